"""The maximum of M(h_c) of many EOS, located by compiled single-star solves.

For each EOS ``member[k]`` the maximum of the gravitational mass over
x = ln h_c inside the bracket ``[x_lo[k], x_hi[k]]`` is found by Brent's
minimisation without derivatives (golden-section search with parabolic
interpolation; Brent 1973, *Algorithms for Minimization without
Derivatives*, ch. 5) applied to -M(x), each M from one structure-only solve
of :func:`stellar_match.kernels.tov_stepping._solve_one`.  Near the maximum
M - M_max ~ (x - x*)^2, so locating x* to ``x_tol`` costs a relative mass
error of order (x_tol)^2 times the curvature: 1e-4 leaves the mass well
below 1e-7.  A handful of solves per EOS, no batches.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .tov_stepping import _solve_one

__all__ = ["maximise_masses", "FOUND", "FAILED_SOLVE", "AT_EDGE"]

FOUND = 0
#: A trial star could not be solved (budget, non-finite state): no maximum reported.
FAILED_SOLVE = 1
#: The largest mass sits at an end of the bracket: no interior maximum there.
AT_EDGE = 2
#: Golden-section fraction (3 - sqrt 5) / 2.
GOLDEN = 0.3819660112501051
MAX_ITERATIONS = 60


@njit(cache=True)
def _mass(x, m, piece_lo, piece_hi, piece_top, piece_type, coeff, jump_lo, jump_hi, jump_h, jump_de,
          jump_p, crust_h, response, tol_step, start_offset, growth, h_cap, density_cap, max_steps,
          tab_c, tab_a, tab_b, tab_e, y, err, core, crust, rec_h, rec_y):
    """M (geometric) of the star of member m at x = ln h_c; NaN when it cannot be solved."""
    flag, _, _ = _solve_one(math.exp(x), piece_lo[m], piece_hi[m], piece_top, piece_type, coeff,
                            jump_lo[m], jump_hi[m], jump_h, jump_de, jump_p, crust_h[m], response, tol_step,
                            start_offset, growth, h_cap, density_cap, max_steps, tab_c, tab_a, tab_b, tab_e,
                            y, err, core, crust, False, rec_h, rec_y)
    if flag != 0:
        return math.nan
    mass = y[1] * y[0] ** 1.5
    return mass if math.isfinite(mass) else math.nan


@njit(cache=True)
def maximise_masses(member, x_lo, x_hi, x_guess, x_tol, piece_lo, piece_hi, piece_top, piece_type, coeff,
                    jump_lo, jump_hi, jump_h, jump_de, jump_p, crust_h, response, tol_step, start_offset, growth,
                    h_cap, density_cap, max_steps, tab_c, tab_a, tab_b, tab_e, x_out, flags, evaluations):
    """Locate the maximum of M(x) of member ``member[k]`` in ``[x_lo[k], x_hi[k]]`` (outputs by row).

    ``x_guess[k]`` (clipped into the bracket) is the first trial point.  The
    arguments from ``piece_lo`` on are those of
    :func:`~stellar_match.kernels.tov_stepping.solve_stars`; pass
    ``response=False`` (the masses need structure-only solves; a variable,
    not a literal, so that the star kernel is compiled once for both callers).  ``x_out[k]`` is
    the located x, NaN unless ``flags[k]`` is FOUND.
    """
    y = np.empty(6)
    err = np.empty(12)
    core = np.empty(2)
    crust = np.empty(6)
    rec_h = np.empty(1)
    rec_y = np.empty((1, 6))
    for k in range(member.size):
        m = member[k]
        a, b = x_lo[k], x_hi[k]
        tol1 = x_tol
        tol2 = 2.0 * tol1
        x = min(max(x_guess[k], a + tol2), b - tol2)
        fx = -_mass(x, m, piece_lo, piece_hi, piece_top, piece_type, coeff, jump_lo, jump_hi, jump_h, jump_de,
                    jump_p, crust_h, response, tol_step, start_offset, growth, h_cap, density_cap, max_steps,
                    tab_c, tab_a, tab_b, tab_e, y, err, core, crust, rec_h, rec_y)
        n_eval = 1
        ok = math.isfinite(fx)
        v = w = x
        fv = fw = fx
        d = 0.0
        e = 0.0
        for _ in range(MAX_ITERATIONS):
            if not ok:
                break
            xm = 0.5 * (a + b)
            if abs(x - xm) <= tol2 - 0.5 * (b - a):
                break
            golden = True
            if abs(e) > tol1:  # try a parabola through x, w, v
                r = (x - w) * (fx - fv)
                q = (x - v) * (fx - fw)
                p = (x - v) * q - (x - w) * r
                q = 2.0 * (q - r)
                if q > 0.0:
                    p = -p
                q = abs(q)
                e_old = e
                e = d
                if abs(p) < abs(0.5 * q * e_old) and p > q * (a - x) and p < q * (b - x):
                    d = p / q
                    u = x + d
                    if u - a < tol2 or b - u < tol2:
                        d = tol1 if xm >= x else -tol1
                    golden = False
            if golden:
                e = (a - x) if x >= xm else (b - x)
                d = GOLDEN * e
            u = x + d if abs(d) >= tol1 else x + (tol1 if d >= 0.0 else -tol1)
            fu = -_mass(u, m, piece_lo, piece_hi, piece_top, piece_type, coeff, jump_lo, jump_hi, jump_h,
                        jump_de, jump_p, crust_h, response, tol_step, start_offset, growth, h_cap, density_cap,
                        max_steps, tab_c, tab_a, tab_b, tab_e, y, err, core, crust, rec_h, rec_y)
            n_eval += 1
            if not math.isfinite(fu):
                ok = False
                break
            if fu <= fx:
                if u >= x:
                    a = x
                else:
                    b = x
                v, fv = w, fw
                w, fw = x, fx
                x, fx = u, fu
            else:
                if u < x:
                    a = u
                else:
                    b = u
                if fu <= fw or w == x:
                    v, fv = w, fw
                    w, fw = u, fu
                elif fu <= fv or v == x or v == w:
                    v, fv = u, fu
        evaluations[k] = n_eval
        if not ok:
            flags[k] = FAILED_SOLVE
            x_out[k] = math.nan
        elif x - x_lo[k] < 2.0 * tol2 or x_hi[k] - x < 2.0 * tol2:
            flags[k] = AT_EDGE
            x_out[k] = math.nan
        else:
            flags[k] = FOUND
            x_out[k] = x
