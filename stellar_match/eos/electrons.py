"""Cold white-dwarf matter: the ideal degenerate electron gas of Chandrasekhar (1935), Salpeter's (1961) lattice term.

Electrons of Fermi momentum x m_e c (x the dimensionless Fermi momentum) in a
neutralising lattice of nuclei that carry the rest mass, mu_e atomic mass
units (CODATA 2018) per electron.  With lambda = hbar/(m_e c) and
gamma = sqrt(1 + x^2) (Chandrasekhar 1935, MNRAS 95, 207; 1939, ch. X):

    n_e = x^3 / (3 pi^2 lambda^3),        rho = mu_e m_u n_e,
    P_e = (m_e c^2 / lambda^3) f(x),      f(x) = [x (2x^2/3 - 1) gamma + asinh x] / (8 pi^2)
                                               = (1/(3 pi^2)) int_0^x t^4 / sqrt(1 + t^2) dt,
    eps = rho c^2 + n_e m_e c^2 (gamma - 1) - P_e          (electron kinetic energy; rest mass in rho).

The optional electrostatic (Wigner-Seitz lattice) correction of Salpeter
(1961, ApJ 134, 669), to leading order, with nuclear charge Z:

    eps_C = 3 P_C = -(9/10) (4 pi/3)^(1/3) Z^(2/3) alpha hbar c n_e^(4/3),

which makes the pressure vanish at a finite density: a bare surface with a
density jump (the tidal surface jump applies).  The enthalpy per electron is
mu = mu_e m_u c^2 + m_e c^2 (gamma - 1 - C_Z x), C_Z = (6/5)(4/(9 pi))^(1/3) alpha Z^(2/3),
so in the log-enthalpy h = ln(mu/mu_s) the Fermi momentum follows in closed
form from gamma - 1 - C_Z x = R (mu_s e^h - 1) (R = mu_e m_u/m_e, mu_s per
rest mass): one piece, no root finding during a solve.  f(x) is summed as its
series below x = 0.2, where the closed form cancels.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .. import units
from ..errors import InputError
from ..kernels import eos_pieces
from . import registry
from .base import EquationOfState

__all__ = ["ElectronGas", "electron_gas", "DEFAULT_NUCLEAR_CHARGE"]

#: Nuclear charge of the lattice with the Coulomb correction: carbon (this project's default).
DEFAULT_NUCLEAR_CHARGE = 6.0
#: Below this x the pressure integral is summed as a series (the closed form loses about 3 digits here).
SERIES_BELOW = 0.2
# f(x) = (1/(3 pi^2)) sum_k binom(-1/2, k) x^(2k+5)/(2k+5); 13 terms reach 1e-18 of the first at x = 0.2
_BINOM = np.array([np.prod([(-0.5 - i) / (i + 1) for i in range(k)]) for k in range(13)])
_SERIES = _BINOM / (2 * np.arange(13) + 5) / (3 * np.pi**2)


def pressure_integral(x):
    """f(x) = (1/(3 pi^2)) int_0^x t^4/sqrt(1 + t^2) dt (series below SERIES_BELOW, closed form above)."""
    x = np.asarray(x, dtype=float)
    small = np.minimum(x, SERIES_BELOW)
    z = small * small
    series = np.zeros_like(small)
    for c in _SERIES[::-1]:
        series = series * z + c
    series *= small**5
    with np.errstate(invalid="ignore"):
        big = np.maximum(x, SERIES_BELOW)
        closed = (big * (2.0 * big * big / 3.0 - 1.0) * np.sqrt(1.0 + big * big) + np.arcsinh(big)) / (8 * np.pi**2)
    return np.where(x < SERIES_BELOW, series, closed)


@dataclass(eq=False)
class ElectronGas(EquationOfState):
    """Degenerate electrons (and optionally Salpeter's lattice energy) on nuclei of mu_e m_u per electron.

    Parameters
    ----------
    name : str
        Label.
    mu_e : float
        Nucleons (atomic mass units) per electron.
    coulomb_correction : bool
        Add Salpeter's (1961) lattice term.
    nuclear_charge : float
        Z of the nuclei (used with the correction).
    parameters : dict
        Physical parameters for the run file.
    """

    #: How the family lowers to the compiled solver (eos/lowering.py): its piece type and row order.
    PIECE_TYPE = eos_pieces.ELECTRON
    LOWERED_COEFFICIENTS = ("Krho", "KP", "R", "Cz", "aC", "G0", "RmuS")

    #: Coefficients that keep the formula finite on pieces of other families (see :mod:`.joined`).
    NEUTRAL_COEFFICIENTS = {"Krho": 1.0, "KP": 1.0, "R": 1.0, "Cz": 0.0, "aC": 0.0, "G0": 0.0, "RmuS": 1.0}

    name: str
    mu_e: float
    coulomb_correction: bool = False
    nuclear_charge: float = DEFAULT_NUCLEAR_CHARGE
    kind: str = "electron_gas"
    parameters: dict = field(default_factory=dict)
    h_max: float = np.inf

    def __post_init__(self) -> None:
        lam_cm = units.HBAR_C_MEV_FM / units.ELECTRON_REST_ENERGY_MEV * 1e-13  # reduced Compton wavelength
        m_u = units.ATOMIC_MASS_UNIT_G
        # rho = Krho x^3 and P = KP (f(x) - aC x^4), geometric units
        self.K_rho = self.mu_e * m_u / (3 * np.pi**2 * lam_cm**3) * units.DENSITY_CGS_TO_GEOM
        me_c2_erg = units.ELECTRON_REST_ENERGY_MEV * 1e6 * units.ELEMENTARY_CHARGE_SI * 1e7
        self.K_P = me_c2_erg / lam_cm**3 * units.PRESSURE_CGS_TO_GEOM
        self.R = self.mu_e * units.ATOMIC_MASS_UNIT_REST_ENERGY_MEV / units.ELECTRON_REST_ENERGY_MEV
        alpha, z23 = units.FINE_STRUCTURE_CONSTANT, self.nuclear_charge ** (2.0 / 3.0)
        on = 1.0 if self.coulomb_correction else 0.0
        self.a_C = on * 0.3 * (4 * np.pi / 3) ** (1 / 3) * alpha * z23 / (3 * np.pi**2) ** (4 / 3)
        self.C_Z = on * 1.2 * (4 / (9 * np.pi)) ** (1 / 3) * alpha * z23
        # the surface: P(x0) = 0 (x0 = 0 without the lattice term), by Newton on f(x) = aC x^4
        x0 = 0.0
        if self.coulomb_correction:
            x0 = 15 * np.pi**2 * self.a_C  # the non-relativistic root
            for _ in range(50):
                f = pressure_integral(x0) - self.a_C * x0**4
                df = x0**4 / (3 * np.pi**2 * np.sqrt(1 + x0 * x0)) - 4 * self.a_C * x0**3
                x0 -= f / df
        self.x_surface = float(x0)
        g0 = x0 * x0 / (np.sqrt(1 + x0 * x0) + 1.0)  # gamma - 1 at the surface, without cancellation
        self.G0 = g0 - self.C_Z * x0  # = R (mu_s - 1)
        self.surface_enthalpy_per_mass = 1.0 + self.G0 / self.R
        self.breakpoints_h = np.empty(0)
        self._coeff = {"Krho": np.array([self.K_rho]), "KP": np.array([self.K_P]), "R": np.array([self.R]),
                       "Cz": np.array([self.C_Z]), "aC": np.array([self.a_C]), "G0": np.array([self.G0]),
                       "RmuS": np.array([self.R * self.surface_enthalpy_per_mass])}
        self.surface_density = self.K_rho * x0**3
        self.surface_energy_density = self.surface_density * self.surface_enthalpy_per_mass

    # -- solver interface ---------------------------------------------------
    def piece_index(self, h):
        return np.zeros(np.shape(h), dtype=np.intp)

    def piece_arrays(self):
        return self._coeff

    @staticmethod
    def _fermi(h, coeff, em1):
        """(x, gamma - 1, mu per rest mass) at log-enthalpy h."""
        G = coeff["G0"] + coeff["RmuS"] * em1  # gamma - 1 - C_Z x
        cz = coeff["Cz"]
        q2m1 = G * (G + 2.0)  # q^2 - 1, q = 1 + G
        x = ((1.0 + G) * cz + np.sqrt(np.maximum(q2m1 + cz * cz, 0.0))) / (1.0 - cz * cz)
        return x, G + cz * x, 1.0 + G / coeff["R"]

    @staticmethod
    def state_from_coefficients(h, coeff, expm1_h=None):
        em1 = np.expm1(h) if expm1_h is None else expm1_h
        x, _, mu = ElectronGas._fermi(h, coeff, em1)
        rho = coeff["Krho"] * x**3
        p = coeff["KP"] * (pressure_integral(x) - coeff["aC"] * x**4)
        return p, rho * mu - p, rho

    @staticmethod
    def slope_from_coefficients(p, eps, coeff, h=None):
        # c_s^2 = x (x/gamma - C_Z) / (3 R mu): d eps/dh = (eps + p)/c_s^2 = 3 R Krho x^2 mu^2 / (x/gamma - C_Z)
        x, g, mu = ElectronGas._fermi(h, coeff, np.expm1(h))
        return 3.0 * coeff["R"] * coeff["Krho"] * x * x * mu * mu / (x / (1.0 + g) - coeff["Cz"])

    def sound_speed_squared(self, h):
        h = np.asarray(h, dtype=float)
        coeff = self.coefficients_at(h)
        x, g, mu = self._fermi(h, coeff, np.expm1(h))
        return x * (x / (1.0 + g) - coeff["Cz"]) / (3.0 * coeff["R"] * mu)

    def enthalpy_of_density(self, rho):
        x = np.cbrt(np.asarray(rho, dtype=float) / self.K_rho)
        g = x * x / (np.sqrt(1.0 + x * x) + 1.0)
        # e^h = mu/mu_s = 1 + ((g - C_Z x) - G0) / (R mu_s); below the surface density: h = 0
        return np.maximum(np.log1p(((g - self.C_Z * x) - self.G0) / (self.R * self.surface_enthalpy_per_mass)), 0.0)

    def enthalpy_of_pressure(self, p):
        # Newton on f(x) - aC x^4 = p / KP (increasing in x above the surface), kept inside a bracket
        p = np.atleast_1d(np.asarray(p, dtype=float))
        target = np.maximum(p / self.K_P, 0.0)
        x_nr, x_ur = (15 * np.pi**2 * target) ** 0.2, (12 * np.pi**2 * target) ** 0.25  # the two limits of f
        x = np.maximum(np.where(x_nr < 1.0, x_nr, x_ur), self.x_surface)
        lo, hi = np.full(x.shape, self.x_surface), np.full(x.shape, np.inf)
        for _ in range(200):
            f = pressure_integral(x) - self.a_C * x**4 - target
            lo, hi = np.where(f < 0, x, lo), np.where(f < 0, hi, x)
            df = x**4 / (3 * np.pi**2 * np.sqrt(1 + x * x)) - 4 * self.a_C * x**3
            with np.errstate(divide="ignore", invalid="ignore"):
                new = x - f / df
            bad = ~((new > lo) & (new < hi))
            new = np.where(bad, np.where(np.isfinite(hi), 0.5 * (lo + hi), 2.0 * x + 1e-3), new)
            done = np.abs(new - x) <= 4e-16 * np.abs(new)
            x = new
            if done.all():
                break
        return self.enthalpy_of_density(self.K_rho * x**3).reshape(np.shape(p))

    def max_sound_speed_squared(self, h_top):
        return float(self.sound_speed_squared(np.array([h_top]))[0])  # c_s^2 rises with x


def electron_gas(name: str, mu_e: float, coulomb_correction: bool = False,
                 nuclear_charge: float = DEFAULT_NUCLEAR_CHARGE) -> ElectronGas:
    """Cold white-dwarf matter: degenerate electrons on nuclei of ``mu_e`` atomic mass units per electron.

    Parameters
    ----------
    name : str
        Label.
    mu_e : float
        Mean molecular weight per electron, 1 <= mu_e <= 3 (2 for 4He, 12C, 16O; 56/26 for 56Fe).
    coulomb_correction : bool
        Salpeter's (1961) lattice term (default off).
    nuclear_charge : float
        Z, 1 <= Z <= 100 (default 6, carbon); used only with the correction.

    Raises
    ------
    InputError
        Naming ``mu_e``, ``coulomb_correction`` or ``nuclear_charge``.
    """
    mu_e = registry.as_scalar(units.to_unit(mu_e, units.DIMENSIONLESS, name="mu_e"), "mu_e")
    nuclear_charge = registry.as_scalar(units.to_unit(nuclear_charge, units.DIMENSIONLESS, name="nuclear_charge"),
                                        "nuclear_charge")
    if not (np.isfinite(mu_e) and 1.0 <= mu_e <= 3.0):
        raise InputError(f"needs 1 <= mu_e <= 3 (nucleons per electron), got {mu_e!r}", key="mu_e")
    if not isinstance(coulomb_correction, bool | np.bool_):
        raise InputError(f"needs true or false, got {coulomb_correction!r}", key="coulomb_correction")
    if not (np.isfinite(nuclear_charge) and 1.0 <= nuclear_charge <= 100.0):
        raise InputError(f"needs 1 <= Z <= 100, got {nuclear_charge!r}", key="nuclear_charge")
    return ElectronGas(name=name, mu_e=float(mu_e), coulomb_correction=bool(coulomb_correction),
                       nuclear_charge=float(nuclear_charge), parameters={
                           "mu_e": float(mu_e), "coulomb_correction": bool(coulomb_correction),
                           "nuclear_charge": float(nuclear_charge), "atomic_mass_unit_g": units.ATOMIC_MASS_UNIT_G,
                           "model": "ideal degenerate electrons (Chandrasekhar 1935)"
                                    + ("; lattice energy (Salpeter 1961)" if coulomb_correction else "")})


registry.register(registry.EOSKind(
    name="electron_gas",
    keys=("mu_e", "coulomb_correction", "nuclear_charge"),
    required=("mu_e",),
    parse=lambda r: {"mu_e": r.number("mu_e"), "coulomb_correction": r.boolean("coulomb_correction", default=False),
                     "nuclear_charge": r.number("nuclear_charge", default=DEFAULT_NUCLEAR_CHARGE)},
    build=lambda name, o: electron_gas(name, o["mu_e"], o["coulomb_correction"], o["nuclear_charge"]),
    columns=(registry.Column("mu_e"), registry.Column("nuclear_charge", default=DEFAULT_NUCLEAR_CHARGE)),
    summary="cold white-dwarf matter: degenerate electrons (Chandrasekhar 1935), optional lattice term",
))
