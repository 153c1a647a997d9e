"""Adaptive per-star integration of the TOV equations in the log-enthalpy form (compiled).

The equations are those of :mod:`stellar_match.structure` (Lindblom 1992,
ApJ 398, 569, in the regular variables u = r^2, v = m/r^3, w = m_b/r^3), with
the tidal equation of Hinderer (2008, ApJ 677, 1216; in the form of
Postnikov, Prakash & Lattimer 2010, PRD 82, 024016, eq. 13) and Hartle's
(1967, ApJ 150, 1005, eq. 43) frame-dragging equation as three more
components of the same state.

Each star takes its own explicit Runge-Kutta steps from the hand-over of the
central series at h = h_c - x_0 down to the surface h = 0.  The scheme is
data (the Butcher tableau, ``c``, ``a``, ``b``, ``e`` arrays; Dormand &
Prince 1980): the embedded error estimate of every step is checked there,
the step accepted or rejected, and the next step sized from it.  The
acceptance test is *error per unit step*: a step of length dh is accepted
when its local error, relative to the state, is below
``tol_step * dh / h_c``, so the sum of the accepted local errors along the
star stays below ``tol_step`` (Hairer, Norsett & Wanner 1993, *Solving
Ordinary Differential Equations I*, sec. II.4).

A sum of local errors misses how the equations carry an early error
forward: in a long, soft envelope (m nearly constant, so 1/r falls
linearly in h) a relative error of r made at r_0 reaches the surface
multiplied by R / r_0, hundreds for a puffed-up star.  So each star also
carries its global error through the linearised equations,

    g_{n+1} = g_n - dh [f(h_n, y_n + g_n) - f(h_n, y_n)] + l_n,

l_n the signed embedded estimate of step n (the "linearised error
equation" of global error estimation; Lang & Verwer 2007, SIAM J. Sci.
Comput. 29, 1460), one more evaluation of the right-hand side per accepted
step.  ``err_out`` receives both: the summed relative local errors of each
component (0-5) and the propagated global error relative to the final state
(6-11).

Steps end exactly on every piece boundary of the EOS (a kink or a jump of
the energy density: the stages of a step never straddle one) and on the
crust-core boundary.  Interior energy-density jumps are crossed exactly:
u, v, w, omega and psi are continuous there, and the tidal variable y
jumps.  Its equation holds the term (4 pi r^3 / (m + 4 pi r^3 p)) d eps/dh,
and d eps/dh carries -[eps] delta(h - h_t), so going outwards across the jump

    y(r_t+) = y(r_t-) - 4 pi [eps] / (v + 4 pi p_t),

[eps] = eps(h_t+) - eps(h_t-) >= 0.  With p_t = 0 this is the surface jump
of Damour & Nagar (2009, PRD 80, 084035) and Postnikov et al. (2010, eq. 14);
in the Newtonian limit it is -3 [eps] / <eps>, <eps> the mean density inside
r_t.  The step that ends at a jump takes all its stages, the last included,
from its own (inner) piece.  Near the centre no step exceeds
``growth`` times its distance x = h_c - h from the centre: the decaying
mode v ~ x^(-3/2) of the regular singular point makes longer explicit steps
unstable.  Optional caps ``h_cap`` (in h) and ``density_cap`` (in ln rho,
through dh = c_s^2 d ln rho) keep nodes dense for profiles.

A star that needs more than ``max_steps`` attempts (accepted and rejected),
or whose step shrinks below ``MIN_STEP`` h_c, ends with flag 1; a star whose
state becomes non-finite, flag 2.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .eos_pieces import piece_state

__all__ = ["solve_stars", "solve_star_recorded", "central_series_scalar", "FLAG_DONE", "FLAG_BUDGET",
           "FLAG_BROKE_DOWN"]

FOUR_PI = 4.0 * math.pi
FLAG_DONE = 0
FLAG_BUDGET = 1
FLAG_BROKE_DOWN = 2
#: Smallest step relative to h_c before a star is given up (round-off dominates below it).
MIN_STEP = 1e-13
#: EOS values at h = 0 are taken at SURFACE_GUARD * h_c: d eps/dh diverges at p = 0 when the
#: outermost piece has Gamma > 2.
SURFACE_GUARD = 1e-12
#: A core of the high-density phase with h_c - h_t below this fraction of h_c is left to the central series.
JUMP_NEGLIGIBLE = 1e-12
#: A step may stretch by this factor to land on an edge instead of leaving a sliver before it.
LANDING_STRETCH = 1.05
#: Within this fraction of h_c of the surface a step tries to land on it, and is accepted when its error
#: is below SURFACE_SHARE of the star's target.  With Gamma > 2 in the outermost piece d eps/dh diverges
#: like h^(1/(Gamma - 1) - 1) at p = 0 (integrable), so the tidal equation's error per unit step grows
#: towards the surface and the per-unit-step test alone would shrink the steps geometrically forever.
SURFACE_ZONE = 1e-9
SURFACE_SHARE = 1e-2


@njit(cache=True)
def central_series_scalar(p_c, eps_c, rho_c, deps_c, h_c, x, out):
    """(u, v, w, y, omega, psi) a log-enthalpy distance ``x`` below the centre, into ``out``.

    The series of :func:`stellar_match.structure.central_series` and
    :func:`~stellar_match.structure.response_series` (Lindblom 1992, eqs. 7-8;
    Postnikov et al. 2010, eq. 13; Hartle 1967, eq. 43), for one star.
    """
    v0 = FOUR_PI * eps_c / 3.0
    v1 = -0.8 * math.pi * deps_c
    u1 = 3.0 / (2.0 * math.pi * (eps_c + 3.0 * p_c))
    d0 = v0 + FOUR_PI * p_c
    d1 = v1 - FOUR_PI * (eps_c + p_c)
    u2 = -0.5 * u1 * (2.0 * v0 * u1 + d1 / d0)
    drho = rho_c * deps_c / (eps_c + p_c)
    w0 = FOUR_PI * rho_c / 3.0
    w1 = 0.8 * math.pi * (rho_c * v0 * u1 - drho)
    out[0] = u1 * x + u2 * x * x
    out[1] = v0 + v1 * x
    out[2] = w0 + w1 * x
    a = -(FOUR_PI / 7.0) * (eps_c / 3.0 + 11.0 * p_c + deps_c)
    out[3] = 2.0 + a * u1 * x
    omega1 = u1 * 1.6 * math.pi * (eps_c + p_c)
    psi0 = 3.2 * math.pi * (eps_c + p_c) * math.exp(h_c)
    f1 = psi0 * 5.0 * (-deps_c / (eps_c + p_c) - 2.0 + u1 * v0 + omega1)
    out[4] = 1.0 + omega1 * x
    out[5] = psi0 + f1 / 7.0 * x


@njit(cache=True)
def _rhs(h, y, kind, c, response, out):
    """d(u, v, w[, y, omega, psi])/dh into ``out``; returns c_s^2 at ``h`` (inf where d eps/dh = 0)."""
    em1 = math.expm1(h)
    p, eps, rho, slope = piece_state(kind, c, h, em1)
    u, v, w = y[0], y[1], y[2]
    f = 1.0 - 2.0 * u * v
    dd = v + FOUR_PI * p
    du = -2.0 * f / dd
    q = du / u
    out[0] = du
    out[1] = q * (2.0 * math.pi * eps - 1.5 * v)
    sqrt_f = math.sqrt(f)
    out[2] = q * (2.0 * math.pi * rho / sqrt_f - 1.5 * w)
    if response:
        yy, om, psi = y[3], y[4], y[5]
        e_lam = 1.0 / f
        u_e_lam = u * e_lam
        u_q = FOUR_PI * u_e_lam * (5.0 * eps + 9.0 * p + slope) - 6.0 * e_lam - 4.0 * (u_e_lam * dd) ** 2
        out[3] = -0.5 * q * (yy * yy + yy * e_lam * (1.0 + FOUR_PI * u * (p - eps)) + u_q)
        jhat = (1.0 + em1) * sqrt_f
        out[4] = 0.5 * du * psi / jhat
        out[5] = 0.5 * q * (16.0 * math.pi * (eps + p) * e_lam * jhat * om - 5.0 * psi)
    return (eps + p) / slope if slope > 0.0 else math.inf


@njit(cache=True)
def _piece_at(h, lo, hi, piece_top):
    """Index of the piece holding h: the first of lo..hi-1 whose top is >= h (boundaries go down)."""
    i = lo
    while i < hi - 1 and piece_top[i] < h:
        i += 1
    return i


@njit(cache=True)
def _solve_one(h_c, lo, hi, piece_top, piece_type, coeff, jlo, jhi, jump_h, jump_de, jump_p, crust_h,
               response, tol_step, start_offset, growth, h_cap, density_cap, max_steps,
               tab_c, tab_a, tab_b, tab_e, y_out, err_out, core_out, crust_out, record, rec_h, rec_y):
    """Integrate one star; returns (flag, attempts, recorded nodes).  See the module docstring."""
    n_comp = 6 if response else 3
    stages = tab_b.size
    # the centre
    ic = _piece_at(h_c, lo, hi, piece_top)
    p_c, eps_c, rho_c, deps_c = piece_state(piece_type[ic], coeff[ic], h_c, math.expm1(h_c))
    x0 = start_offset * h_c
    core_out[0] = math.nan
    core_out[1] = math.nan
    series = np.empty(6)
    for jj in range(jlo, jhi):
        # a jump inside the central-series region: hand over just inside it (the series holds in the core)
        x_t = h_c - jump_h[jj]
        if x_t > JUMP_NEGLIGIBLE * h_c and x_t < x0:
            x0 = min(x0, x_t * (1.0 - 1e-9))
    if jhi > jlo:
        x_t = h_c - jump_h[jlo]
        if x_t > 0.0 and x_t <= JUMP_NEGLIGIBLE * h_c:  # a core too small to matter: from the series
            central_series_scalar(p_c, eps_c, rho_c, deps_c, h_c, x_t, series)
            core_out[0] = series[0]
            core_out[1] = series[1]
    crust_edge = -1.0
    if math.isfinite(crust_h):
        if crust_h < h_c - x0:
            crust_edge = crust_h
        else:  # the boundary lies in the series region (or the star is all crust: its centre, r = 0)
            central_series_scalar(p_c, eps_c, rho_c, deps_c, h_c, max(h_c - crust_h, 0.0), series)
            for i in range(n_comp):
                crust_out[i] = series[i]
    y = np.empty(6)
    central_series_scalar(p_c, eps_c, rho_c, deps_c, h_c, x0, y)
    h = h_c - x0
    guard = SURFACE_GUARD * h_c
    k = np.zeros((stages + 1, 6))
    y_stage = np.empty(6)
    y_new = np.empty(6)
    err = np.zeros(6)
    signed = np.zeros(6)
    g = np.zeros(6)  # propagated global error (absolute, signed)
    y_g = np.empty(6)
    f_g = np.empty(6)
    for i in range(12):
        err_out[i] = 0.0
    n_rec = 0
    if record:
        rec_h[0] = h
        for i in range(n_comp):
            rec_y[0, i] = y[i]
        n_rec = 1
    pi = _piece_at(h, lo, hi, piece_top)
    cs2 = _rhs(h, y, piece_type[pi], coeff[pi], response, k[0])
    dh = growth * x0
    attempts = 0
    flag = FLAG_DONE
    surface_try = SURFACE_ZONE * h_c
    while h > 0.0:
        if attempts >= max_steps:
            flag = FLAG_BUDGET
            break
        attempts += 1
        edge = piece_top[pi - 1] if pi > lo else 0.0
        if crust_edge > edge and crust_edge < h:
            edge = crust_edge
        cap = growth * (h_c - h)
        cap = min(cap, h_cap)
        if density_cap < math.inf:
            cap = min(cap, density_cap * cs2)
        step = min(dh, cap)
        at_surface = edge == 0.0 and h <= surface_try
        landing = at_surface or h - edge <= LANDING_STRETCH * step
        if landing:
            step = h - edge
        h_new = edge if landing else h - step
        kind, c = piece_type[pi], coeff[pi]
        for s in range(1, stages):
            for i in range(n_comp):
                acc = 0.0
                for m in range(s):
                    acc += tab_a[s, m] * k[m, i]
                y_stage[i] = y[i] - step * acc
            _rhs(max(h - tab_c[s] * step, guard), y_stage, kind, c, response, k[s])
        for i in range(n_comp):
            acc = 0.0
            for m in range(stages):
                acc += tab_b[m] * k[m, i]
            y_new[i] = y[i] - step * acc
        # the derivative at the end of the step, on the step's own piece (first-same-as-last)
        cs2_new = _rhs(max(h_new, guard), y_new, kind, c, response, k[stages])
        finite = True
        for i in range(n_comp):
            acc = 0.0
            for m in range(stages + 1):
                acc += tab_e[m] * k[m, i]
            signed[i] = -step * acc
            err[i] = abs(step * acc) / abs(y_new[i])
            if not (math.isfinite(y_new[i]) and math.isfinite(err[i])):
                finite = False
        if response:
            err[3] = err[3] * abs(y_new[3]) / max(abs(y_new[3]), 1.0)  # y is O(1) and may pass through 0
        measure = max(0.5 * err[0], max(err[1], err[2]) + 1.5 * err[0])
        if response:
            measure = max(measure, max(err[3], max(err[4], err[5])))
        target = tol_step * step / h_c
        if at_surface:  # the last step, judged by its share of the whole star's target
            target = max(target, SURFACE_SHARE * tol_step)
        if not finite or not (measure <= target):
            if step <= MIN_STEP * h_c:
                flag = FLAG_BUDGET if finite else FLAG_BROKE_DOWN
                break
            factor = 0.25 if not finite else max(0.2, 0.9 * (target / measure) ** 0.25)
            if at_surface:  # the landing failed: ordinary steps until a quarter of the way left
                surface_try = 0.25 * h
            dh = step * factor
            continue
        # accepted: carry the global error over the step (k[0] = f(h, y) still), then take the step
        for i in range(n_comp):
            y_g[i] = y[i] + g[i]
        _rhs(h, y_g, kind, c, response, f_g)
        for i in range(n_comp):
            g[i] += -step * (f_g[i] - k[0, i]) + signed[i]
            y[i] = y_new[i]
            err_out[i] += err[i]
        h = h_new
        if record:
            rec_h[n_rec] = h
            for i in range(n_comp):
                rec_y[n_rec, i] = y[i]
            n_rec += 1
        grow = 5.0 if measure == 0.0 else min(5.0, max(0.2, 0.9 * (target / measure) ** 0.25))
        dh = step * grow
        if landing and h > 0.0:
            if h == crust_edge:
                for i in range(n_comp):
                    crust_out[i] = y[i]
            if pi > lo and h == piece_top[pi - 1]:
                for jj in range(jlo, jhi):
                    if jump_h[jj] == h:
                        if jj == jlo:
                            core_out[0] = y[0]
                            core_out[1] = y[1]
                        if response:
                            dd_t = y[1] + FOUR_PI * jump_p[jj]
                            y[3] -= FOUR_PI * jump_de[jj] / dd_t
                            g[3] += FOUR_PI * jump_de[jj] / (dd_t * dd_t) * g[1]
                pi -= 1
                cs2 = _rhs(h, y, piece_type[pi], coeff[pi], response, k[0])
                continue
        for i in range(n_comp):
            k[0, i] = k[stages, i]
        cs2 = cs2_new
    for i in range(n_comp):
        y_out[i] = y[i]
        scale = max(abs(y[i]), 1.0) if i == 3 else abs(y[i])
        err_out[6 + i] = g[i] / scale
    for i in range(n_comp, 6):
        y_out[i] = math.nan
    return flag, attempts, n_rec


@njit(cache=True)
def solve_stars(h_c, member, tol_scale, piece_lo, piece_hi, piece_top, piece_type, coeff,
                jump_lo, jump_hi, jump_h, jump_de, jump_p, crust_h, response, tol_step, start_offset, growth,
                h_cap, density_cap, max_steps, tab_c, tab_a, tab_b, tab_e,
                y_out, err_out, core_out, crust_out, flags, attempts):
    """Solve every star j of member ``member[j]`` at central log-enthalpy ``h_c[j]`` (outputs by row)."""
    rec_h = np.empty(1)
    rec_y = np.empty((1, 6))
    for j in range(h_c.size):
        m = member[j]
        flag, n_att, _ = _solve_one(h_c[j], piece_lo[m], piece_hi[m], piece_top, piece_type, coeff,
                                    jump_lo[m], jump_hi[m], jump_h, jump_de, jump_p, crust_h[m], response,
                                    tol_step * tol_scale[j], start_offset, growth, h_cap, density_cap, max_steps,
                                    tab_c, tab_a, tab_b, tab_e, y_out[j], err_out[j], core_out[j], crust_out[j],
                                    False, rec_h, rec_y)
        flags[j] = flag
        attempts[j] = n_att


@njit(cache=True)
def solve_star_recorded(h_c, m, tol_scale, piece_lo, piece_hi, piece_top, piece_type, coeff,
                        jump_lo, jump_hi, jump_h, jump_de, jump_p, crust_h, response, tol_step, start_offset, growth,
                        h_cap, density_cap, max_steps, tab_c, tab_a, tab_b, tab_e,
                        y_out, err_out, core_out, crust_out, rec_h, rec_y):
    """One star as :func:`solve_stars` solves it, with the state at every accepted step edge.

    ``rec_h`` (max_steps + 1,) and ``rec_y`` (max_steps + 1, 6) receive the
    edges, descending from h_c - x_0 to 0, and the state each step left
    there (at an interior jump: its inner side, before y jumps).  Returns
    (flag, attempts, number of recorded nodes).
    """
    return _solve_one(h_c, piece_lo[m], piece_hi[m], piece_top, piece_type, coeff, jump_lo[m], jump_hi[m],
                      jump_h, jump_de, jump_p, crust_h[m], response, tol_step * tol_scale, start_offset, growth,
                      h_cap, density_cap, max_steps, tab_c, tab_a, tab_b, tab_e, y_out, err_out, core_out,
                      crust_out, True, rec_h, rec_y)
