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

from dataclasses import dataclass

import numpy as np

from . import units
from .eos import EquationOfState
from .errors import InputError

__all__ = [
    "RungeKuttaTableau",
    "CLASSIC_RK4",
    "DORMAND_PRINCE_5",
    "StarInteriors",
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
    """

    name: str
    order: int
    c: np.ndarray
    a: np.ndarray
    b: np.ndarray


#: The classical fourth-order method (Kutta 1901).
CLASSIC_RK4 = RungeKuttaTableau(
    name="rk4",
    order=4,
    c=np.array([0.0, 0.5, 0.5, 1.0]),
    a=np.array([[0, 0, 0, 0], [0.5, 0, 0, 0], [0, 0.5, 0, 0], [0, 0, 1.0, 0]], dtype=float),
    b=np.array([1, 2, 2, 1], dtype=float) / 6.0,
)

#: Fifth-order solution of Dormand & Prince (1980, J. Comp. Appl. Math. 6, 19),
#: Table 2; the same coefficients as scipy's RK45.  Its last stage only feeds
#: the embedded estimate, so six stages are evaluated per step.
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
)

@dataclass(frozen=True)
class StepControl:
    """Where the fixed steps go; the accuracy knobs of the solver.

    Step edges are the union of (a) a geometric progression off the centre,
    x_{k+1} = (1 + ``startup_growth``) x_k from x_0 = ``start_offset`` h_c,
    which keeps explicit steps stable near the regular singular point where
    the decaying mode v ~ x^(-3/2) lives; (b) EOS nodes spaced
    ``density_step`` in ln(rho) above ``envelope_density``, so that steps
    follow the local scale d h = c_s^2 d ln(rho) of the matter; (c) nodes
    every ``enthalpy_step`` in h; (d) every EOS breakpoint.  The defaults come
    from the convergence study in tests/test_structure.py and give relative
    errors below 1e-6 in M and R (about 1e-8 at 1-2 solar masses).

    Attributes
    ----------
    density_step : float
        Largest step in ln(rho) above the envelope.
    enthalpy_step : float
        Largest step in h.
    envelope_density : float
        Rest-mass density (g/cm^3) below which only h-steps are used; the
        envelope holds a negligible mass and r is nearly linear in h there.
    startup_growth : float
        Largest step relative to the distance from the centre.
    start_offset : float
        x_0 / h_c where the central series hands over; the neglected series
        terms are O(start_offset^2) relative.
    tableau : RungeKuttaTableau
        The stepping scheme.
    """

    density_step: float = 0.12
    enthalpy_step: float = 0.012
    envelope_density: float = 1e8
    startup_growth: float = 0.6
    start_offset: float = 1e-4
    tableau: RungeKuttaTableau = DORMAND_PRINCE_5

    def scaled(self, factor: float) -> StepControl:
        """The same control with every step length multiplied by ``factor``."""
        return StepControl(
            density_step=self.density_step * factor,
            enthalpy_step=self.enthalpy_step * factor,
            envelope_density=self.envelope_density,
            startup_growth=self.startup_growth * factor,
            start_offset=self.start_offset,
            tableau=self.tableau,
        )


DEFAULT_STEPS = StepControl()


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
    """

    central_enthalpy: np.ndarray
    central_pressure: np.ndarray
    central_energy_density: np.ndarray
    central_density: np.ndarray
    radius: np.ndarray
    mass: np.ndarray
    baryon_mass: np.ndarray


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


def structure_rhs(y, p, eps, rho):
    """d(u, v, w)/dh for state ``y`` (shape (3, n)) and EOS values at the same h."""
    u, v, w = y
    two_m_over_r = 2.0 * u * v
    du = -2.0 * (1.0 - two_m_over_r) / (v + FOUR_PI * p)
    q = du / u
    dv = q * (2.0 * np.pi * eps - 1.5 * v)
    dw = q * (2.0 * np.pi * rho / np.sqrt(1.0 - two_m_over_r) - 1.5 * w)
    return np.stack([du, dv, dw])


def eos_nodes(eos: EquationOfState, control: StepControl, h_top: float) -> np.ndarray:
    """Star-independent step edges of one EOS below ``h_top``, ascending.

    The union of the EOS breakpoints, nodes every ``density_step`` in
    ln(rho) above the envelope density, and nodes every ``enthalpy_step`` in h.
    A density or enthalpy node closer than a third of its spacing to a
    breakpoint is dropped, so table knots do not double the step count.
    """
    breaks = eos.breakpoints_h[eos.breakpoints_h < h_top]
    h_nodes = np.arange(1, int(h_top / control.enthalpy_step) + 1) * control.enthalpy_step
    parts = [h_nodes]
    _, _, rho_top = eos.state(np.array([h_top]))
    rho_env = units.density_to_geometric(control.envelope_density)
    if np.isfinite(rho_top[0]) and rho_top[0] > rho_env:
        ln_rho = np.arange(np.log(rho_env), np.log(rho_top[0]), control.density_step)
        try:
            parts.append(eos.enthalpy_of_density(np.exp(ln_rho)))
        except InputError:  # no density axis (incompressible): h-steps only
            pass
    nodes = np.concatenate(parts)
    nodes = nodes[(nodes > 0) & (nodes < h_top)]
    if breaks.size and nodes.size:
        # distance to the nearest breakpoint, compared with the local spacing
        j = np.clip(np.searchsorted(breaks, nodes), 1, breaks.size) - 1
        near = np.minimum(np.abs(nodes - breaks[j]),
                          np.abs(nodes - breaks[np.minimum(j + 1, breaks.size - 1)]))
        # local spacing from the EOS at the node itself, so the node set below
        # any h is the same whatever h_top is (batch-independent results)
        with np.errstate(divide="ignore", invalid="ignore"):
            cs2 = np.nan_to_num(eos.sound_speed_squared(nodes), nan=np.inf)
        spacing = np.minimum(control.enthalpy_step, control.density_step * cs2)
        nodes = nodes[near > spacing / 3.0]
    return np.unique(np.concatenate([nodes, breaks]))


def step_grid(
    nodes: np.ndarray,
    central_enthalpy: np.ndarray,
    start_offset: np.ndarray,
    startup_end: np.ndarray,
    growth: float,
) -> np.ndarray:
    """Per-star step edges: a geometric start-up, then the EOS nodes.

    Parameters
    ----------
    nodes : ndarray, shape (G,)
        Star-independent edges from :func:`eos_nodes`, ascending.
    central_enthalpy, start_offset, startup_end : ndarray, shape (n,)
        h_c, the series hand-over distance x_0 and the distance from the
        centre where the geometric start-up ends.
    growth : float
        Ratio of each start-up step to its distance from the centre.

    Returns
    -------
    edges : ndarray, shape (S + 1, n)
        Step edges in h, descending from h_c - x_0 to exactly 0; stars that
        need fewer steps end with zero-length steps at h = 0.
    """
    h_c = central_enthalpy
    n_geo = np.ceil(np.log(startup_end / start_offset) / np.log1p(growth)).astype(np.intp)
    k = np.arange(int(n_geo.max(initial=0)) + 1)[:, None]
    x = np.minimum(start_offset[None, :] * (1.0 + growth) ** k, startup_end[None, :])
    below = nodes[:, None] < (h_c - startup_end)[None, :]
    h = np.concatenate(
        [h_c[None, :] - x, np.where(below, nodes[:, None], 0.0), np.zeros((1, h_c.size))]
    )
    return -np.sort(-h, axis=0)


def solve_interiors(
    eos: EquationOfState,
    central_enthalpy,
    *,
    control: StepControl = DEFAULT_STEPS,
) -> StarInteriors:
    """Integrate the TOV equations for a batch of central log-enthalpies.

    Parameters
    ----------
    eos : EquationOfState
        The equation of state.
    central_enthalpy : array_like, shape (n,)
        Central log-enthalpies, each in (0, ``eos.h_max``].
    control : StepControl, optional
        Step placement and scheme (the accuracy knobs).

    Returns
    -------
    StarInteriors
        Central and surface values, geometric units.
    """
    h_c = np.atleast_1d(np.asarray(central_enthalpy, dtype=float))
    if np.any(~np.isfinite(h_c) | (h_c <= 0)) or np.any(h_c > eos.h_max * (1 + 1e-12)):
        raise ValueError("central enthalpies must lie in (0, eos.h_max]")
    p_c, eps_c, rho_c = eos.state(h_c)
    x0 = control.start_offset * h_c
    deps_dh = eos.energy_density_slope(h_c)
    y = central_series(p_c, eps_c, rho_c, deps_dh, x0)
    # the start-up ends where its steps reach the local EOS node spacing
    with np.errstate(divide="ignore"):
        density_scale = control.density_step * (eps_c + p_c) / deps_dh  # = step * c_s^2
    local = np.minimum(control.enthalpy_step, density_scale)
    startup_end = np.clip(local / control.startup_growth, x0, h_c - x0)
    nodes = eos_nodes(eos, control, float(h_c.max()))
    edges = step_grid(nodes, h_c, x0, startup_end, control.startup_growth)
    h_from, h_to = edges[:-1], edges[1:]
    piece = eos.piece_index(0.5 * (h_from + h_to))

    coeff_tables = eos.piece_arrays()
    evaluate = eos.state_from_coefficients
    tableau = control.tableau
    c, a, b = tableau.c, tableau.a, tableau.b
    stages = len(b)
    for s in range(h_from.shape[0]):
        h0 = h_from[s]
        dh = h_to[s] - h0
        idx = piece[s]
        coeff = {k: v[idx] for k, v in coeff_tables.items()}
        k = []
        for i in range(stages):
            yi = y
            for j in range(i):
                if a[i, j] != 0.0:
                    yi = yi + (a[i, j] * dh) * k[j]
            hi = h0 + c[i] * dh
            k.append(structure_rhs(yi, *evaluate(hi, coeff)))
        incr = b[0] * k[0]
        for i in range(1, stages):
            if b[i] != 0.0:
                incr = incr + b[i] * k[i]
        y = y + dh * incr

    u, v, w = y
    r3 = u * np.sqrt(u)
    return StarInteriors(
        central_enthalpy=h_c,
        central_pressure=p_c,
        central_energy_density=eps_c,
        central_density=rho_c,
        radius=np.sqrt(u),
        mass=v * r3,
        baryon_mass=w * r3,
    )
