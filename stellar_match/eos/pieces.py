"""Power-law pieces: polytropes, Read et al. piecewise polytropes and tables.

:class:`PiecewisePolytrope` -- any number of pieces p = K rho^Gamma with the
energy density fixed by the first law,
eps = (1 + a_i) rho + K_i rho^Gamma_i / (Gamma_i - 1)
(Read, Lackey, Owen & Friedman 2009, PRD 79, 124032, eqs. 3-7).  A single
polytrope, the Read et al. parametrisation and tabulated EOS (one piece per
table interval, see :func:`from_table`) are all instances.  Every piece is
inverted analytically in h, so no root finding happens during a solve.

Factory functions build these from physical (cgs) parameters.  The SLy crust
fit of Read et al. (:data:`SLY_CRUST`) is also the crust of the spectral and
sound-speed kinds.
"""

from __future__ import annotations

import hashlib
import io
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import units
from ..errors import InputError, TableError
from ..kernels import eos_pieces
from . import registry
from .base import EquationOfState
from .crust import CRUST_CORE_KEY, SLY_CRUST_CORE_DENSITY, set_crust_core

__all__ = [
    "PiecewisePolytrope",
    "polytrope",
    "read_piecewise_polytrope",
    "from_table",
    "SLY_CRUST",
    "READ_CORE_DIVIDING_DENSITIES",
    "TableColumns",
    "read_table_file",
    "sly_crust_dividing_densities",
    "sly_crust",
    "FIRST_LAW_TOLERANCE",
]


@dataclass(eq=False)
class PiecewisePolytrope(EquationOfState):
    """Pieces p = K_i rho^Gamma_i joined continuously in p and eps.

    Parameters
    ----------
    name, kind : str
        Label and config kind.
    lower_densities : ndarray, shape (n,)
        Lower rest-mass density of each piece (km^-2), ascending, first = 0.
    K : ndarray, shape (n,)
        Polytropic constants in geometric units (km^(2 Gamma - 2)).
    gamma : ndarray, shape (n,)
        Adiabatic indices; the first must exceed 1 so that p -> 0 at rho -> 0.
    first_a : float
        a_0 of the first piece, eps = (1 + a_0) rho + ... near the surface.
        0 for an ideal rest-mass contribution; tables may need another value.
    parameters : dict
        Physical parameters for the run file.
    """

    #: How the family lowers to the compiled solver (eos/lowering.py): its piece type and row order.
    PIECE_TYPE = eos_pieces.POWER
    LOWERED_COEFFICIENTS = ("K", "c1", "inv_gm1", "one_plus_a", "shift", "mu_s", "gamma")

    #: Coefficients that keep the formula finite on pieces of other families (see :mod:`.joined`):
    #: rho = e^h, p = e^(2h).
    NEUTRAL_COEFFICIENTS = {"K": 1.0, "c1": 1.0, "inv_gm1": 1.0, "one_plus_a": 1.0, "shift": 1.0, "mu_s": 1.0,
                            "gamma": 2.0}

    name: str
    kind: str
    lower_densities: np.ndarray
    K: np.ndarray
    gamma: np.ndarray
    first_a: float = 0.0
    parameters: dict = field(default_factory=dict)
    table_sha256: str | None = None
    h_max: float = np.inf

    def __post_init__(self) -> None:
        rho_lo = np.asarray(self.lower_densities, dtype=float)
        K = np.asarray(self.K, dtype=float)
        g = np.asarray(self.gamma, dtype=float)
        if not (rho_lo.shape == K.shape == g.shape and rho_lo.ndim == 1 and rho_lo.size):
            raise ValueError("lower_densities, K and gamma need the same 1-D shape")
        if g[0] <= 1.0:
            raise InputError(f"the lowest piece needs Gamma > 1 (got {g[0]:.6g})")
        if np.any(np.abs(g - 1.0) < 1e-9):
            raise InputError("a piece with Gamma = 1 has no polytropic energy density")
        # Energy-density continuity fixes a_i (Read et al. 2009, eq. 7),
        # written with p/rho at each boundary so that no K^(..) is formed.
        if g.size > 1:
            p_below = K[:-1] * rho_lo[1:] ** g[:-1]
            p_above = K[1:] * rho_lo[1:] ** g[1:]
            if np.any(np.abs(p_above / p_below - 1.0) > 1e-9):
                raise ValueError("pieces must be continuous in pressure at their boundaries")
        a = np.empty_like(g)
        a[0] = self.first_a
        for i in range(1, g.size):
            p_over_rho = K[i] * rho_lo[i] ** (g[i] - 1.0)
            a[i] = a[i - 1] + p_over_rho * (1.0 / (g[i - 1] - 1.0) - 1.0 / (g[i] - 1.0))
        self.lower_densities, self.K, self.gamma, self.a = rho_lo, K, g, a
        self.surface_enthalpy_per_mass = 1.0 + a[0]  # mu at p -> 0
        if self.surface_enthalpy_per_mass <= 0:
            raise InputError("energy density below the rest-mass density at the surface")
        mu_lo = 1.0 + a + K * g / (g - 1.0) * rho_lo ** (g - 1.0)
        mu_lo[0] = self.surface_enthalpy_per_mass
        self.breakpoints_h = np.log(mu_lo[1:] / self.surface_enthalpy_per_mass)
        if np.any(np.diff(np.concatenate([[0.0], self.breakpoints_h])) <= 0):
            raise InputError("enthalpy is not increasing across pieces (p or eps not increasing)")
        p_lo = K * rho_lo**g
        self.lower_pressures = p_lo
        with np.errstate(divide="ignore"):
            self._coeff = {
                "K": K,
                "c1": (g - 1.0) / (K * g),
                "inv_gm1": 1.0 / (g - 1.0),
                "one_plus_a": 1.0 + a,
                "shift": a[0] - a,
                "mu_s": np.full_like(g, self.surface_enthalpy_per_mass),
                "gamma": g,
            }

    # -- solver interface ---------------------------------------------------
    def piece_index(self, h):
        return np.searchsorted(self.breakpoints_h, h, side="left")

    def piece_arrays(self):
        return self._coeff

    @staticmethod
    def state_from_coefficients(h, coeff, expm1_h=None):
        # mu - (1 + a_i) = mu_s expm1(h) + (a_0 - a_i); then
        # rho^(Gamma-1) = (mu - 1 - a)(Gamma - 1)/(K Gamma): one power per call.
        em1 = np.expm1(h) if expm1_h is None else expm1_h
        q = coeff["c1"] * (coeff["mu_s"] * em1 + coeff["shift"])
        rho = q ** coeff["inv_gm1"]
        p = coeff["K"] * rho * q
        eps = coeff["one_plus_a"] * rho + p * coeff["inv_gm1"]
        return p, eps, rho

    @staticmethod
    def slope_from_coefficients(p, eps, coeff, h=None):
        # c_s^2 = Gamma p / (eps + p) inside a piece, so d eps/dh = (eps + p)^2 / (Gamma p);
        # at the surface itself (p = 0) the limit is 0 for Gamma < 2, the usual crust case; for
        # Gamma > 2 it diverges, which the solver avoids by never evaluating at h = 0 exactly
        # (structure.SURFACE_GUARD).
        with np.errstate(divide="ignore", invalid="ignore"):
            slope = (eps + p) ** 2 / (coeff["gamma"] * p)
        return np.where(p > 0, slope, 0.0)

    def energy_density_slope(self, h):
        h = np.asarray(h, dtype=float)
        coeff = self.coefficients_at(h)
        p, eps, _ = self.state_from_coefficients(h, coeff)
        return self.slope_from_coefficients(p, eps, coeff, h)

    def sound_speed_squared(self, h):
        h = np.asarray(h, dtype=float)
        coeff = self.coefficients_at(h)
        p, eps, _ = self.state_from_coefficients(h, coeff)
        total = eps + p
        return np.where(total > 0, coeff["gamma"] * p / np.where(total > 0, total, 1.0), 0.0)

    def enthalpy_of_density(self, rho):
        rho = np.asarray(rho, dtype=float)
        i = np.searchsorted(self.lower_densities, rho, side="right") - 1
        i = np.clip(i, 0, None)
        g, K, a = self.gamma[i], self.K[i], self.a[i]
        mu_minus_mus = (a - self.a[0]) + K * g / (g - 1.0) * rho ** (g - 1.0)
        return np.log1p(mu_minus_mus / self.surface_enthalpy_per_mass)

    def enthalpy_of_pressure(self, p):
        p = np.asarray(p, dtype=float)
        i = np.clip(np.searchsorted(self.lower_pressures, p, side="right") - 1, 0, None)
        rho = (p / self.K[i]) ** (1.0 / self.gamma[i])
        return self.enthalpy_of_density(rho)

    def max_sound_speed_squared(self, h_top):
        # Inside a piece c_s^2 = Gamma p/(eps + p) is monotone in rho (rising
        # for Gamma > 1, falling for Gamma < 1), so its maximum over [0, h_top]
        # sits at an end of a piece: check both sides of every boundary.
        inside = self.breakpoints_h[self.breakpoints_h < h_top]
        hs = np.concatenate([inside, inside, [h_top]])
        pieces = np.concatenate([np.arange(inside.size), np.arange(inside.size) + 1,
                                 self.piece_index(np.array([h_top]))])
        coeff = {k: v[pieces] for k, v in self._coeff.items()}
        p, eps, _ = self.state_from_coefficients(hs, coeff)
        return float(np.max(self.gamma[pieces] * p / (eps + p)))


# --- Factories from physical (cgs) parameters -------------------------------

#: SLy crust fit of Read et al. 2009, Table II (from memory, as listed in
#: ../shared/REFERENCE_VALUES.md): (K in cgs with p/c^2 in g/cm^3, Gamma,
#: upper density g/cm^3).  The last piece ends where the core begins.
SLY_CRUST = (
    (6.80110e-9, 1.58425, 2.44034e7),
    (1.06186e-6, 1.28733, 3.78358e11),
    (5.32697e1, 0.62223, 2.62780e12),
    (3.99874e-8, 1.35692, None),
)
#: Dividing densities between the three core pieces, g/cm^3 (Read et al. 2009).
READ_CORE_DIVIDING_DENSITIES = (10**14.7, 10**15.0)
_C2_CGS = (units.SPEED_OF_LIGHT_SI * 1e2) ** 2


def _geometric_K(K_dyn: np.ndarray, gamma: np.ndarray) -> np.ndarray:
    """K with p in dyn/cm^2 and rho in g/cm^3 -> geometric K (km^(2 Gamma - 2))."""
    return K_dyn * units.PRESSURE_CGS_TO_GEOM / units.DENSITY_CGS_TO_GEOM**gamma


def sly_crust_dividing_densities() -> np.ndarray:
    """Densities (g/cm^3) where consecutive SLy crust pieces have equal pressure.

    Table II lists K, Gamma and rounded dividing densities that make p
    continuous only to about 1e-4; a pressure jump would be a spurious force
    in hydrostatic equilibrium, so the boundaries are recomputed from
    K_i rho^Gamma_i = K_(i+1) rho^Gamma_(i+1).  They agree with the printed
    ones to about 1e-3 (checked in tests/test_eos.py).
    """
    K = np.array([k for k, _, _ in SLY_CRUST])
    g = np.array([g for _, g, _ in SLY_CRUST])
    return (K[:-1] / K[1:]) ** (1.0 / (g[1:] - g[:-1]))


def sly_crust(name: str, kind: str) -> PiecewisePolytrope:
    """The four-piece SLy crust fit of Read et al. (2009, Table II), its last piece continued upwards.

    The crust of the spectral and sound-speed kinds, which join it where their own core begins.
    """
    g = np.array([g for _, g, _ in SLY_CRUST])
    K = _geometric_K(np.array([k for k, _, _ in SLY_CRUST]) * _C2_CGS, g)  # p/c^2 -> dyn/cm^2
    lower = np.array([0.0, *sly_crust_dividing_densities()]) * units.DENSITY_CGS_TO_GEOM
    return PiecewisePolytrope(name=name, kind=kind, lower_densities=lower, K=K, gamma=g)


def polytrope(name: str, K: float, gamma: float) -> PiecewisePolytrope:
    """Single polytrope p = K rho^Gamma, eps = rho c^2 + p/(Gamma - 1).

    Parameters
    ----------
    name : str
        Label.
    K : float or Quantity
        Polytropic constant in cgs (p in dyn/cm^2, rho in g/cm^3), or a
        Quantity in any unit of pressure / density^gamma.
    gamma : float
        Adiabatic index, > 1.
    """
    gamma = units.to_unit(gamma, units.DIMENSIONLESS, name="gamma")
    K = units.polytropic_constant_to_cgs(K, gamma)
    if not (np.isfinite(K) and K > 0):
        raise InputError(f"K must be positive and finite (got {K!r})", key="K")
    if not (np.isfinite(gamma) and gamma > 1):
        raise InputError(f"gamma must exceed 1 (got {gamma!r})", key="gamma")
    g = np.array([float(gamma)])
    return PiecewisePolytrope(
        name=name,
        kind="polytrope",
        lower_densities=np.zeros(1),
        K=_geometric_K(np.array([float(K)]), g),
        gamma=g,
        parameters={"K": K, "gamma": gamma, "K_unit": "dyn/cm2 / (g/cm3)^gamma"},
    )


def read_piecewise_polytrope(
    name: str, log10_p1: float, gammas: tuple[float, float, float] | list[float],
    crust_core_density: float = SLY_CRUST_CORE_DENSITY,
) -> PiecewisePolytrope:
    """Read et al. (2009) four-parameter piecewise polytrope on the SLy crust.

    Parameters
    ----------
    name : str
        Label.
    log10_p1 : float or Quantity
        log10 of the pressure (dyn/cm^2) at rho = 10^14.7 g/cm^3; or a
        Quantity, either logarithmic (``34.384 * u.dex(u.dyn / u.cm**2)``)
        or the pressure p1 itself in any pressure unit.
    gammas : sequence of 3 floats
        Gamma_1, Gamma_2, Gamma_3 of the core pieces, dividing densities
        10^14.7 and 10^15.0 g/cm^3.
    crust_core_density : float or Quantity, optional
        Rest-mass density (g/cm^3) of the crust-core boundary, where the
        crust datasets are measured (:mod:`.crust`); default SLy's.

    Notes
    -----
    The core's first piece is joined to the SLy crust fit (:data:`SLY_CRUST`)
    at the density where their pressures agree, as prescribed by Read et al.
    """
    log10_p1 = units.to_unit(log10_p1, units.LOG_PRESSURE_UNIT, name="log10_p1")
    gammas = [float(x) for x in np.ravel(units.to_unit(gammas, units.DIMENSIONLESS, name="gammas"))]
    if len(gammas) != 3:
        raise InputError("gammas needs exactly three values [G1, G2, G3]", key="gammas")
    if any(not np.isfinite(x) or x <= 0 for x in gammas):
        raise InputError("gammas must be positive", key="gammas")
    rho1, rho2 = READ_CORE_DIVIDING_DENSITIES
    if not (np.isfinite(log10_p1) and 30.0 < log10_p1 < 40.0):
        raise InputError(f"log10_p1 = {log10_p1} is outside (30, 40) (log10 of dyn/cm^2)", key="log10_p1")
    g1, g2, g3 = gammas
    # Polytropic constants in logarithms, in geometric units: K = p / rho^Gamma
    # over- or underflows in cgs for stiff pieces (Gamma = 20: rho^Gamma ~ 1e294).
    ln_d = np.log(units.DENSITY_CGS_TO_GEOM)
    ln_rho1, ln_rho2 = np.log(rho1) + ln_d, np.log(rho2) + ln_d
    ln_K1 = float(log10_p1) * np.log(10.0) + np.log(units.PRESSURE_CGS_TO_GEOM) - g1 * ln_rho1
    ln_K2 = ln_K1 + (g1 - g2) * ln_rho1
    ln_K3 = ln_K2 + (g2 - g3) * ln_rho2
    crust_g = np.array([g for _, g, _ in SLY_CRUST])
    crust_K = _geometric_K(np.array([k for k, _, _ in SLY_CRUST]) * _C2_CGS, crust_g)  # p/c^2 -> dyn/cm^2
    ln_crust_K = np.log(crust_K)
    if abs(g1 - crust_g[-1]) < 1e-12:
        raise InputError("Gamma_1 equals the crust's last Gamma; no joining density", key="gammas")
    with np.errstate(over="ignore"):
        rho_join = float(np.exp((ln_crust_K[-1] - ln_K1) / (g1 - crust_g[-1]) - ln_d))  # g/cm^3
    if not (sly_crust_dividing_densities()[-1] < rho_join < rho1):
        raise InputError(
            f"log10_p1 = {log10_p1} with Gamma_1 = {g1} meets the SLy crust at "
            f"{rho_join:.3e} g/cm^3, outside ({sly_crust_dividing_densities()[-1]:.3e}, {rho1:.3e})",
            key="log10_p1",
        )
    lower = np.array([0.0, *sly_crust_dividing_densities(), rho_join, rho1, rho2])
    with np.errstate(over="ignore", under="ignore"):
        K = np.concatenate([crust_K, np.exp([ln_K1, ln_K2, ln_K3])])
    if not np.all(np.isfinite(K) & (K > 0)):
        raise InputError(f"gammas {gammas} make a polytropic constant over- or underflow", key="gammas")
    g = np.concatenate([crust_g, gammas])
    return set_crust_core(PiecewisePolytrope(
        name=name,
        kind="piecewise_polytrope",
        lower_densities=lower * units.DENSITY_CGS_TO_GEOM,
        K=K,
        gamma=g,
        parameters={"log10_p1": float(log10_p1), "gammas": gammas, "crust": "SLy (Read et al. 2009)"},
    ), crust_core_density)


# --- Tables ------------------------------------------------------------------

@dataclass(frozen=True)
class TableColumns:
    """Which CSV columns hold what, and in which unit.

    ``density_kind`` is "baryon_density" (number density) or
    "rest_mass_density".
    """

    pressure: tuple[str, str]
    energy_density: tuple[str, str]
    density: tuple[str, str]
    density_kind: str


def read_table_file(path: Path, columns: TableColumns) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[int], str]:
    """Read a CSV table: (p dyn/cm^2, eps g/cm^3, rho g/cm^3, file line numbers, sha256).

    The first non-comment line is the header; ``#`` starts a comment line.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise TableError("table file not found", source=str(path)) from None
    except OSError as exc:
        raise TableError(f"cannot read table file ({exc.strerror})", source=str(path)) from None
    sha = hashlib.sha256(raw).hexdigest()
    try:
        text = raw.decode("utf-8-sig")  # spreadsheets often write a byte-order mark
    except UnicodeDecodeError:
        raise TableError("table file is not UTF-8 text", source=str(path)) from None
    header: list[str] | None = None
    rows: list[list[str]] = []
    line_numbers: list[int] = []
    for number, line in enumerate(io.StringIO(text), start=1):
        stripped = line.strip()
        if not stripped or stripped.startswith("#"):
            continue
        fields = [f.strip() for f in stripped.split(",")]
        if header is None:
            header = fields
            header_line = number
            continue
        if len(fields) != len(header):
            raise TableError(
                f"{len(fields)} fields where the header (line {header_line}) has {len(header)}",
                source=str(path), row=number,
            )
        rows.append(fields)
        line_numbers.append(number)
    if header is None:
        raise TableError("table has no header row", source=str(path))
    if len(rows) < 2:
        raise TableError("table needs at least two data rows", source=str(path))

    def column(spec: tuple[str, str], quantity: str, allowed: dict[str, float]) -> np.ndarray:
        name, unit = spec
        if name not in header:
            raise TableError(
                f"no column {name!r} for {quantity}; header has {', '.join(header)}",
                source=str(path), key=f"columns.{quantity}.column",
            )
        if unit not in allowed:
            raise TableError(
                f"unit {unit!r} not accepted for {quantity}; use one of {', '.join(allowed)}",
                source=str(path), key=f"columns.{quantity}.unit",
            )
        j = header.index(name)
        values = np.empty(len(rows))
        for k, fields in enumerate(rows):
            try:
                values[k] = float(fields[j])
            except ValueError:
                raise TableError(
                    f"{quantity} {fields[j]!r} in column {name!r} is not a number",
                    source=str(path), row=line_numbers[k],
                ) from None
        return values * allowed[unit]

    p = column(columns.pressure, "pressure", units.PRESSURE_UNITS)
    eps = column(columns.energy_density, "energy_density", units.ENERGY_DENSITY_UNITS)
    if columns.density_kind == "baryon_density":
        n = column(columns.density, "baryon_density", units.BARYON_DENSITY_UNITS)
        rho = n * units.NEUTRON_MASS_G
    else:
        rho = column(columns.density, "rest_mass_density", units.REST_MASS_DENSITY_UNITS)
    for name, values in (("pressure", p), ("energy_density", eps), (columns.density_kind, rho)):
        bad = np.flatnonzero(~np.isfinite(values) | (values <= 0))
        if bad.size:
            k = bad[0]
            raise TableError(
                f"{name} must be finite and positive (got {values[k]:g})",
                source=str(path), row=line_numbers[k],
            )
        bad = np.flatnonzero(np.diff(values) <= 0)
        if bad.size:
            k = bad[0] + 1
            raise TableError(
                f"{name} must increase strictly from row to row "
                f"({values[k]:g} after {values[k - 1]:g})",
                source=str(path), row=line_numbers[k],
            )
    return p, eps, rho, line_numbers, sha


#: Largest relative gap allowed between a table's energy density and the one
#: implied by the first law from its pressure and density columns.  A larger
#: gap almost always means a wrong unit or a swapped column (common practice).
FIRST_LAW_TOLERANCE = 0.05


def from_table(name: str, path: str | Path, columns: TableColumns,
               crust_core_density: float | None = None) -> PiecewisePolytrope:
    """Build a thermodynamically consistent EOS from a CSV table.

    Between consecutive rows the pressure is the power law through both rows,
    p = K_i rho^Gamma_i (monotone, exact at every row), and the energy
    density follows from the first law d(eps/rho) = p d rho / rho^2, starting
    from the table's energy density at the first row.  The result is an
    exactly consistent, piecewise-analytic EOS whose sound speed is smooth
    inside each interval (no spline overshoot).  Below the first row the first
    interval's power law is continued to p = 0.

    Parameters
    ----------
    name : str
        Label.
    path : str or Path
        CSV file.
    columns : TableColumns
        Column names and units.
    crust_core_density : float or Quantity, optional
        Rest-mass density (g/cm^3) of the table's crust-core boundary; given,
        the sweeps write the crust datasets (:mod:`.crust`); default: no crust.

    Raises
    ------
    TableError
        Naming the file and line for unreadable, non-positive, non-monotone or
        first-law-inconsistent rows, or for values beyond the accepted units.
    """
    p_cgs, eps_cgs, rho_cgs, lines, sha = read_table_file(Path(path), columns)
    rho = rho_cgs * units.DENSITY_CGS_TO_GEOM
    p = p_cgs * units.PRESSURE_CGS_TO_GEOM
    eps = eps_cgs * units.DENSITY_CGS_TO_GEOM
    gamma = np.diff(np.log(p)) / np.diff(np.log(rho))
    flat = np.flatnonzero(np.abs(gamma - 1.0) < 1e-9)
    if flat.size:
        raise TableError("pressure grows exactly like density here (Gamma = 1)",
                         source=str(path), row=lines[flat[0] + 1])
    if gamma[0] <= 1.0:
        raise TableError(
            f"the first two rows have Gamma = {gamma[0]:.4g} <= 1, so the table cannot be "
            "continued to zero pressure; add low-density (crust) rows",
            source=str(path), row=lines[1],
        )
    # Consistency of the table's own energy column with the first law
    # d(eps/rho) = p d rho / rho^2, integrated exactly along p = K_i rho^Gamma_i
    # from the first row.  Checked before the EOS is built: an energy column in
    # the wrong unit must be reported as such, with its row, and not as the
    # round-off failure it causes in the enthalpy of the pieces.
    eps_over_rho = eps[0] / rho[0] + np.concatenate([[0.0], np.cumsum(np.diff(p / rho) / (gamma - 1.0))])
    deviation = np.abs(rho * eps_over_rho / eps - 1.0)
    worst = int(np.argmax(deviation))
    if deviation[worst] > FIRST_LAW_TOLERANCE:
        raise TableError(
            f"energy density differs by {100 * deviation[worst]:.1f}% from the first law "
            "d eps/d n = (eps + p)/n integrated from the first row; check the column units",
            source=str(path), row=lines[worst],
        )
    K = p[:-1] / rho[:-1] ** gamma
    lower = np.concatenate([[0.0], rho[1:-1]])
    first_a = (eps[0] - p[0] / (gamma[0] - 1.0)) / rho[0] - 1.0
    try:
        eos = PiecewisePolytrope(
            name=name, kind="table", lower_densities=lower, K=K, gamma=gamma,
            first_a=first_a, table_sha256=sha,
        )
    except InputError as exc:
        raise TableError(exc.message, source=str(path), row=lines[0]) from None
    eos.h_max = float(eos.enthalpy_of_density(rho[-1]))
    eos.first_law_deviation = float(deviation[worst])
    eos.table_density_range = (float(rho_cgs[0]), float(rho_cgs[-1]))
    eos.parameters = {
        "path": str(Path(path).resolve()),  # absolute: a run file is read from anywhere
        "rows": int(rho.size),
        "columns": {
            "pressure": list(columns.pressure),
            "energy_density": list(columns.energy_density),
            columns.density_kind: list(columns.density),
        },
        "interpolation": "power law in p(rho) per interval, eps from the first law",
        "max_first_law_deviation": float(deviation[worst]),
        "baryon_mass_g": units.NEUTRON_MASS_G,
    }
    if crust_core_density is not None:
        set_crust_core(eos, crust_core_density)
    return eos


# --- Kinds -------------------------------------------------------------------

_DENSITY_KINDS = ("baryon_density", "rest_mass_density")


def check_table_file(path: Path) -> None:
    """Refuse a table path that is no readable CSV file (an InputError naming the key ``path``).

    Checked before the table is read: a FIFO or device would block or read
    forever, and a folder, an empty file or a binary file would otherwise
    surface as a puzzling parse error.
    """
    import stat

    def fail(message: str) -> InputError:
        return InputError(f"table file {path} {message}", key="path")

    try:
        mode = path.stat().st_mode
    except FileNotFoundError:
        raise fail("not found") from None
    except OSError as exc:
        raise fail(f"cannot be read ({exc.strerror})") from None
    if stat.S_ISDIR(mode):
        raise fail("is a folder, not a CSV table")
    if not stat.S_ISREG(mode):
        raise fail("is not a regular file (a device, pipe or socket)")
    try:
        with path.open("rb") as f:
            head = f.read(8192)
    except OSError as exc:
        raise fail(f"cannot be read ({exc.strerror or exc})") from None
    if not head:
        raise fail("is empty")
    if b"\0" in head:  # text never holds NUL bytes; binaries nearly always do
        raise fail("is a binary file, not a CSV table")


def _parse_columns(reader: registry.KeyReader) -> TableColumns:
    cols = reader.table("columns")
    key = "columns"
    allowed = {"pressure", "energy_density", *_DENSITY_KINDS}
    for k in cols:
        if k not in allowed:
            raise reader.fail(f"{key}.{k}", f"unknown key (expected one of: {', '.join(sorted(allowed))})")
    parts = {}
    for q in ("pressure", "energy_density", *_DENSITY_KINDS):
        if q not in cols:
            continue
        spec = cols[q]
        if not isinstance(spec, dict):
            raise reader.fail(f"{key}.{q}", f"needs a table, got {type(spec).__name__}")
        for k in spec:
            if k not in {"column", "unit"}:
                raise reader.fail(f"{key}.{q}.{k}", "unknown key (expected one of: column, unit)")
        for k in ("column", "unit"):
            if not isinstance(spec.get(k), str):
                raise reader.fail(f"{key}.{q}.{k}", "missing or not a string")
        parts[q] = (spec["column"], spec["unit"])
    for q in ("pressure", "energy_density"):
        if q not in parts:
            raise reader.fail(f"{key}.{q}", "missing")
    dens = [q for q in _DENSITY_KINDS if q in parts]
    if len(dens) != 1:
        raise reader.fail(key, "needs exactly one of baryon_density or rest_mass_density")
    return TableColumns(parts["pressure"], parts["energy_density"], parts[dens[0]], dens[0])


def _build_table(name: str, options: dict) -> PiecewisePolytrope:
    path = Path(options["path"])
    check_table_file(path)
    return from_table(name, path, options["columns"], options.get(CRUST_CORE_KEY))


def _rebuild_table(name: str, p: dict) -> PiecewisePolytrope:
    cols = p["columns"]
    density_kind = "baryon_density" if "baryon_density" in cols else "rest_mass_density"
    columns = TableColumns(tuple(cols["pressure"]), tuple(cols["energy_density"]), tuple(cols[density_kind]),
                           density_kind)
    return from_table(name, p["path"], columns, p.get(CRUST_CORE_KEY))


registry.register(registry.EOSKind(
    name="polytrope",
    keys=("K", "gamma"),
    required=("K", "gamma"),
    parse=lambda r: {"K": r.number("K"), "gamma": r.number("gamma")},
    build=lambda name, o: polytrope(name, o["K"], o["gamma"]),
    columns=(registry.Column("K"), registry.Column("gamma")),
    summary="p = K rho^gamma, eps = rho c^2 + p/(gamma - 1)",
))
registry.register(registry.EOSKind(
    name="piecewise_polytrope",
    keys=("log10_p1", "gammas", CRUST_CORE_KEY),
    required=("log10_p1", "gammas"),
    parse=lambda r: {"log10_p1": r.number("log10_p1"),
                     "gammas": r.numbers("gammas", min_count=3, max_count=3, usage="[G1, G2, G3]"),
                     CRUST_CORE_KEY: r.number(CRUST_CORE_KEY, default=SLY_CRUST_CORE_DENSITY, positive=True)},
    build=lambda name, o: read_piecewise_polytrope(name, o["log10_p1"], o["gammas"],
                                                   o.get(CRUST_CORE_KEY, SLY_CRUST_CORE_DENSITY)),
    columns=(registry.Column("log10_p1"),
             registry.Column("gammas", element=lambda k: f"gamma{k + 1}", min_count=3, max_count=3)),
    summary="Read et al. (2009) three core pieces on the SLy crust",
    extra_datasets=("crust_thickness", "crust_mass", "crust_inertia_fraction"),
))
registry.register(registry.EOSKind(
    name="table",
    keys=("path", "columns", CRUST_CORE_KEY),
    required=("path", "columns"),
    parse=lambda r: {"path": r.path("path"), "columns": _parse_columns(r),
                     CRUST_CORE_KEY: r.number(CRUST_CORE_KEY, default=None, positive=True)},
    build=_build_table,
    rebuild=_rebuild_table,
    summary="CSV table, power law in p(rho) per interval, eps from the first law",
))
