"""Batched TOV structure solver in the log-enthalpy form.

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

Batching
--------
Every star of a batch advances in lock-step through the same number of
fixed steps; each star has its own step sizes, chosen so that step edges fall
exactly on the EOS breakpoints below its centre and steps follow the
local density scale (see :class:`StepControl`).  Inside one step every star stays on one EOS piece, so
piece coefficients are gathered once per step and each stage is a handful of
whole-array numpy operations.  Stars that need fewer steps are padded with
zero-length steps at the surface.  A star's result depends only on its own
grid, never on which other stars share its batch.

Geometric units throughout (G = c = 1, km); see :mod:`stellar_match.units`.
"""

from __future__ import annotations

from dataclasses import dataclass, fields, replace

import numpy as np

from . import units
from .eos import EquationOfState
from .errors import InputError

__all__ = [
    "RungeKuttaTableau",
    "DORMAND_PRINCE_5",
    "StarInteriors",
    "InteriorProfiles",
    "solve_profiles",
    "central_series",
    "solve_interiors",
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


#: Largest relative error in M, R and M_b that a star may carry with status 0; see solve_interiors.
DEFAULT_TOLERANCE = 1e-5
#: A star is accepted when its error estimate is below ESTIMATE_SAFETY * tolerance.  The estimate
#: overstates the true error 5-30x on smooth stars, but in soft (Gamma < 1) pieces and puffed-up
#: stars it was measured up to 1.6x below it (4800 random piecewise polytropes against solve_ivp,
#: tests/test_error_control.py), so half the tolerance keeps the promise with a margin.
ESTIMATE_SAFETY = 0.5
#: Step budget: a star above tolerance is solved again at most this many times, on grids no finer
#: than FINEST_SCALE times the steps of ``control`` (about 16x its steps; its cost is bounded).
MAX_REFINEMENTS = 4
FINEST_SCALE = 1.0 / 16.0
#: Compactness GM/(Rc^2) of every static fluid star is below 4/9 (Buchdahl 1959, Phys. Rev. 116, 1027).
BUCHDAHL_LIMIT = 4.0 / 9.0

@dataclass(frozen=True)
class StepControl:
    """Where the fixed steps go; the accuracy knobs of the solver.

    Step edges are the union of (a) a geometric progression off the centre,
    x_{k+1} = (1 + ``startup_growth``) x_k from x_0 = ``start_offset`` h_c out
    to half the star, which keeps explicit steps stable near the regular
    singular point where the decaying mode v ~ x^(-3/2) lives; (b) EOS nodes
    spaced ``density_step`` in ln(rho) above the envelope, so that steps
    follow the local scale d h = c_s^2 d ln(rho) of the matter; (c) nodes
    every ``enthalpy_step`` in h; (d) every EOS breakpoint; (e) a geometric
    grading of the envelope towards h = 0.  The defaults were chosen with
    benchmarks/bench_sequence.py against solve_ivp at rtol 1e-11: relative
    errors about 2e-7 in M and R over 0.2-2.0 Msun for SLy (below 1e-6 for
    every star the tests check, puffed-up low-mass stars included).

    Attributes
    ----------
    density_step : float
        Largest step in ln(rho) above the envelope.
    enthalpy_step : float
        Largest step in h.
    envelope_density : float
        Rest-mass density (g/cm^3) below which the envelope is graded in h
        instead of followed in density (or ENVELOPE_FRACTION rho_c, if lower).
    startup_growth : float
        Largest step relative to the distance from the centre.
    start_offset : float
        x_0 / h_c where the central series hands over; the neglected series
        terms are O(start_offset^2) relative.
    tableau : RungeKuttaTableau
        The stepping scheme.
    tolerance : float
        Largest relative error in M, R and M_b a star may carry with status 0
        (see :func:`solve_interiors`).
    max_refinements : int
        Step budget: how often a star above tolerance is solved again on a
        finer grid (never finer than FINEST_SCALE times these steps).
    """

    density_step: float = 0.12
    enthalpy_step: float = 0.08
    envelope_density: float = 1e10
    startup_growth: float = 0.6
    start_offset: float = 1e-4
    tableau: RungeKuttaTableau = DORMAND_PRINCE_5
    tolerance: float = DEFAULT_TOLERANCE
    max_refinements: int = MAX_REFINEMENTS

    def __repr__(self) -> str:
        # only what differs from the defaults: help() shows ``control=StepControl()``
        changed = [f"{f.name}={getattr(self, f.name)!r}" for f in fields(self)
                   if not _same_default(getattr(self, f.name), f.default)]
        return f"StepControl({', '.join(changed)})"

    def scaled(self, factor: float) -> StepControl:
        """The same control with every step length multiplied by ``factor``."""
        return replace(self, density_step=self.density_step * factor, enthalpy_step=self.enthalpy_step * factor,
                       startup_growth=self.startup_growth * factor)


def _same_default(value, default) -> bool:
    if isinstance(value, RungeKuttaTableau):  # arrays: compare the object, not elementwise
        return value is default
    return type(value) is type(default) and value == default


DEFAULT_STEPS = StepControl()
#: A star's envelope starts at most this fraction of its central density down
#: (so low-density, Newtonian stars keep density-following steps).
ENVELOPE_FRACTION = 1e-6
#: Below a star's envelope enthalpy h_env, edges sit at h_env g^k, k = 1..ENVELOPE_STEPS.
ENVELOPE_GRADING = 0.4
ENVELOPE_STEPS = 10
#: Stars less compact than this are re-solved with a deeper envelope (see solve_interiors).
LOW_COMPACTNESS = 0.006
#: ... and whose envelope holds more than this share of the radius.  Near the surface hydrostatic
#: equilibrium gives dh/dr ~ -C/R (C = GM/(Rc^2)), so the envelope below h_env is about h_env/C of
#: R deep.  Measured with the defaults: puffed-up neutron stars (SLy, rho_c 5e13-1.8e14 g/cm^3)
#: 0.8 and more; white dwarfs (electron_gas, 1e4-1e11 g/cm^3) 1e-5 to 8e-3, which the shallow
#: grid already solves to tolerance (they used to be solved twice).
ENVELOPE_SHARE = 0.05
REDO_ENVELOPE_FRACTION = 1e-10
#: ... and with every step length scaled by this (they are few; their envelopes are long).
REDO_STEP_SCALE = 0.7
#: A star above tolerance on the shallow envelope is solved again on the deep one with steps scaled
#: by this.  The deep envelope brings error of its own, so 0.7 left about half of such stars (wide
#: piecewise-polytrope priors, near their maxima) above tolerance for a third solve; each solve of a
#: few stars costs as much as the first pass of the whole batch (per-step overhead), so one finer
#: solve is cheaper than two (3000 wide-prior members: 271 s -> 96 s, benchmarks/bench_wide_prior.py).
REFINE_STEP_SCALE = 0.5
#: Steps off an interior density jump: each at most JUMP_GROWTH times the distance from the
#: centre (scaled like the start-up), out to JUMP_REACH times the jump's distance (see _integrate).
JUMP_GROWTH = 0.08
#: A core of the high-density phase with h_c - h_t below this fraction of h_c is left to the central series.
JUMP_NEGLIGIBLE = 1e-12
#: EOS values at a step edge h = 0 are taken at SURFACE_GUARD * h_c instead:
#: d eps/dh diverges at p = 0 when the outermost piece has Gamma > 2.
SURFACE_GUARD = 1e-12


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
    # -- the crust (issue 12)
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
    num = 1.6 * (1 - 2 * C) ** 2 * (2 + 2 * C * (yv - 1) - yv)  # / C^5 cancelled with D
    powers = C[..., None] ** np.arange(_D_SERIES.shape[0])
    d_series = (powers * (_D_SERIES[:, 0] + _D_SERIES[:, 1] * yv[..., None])).sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        d_closed = (
            2 * C * (6 - 3 * yv + 3 * C * (5 * yv - 8))
            + 4 * C**3 * (13 - 11 * yv + C * (3 * yv - 2) + 2 * C**2 * (1 + yv))
            + 3 * (1 - 2 * C) ** 2 * (2 - yv + 2 * C * (yv - 1)) * np.log1p(-2 * C)
        ) / C**5
    return num / np.where(C < 0.15, d_series, d_closed)


def eos_nodes(eos: EquationOfState, control: StepControl, h_top: float, rho_floor: float):
    """Star-independent step edges of one EOS below ``h_top``.

    Returns three ascending arrays of log-enthalpies:

    * ``always``: nodes every ``enthalpy_step`` in h;
    * ``density``: a lattice ln(rho / 1 g cm^-3) = k ``density_step`` (k
      integer) from ``rho_floor`` (g/cm^3) up.  A star uses the lattice nodes
      above its own envelope density, so every star sees the same nodes
      whatever else is in its batch;
    * ``breaks``: the EOS breakpoints, each an edge for every star below it.

    A node closer than a third of its local spacing to a breakpoint is
    dropped, so table knots do not double the step count.
    """
    breaks = eos.breakpoints_h[eos.breakpoints_h < h_top]
    h_nodes = np.arange(1, int(h_top / control.enthalpy_step) + 1) * control.enthalpy_step
    density = np.empty(0)
    _, _, rho_top = eos.state(np.array([h_top]))
    rho_top_cgs = units.density_from_geometric(rho_top[0])
    if np.isfinite(rho_top_cgs) and rho_top_cgs > rho_floor:
        k = np.arange(np.floor(np.log(rho_floor) / control.density_step),
                      np.ceil(np.log(rho_top_cgs) / control.density_step) + 1)
        try:
            density = eos.enthalpy_of_density(units.density_to_geometric(np.exp(k * control.density_step)))
        except InputError:  # no density axis (incompressible): h-steps only
            density = np.empty(0)

    def thin(nodes):
        nodes = nodes[(nodes > 0) & (nodes < h_top)]
        if not (breaks.size and nodes.size):
            return nodes
        j = np.clip(np.searchsorted(breaks, nodes), 1, breaks.size) - 1
        near = np.minimum(np.abs(nodes - breaks[j]),
                          np.abs(nodes - breaks[np.minimum(j + 1, breaks.size - 1)]))
        # local spacing from the EOS at the node itself (batch-independent)
        with np.errstate(divide="ignore", invalid="ignore"):
            cs2 = np.nan_to_num(eos.sound_speed_squared(nodes), nan=np.inf)
        spacing = np.minimum(control.enthalpy_step, control.density_step * cs2)
        return nodes[near > spacing / 3.0]

    return np.unique(thin(h_nodes)), np.unique(thin(density)), breaks


def _stacked_nodes(bound, control: StepControl, h_c: np.ndarray, rho_env: np.ndarray):
    """Per-star node matrices (G, n) for a batch of an EOS stack (see eos.EOSStack)."""
    per_member = {}
    for m in np.unique(bound.member):
        sel = bound.member == m
        per_member[m] = eos_nodes(bound.stack.members[m], control, float(h_c[sel].max()),
                                  float(rho_env[sel].min()))
    out = []
    for part in range(3):
        width = max(per_member[m][part].size for m in per_member)
        table = np.full((width, h_c.size), np.inf)  # inf never lies below a star's centre
        for m, nodes in per_member.items():
            sel = np.flatnonzero(bound.member == m)
            table[: nodes[part].size, sel] = nodes[part][:, None]
        out.append(table)
    return tuple(out)


def _column(nodes: np.ndarray) -> np.ndarray:
    """Nodes as (G, 1) for one EOS or (G, n) per star."""
    return nodes[:, None] if nodes.ndim == 1 else nodes


def step_grid(
    always: np.ndarray,
    density: np.ndarray,
    breakpoints: np.ndarray,
    central_enthalpy: np.ndarray,
    start_offset: np.ndarray,
    startup_end: np.ndarray,
    envelope_enthalpy: np.ndarray,
    growth: float,
    max_step: float = np.inf,
    extra: np.ndarray | None = None,
) -> np.ndarray:
    """Per-star step edges: a geometric start-up, then the EOS nodes.

    Parameters
    ----------
    always, density, breakpoints : ndarray
        Star-independent edges from :func:`eos_nodes`, ascending.
    central_enthalpy, start_offset, startup_end, envelope_enthalpy : ndarray, shape (n,)
        h_c, the series hand-over distance x_0, the distance from the centre
        where the geometric start-up ends, and the h below which a star
        uses no density nodes.
    growth : float
        Ratio of each start-up step to its distance from the centre.
    max_step : float
        The largest enthalpy step of the other edges (``enthalpy_step``).
    extra : ndarray, shape (K, n), optional
        More edges per star (those off interior density jumps); entries
        outside (0, h_c - x_0) must be 0.

    Returns
    -------
    edges : ndarray, shape (S + 1, n)
        Step edges in h, descending from h_c - x_0 to exactly 0; stars that
        need fewer steps end with zero-length steps at h = 0.
    """
    h_c = central_enthalpy
    # The geometric progression runs all the way to h = 0 (as extra edges beyond the
    # start-up end): no step may exceed ``growth`` times its distance from the centre,
    # or the decaying central mode makes explicit steps unstable, e.g. where a stiff
    # piece with sparse nodes follows a soft piece just off the centre.
    n_geo = np.ceil(np.log(h_c / start_offset) / np.log1p(growth)).astype(np.intp)
    k = np.arange(int(n_geo.max(initial=0)) + 1)[:, None]
    x = start_offset[None, :] * (1.0 + growth) ** k
    dense = x <= startup_end[None, :]
    # beyond x = min(h_c / 2, enthalpy_step / growth) the other edges are dense enough
    reach = np.maximum(startup_end, np.minimum(0.5 * h_c, max_step / growth))[None, :]
    x = np.where(dense | (x < reach), np.minimum(x, reach), reach)
    top = (h_c - startup_end)[None, :]
    always, density, breakpoints = _column(always), _column(density), _column(breakpoints)
    # EOS nodes apply inside the start-up region too: where c_s^2 changes fast near
    # the centre (soft pieces, Gamma < 1) the start-up alone would step too far
    start = (h_c - start_offset)[None, :]
    use_always = always < start
    use_density = (density < start) & (density >= envelope_enthalpy[None, :])
    # every breakpoint below the start is an edge, also inside the start-up region
    use_breaks = breakpoints < (h_c - start_offset)[None, :]
    # the envelope is graded geometrically towards h = 0: there 1/r, not r, is
    # nearly linear in h, and a puffed-up low-mass star keeps most of its radius there
    env = envelope_enthalpy[None, :] * ENVELOPE_GRADING ** np.arange(1, ENVELOPE_STEPS + 1)[:, None]
    env = np.where(env < top, env, 0.0)
    h = np.concatenate([
        h_c[None, :] - x,
        np.where(use_always, always, 0.0),
        np.where(use_density, density, 0.0),
        np.where(use_breaks, breakpoints, 0.0),
        env,
        np.zeros((1, h_c.size)),
        *(() if extra is None else (extra,)),
    ])
    return -np.sort(-h, axis=0)


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
        The equation of state.
    central_enthalpy : array_like, shape (n,)
        Central log-enthalpies, each in (0, ``eos.h_max``].
    control : StepControl, optional
        Step placement, scheme, tolerance and step budget (the accuracy knobs).
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
    A star's envelope, where only enthalpy steps graded towards the surface
    are taken, starts at min(control.envelope_density, ENVELOPE_FRACTION
    rho_c).  Stars that come out puffed up (GM/(Rc^2) < LOW_COMPACTNESS, the
    low-mass and unstable configurations near the minimum mass) keep much of
    their radius there (more than ENVELOPE_SHARE, estimated from h_env and
    the compactness; white dwarfs do not), so they are solved again, with
    the envelope pushed down to REDO_ENVELOPE_FRACTION rho_c and steps scaled
    by REDO_STEP_SCALE.

    Error control: every step's embedded Dormand-Prince estimate of the
    local error of (u, v, w), relative to the state, is summed along the
    star (:func:`_integrate`); with u = R^2, M = v R^3, M_b = w R^3 this
    bounds the relative errors of R (half the u sum), M and M_b (their sum
    plus 1.5 times the u sum).  The sum of local estimates of the embedded
    fourth-order solution overstates the error of the propagated
    fifth-order one (tests/test_error_control.py measures by how much).
    A star above tolerance is solved again: first on the deep envelope with
    steps scaled by REFINE_STEP_SCALE (if it was on the shallow one), then
    on grids scaled towards the tolerance by the estimate's fourth-power
    law, at most ``control.max_refinements`` times in all.
    Every decision depends only on the star itself, never on its batch.
    """
    return _solve(eos, central_enthalpy, control, response, record=False)[0]


def _solve(eos, central_enthalpy, control: StepControl, response: bool, record: bool):
    """The body of :func:`solve_interiors`; with ``record`` also each star's accepted grid and node states.

    Returns (StarInteriors, nodes) where ``nodes`` is None without ``record``,
    else a list with one (edges, states) pair per star: its step edges,
    shape (S + 1,), and states, shape (S + 1, components), from the last
    grid it was solved on (the one whose surface values are reported).
    """
    h_c = np.atleast_1d(np.asarray(central_enthalpy, dtype=float))
    if np.any(~np.isfinite(h_c) | (h_c <= 0)) or np.any(h_c > eos.h_max * (1 + 1e-12)):
        raise ValueError("central enthalpies must lie in (0, eos.h_max]")
    p_c, eps_c, rho_c = eos.state(h_c)
    n = h_c.size
    tolerance = control.tolerance
    fraction = np.full(n, ENVELOPE_FRACTION)
    scale = np.ones(n)
    with np.errstate(all="ignore"):  # stars that break down are redone or flagged below
        y, err, steps, core, crust, *first = _integrate(eos, h_c, control, response, fraction, record)
        # recorded grids: (edges, states, column) per star, replaced whenever the star is solved again
        nodes = [(first[0][0], first[0][1], j) for j in range(n)] if record else None

        def redo(stars):
            for factor in np.unique(scale[stars]):
                sel = stars[scale[stars] == factor]
                sub = eos.select(sel) if hasattr(eos, "select") else eos
                y[:, sel], err[:, sel], steps_sel, core[:, sel], crust_sel, *again = _integrate(
                    sub, h_c[sel], control.scaled(factor), response, fraction[sel], record)
                steps[sel] += steps_sel
                if crust is not None:
                    crust[:, sel] = crust_sel
                if record:
                    for j, star in enumerate(sel):
                        nodes[star] = (again[0][0], again[0][1], j)

        compactness = y[1] * y[0]  # m/r = v u
        _, h_env = _envelope_start(eos, control, fraction, rho_c)
        thin = (compactness > 0) & (h_env * (1.0 - 2.0 * compactness) < ENVELOPE_SHARE * compactness)
        puffed = np.flatnonzero(~(compactness >= LOW_COMPACTNESS) & ~thin)  # also NaN
        if puffed.size:
            fraction[puffed] = REDO_ENVELOPE_FRACTION
            scale[puffed] = REDO_STEP_SCALE
            redo(puffed)
        for _ in range(control.max_refinements):
            # NaN estimates too; a star already on the finest grid of the budget stays as it is
            above = np.flatnonzero(~(_relative_error(err) <= ESTIMATE_SAFETY * tolerance) & (scale > FINEST_SCALE))
            if not above.size:
                break
            # First refinement of a star on the shallow envelope: the deep one (a star whose
            # radius lies mostly in its envelope can come out wrong but not puffed up, e.g. a
            # small stiff core under a long crust); after that, halve every step.
            shallow = above[fraction[above] == ENVELOPE_FRACTION]
            fraction[shallow] = REDO_ENVELOPE_FRACTION
            scale[shallow] = REFINE_STEP_SCALE
            # the others: the global error goes as (step)^4, so aim at the tolerance in one go
            # (with a margin; at least halving, at most 1/16)
            deep = np.setdiff1d(above, shallow)
            wanted = 0.8 * (ESTIMATE_SAFETY * tolerance / _relative_error(err[:, deep])) ** 0.25
            scale[deep] = np.maximum(scale[deep] * np.clip(np.nan_to_num(wanted, nan=0.5), 1.0 / 16.0, 0.5),
                                     FINEST_SCALE)
            redo(above)

        u, v, w = y[:3]
        radius = np.sqrt(u)
        r3 = u * radius
        mass = v * r3
        estimate = _relative_error(err)
        finite = np.all(np.isfinite(y), axis=0) & np.isfinite(estimate)
        bound = (mass > 0) & (radius > 0) & (mass / radius < BUCHDAHL_LIMIT)
        status = np.where(~finite, 2, np.where(~bound, 3, np.where(estimate <= ESTIMATE_SAFETY * tolerance, 0, 1)))
        status = status.astype(np.int8)
        bad = status != 0
        radius[bad] = mass[bad] = r3[bad] = np.nan
        out = StarInteriors(
            central_enthalpy=h_c,
            central_pressure=p_c,
            central_energy_density=eps_c,
            central_density=rho_c,
            radius=radius,
            mass=mass,
            baryon_mass=w * r3,
            error_estimate=estimate,
            status=status,
            steps=steps,
        )
        if getattr(eos, "interior_jumps", None) is not None:
            core_r = np.sqrt(core[0])
            out.core_radius = np.where(bad, np.nan, core_r)
            out.core_mass = np.where(bad, np.nan, core[1] * core[0] * core_r)
        if crust is not None:
            crust_r = np.sqrt(crust[0])
            out.crust_thickness = np.where(bad, np.nan, radius - crust_r)
            out.crust_mass = np.where(bad, np.nan, mass - crust[1] * crust[0] * crust_r)
            # phi = C r^5 psi, the same constant C at r_cc and R
            fraction_cc = 1.0 - crust_r**5 * crust[5] / (radius**5 * y[5]) if response else np.nan
            out.crust_inertia_fraction = np.where(bad, np.nan, fraction_cc)
        if response:
            compactness = mass / radius
            # energy-density jump at the surface: y drops by 4 pi R^3 eps(R-) / M
            # (Damour & Nagar 2009, PRD 80, 084035; Postnikov et al. 2010, eq. 14)
            y_surface = y[3] - FOUR_PI * r3 * eos.surface_energy_density / mass
            k2 = love_number_k2(compactness, y_surface)
            out.love_number_k2 = k2
            out.tidal_deformability = (2.0 / 3.0) * k2 / compactness**5
            # exterior frame dragging: omega = Omega - 2J/r^3, J = phi(R)/6 with
            # phi = C r^5 psi and C = 1/sqrt(1 - 2M/R) making j(R) = 1
            omega_r, psi_r = y[4], y[5]
            J = radius**5 * psi_r / np.sqrt(1.0 - 2.0 * compactness) / 6.0
            out.moment_of_inertia = J / (omega_r + 2.0 * J / r3)
    if record:
        nodes = [(edges[:, j], states[:, :, j]) for edges, states, j in nodes]
    return out, nodes


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
    control: StepControl = DEFAULT_STEPS,
    response: bool = False,
    centre: bool = True,
) -> tuple[StarInteriors, InteriorProfiles]:
    """Solve a batch of stars as :func:`solve_interiors` does and return their node states too.

    The states are recorded along the very integration whose surface values
    are returned (same grids, same steps, same error control), so the
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
        Step placement, scheme, tolerance and step budget.
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


def _jump_ratios(scale: float) -> np.ndarray:
    """x / x_t of the step edges after an interior jump (x: distance from the centre in h).

    Outside a core the excess mass of the core makes v relax like A (x_t/x)^(3/2), A of order
    [eps]/eps.  A step of relative length g = dx/x errs by about A(x) g^6, so the steps grow as
    g = JUMP_GROWTH (x/x_t)^(1/4), keeping that error even, until they reach the ordinary
    start-up growth (0.6, times ``scale``): about 4/JUMP_GROWTH steps out to some 10^3 x_t.
    """
    ratios, r = [], 1.0
    g0, top = JUMP_GROWTH * scale, DEFAULT_STEPS.startup_growth * scale
    while g0 * r**0.25 < top:
        r *= 1.0 + g0 * r**0.25
        ratios.append(r)
    return np.array(ratios)


def _relative_error(err: np.ndarray) -> np.ndarray:
    """Relative error estimate of a star: the largest of those of R, M and M_b.

    ``err`` holds the summed relative local errors of (u, v, w); R = sqrt(u),
    M = v u^(3/2), M_b = w u^(3/2).
    """
    eu, ev, ew = err
    return np.maximum(0.5 * eu, np.maximum(ev, ew) + 1.5 * eu)


def _envelope_start(eos, control: StepControl, envelope_fraction, rho_c):
    """Where each star's envelope begins: (rest-mass density in g/cm^3, log-enthalpy h_env).

    At min(control.envelope_density, envelope_fraction rho_c); h_env = 0 for an
    EOS without a density axis (incompressible: no envelope).
    """
    rho_env = np.minimum(control.envelope_density, envelope_fraction * units.density_from_geometric(rho_c))
    try:
        h_env = eos.enthalpy_of_density(units.density_to_geometric(rho_env))
    except InputError:
        h_env = np.zeros_like(rho_env)
    return rho_env, h_env


def _integrate(eos, h_c, control, response, envelope_fraction, record: bool = False):
    """Integrate every star from its centre to h = 0.

    Interior energy-density jumps (``eos.interior_jumps``, each a step edge
    at its log-enthalpy h_t) are crossed exactly: u, v, w, omega and psi are
    continuous there, and the tidal variable y jumps.  Its equation holds
    the term (4 pi r^3 / (m + 4 pi r^3 p)) d eps/dh (from -(q/2) r^2 Q, with
    e^lambda (1 - 2m/r) = 1), and d eps/dh carries -[eps] delta(h - h_t), so
    going outwards across the jump

        y(r_t+) = y(r_t-) - 4 pi r_t^3 [eps] / (m(r_t) + 4 pi r_t^3 p_t)
                = y(r_t-) - 4 pi [eps] / (v + 4 pi p_t),

    [eps] = eps(h_t+) - eps(h_t-) >= 0, the inner minus the outer energy
    density.  With p_t = 0 this is the surface jump of Damour & Nagar
    (2009, PRD 80, 084035) and Postnikov et al. (2010, eq. 14); in the
    Newtonian limit it is -3 [eps] / <eps>, <eps> = 3 m / (4 pi r_t^3) the
    mean density inside r_t.  The embedded error estimate of the step that
    ends at a jump takes its last stage from that step's own (inner) piece.

    Returns
    -------
    y : ndarray, shape (3 or 6, n)
        Final state (u, v, w[, y, omega, psi]) at the surface.
    error : ndarray, shape (3, n)
        Accumulated local error estimates of ln u, ln v and ln w: the sum
        over steps of |embedded Dormand-Prince estimate| / |state|.
    steps : ndarray of int, shape (n,)
        Steps of non-zero length taken by each star.
    core : ndarray, shape (2, n)
        (u, v) where the star crosses the first interior jump (NaN if it does
        not); a core smaller than the central-series hand-over x_0 takes
        them from the central series at x = h_c - h_t.
    crust : ndarray, shape (3 or 6, n), or None
        The state where each star passes the crust-core boundary
        ``eos.crust_core_enthalpy`` (a step edge; from the central series
        when it lies within x_0 of the centre, at the centre itself when the
        star is all crust); None for an EOS without a crust.
    nodes : tuple of ndarray, only with ``record=True``
        (edges, states): the step edges, shape (S + 1, n), descending from
        h_c - x_0 to 0, and the state at each edge as the step ending there
        left it, shape (S + 1, 3 or 6, n) (at an interior jump: its inner
        side, before y jumps).  Zero-length steps repeat their edge.
    """
    p_c, eps_c, rho_c = eos.state(h_c)
    x0 = control.start_offset * h_c
    deps_dh = eos.energy_density_slope(h_c)
    n = h_c.size
    core = np.full((2, n), np.nan)
    jumps = getattr(eos, "interior_jumps", None)
    if jumps is not None:
        jump_h, jump_de, jump_p = (np.broadcast_to(a.reshape(a.shape[0], -1), (a.shape[0], n))
                                   for a in (jumps.h, jumps.delta_eps, jumps.pressure))
        # A jump inside the central-series region: the series holds only inside the core, so it hands
        # over just inside the jump (the step to it stays in the core; the jump is then crossed as
        # any other).  A core below JUMP_NEGLIGIBLE h_c in h (about 1e-6 of the radius) is too small
        # to matter: the series from the centre phase takes it, its radius and mass from the series.
        x_t = h_c[None, :] - jump_h
        inside = (x_t > JUMP_NEGLIGIBLE * h_c) & (x_t < x0)
        x0 = np.min(np.where(inside, x_t * (1.0 - 1e-9), x0), axis=0)
        tiny = (x_t[0] > 0) & (x_t[0] <= JUMP_NEGLIGIBLE * h_c)
        if tiny.any():
            core[:, tiny] = central_series(p_c, eps_c, rho_c, deps_dh, x_t[0])[:2, tiny]
    y = central_series(p_c, eps_c, rho_c, deps_dh, x0)
    if response:
        y = np.concatenate([y, response_series(p_c, eps_c, deps_dh, h_c, x0)])
    # the start-up ends where its steps reach the local EOS node spacing
    density_scale = control.density_step * (eps_c + p_c) / deps_dh  # = step * c_s^2
    local = np.minimum(control.enthalpy_step, density_scale)
    startup_end = np.clip(local / control.startup_growth, x0, h_c - x0)
    rho_env, h_env = _envelope_start(eos, control, envelope_fraction, rho_c)
    if hasattr(eos, "stack"):  # an ensemble batch: every member has its own nodes
        always, density, breaks = _stacked_nodes(eos, control, h_c, rho_env)
    else:
        always, density, breaks = eos_nodes(eos, control, float(h_c.max()), float(rho_env.min()))
    extra = None
    if jumps is not None:
        # Outside a core the mass of the core makes v = m/r^3 relax like (x_t/x)^(3/2), x = h_c - h the
        # distance from the centre, with an amplitude of order [eps]/eps: as near the centre (the
        # start-up), but with an O(1) amplitude, so steps of JUMP_GROWTH times x follow each jump
        # for JUMP_REACH times its distance x_t (measured: M off by 4e-5 with the ordinary steps
        # for a small core under a jump of 0.35 eps_t).
        x_t = h_c[None, :] - jump_h
        ratio = _jump_ratios(control.startup_growth / DEFAULT_STEPS.startup_growth)
        e = h_c[None, None, :] - x_t[:, None, :] * ratio[None, :, None]
        ok = (x_t[:, None, :] > x0[None, None, :]) & (e > 0) & np.isfinite(e)
        extra = np.where(ok, e, 0.0).reshape(-1, n)
    crust_h = getattr(eos, "crust_core_enthalpy", None)
    crust = None
    if crust_h is not None:
        # the crust-core boundary is a step edge of every star that passes it off the central series;
        # the others take the series there (or, all crust, at the centre: r = m = phi = 0)
        crust_h = np.broadcast_to(np.asarray(crust_h, dtype=float), (n,))
        passes = crust_h < h_c - x0
        edge = np.where(passes, crust_h, 0.0)[None, :]
        extra = edge if extra is None else np.concatenate([extra, edge])
        x_cc = np.clip(h_c - crust_h, 0.0, None)
        crust = central_series(p_c, eps_c, rho_c, deps_dh, x_cc)
        if response:
            crust = np.concatenate([crust, response_series(p_c, eps_c, deps_dh, h_c, x_cc)])
    edges = step_grid(always, density, breaks, h_c, x0, startup_end, h_env, control.startup_growth,
                      control.enthalpy_step, extra)
    h_from, h_to = edges[:-1], edges[1:]
    steps = np.count_nonzero(h_from > h_to, axis=0)
    piece = eos.piece_index(0.5 * (h_from + h_to))
    crust_at: dict[int, np.ndarray] = {}  # step -> stars whose step s starts at the boundary
    if crust is not None:
        hit = h_from == crust_h[None, :]
        hit[1:] &= h_from[:-1] > h_from[1:]
        hit[0] = False
        first_hit = np.where(hit.any(axis=0), hit.argmax(axis=0), -1)
        for s_hit in np.unique(first_hit[first_hit > 0]):
            crust_at[int(s_hit)] = np.flatnonzero(first_hit == s_hit)

    h_guard = SURFACE_GUARD * h_c
    coeff_tables = eos.piece_arrays()
    evaluate = eos.state_from_coefficients
    slope = eos.slope_from_coefficients
    tableau = control.tableau
    c, a, b = tableau.c, tableau.a, tableau.b
    e_stages, e_last = tableau.e[:-1], tableau.e[-1]
    stages = len(b)
    # Stage derivatives live in one (stages, components, stars) array, so each
    # stage's combination sum_j a_ij k_j is a single matrix-vector product.
    k = np.empty((stages,) + y.shape)
    flat = k.reshape(stages, -1)  # the same memory, for one matrix-vector product per stage
    shape = y.shape
    # Error estimate of (u, v, w) only: p, eps and rho are continuous across EOS
    # breakpoints, so the next step's first stage is this step's seventh (FSAL);
    # the response equations see d eps/dh, which jumps there.
    error = np.zeros((3, n))
    carry = np.zeros((3, n))  # this step's estimate, all but its last stage
    carry_flat, n3 = carry.reshape(-1), 3 * n
    scratch = np.empty((3, n))
    dh_prev = np.zeros(n)
    # profiles (solve_profiles): the state at every edge, recorded along the way (never re-solved)
    recorded = [y.copy()] if record else None

    def rhs(i, hi, yi, coeff):
        em1 = np.expm1(hi)
        p, e, r = evaluate(hi, coeff, em1)
        if response:
            response_rhs(hi, yi, p, e, r, slope(p, e, coeff, hi), out=k[i], exp_h=1.0 + em1)
        else:
            structure_rhs(yi, p, e, r, out=k[i])

    for s in range(h_from.shape[0]):
        h0 = h_from[s]
        dh = h_to[s] - h0
        idx = piece[s]
        coeff = {name: table[idx] for name, table in coeff_tables.items()}
        crossing = None
        if s in crust_at:
            crust[:, crust_at[s]] = y[:, crust_at[s]]
        if jumps is not None and s > 0:
            at_jump = (jump_h == h0[None, :]) & (h_from[s - 1] > h0)[None, :]
            if at_jump.any():
                crossing = np.flatnonzero(at_jump.any(axis=0))
                first = np.flatnonzero(at_jump[0])
                core[:, first] = y[:2, first]
                if response:
                    for j in range(jump_h.shape[0]):
                        sel = np.flatnonzero(at_jump[j])
                        y[3, sel] -= FOUR_PI * jump_de[j, sel] / (y[1, sel] + FOUR_PI * jump_p[j, sel])
                # the last stage of the step that ended here, on its own (inner) piece
                inner = {name: table[piece[s - 1][crossing]] for name, table in coeff_tables.items()}
                last_inner = structure_rhs(y[:3, crossing], *evaluate(h0[crossing], inner))
        for i in range(stages):
            yi = y if i == 0 else y + dh * (a[i, :i] @ flat[:i]).reshape(shape)
            rhs(i, np.maximum(h0 + c[i] * dh, h_guard), yi, coeff)
            if i == 0 and s > 0:
                last = k[0, :3]
                if crossing is not None:
                    last = last.copy()
                    last[:, crossing] = last_inner
                _accumulate(error, carry, dh_prev * e_last, last, y[:3], scratch)
        # (u, v, w) are the first 3 n entries of each stage row of ``flat``
        np.dot(e_stages, flat[:, :n3], out=carry_flat)
        carry *= dh
        dh_prev = dh
        y = y + dh * (b @ flat).reshape(shape)
        if record:
            recorded.append(y.copy())  # copies: a jump changes y in place
    # the seventh stage of the last step: the derivative at the surface
    coeff = {name: table[piece[-1]] for name, table in coeff_tables.items()}
    rhs(0, h_guard, y, coeff)
    _accumulate(error, carry, dh_prev * e_last, k[0, :3], y[:3], scratch)
    if record:
        return y, error, steps, core, crust, (edges, np.stack(recorded))
    return y, error, steps, core, crust


def _accumulate(error, carry, last_weight, last_stage, state, scratch) -> None:
    """error += |carry + last_weight * last_stage| / |state|, in place (the hot loop)."""
    np.multiply(last_stage, last_weight, out=scratch)
    scratch += carry
    scratch /= state
    np.abs(scratch, out=scratch)
    error += scratch
