"""Self-bound quark matter: the MIT bag model (Witten 1984; Farhi & Jaffe 1984).

For massless, non-interacting u, d, s quarks in a bag of vacuum energy B
(Farhi & Jaffe 1984, PRD 30, 2379; Witten 1984, PRD 30, 272) the pressure
is p = (eps - 4B)/3: zero at the finite energy density 4B, so a star of
such matter ends at a bare surface with a density jump.  Generalised to a
constant squared sound speed s (in units of c^2),

    p = s (eps - 4B),

which in the log-enthalpy is a single constant-sound-speed piece
(:mod:`.smooth`): eps + p = 4B exp((1 + s) h / s).

Rest mass: the baryon number density follows from the first law,
n = n_s exp(h/s), with the surface value n_s = 4B / mu_s of the massless
three-flavour bag model, whose baryon chemical potential at p = 0 is
mu_s = 3 (4 pi^2 B (hbar c)^3 / 3)^(1/4) (from p = 3 mu_q^4/(4 pi^2 (hbar c)^3) - B
with mu_s = 3 mu_q; e.g. 826.6 MeV for B = 57 MeV/fm^3).  The same
surface value is used for every s; the rest-mass density is rho = m_n n
with the neutron mass (CODATA 2018), as for tables.
"""

from __future__ import annotations

import numpy as np

from .. import units
from ..errors import InputError
from . import registry
from .smooth import ExpPolynomialPieces, constant_sound_speed_coefficients

__all__ = ["QuarkMatter", "quark_matter", "bag_surface_chemical_potential"]

#: Default squared sound speed: massless quarks, p = (eps - 4B)/3.
DEFAULT_SOUND_SPEED_SQUARED = 1.0 / 3.0


def bag_surface_chemical_potential(bag_constant_mev_fm3: float) -> float:
    """Baryon chemical potential (MeV) at zero pressure of massless three-flavour quark matter."""
    mu_q = (4.0 * np.pi**2 * bag_constant_mev_fm3 * units.HBAR_C_MEV_FM**3 / 3.0) ** 0.25
    return 3.0 * mu_q


class QuarkMatter(ExpPolynomialPieces):
    """p = s (eps - 4B) from the bare surface up: one exact constant-sound-speed piece.

    The closed forms invert it: eps + p = 4B e^(k h) with k = (1 + s)/s, and
    rho = rho_s e^(h/s).
    """

    def __init__(self, name: str, bag_energy_density: float, sound_speed_squared: float,
                 surface_enthalpy_per_mass: float, parameters: dict) -> None:
        self.s = float(sound_speed_squared)
        self.eps_surface = float(bag_energy_density)
        A, c = constant_sound_speed_coefficients(0.0, self.eps_surface, self.s)
        super().__init__(name=name, kind="quark_matter", lower_h=np.zeros(1), offset=np.array([A]),
                         coefficients=c[None, :], surface_enthalpy_per_mass=surface_enthalpy_per_mass,
                         parameters=parameters)
        self.surface_energy_density = self.eps_surface
        self.surface_density = self.eps_surface / surface_enthalpy_per_mass

    def enthalpy_of_density(self, rho):
        rho = np.asarray(rho, dtype=float)
        with np.errstate(divide="ignore"):
            return np.maximum(self.s * np.log(rho / self.surface_density), 0.0)  # below the surface: h = 0

    def enthalpy_of_pressure(self, p):
        p = np.asarray(p, dtype=float)
        w = self.eps_surface + p * (1.0 + self.s) / self.s
        return np.log(w / self.eps_surface) * self.s / (1.0 + self.s)

    def max_sound_speed_squared(self, h_top):
        return self.s


def quark_matter(name: str, bag_constant: float, sound_speed_squared: float = DEFAULT_SOUND_SPEED_SQUARED
                 ) -> QuarkMatter:
    """Bag-model quark matter p = c_s^2 (eps - 4B).

    Parameters
    ----------
    name : str
        Label.
    bag_constant : float or Quantity
        B in MeV/fm^3 (a Quantity: any energy-density unit).
    sound_speed_squared : float
        c_s^2 / c^2, 0 < c_s^2 <= 1 (default 1/3, massless quarks).

    Raises
    ------
    InputError
        Naming ``bag_constant`` or ``sound_speed_squared``.
    """
    bag_constant = units.to_unit(bag_constant, "MeV / fm3", name="bag_constant")
    sound_speed_squared = units.to_unit(sound_speed_squared, units.DIMENSIONLESS, name="sound_speed_squared")
    bag_constant = registry.as_scalar(bag_constant, "bag_constant")
    sound_speed_squared = registry.as_scalar(sound_speed_squared, "sound_speed_squared")
    if not (np.isfinite(bag_constant) and bag_constant > 0):
        raise InputError(f"needs a positive bag constant (MeV/fm3), got {bag_constant!r}", key="bag_constant")
    if not (np.isfinite(sound_speed_squared) and 0 < sound_speed_squared <= 1):
        raise InputError(f"needs 0 < c_s^2 <= 1 (causality), got {sound_speed_squared!r}",
                         key="sound_speed_squared")
    eps_s = 4.0 * units.pressure_to_geometric(bag_constant * units.MEV_PER_FM3_IN_ERG_PER_CM3)
    mu_s_mev = bag_surface_chemical_potential(bag_constant)
    return QuarkMatter(
        name=name,
        bag_energy_density=eps_s,
        sound_speed_squared=sound_speed_squared,
        surface_enthalpy_per_mass=mu_s_mev / units.NEUTRON_REST_ENERGY_MEV,
        parameters={"bag_constant": float(bag_constant), "sound_speed_squared": float(sound_speed_squared),
                    "bag_constant_unit": "MeV/fm3", "surface_baryon_chemical_potential_MeV": mu_s_mev,
                    "baryon_mass_g": units.NEUTRON_MASS_G},
    )


registry.register(registry.EOSKind(
    name="quark_matter",
    keys=("bag_constant", "sound_speed_squared"),
    required=("bag_constant",),
    parse=lambda r: {"bag_constant": r.number("bag_constant"),
                     "sound_speed_squared": r.number("sound_speed_squared", default=DEFAULT_SOUND_SPEED_SQUARED)},
    build=lambda name, o: quark_matter(name, o["bag_constant"], o["sound_speed_squared"]),
    columns=(registry.Column("bag_constant"),
             registry.Column("sound_speed_squared", default=DEFAULT_SOUND_SPEED_SQUARED)),
    summary="bag-model quark matter p = c_s^2 (eps - 4B), bare surface at eps = 4B",
))
