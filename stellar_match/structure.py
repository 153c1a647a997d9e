"""The TOV structure solver in the log-enthalpy form: one star at a time, adaptive steps.

Equations
---------
With the log-enthalpy h as the independent variable (Lindblom 1992, ApJ 398,
569, eqs. 5-6) the surface is exactly h = 0 and no root search is needed:

    dr/dh = -r (r - 2m) / (m + 4 pi r^3 p),     dm/dh = 4 pi r^2 eps dr/dh.

Near the centre r ~ sqrt(h_c - h), so we integrate the regular variables

    u = r^2,   v = m / r^3,   w = m_b / r^3,

for which, with q = (du/dh) / u,

    du/dh = -2 (1 - 2 u v) / (v + 4 pi p),
    dv/dh = q (2 pi eps - 3 v / 2),
    dw/dh = q (2 pi rho / sqrt(1 - 2 u v) - 3 w / 2),

where m_b is the baryon (rest) mass.  All are analytic at the centre; the
integration starts a small distance off it with the series of Lindblom
(1992, eqs. 7-8), re-derived for u, v, w in :func:`central_series`.

Solving
-------
Every star is integrated on its own by a compiled kernel
(:mod:`stellar_match.kernels.tov_stepping`): adaptive Dormand-Prince 5(4)
steps, each accepted or rejected on its embedded error estimate, ending
exactly on every EOS breakpoint.  The EOS enters as flat coefficient arrays
(:mod:`stellar_match.eos.lowering`).  This module holds the equations in
numpy form (the readable statement of what the kernel computes, used by the
profiles), the surface formulas and the error estimates of the results.  A
star's result depends only on its own inputs, never on its batch.

Geometric units throughout (G = c = 1, km); see :mod:`stellar_match.units`.
"""

from __future__ import annotations

from dataclasses import dataclass, fields, replace

import numpy as np

from . import units
from .eos import EquationOfState, lowering
from .kernels import mass_maxima as maxima_kernel
from .kernels import tov_stepping

__all__ = [
    "RungeKuttaTableau",
    "DORMAND_PRINCE_5",
    "StarInteriors",
    "InteriorProfiles",
    "solve_profiles",
    "central_series",
    "solve_interiors",
    "mass_maxima",
    "warm_up",
    "StepControl",
    "DEFAULT_STEPS",
]

FOUR_PI = 4.0 * np.pi


@dataclass(frozen=True)
class RungeKuttaTableau:
    """An explicit Runge-Kutta method, as its Butcher tableau.

    Attributes
    ----------
    name : str
        Short label.
    order : int
        Order of the propagated solution.
    c : ndarray, shape (s,)
        Stage nodes.
    a : ndarray, shape (s, s)
        Strictly lower-triangular stage coefficients.
    b : ndarray, shape (s,)
        Weights of the propagated solution.
    e : ndarray, shape (s + 1,)
        Weights of the local error estimate, b - b_hat of the embedded
        lower-order solution; the last entry multiplies the derivative at the
        end of the step (first-same-as-last, so it costs nothing extra).
    """

    name: str
    order: int
    c: np.ndarray
    a: np.ndarray
    b: np.ndarray
    e: np.ndarray

    def __repr__(self) -> str:
        # the arrays would fill a screen, in help() signatures too (defaults of StepControl)
        return f"RungeKuttaTableau({self.name!r}, order={self.order}, stages={self.c.size})"


#: Fifth-order solution of Dormand & Prince (1980, J. Comp. Appl. Math. 6, 19),
#: Table 2; the same coefficients as scipy's RK45 (``e`` as scipy's ``E``, with
#: the sign flipped).  Its seventh stage is the derivative at the end of the
#: step, i.e. the first stage of the next one, so the embedded fourth-order
#: error estimate costs no extra evaluation (one at the surface).
DORMAND_PRINCE_5 = RungeKuttaTableau(
    name="dopri5",
    order=5,
    c=np.array([0.0, 1 / 5, 3 / 10, 4 / 5, 8 / 9, 1.0]),
    a=np.array(
        [
            [0, 0, 0, 0, 0, 0],
            [1 / 5, 0, 0, 0, 0, 0],
            [3 / 40, 9 / 40, 0, 0, 0, 0],
            [44 / 45, -56 / 15, 32 / 9, 0, 0, 0],
            [19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729, 0, 0],
            [9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656, 0],
        ]
    ),
    b=np.array([35 / 384, 0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84]),
    e=np.array([71 / 57600, 0, -71 / 16695, 71 / 1920, -17253 / 339200, 22 / 525, -1 / 40]),
)


#: Largest relative error in M, R, M_b (and k2, Lambda, I when solved) that a star may carry with
#: status 0; see solve_interiors.
DEFAULT_TOLERANCE = 1e-5
#: The kernel's raw estimates (the summed local errors and the carried global error, see
#: :mod:`stellar_match.kernels.tov_stepping`) are of the embedded 4th-order solution, while the kernel
#: propagates the 5th-order one (local extrapolation; Dormand & Prince 1980, J. Comput. Appl. Math. 6,
#: 19), so they overstate the true error; divided by this factor they are the reported estimate.  How
#: much they overstate it depends on how long the steps are: about 300x on the fine steps that k2,
#: Lambda and I need, but only 3-4x on the long steps of a structure-only white dwarf or of a 30-step
#: neutron star.  The factor is set by the second case, so that the reported estimate stays above the
#: true error everywhere: over 240 random stars of four regimes (benchmarks/bench_calibration.py)
#: structure-only estimates were 4 to 10x the true error, with median true error / tolerance 0.05.
ESTIMATE_CALIBRATION = 2.0
#: Step budget of one star: attempted steps (accepted and rejected) before it is given up (status 1).
MAX_STEPS = 3000
#: A star whose estimate misses the tolerance (the carried error of a long envelope, or k2, Lambda or
#: I) is solved again (alone) with the step target lowered by the fourth-power law, at most this many times.
MAX_RETRIES = 3
#: With the response equations the steps aim this much lower: Lambda = (2/3) k2 (R/M)^5 carries five
#: times the relative error of the compactness, and k2 that of y amplified by dk2/dy near y = 2
#: (Hinderer 2008, eq. 23), so aiming at the Lambda estimate directly spares most re-solves.
RESPONSE_AIM = 8.0
#: Compactness GM/(Rc^2) of every static fluid star is below 4/9 (Buchdahl 1959, Phys. Rev. 116, 1027).
BUCHDAHL_LIMIT = 4.0 / 9.0


@dataclass(frozen=True)
class StepControl:
    """Accuracy knobs of the solver: tolerance, step budget, the largest steps.

    Every star takes its own adaptive steps (:mod:`stellar_match.kernels.tov_stepping`):
    a step is accepted when its embedded error estimate, relative to the
    state, is below ``ESTIMATE_CALIBRATION * tolerance * step_scale**4 * dh / h_c``,
    so the summed (calibrated) estimate of the whole star stays below the tolerance.
    Steps end on every EOS breakpoint, and none is longer than the caps below.

    Attributes
    ----------
    tolerance : float
        Largest relative error in M, R and M_b (and k2, Lambda and I when
        the response equations are solved) a star may carry with status 0
        (see :func:`solve_interiors`).
    step_scale : float
        Multiplies every step cap and, below 1, to the fourth power the error
        the steps aim at: the steps are then finer than the tolerance needs
        (0.5: about 16x smaller errors for about twice the steps).
    max_steps : int
        Step budget of a star: attempted steps (accepted and rejected)
        before it ends with status 1.
    startup_growth : float
        Largest step relative to the distance x = h_c - h from the centre.
    enthalpy_step : float
        Largest step in h (inf: none).
    density_step : float
        Largest step in ln(rho), as dh = c_s^2 d ln(rho) (inf: none).
    start_offset : float
        x_0 / h_c where the central series hands over; the neglected series
        terms are O(start_offset^2) relative.
    tableau : RungeKuttaTableau
        The stepping scheme (explicit, with an embedded error estimate).
    """

    tolerance: float = DEFAULT_TOLERANCE
    step_scale: float = 1.0
    max_steps: int = MAX_STEPS
    startup_growth: float = 0.6
    enthalpy_step: float = np.inf
    density_step: float = np.inf
    start_offset: float = 1e-4
    tableau: RungeKuttaTableau = DORMAND_PRINCE_5

    def __repr__(self) -> str:
        # only what differs from the defaults: help() shows ``control=StepControl()``
        changed = [f"{f.name}={getattr(self, f.name)!r}" for f in fields(self)
                   if not _same_default(getattr(self, f.name), f.default)]
        return f"StepControl({', '.join(changed)})"

    def scaled(self, factor: float) -> StepControl:
        """The same control with every step cap, and the step scale, multiplied by ``factor``."""
        return replace(self, step_scale=self.step_scale * factor, startup_growth=self.startup_growth * factor,
                       enthalpy_step=self.enthalpy_step * factor, density_step=self.density_step * factor)

    @property
    def step_target(self) -> float:
        """Summed raw (uncalibrated) relative error estimate the steps of a star aim at."""
        # a scale above 1 widens the caps only: the steps never aim above the tolerance
        return ESTIMATE_CALIBRATION * self.tolerance * min(self.step_scale, 1.0) ** 4


def _same_default(value, default) -> bool:
    if isinstance(value, RungeKuttaTableau):  # arrays: compare the object, not elementwise
        return value is default
    return type(value) is type(default) and value == default


DEFAULT_STEPS = StepControl()
#: Largest steps of the node profiles (solve_profiles' default control): the radial modes and the
#: profile tables interpolate between the solver's nodes, so nodes follow the matter at least every
#: 0.12 in ln(rho) and 0.08 in h (the spacing that gave the radial-mode checks their accuracy).
PROFILE_STEPS = replace(DEFAULT_STEPS, enthalpy_step=0.08, density_step=0.12)


@dataclass
class StarInteriors:
    """Surface values of a batch of interior solutions (geometric units).

    Attributes
    ----------
    central_enthalpy : ndarray
        Log-enthalpy at the centre.
    central_pressure, central_energy_density, central_density : ndarray
        Central p, eps and rest-mass density rho (km^-2).
    radius : ndarray
        Areal radius R of the surface p = 0 (km).
    mass : ndarray
        Gravitational mass M (km, i.e. G M / c^2).
    baryon_mass : ndarray
        Baryon (rest) mass M_b (km).
    love_number_k2, tidal_deformability : ndarray or None
        Quadrupolar tidal Love number k2 and Lambda = (2/3) k2 (R/M)^5
        (None when solved without the response equations).
    moment_of_inertia : ndarray or None
        Slow-rotation moment of inertia I (km^3, i.e. G I / c^2).
    error_estimate : ndarray or None
        Estimated relative integration error of M and R (the larger).
    status : ndarray of int8 or None
        Per-star quality code (``schema.STAR_STATUS``); the physics values
        of a star with a non-zero code are NaN.
    steps : ndarray of int or None
        Steps each star took, over all its grids (the cost of its refinements).
    core_radius, core_mass : ndarray or None
        Areal radius (km) and gravitational mass m(r) (km) inside the first
        interior density jump of the EOS (``eos.interior_jumps``): the core
        of the high-density phase.  NaN for stars without such a core; None
        when the EOS has no interior jump.
    crust_thickness, crust_mass : ndarray or None
        R - r_cc and M - m(r_cc) (km) of an EOS with a crust
        (``eos.crust_core_enthalpy``, the log-enthalpy h_cc of its
        crust-core density): r_cc is where the star passes h_cc.  A star
        whose centre lies below h_cc is crust throughout (R and M).  None
        when the EOS has no crust.
    crust_inertia_fraction : ndarray or None
        Delta I_crust / I = 1 - phi(r_cc) / phi(R), phi = r^4 j d omega-bar/dr
        (Hartle 1967, ApJ 150, 1005, eq. 43: phi / 6 is the angular momentum
        J(r) inside r); NaN without the response equations.
    """

    central_enthalpy: np.ndarray
    central_pressure: np.ndarray
    central_energy_density: np.ndarray
    central_density: np.ndarray
    radius: np.ndarray
    mass: np.ndarray
    baryon_mass: np.ndarray
    love_number_k2: np.ndarray | None = None
    tidal_deformability: np.ndarray | None = None
    moment_of_inertia: np.ndarray | None = None
    error_estimate: np.ndarray | None = None
    status: np.ndarray | None = None
    steps: np.ndarray | None = None
    core_radius: np.ndarray | None = None
    core_mass: np.ndarray | None = None
    # -- the crust
    crust_thickness: np.ndarray | None = None
    crust_mass: np.ndarray | None = None
    crust_inertia_fraction: np.ndarray | None = None

    def __repr__(self) -> str:
        n = int(np.size(self.mass))
        ok = n if self.status is None else int(np.count_nonzero(np.asarray(self.status) == 0))
        parts = [f"{n} stars", f"{ok} within tolerance"]
        m = units.mass_from_geometric(np.asarray(self.mass, dtype=float))
        r = np.asarray(self.radius, dtype=float)
        finite = np.isfinite(m) & np.isfinite(r)
        if finite.any():
            parts.append(f"M {m[finite].min():.4g}-{m[finite].max():.4g} Msun, "
                         f"R {r[finite].min():.4g}-{r[finite].max():.4g} km")
        parts.append("with k2, Lambda, I" if self.love_number_k2 is not None else "without response equations")
        return f"StarInteriors({'; '.join(parts)})"


def central_series(p_c, eps_c, rho_c, deps_dh_c, x):
    """State (u, v, w) a log-enthalpy distance ``x`` below the centre.

    Series to first order in x for v, w and second order for u (Lindblom
    1992, eqs. 7-8, in the variables u = r^2, v = m/r^3, w = m_b/r^3):

        u = u1 x + u2 x^2,    u1 = 3 / (2 pi (eps_c + 3 p_c)),
        v = 4 pi eps_c / 3 - (4 pi / 5) eps'_c x,
        w = 4 pi rho_c / 3 + (4 pi / 5)(rho_c v0 u1 - rho'_c) x,

    with eps'_c = d eps/dh and rho'_c = rho_c eps'_c / (eps_c + p_c) at the
    centre, v0 = 4 pi eps_c / 3 and
    u2 = -(u1 / 2) (2 v0 u1 + D1 / D0), D0 = v0 + 4 pi p_c,
    D1 = -(4 pi / 5) eps'_c - 4 pi (eps_c + p_c).
    """
    v0 = FOUR_PI * eps_c / 3.0
    v1 = -0.8 * np.pi * deps_dh_c
    u1 = 3.0 / (2.0 * np.pi * (eps_c + 3.0 * p_c))
    d0 = v0 + FOUR_PI * p_c
    d1 = v1 - FOUR_PI * (eps_c + p_c)
    u2 = -0.5 * u1 * (2.0 * v0 * u1 + d1 / d0)
    drho_dh_c = rho_c * deps_dh_c / (eps_c + p_c)
    w0 = FOUR_PI * rho_c / 3.0
    w1 = 0.8 * np.pi * (rho_c * v0 * u1 - drho_dh_c)
    return np.stack([u1 * x + u2 * x * x, v0 + v1 * x, w0 + w1 * x])


def response_series(p_c, eps_c, deps_dh_c, h_c, x):
    """Tidal and rotational variables (y, omega, psi) a distance ``x`` off the centre.

    y = 2 + a r^2 with a = -(4 pi / 7)(eps_c / 3 + 11 p_c + eps'_c), from the
    r^2 terms of the y-equation of Postnikov, Prakash & Lattimer (2010,
    PRD 82, 024016, eq. 13); omega = 1 + (8 pi / 5)(eps_c + p_c) r^2 and
    psi = psi_0 + psi_1 x from Hartle's (1967, ApJ 150, 1005, eq. 43)
    frame-dragging equation, with the arbitrary normalisation omega_c = 1
    (the equation is linear).  Derivation in docs of :func:`response_rhs`.
    """
    v0 = FOUR_PI * eps_c / 3.0
    u1 = 3.0 / (2.0 * np.pi * (eps_c + 3.0 * p_c))
    a = -(FOUR_PI / 7.0) * (eps_c / 3.0 + 11.0 * p_c + deps_dh_c)
    y = 2.0 + a * u1 * x
    omega1 = u1 * 1.6 * np.pi * (eps_c + p_c)
    psi0 = 3.2 * np.pi * (eps_c + p_c) * np.exp(h_c)
    f1 = psi0 * 5.0 * (-deps_dh_c / (eps_c + p_c) - 2.0 + u1 * v0 + omega1)
    return np.stack([y, 1.0 + omega1 * x, psi0 + f1 / 7.0 * x])


def structure_rhs(y, p, eps, rho, out=None):
    """d(u, v, w)/dh for state ``y`` (shape (3, n)) and EOS values at the same h.

    Writes into ``out`` (shape (3, n)) when given, to spare an allocation per stage.
    """
    u, v, w = y[0], y[1], y[2]
    out = np.empty((3,) + np.shape(u)) if out is None else out
    f = 1.0 - 2.0 * u * v
    du = out[0]
    np.divide(-2.0 * f, v + FOUR_PI * p, out=du)
    q = du / u
    np.multiply(q, 2.0 * np.pi * eps - 1.5 * v, out=out[1])
    np.multiply(q, 2.0 * np.pi * rho / np.sqrt(f) - 1.5 * w, out=out[2])
    return out


def response_rhs(h, y, p, eps, rho, deps_dh, out=None, exp_h=None):
    """d/dh of (u, v, w, y, omega, psi): structure plus tidal and rotational response.

    With q = (du/dh)/u, f = 1 - 2m/r, e^lambda = 1/f:

    * tidal (Hinderer 2008, ApJ 677, 1216; Postnikov et al. 2010, eq. 13 in
      the variable h, using dr/dh = r q / 2):
      dy/dh = -(q/2) [y^2 + y e^lambda (1 + 4 pi r^2 (p - eps)) + r^2 Q],
      r^2 Q = 4 pi r^2 e^lambda (5 eps + 9 p + d eps/dh) - 6 e^lambda - r^2 nu'^2,
      with (eps + p)/c_s^2 = d eps/dh and r^2 nu'^2 = 4 u^2 (v + 4 pi p)^2 / f^2;
    * frame dragging (Hartle 1967, eq. 43, (r^4 j omega')' + 4 r^3 j' omega = 0,
      j = e^(-(nu+lambda)/2)), as phi = r^4 j omega' = C r^5 psi with the
      lapse written jhat = e^h sqrt(f) up to the surface constant C:
      d omega/dh = (du/dh) psi / (2 jhat),
      d psi/dh = (q/2) [16 pi (eps + p) e^lambda jhat omega - 5 psi].
    """
    u, v, w, yy, om, psi = y[0], y[1], y[2], y[3], y[4], y[5]
    out = np.empty((6,) + np.shape(u)) if out is None else out
    f = 1.0 - 2.0 * u * v
    dd = v + FOUR_PI * p
    e_lam = 1.0 / f
    du = out[0]
    np.multiply(-2.0 * f, 1.0 / dd, out=du)
    q = du / u
    half_q = 0.5 * q
    np.multiply(q, 2.0 * np.pi * eps - 1.5 * v, out=out[1])
    sqrt_f = np.sqrt(f)
    np.multiply(q, 2.0 * np.pi * rho / sqrt_f - 1.5 * w, out=out[2])
    u_e_lam = u * e_lam
    u_q = FOUR_PI * u_e_lam * (5.0 * eps + 9.0 * p + deps_dh) - 6.0 * e_lam - 4.0 * (u_e_lam * dd) ** 2
    np.multiply(-half_q, yy * yy + yy * e_lam * (1.0 + FOUR_PI * u * (p - eps)) + u_q, out=out[3])
    jhat = (np.exp(h) if exp_h is None else exp_h) * sqrt_f
    np.multiply(0.5 * du, psi / jhat, out=out[4])
    np.multiply(half_q, 16.0 * np.pi * (eps + p) * e_lam * jhat * om - 5.0 * psi, out=out[5])
    return out


def _hinderer_denominator_series(order: int = 40) -> np.ndarray:
    """Coefficients (alpha_n, beta_n) with D(C, y) = C^5 sum_n (alpha_n + beta_n y) C^n.

    D is the denominator of k2 in Hinderer (2008, erratum 2009), eq. 23.  Its
    closed form cancels through O(C^4), losing ~16 - 5 log10(1/C) digits; the
    series, in exact rational arithmetic from ln(1 - 2C) = -sum (2C)^k / k, has
    no cancellation.
    """
    from fractions import Fraction as F

    n_terms = order + 6
    # polynomial in C as dict power -> (const, y-coefficient)
    def add(acc, power, c0, c1):
        a0, a1 = acc.get(power, (F(0), F(0)))
        acc[power] = (a0 + c0, a1 + c1)

    acc: dict[int, tuple] = {}
    # 2C[6 - 3y + 3C(5y - 8)]
    add(acc, 1, F(12), F(-6))
    add(acc, 2, F(-48), F(30))
    # 4C^3 [13 - 11y + C(3y - 2) + 2C^2 (1 + y)]
    add(acc, 3, F(52), F(-44))
    add(acc, 4, F(-8), F(12))
    add(acc, 5, F(8), F(8))
    # 3(1 - 2C)^2 [2 - y + 2C(y - 1)] = 3(1 - 4C + 4C^2)(2 - y - 2C + 2Cy), expanded exactly
    pre = {}
    poly_a = {0: 1, 1: -4, 2: 4}
    poly_b = {0: (F(2), F(-1)), 1: (F(-2), F(2))}
    for ia, ca in poly_a.items():
        for ib, (b0, b1) in poly_b.items():
            c0, c1 = pre.get(ia + ib, (F(0), F(0)))
            pre[ia + ib] = (c0 + 3 * ca * b0, c1 + 3 * ca * b1)
    for k in range(1, n_terms + 1):
        lk = -F(2) ** k / k
        for ip, (c0, c1) in pre.items():
            if ip + k <= n_terms:
                add(acc, ip + k, c0 * lk, c1 * lk)
    for power in range(5):
        assert acc.get(power, (0, 0)) == (0, 0), "Hinderer denominator must start at C^5"
    return np.array([[float(acc[5 + n][0]), float(acc[5 + n][1])] for n in range(order)])


_D_SERIES = _hinderer_denominator_series()


def love_number_k2(compactness, y_surface):
    """Quadrupolar tidal Love number k2 from C = M/R and y = R H'(R)/H(R).

    Hinderer (2008, ApJ 677, 1216, with the 2009 erratum), eq. 23.  For
    C < 0.15 the denominator is summed as a series (no cancellation); the
    Newtonian limit is k2 = (2 - y) / (2 (y + 3)).
    """
    C = np.asarray(compactness, dtype=float)
    yv = np.asarray(y_surface, dtype=float)
    C, yv = np.broadcast_arrays(C, yv)
    num = 1.6 * (1 - 2 * C) ** 2 * (2 + 2 * C * (yv - 1) - yv)  # / C^5 cancelled with D
    with np.errstate(invalid="ignore", divide="ignore"):
        den = (
            2 * C * (6 - 3 * yv + 3 * C * (5 * yv - 8))
            + 4 * C**3 * (13 - 11 * yv + C * (3 * yv - 2) + 2 * C**2 * (1 + yv))
            + 3 * (1 - 2 * C) ** 2 * (2 - yv + 2 * C * (yv - 1)) * np.log1p(-2 * C)
        ) / C**5
    small = C < 0.15
    if np.any(small):  # the series only where the closed form cancels
        c_s, y_s = C[small], yv[small]
        powers = c_s[:, None] ** np.arange(_D_SERIES.shape[0])
        den = np.array(den, dtype=float)
        den[small] = (powers * (_D_SERIES[:, 0] + _D_SERIES[:, 1] * y_s[:, None])).sum(axis=-1)
    return num / den


def solve_interiors(
    eos: EquationOfState,
    central_enthalpy,
    *,
    control: StepControl = DEFAULT_STEPS,
    response: bool = True,
) -> StarInteriors:
    """Integrate the TOV equations for a batch of central log-enthalpies.

    Parameters
    ----------
    eos : EquationOfState
        The equation of state (or a bound ensemble stack).
    central_enthalpy : array_like, shape (n,)
        Central log-enthalpies, each in (0, ``eos.h_max``].
    control : StepControl, optional
        Tolerance, step budget and step caps (the accuracy knobs).
    response : bool, optional
        Also integrate the tidal (k2, Lambda) and slow-rotation (I)
        equations as three more components of the same state.

    Returns
    -------
    StarInteriors
        Central and surface values, geometric units, with every star's
        ``error_estimate`` and ``status``; stars with a non-zero status
        have NaN surface values.

    Notes
    -----
    Every star is integrated on its own by the compiled solver
    (:mod:`stellar_match.kernels.tov_stepping`), with adaptive
    Dormand-Prince steps whose embedded error is checked at every step.
    Two readings of the error of (u, v, w) come out of the kernel: the sum
    of the local estimates, and the global error carried through the
    linearised equations (which sees an envelope amplify early errors).  The
    larger, divided by :data:`ESTIMATE_CALIBRATION`, gives the relative
    errors of R = sqrt(u), M = v u^(3/2) and M_b = w u^(3/2); with the
    response equations those of y, omega-bar and psi give k2, Lambda and I
    through their formulas (:func:`_response_errors`).  A star whose
    estimate misses the tolerance is solved again, alone, with a smaller
    step target (at most MAX_RETRIES times).  A star that runs out of its
    step budget has status 1.  Every decision depends only on the star
    itself, never on its batch.
    """
    return _solve(eos, central_enthalpy, control, response, record=False)[0]


def _kernel_arguments(bank, control: StepControl, response: bool):
    tab = control.tableau
    return (bank.piece_lo, bank.piece_hi, bank.piece_top, bank.piece_type, bank.coefficients,
            bank.jump_lo, bank.jump_hi, bank.jump_h, bank.jump_delta_eps, bank.jump_pressure,
            bank.crust_core_enthalpy, bool(response),
            float(control.step_target / (RESPONSE_AIM if response else 1.0)), float(control.start_offset),
            float(control.startup_growth), float(control.enthalpy_step), float(control.density_step),
            int(control.max_steps), tab.c, tab.a, tab.b, tab.e)


def _run_kernel(bank, member, h_c, tol_scale, control, response, record):
    """Solve stars with the compiled kernel; returns (y, err, core, crust, flags, attempts, nodes)."""
    n = h_c.size
    y = np.empty((n, 6))
    err = np.empty((n, 12))
    core = np.empty((n, 2))
    crust = np.full((n, 6), np.nan)
    flags = np.empty(n, dtype=np.int64)
    attempts = np.empty(n, dtype=np.int64)
    args = _kernel_arguments(bank, control, response)
    nodes = None
    if not record:
        tov_stepping.solve_stars(h_c, member, tol_scale, *args, y, err, core, crust, flags, attempts)
    else:
        nodes = []
        rec_h = np.empty(control.max_steps + 1)
        rec_y = np.empty((control.max_steps + 1, 6))
        for j in range(n):
            flags[j], attempts[j], kept = tov_stepping.solve_star_recorded(
                h_c[j], int(member[j]), tol_scale[j], *args, y[j], err[j], core[j], crust[j], rec_h, rec_y)
            nodes.append((rec_h[:kept].copy(), rec_y[:kept, : 6 if response else 3].copy()))
    return y, err, core, crust, flags, attempts, nodes


def _structure_errors(err: np.ndarray) -> np.ndarray:
    """Relative error estimate of R, M and M_b (the largest) from the kernel's estimates of (u, v, w).

    ``err`` has shape (n, 12): the summed local errors (0-5) and the carried global errors (6-11,
    signed) of the state; R = sqrt(u), M = v u^(3/2), M_b = w u^(3/2).  The larger of the two
    readings: the sum bounds the errors made, the carried error adds how the equations amplified them.
    """
    eu, ev, ew = err[:, 0], err[:, 1], err[:, 2]
    gu, gv, gw = err[:, 6], err[:, 7], err[:, 8]
    summed = np.maximum(0.5 * eu, np.maximum(ev, ew) + 1.5 * eu)
    carried = np.maximum(np.abs(0.5 * gu), np.maximum(np.abs(gv + 1.5 * gu), np.abs(gw + 1.5 * gu)))
    return np.maximum(summed, carried)


def _response_errors(err, compactness, y_surface, y_final, jump_term, omega_r, two_j_over_r3):
    """Relative error estimates of k2, Lambda and I from the kernel's estimates (n, 12) of the state.

    k2 = k2(C, y_R) (Hinderer 2008, eq. 23) is differentiated numerically in C and y_R; y_R carries
    the absolute error of y plus that of the surface jump 4 pi R^3 eps_s / M; Lambda = (2/3) k2 C^-5;
    I = J / (omega-bar_R + 2 J / R^3) with J = R^5 psi_R / (6 sqrt(1 - 2C)).
    """
    err = np.maximum(err[:, :6], np.abs(err[:, 6:]))  # per component: the larger reading
    eu, ev = err[:, 0], err[:, 1]
    e_r, e_m = 0.5 * eu, ev + 1.5 * eu
    e_c = e_r + e_m
    d_y = err[:, 3] * np.maximum(np.abs(y_final), 1.0) + np.abs(jump_term) * (3.0 * e_r + e_m)
    # k2 and its changes in y_R and in C, from one call
    k2, k2_y, k2_c = np.split(love_number_k2(np.concatenate([compactness, compactness, compactness * (1.0 + e_c)]),
                                             np.concatenate([y_surface, y_surface + d_y, y_surface])), 3)
    d_k2 = np.abs(k2_y - k2) + np.abs(k2_c - k2)
    e_k2 = d_k2 / np.abs(k2)
    e_lambda = e_k2 + 5.0 * e_c
    e_j = 5.0 * e_r + err[:, 5] + compactness / (1.0 - 2.0 * compactness) * e_c
    spin = omega_r + two_j_over_r3
    e_i = e_j + (err[:, 4] * np.abs(omega_r) + two_j_over_r3 * (e_j + 3.0 * e_r)) / np.abs(spin)
    return np.maximum(e_k2, np.maximum(e_lambda, e_i))


def _surface_values(bank, member, y, err, response):
    """Surface values and the error estimate (with the response columns when solved) of every star."""
    u, v, w = y[:, 0], y[:, 1], y[:, 2]
    with np.errstate(all="ignore"):
        radius = np.sqrt(u)
        r3 = u * radius
        mass = v * r3
        estimate = _structure_errors(err)
        values = {"radius": radius, "r3": r3, "mass": mass, "baryon_mass": w * r3}
        if response:
            compactness = mass / radius
            # energy-density jump at the surface: y drops by 4 pi R^3 eps(R-) / M
            # (Damour & Nagar 2009, PRD 80, 084035; Postnikov et al. 2010, eq. 14)
            jump_term = FOUR_PI * r3 * bank.surface_energy_density[member] / mass
            y_surface = y[:, 3] - jump_term
            k2 = love_number_k2(compactness, y_surface)
            # exterior frame dragging: omega = Omega - 2J/r^3, J = phi(R)/6 with
            # phi = C r^5 psi and C = 1/sqrt(1 - 2M/R) making j(R) = 1
            omega_r, psi_r = y[:, 4], y[:, 5]
            J = radius**5 * psi_r / np.sqrt(1.0 - 2.0 * compactness) / 6.0
            values.update(love_number_k2=k2, tidal_deformability=(2.0 / 3.0) * k2 / compactness**5,
                          moment_of_inertia=J / (omega_r + 2.0 * J / r3))
            estimate = np.maximum(estimate, _response_errors(err, compactness, y_surface, y[:, 3], jump_term,
                                                             omega_r, 2.0 * J / r3))
    values["estimate"] = estimate
    return values


def _solve(eos, central_enthalpy, control: StepControl, response: bool, record: bool):
    """The body of :func:`solve_interiors`; with ``record`` also each star's accepted nodes.

    Returns (StarInteriors, nodes) where ``nodes`` is None without ``record``,
    else a list with one (edges, states) pair per star: its step edges,
    shape (S + 1,), descending from h_c - x_0 to 0, and the state at each,
    shape (S + 1, components), from the solve whose surface values are
    reported.
    """
    h_c = np.atleast_1d(np.asarray(central_enthalpy, dtype=float))
    if np.any(~np.isfinite(h_c) | (h_c <= 0)) or np.any(h_c > eos.h_max * (1 + 1e-12)):
        raise ValueError("central enthalpies must lie in (0, eos.h_max]")
    p_c, eps_c, rho_c = eos.state(h_c)
    n = h_c.size
    tolerance = control.tolerance
    bank, member = lowering.lower(eos)
    member = np.zeros(n, dtype=np.int64) if member is None else np.ascontiguousarray(member, dtype=np.int64)
    tol_scale = np.ones(n)
    y, err, core, crust, flags, attempts, nodes = _run_kernel(bank, member, h_c, tol_scale, control, response,
                                                               record)
    err /= ESTIMATE_CALIBRATION
    values = _surface_values(bank, member, y, err, response)
    limit = tolerance
    for _ in range(MAX_RETRIES):
        # above tolerance (an amplifying envelope; k2, Lambda or I): these stars alone again, the step
        # target lowered by the fourth-power law of the global error (with a margin; at least halved,
        # at most 1/16)
        again = np.flatnonzero((flags == 0) & ~(values["estimate"] <= limit) & np.isfinite(values["estimate"]))
        if not again.size:
            break
        tol_scale[again] *= np.clip(0.8 * (limit / values["estimate"][again]) ** 1.25, 1.0 / 16.0, 0.5)
        sub = _run_kernel(bank, member[again], h_c[again], tol_scale[again], control, response, record)
        y[again], core[again], crust[again], flags[again] = sub[0], sub[2], sub[3], sub[4]
        err[again] = sub[1] / ESTIMATE_CALIBRATION
        attempts[again] += sub[5]
        if record:
            for j, star in enumerate(again):
                nodes[star] = sub[6][j]
        fresh = _surface_values(bank, member[again], y[again], err[again], response)
        for key, column in fresh.items():
            values[key][again] = column
    radius, r3, mass = values["radius"], values["r3"], values["mass"]
    estimate = values["estimate"]
    with np.errstate(all="ignore"):
        finite = np.all(np.isfinite(y[:, : 6 if response else 3]), axis=1) & np.isfinite(estimate)
        bound = (mass > 0) & (radius > 0) & (mass / radius < BUCHDAHL_LIMIT)
    status = np.where((flags == 2) | ~finite, 2,
                      np.where(~bound, 3, np.where((flags == 0) & (estimate <= limit), 0, 1))).astype(np.int8)
    bad = status != 0
    radius, mass, r3 = (np.where(bad, np.nan, a) for a in (radius, mass, r3))
    out = StarInteriors(
        central_enthalpy=h_c,
        central_pressure=p_c,
        central_energy_density=eps_c,
        central_density=rho_c,
        radius=radius,
        mass=mass,
        baryon_mass=np.where(bad, np.nan, values["baryon_mass"]),
        error_estimate=estimate,
        status=status,
        steps=attempts,
    )
    with np.errstate(all="ignore"):
        if eos.interior_jumps is not None:
            core_r = np.sqrt(core[:, 0])
            out.core_radius = np.where(bad, np.nan, core_r)
            out.core_mass = np.where(bad, np.nan, core[:, 1] * core[:, 0] * core_r)
        if eos.crust_core_enthalpy is not None:
            crust_r = np.sqrt(crust[:, 0])
            out.crust_thickness = np.where(bad, np.nan, radius - crust_r)
            out.crust_mass = np.where(bad, np.nan, mass - crust[:, 1] * crust[:, 0] * crust_r)
            # phi = C r^5 psi, the same constant C at r_cc and R
            fraction_cc = 1.0 - crust_r**5 * crust[:, 5] / (radius**5 * y[:, 5]) if response else np.nan
            out.crust_inertia_fraction = np.where(bad, np.nan, fraction_cc)
        if response:
            for key in ("love_number_k2", "tidal_deformability", "moment_of_inertia"):
                setattr(out, key, np.where(bad, np.nan, values[key]))
    return out, nodes


def mass_maxima(eos, x_lo, x_hi, x_guess, control: StepControl = DEFAULT_STEPS, *,
                x_tol: float = 1e-4) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Locate the maximum of M(h_c) inside brackets, one EOS per bracket, by compiled single-star solves.

    Parameters
    ----------
    eos : EquationOfState
        One EOS for every bracket, or a bound stack
        (:meth:`stellar_match.eos.EOSStack.bind`) with one member per bracket.
    x_lo, x_hi, x_guess : array_like, shape (n,)
        Bracket ends and first trial point in x = ln h_c (h_c the central
        log-enthalpy, geometric units).
    control : StepControl
        Step control of the trial stars (structure only).
    x_tol : float
        Location accuracy in x.

    Returns
    -------
    x_max : ndarray, shape (n,)
        The located maxima; NaN where a trial star failed or the largest
        mass sits at a bracket end.
    found : ndarray of bool, shape (n,)
    evaluations : ndarray of int, shape (n,)
        Stars solved per bracket (Brent 1973, ch. 5: typically 8 to 15).
    """
    lo = np.ascontiguousarray(np.atleast_1d(x_lo), dtype=float)
    hi = np.ascontiguousarray(np.atleast_1d(x_hi), dtype=float)
    guess = np.ascontiguousarray(np.atleast_1d(x_guess), dtype=float)
    n = lo.size
    bank, member = lowering.lower(eos)
    member = np.zeros(n, dtype=np.int64) if member is None else np.ascontiguousarray(member, dtype=np.int64)
    x_out = np.empty(n)
    flags = np.empty(n, dtype=np.int64)
    evaluations = np.empty(n, dtype=np.int64)
    maxima_kernel.maximise_masses(member, lo, hi, guess, float(x_tol), *_kernel_arguments(bank, control, False),
                                  x_out, flags, evaluations)
    return x_out, flags == maxima_kernel.FOUND, evaluations


#: Seconds :func:`warm_up` may take before it logs that it is compiling the kernels.
COMPILE_NOTICE_AFTER = 1.0


def warm_up() -> None:
    """Compile (first run after an install) or load from numba's cache every kernel of the solver.

    Solves one star of a small polytrope of its own with and without the
    response equations, locates one maximum and interpolates one branch
    value: about 15 s the first time on a 2-core machine, well under a second
    once the cache exists.  When it takes longer than
    :data:`COMPILE_NOTICE_AFTER` it says so on the ``stellar_match`` logger
    (the command line shows it).  :func:`stellar_match.sweep.run_config`
    calls it before starting workers, so that they fork with the kernels
    loaded instead of compiling side by side.
    """
    import logging
    import threading

    from .eos import polytrope
    from .kernels import branch_values

    timer = threading.Timer(COMPILE_NOTICE_AFTER, logging.getLogger(__name__).info,
                            ("compiling the solver once after installation (about 15 s); "
                             "later runs load it from numba's cache",))
    timer.daemon = True
    timer.start()
    try:
        eos = polytrope("warm-up", 1.0e5, 2.0)
        h = np.array([0.2])
        _solve(eos, h, DEFAULT_STEPS, True, record=False)
        _solve(eos, h, DEFAULT_STEPS, False, record=False)
        x = float(np.log(h[0]))
        mass_maxima(eos, [x - 0.1], [x + 0.1], [x])
        out = np.empty(1)
        branch_values.values_at_mass(np.ones((1, 2)), np.ones((1, 2)), np.ones((1, 2), dtype=bool), 1.0, True, out)
    finally:
        timer.cancel()


@dataclass
class InteriorProfiles:
    """The solver's own node states of a batch of stars, centre -> surface (geometric units).

    Every 2-D array has shape (stars, nodes): row j holds star j's
    ``n_nodes[j]`` nodes, NaN past them.  Node 0 is the centre itself
    (r = m = m_b = 0, the central EOS values; with ``centre=False`` it is
    left out), node 1 the hand-over of the central series at
    h = h_c - x_0, then one node per step edge of the grid the star was
    accepted on (after any re-solve of the error control), ending with the
    surface h = 0, whose r, m, m_b are bit-identical to
    :func:`solve_interiors` for the same inputs.  Zero-length steps are
    dropped, so h decreases strictly along a row.

    The metric follows from h alone in this form: with the interior lapse
    e^nu, g_tt = -e^nu, hydrostatic equilibrium d nu = -2 dh and the match
    e^nu(R) = 1 - 2M/R give nu(r) = ln(1 - 2M/R) - 2 h(r) (Lindblom 1992,
    ApJ 398, 569); e^lambda = g_rr = (1 - 2m/r)^-1.

    Attributes
    ----------
    central_enthalpy : ndarray, shape (n,)
        h_c.
    n_nodes : ndarray of int, shape (n,)
        Nodes of each star (0 for a star with a non-zero ``status``, whose row is NaN).
    status : ndarray of int8, shape (n,)
        The star's quality code, as in :class:`StarInteriors`.
    enthalpy : ndarray
        Log-enthalpy h at each node (h_c at the centre, 0 at the surface).
    radius : ndarray
        Areal radius r (km).
    mass, baryon_mass : ndarray
        Enclosed gravitational mass m(r) and baryon mass m_b(r) (km).
    pressure, energy_density, rest_mass_density : ndarray
        p, eps, rho from the EOS at the node's h (km^-2); at a node on an
        interior density jump, the values of its outer (low-density) side.
    g_tt_magnitude, g_rr : ndarray
        e^nu = (1 - 2M/R) e^(-2h) and e^lambda = 1 / (1 - 2m/r).
    frame_dragging, frame_dragging_flux : ndarray or None
        The solver's unnormalised Hartle (1967) variables omega-bar (1 at
        the centre) and psi, with phi = r^4 j d omega-bar/dr = C r^5 psi,
        C = (1 - 2M/R)^(-1/2) (see :func:`response_rhs`); None unless
        solved with ``response=True``.
    frame_dragging_ratio : ndarray or None
        omega / Omega = 1 - omega-bar / Omega, the angular velocity of the
        local inertial frames (Hartle 1967) over the star's: Omega =
        omega-bar(R) + 2 J / R^3, J = C R^5 psi(R) / 6, so that it joins the
        exterior's 2 J / (Omega r^3) at R.
    """

    central_enthalpy: np.ndarray
    n_nodes: np.ndarray
    status: np.ndarray
    enthalpy: np.ndarray
    radius: np.ndarray
    mass: np.ndarray
    baryon_mass: np.ndarray
    pressure: np.ndarray
    energy_density: np.ndarray
    rest_mass_density: np.ndarray
    g_tt_magnitude: np.ndarray
    g_rr: np.ndarray
    frame_dragging: np.ndarray | None = None
    frame_dragging_flux: np.ndarray | None = None
    frame_dragging_ratio: np.ndarray | None = None

    def __repr__(self) -> str:
        n = int(np.size(self.n_nodes))
        return (f"InteriorProfiles({n} stars, {int(np.max(self.n_nodes, initial=0))} nodes at most"
                f"{', with frame dragging' if self.frame_dragging is not None else ''})")

    def star(self, j: int) -> dict[str, np.ndarray]:
        """Star ``j``'s profile as 1-D arrays of its own nodes (no padding)."""
        k = int(self.n_nodes[j])
        out = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, np.ndarray) and value.ndim == 2:
                out[f.name] = value[j, :k]
        return out


def solve_profiles(
    eos: EquationOfState,
    central_enthalpy,
    *,
    control: StepControl = PROFILE_STEPS,
    response: bool = False,
    centre: bool = True,
) -> tuple[StarInteriors, InteriorProfiles]:
    """Solve a batch of stars as :func:`solve_interiors` does and return their node states too.

    The states are recorded along the very integration whose surface values
    are returned (same steps, same error control), so the
    ``StarInteriors`` equals ``solve_interiors(eos, central_enthalpy,
    control=control, response=response)`` bit for bit, and a star re-solved
    by the error control reports the nodes of the grid that was accepted.

    Parameters
    ----------
    eos : EquationOfState
        The equation of state (or a bound ensemble stack).
    central_enthalpy : array_like, shape (n,)
        Central log-enthalpies, each in (0, ``eos.h_max``].
    control : StepControl, optional
        Tolerance, step budget and step caps; the default, ``PROFILE_STEPS``,
        keeps nodes at least every 0.12 in ln(rho) and 0.08 in h.
    response : bool, optional
        Also integrate the tidal and frame-dragging equations (gives the
        frame-dragging columns of the profile, and k2, Lambda, I).
    centre : bool, optional
        Start each profile with the centre itself (r = 0) as node 0.

    Returns
    -------
    (StarInteriors, InteriorProfiles)
    """
    out, nodes = _solve(eos, central_enthalpy, control, response, record=True)
    h_c = out.central_enthalpy
    n = h_c.size
    kept = []
    for edges, states in nodes:
        step_end = np.concatenate([[True], edges[:-1] > edges[1:]])  # drop zero-length steps
        kept.append((edges[step_end], states[step_end]))
    first = 1 if centre else 0
    ok = out.status == 0
    counts = np.array([e.size + first if good else 0 for (e, _), good in zip(kept, ok, strict=True)], dtype=int)
    width = max(int(counts.max(initial=0)), 1)  # one NaN column when no star has nodes
    comps = 6 if response else 3
    h = np.full((width, n), np.nan)
    y = np.full((width, comps, n), np.nan)
    for j, (edges, states) in enumerate(kept):
        if not ok[j]:
            continue
        h[first:counts[j], j] = edges
        y[first:counts[j], :, j] = states
    p_c, eps_c, rho_c = out.central_pressure, out.central_energy_density, out.central_density
    with np.errstate(all="ignore"):
        if centre:
            h[0, ok] = h_c[ok]
            y[0, :3, ok] = np.stack([np.zeros(n), FOUR_PI * eps_c / 3.0, FOUR_PI * rho_c / 3.0])[:, ok].T
            if response:
                y[0, 3:, ok] = response_series(p_c, eps_c, eos.energy_density_slope(h_c), h_c, np.zeros(n))[:, ok].T
        p, eps, rho = eos.state(np.where(np.isfinite(h), h, 0.0))
        pad = ~np.isfinite(h)
        p, eps, rho = (np.where(pad, np.nan, a) for a in (p, eps, rho))
        if centre:
            p[0], eps[0], rho[0] = (np.where(ok, a, np.nan) for a in (p_c, eps_c, rho_c))
        u, v, w = y[:, 0], y[:, 1], y[:, 2]
        radius = np.sqrt(u)
        r3 = u * radius  # the expressions of solve_interiors: the surface node is bit-identical
        lapse_surface = 1.0 - 2.0 * out.mass / out.radius
        profiles = InteriorProfiles(
            central_enthalpy=h_c, n_nodes=counts, status=out.status, enthalpy=h.T, radius=radius.T,
            mass=(v * r3).T, baryon_mass=(w * r3).T, pressure=p.T, energy_density=eps.T, rest_mass_density=rho.T,
            g_tt_magnitude=(lapse_surface[None, :] * np.exp(-2.0 * h)).T, g_rr=(1.0 / (1.0 - 2.0 * u * v)).T,
        )
        if response:
            omega, psi = y[:, 4], y[:, 5]
            last = np.maximum(counts - 1, 0)
            cols = np.arange(n)
            radius_s, omega_s, psi_s = radius[last, cols], omega[last, cols], psi[last, cols]
            J = radius_s**5 * psi_s / np.sqrt(lapse_surface) / 6.0
            spin = omega_s + 2.0 * J / radius_s**3
            profiles.frame_dragging = omega.T
            profiles.frame_dragging_flux = psi.T
            profiles.frame_dragging_ratio = (1.0 - omega / spin[None, :]).T
    return out, profiles
