"""The interface between an equation of state and the structure solver.

The solver asks an EOS for pressure, energy density and rest-mass density as
functions of the dimensionless log-enthalpy

    h = integral_0^p dp' / (eps(p') + p'),

which is zero at the stellar surface (Lindblom 1992, ApJ 398, 569).  All
quantities here are geometric (G = c = 1, lengths in km, densities in
km^-2); see :mod:`stellar_match.units`.

An EOS is a sequence of *pieces* in h, each evaluated in closed form by one
vectorised function of per-piece coefficients (the hot path of the solver),
with a step edge at every piece boundary.  The families live in their own
modules (one per family) and register themselves in :mod:`.registry`.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass

import numpy as np

from .. import units
from ..errors import InputError

__all__ = ["EquationOfState", "InteriorJumps", "central_enthalpy"]


@dataclass(frozen=True)
class InteriorJumps:
    """Energy-density discontinuities inside the EOS's range (first-order phase transitions).

    At each jump the pressure and the chemical potential are continuous, so
    it sits at one log-enthalpy (a Maxwell construction); the energy density
    drops by ``delta_eps`` going down in h (outwards in the star).

    Attributes
    ----------
    h : ndarray, shape (J,) or (J, n)
        Log-enthalpies of the jumps, each also in ``breakpoints_h`` (one per
        star of a batch for stacked ensembles, +inf where a member has none).
    delta_eps : ndarray
        eps(h+) - eps(h-) >= 0 (km^-2).
    pressure : ndarray
        The pressure at the jump (km^-2).
    """

    h: np.ndarray
    delta_eps: np.ndarray
    pressure: np.ndarray

    @property
    def count(self) -> int:
        return int(np.shape(self.h)[0])


class EquationOfState(ABC):
    """Interface between an EOS and the structure solver (geometric units).

    Attributes
    ----------
    name : str
        The user's label for this EOS.
    kind : str
        The config ``kind`` it was built from (a key of :data:`.registry.KINDS`).
    parameters : dict
        The physical parameters it was built from (JSON-serialisable); the
        kind's ``rebuild`` makes the same EOS from them.
    breakpoints_h : ndarray, shape (n_pieces - 1,)
        Log-enthalpies of the piece boundaries, ascending, all > 0.  The
        solver places step boundaries exactly here.
    h_max : float
        Largest log-enthalpy at which the EOS is defined (inf if unbounded).
    table_sha256 : str or None
        SHA-256 of the table file for tabulated EOS.
    surface_energy_density : float
        Energy density just inside the surface (km^-2): 0 unless the EOS
        ends in a density jump (the tidal y-equation needs it).
    interior_jumps : InteriorJumps or None
        Energy-density jumps inside the star's range (None: none).
    density_axis : bool
        False for an EOS without a rest-mass density axis (sweep its central
        pressure instead).
    crust_core_enthalpy : float or None
        Log-enthalpy of the crust-core boundary of an EOS with a crust (the
        solver records the star's state there, see :mod:`.crust`); None: no crust.
    """

    name: str
    kind: str
    parameters: dict
    breakpoints_h: np.ndarray
    h_max: float
    table_sha256: str | None = None
    surface_energy_density: float = 0.0
    interior_jumps: InteriorJumps | None = None
    density_axis: bool = True
    # -- the crust: where the crust datasets are measured
    crust_core_enthalpy: float | None = None

    @abstractmethod
    def piece_index(self, h: np.ndarray) -> np.ndarray:
        """Index of the piece containing each log-enthalpy (boundaries go down)."""

    @abstractmethod
    def piece_arrays(self) -> dict[str, np.ndarray]:
        """Per-piece coefficient arrays consumed by :meth:`state_from_coefficients`."""

    @staticmethod
    @abstractmethod
    def state_from_coefficients(h, coeff, expm1_h=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(p, eps, rho) at ``h`` given per-point coefficients ``coeff``.

        The solver gathers coefficients once per step and calls this once per
        stage; it is the hot path.  ``expm1_h``, if given, is expm1(h),
        computed once per stage and shared with the response equations.  It
        must depend on ``coeff`` only (stacked ensembles call the function
        of one member with the coefficients of all).
        """

    @staticmethod
    @abstractmethod
    def slope_from_coefficients(p, eps, coeff, h=None) -> np.ndarray:
        """d eps / d h = (eps + p) / c_s^2 from (p, eps), per-point coefficients and ``h``.

        Families whose slope follows from (p, eps) alone may ignore ``h``.
        """

    def state(self, h) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Pressure, energy density and rest-mass density at log-enthalpy ``h``.

        Parameters
        ----------
        h : array_like
            Log-enthalpy, 0 <= h <= ``h_max``.

        Returns
        -------
        p, eps, rho : ndarray
            Geometric units, km^-2.
        """
        h = np.asarray(h, dtype=float)
        return self.state_from_coefficients(h, self.coefficients_at(h))

    def coefficients_at(self, h) -> dict[str, np.ndarray]:
        """The per-piece coefficients gathered at each log-enthalpy ``h``."""
        idx = self.piece_index(np.asarray(h, dtype=float))
        return {k: v[idx] for k, v in self.piece_arrays().items()}

    def energy_density_slope(self, h) -> np.ndarray:
        """d eps / d h (km^-2) at ``h``: (eps + p) / c_s^2 for a barotropic fluid."""
        h = np.asarray(h, dtype=float)
        coeff = self.coefficients_at(h)
        p, eps, _ = self.state_from_coefficients(h, coeff)
        return self.slope_from_coefficients(p, eps, coeff, h)

    @abstractmethod
    def enthalpy_of_density(self, rho) -> np.ndarray:
        """Log-enthalpy at rest-mass density ``rho`` (km^-2)."""

    @abstractmethod
    def enthalpy_of_pressure(self, p) -> np.ndarray:
        """Log-enthalpy at pressure ``p`` (km^-2)."""

    @abstractmethod
    def max_sound_speed_squared(self, h_top: float) -> float:
        """Largest c_s^2 / c^2 for 0 <= h <= ``h_top``."""

    def sound_speed_squared(self, h) -> np.ndarray:
        """Squared sound speed dp/d eps in units of c^2."""
        p, eps, _ = self.state(h)
        return (eps + p) / np.asarray(self.energy_density_slope(h))


def central_enthalpy(eos: EquationOfState, quantity: str, values) -> np.ndarray:
    """Central log-enthalpies for central densities (g/cm^3) or pressures (dyn/cm^2), or Quantities.

    Raises
    ------
    InputError
        For values outside the EOS's range (a table's last row, or the top
        of a numerically built EOS) or the wrong axis for the EOS.
    """
    unit = units.DENSITY_UNIT if quantity == "central_density" else units.PRESSURE_UNIT
    values = np.asarray(units.to_unit(values, unit, name=quantity), dtype=float)
    if np.any(~np.isfinite(values) | (values <= 0)):
        raise InputError(f"{quantity} values must be positive and finite", key=f"sweep.{quantity}")
    if quantity == "central_density":
        h = eos.enthalpy_of_density(units.density_to_geometric(values))
    elif quantity == "central_pressure":
        h = eos.enthalpy_of_pressure(units.pressure_to_geometric(values))
    else:
        raise ValueError(f"unknown sweep quantity {quantity!r}")
    if np.any(~(h > 0)):  # a self-bound EOS (quark matter) has no star below its surface density
        low = values[np.argmin(np.where(np.isfinite(h), h, -np.inf))]
        unit = "g/cm3" if quantity == "central_density" else "dyn/cm2"
        surface = units.density_from_geometric(float(eos.state(np.array([0.0]))[2][0]))
        raise InputError(
            f"{low:.4g} {unit} is not above the surface of EOS {eos.name!r} "
            f"(rest-mass density {surface:.4g} g/cm3 at zero pressure)",
            key=f"sweep.{quantity}",
        )
    if np.any(h > eos.h_max * (1 + 1e-12)):
        top = values[np.argmax(h)]
        unit = "g/cm3" if quantity == "central_density" else "dyn/cm2"
        what = "table" if eos.kind == "table" or hasattr(eos, "table_density_range") else "range"
        lo, hi = getattr(eos, "table_density_range", getattr(eos, "density_range", (np.nan, np.nan)))
        raise InputError(
            f"{top:.4g} {unit} lies beyond the {what} of EOS {eos.name!r} "
            f"(rest-mass density up to {hi:.4g} g/cm3)",
            key=f"sweep.{quantity}",
        )
    return h
