"""Uniform density: the validation case with an exact interior solution (Schwarzschild 1916)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .. import units
from ..errors import InputError
from ..kernels import eos_pieces
from . import registry
from .base import EquationOfState

__all__ = ["Incompressible", "incompressible"]


@dataclass(eq=False)
class Incompressible(EquationOfState):
    """Constant energy density eps_0 at every pressure (Schwarzschild 1916).

    Since h = ln((eps_0 + p)/eps_0), p(h) = eps_0 (e^h - 1).  The sound speed is
    infinite, so this EOS is never causal; it exists to validate the solver
    and the surface match against the exact interior solution.  Its
    "rest-mass density" is taken as eps_0 (no internal energy).
    """

    #: How the family lowers to the compiled solver (eos/lowering.py): its piece type and row order.
    PIECE_TYPE = eos_pieces.INCOMPRESSIBLE
    LOWERED_COEFFICIENTS = ("eps0",)

    name: str
    energy_density: float  # km^-2
    kind: str = "incompressible"
    density_axis = False  # no rest-mass density: sweep central_pressure
    #: (eps + p)/rho at the surface, with rho taken as eps_0.
    surface_enthalpy_per_mass = 1.0
    #: Coefficients that keep the formula finite on pieces of other families (see :mod:`.joined`).
    NEUTRAL_COEFFICIENTS = {"eps0": 1.0}
    parameters: dict = field(default_factory=dict)
    h_max: float = np.inf

    def __post_init__(self) -> None:
        if not np.isfinite(self.energy_density) or self.energy_density <= 0:
            raise InputError("energy_density must be positive and finite")
        self.breakpoints_h = np.empty(0)
        self._coeff = {"eps0": np.array([self.energy_density])}
        self.surface_energy_density = self.energy_density

    def piece_index(self, h):
        return np.zeros(np.shape(h), dtype=np.intp)

    def piece_arrays(self):
        return self._coeff

    @staticmethod
    def state_from_coefficients(h, coeff, expm1_h=None):
        eps0 = coeff["eps0"]
        p = eps0 * (np.expm1(h) if expm1_h is None else expm1_h)
        eps = eps0 + 0.0 * p
        return p, eps, eps

    @staticmethod
    def slope_from_coefficients(p, eps, coeff, h=None):
        return np.zeros_like(p)

    def energy_density_slope(self, h):
        return np.zeros(np.shape(h))

    def sound_speed_squared(self, h):
        return np.full(np.shape(h), np.inf)

    def enthalpy_of_density(self, rho):
        raise InputError(
            "an incompressible EOS has no rest-mass density axis; sweep `central_pressure`"
        )

    def enthalpy_of_pressure(self, p):
        return np.log1p(np.asarray(p, dtype=float) / self.energy_density)

    def max_sound_speed_squared(self, h_top):
        return np.inf



def incompressible(name: str, energy_density: float) -> Incompressible:
    """Uniform-density EOS with energy density ``energy_density`` (g/cm^3, eps/c^2).

    A Quantity may be a mass density or an energy density (erg/cm^3, MeV/fm^3, J/m^3: divided by c^2).
    """
    energy_density = units.to_unit(energy_density, units.DENSITY_UNIT, name="energy_density")
    if not (np.isfinite(energy_density) and energy_density > 0):
        raise InputError(
            f"energy_density must be positive (g/cm^3), got {energy_density!r}",
            key="energy_density",
        )
    return Incompressible(
        name=name,
        energy_density=energy_density * units.DENSITY_CGS_TO_GEOM,
        parameters={"energy_density": energy_density, "energy_density_unit": "g/cm3"},
    )


registry.register(registry.EOSKind(
    name="incompressible",
    keys=("energy_density",),
    required=("energy_density",),
    parse=lambda r: {"energy_density": r.number("energy_density")},
    build=lambda name, o: incompressible(name, o["energy_density"]),
    columns=(registry.Column("energy_density"),),
    density_axis=lambda options: False,
    summary="constant energy density (sweep central_pressure)",
))
