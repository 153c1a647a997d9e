"""Independent reference solutions used by the physics tests.

These do not share code with stellar_match.structure: they integrate the
TOV equations with scipy's adaptive solve_ivp (DOP853, Hairer, Norsett &
Wanner 1993) at rtol ~1e-11, one star at a time, in two textbook forms:

* ``tov_in_radius``: the original form dp/dr, dm/dr (Tolman 1939; Oppenheimer
  & Volkoff 1939), surface found by an event at p = 0;
* ``tov_in_enthalpy``: Lindblom's (1992, ApJ 398, 569) dr/dh, dm/dh with r and m
  themselves (not the regularised variables of the product), started with
  the leading-order central expansion at h_c (1 - 1e-9).

Only the EOS object is shared with the product (it is what is being solved).
"""

from __future__ import annotations

import numpy as np
from scipy.integrate import solve_ivp


def _state(eos, h):
    p, e, rho = eos.state(np.array([max(h, 0.0)]))
    return float(p[0]), float(e[0]), float(rho[0])


def tov_in_enthalpy(eos, h_c: float, rtol: float = 1e-11):
    """(R, M, M_b) in km for central log-enthalpy h_c (geometric units)."""

    def rhs(h, y):
        r, m, mb = y
        p, e, rho = _state(eos, h)
        drdh = -r * (r - 2 * m) / (m + 4 * np.pi * r**3 * p)
        return [drdh, 4 * np.pi * r * r * e * drdh, 4 * np.pi * r * r * rho / np.sqrt(1 - 2 * m / r) * drdh]

    p_c, e_c, rho_c = _state(eos, h_c)
    x = 1e-9 * h_c
    r0 = np.sqrt(3 * x / (2 * np.pi * (e_c + 3 * p_c)))  # Lindblom (1992) eq. 7, leading order
    y0 = [r0, 4 * np.pi / 3 * e_c * r0**3, 4 * np.pi / 3 * rho_c * r0**3]
    # between EOS pieces the RHS has kinks: integrate piece by piece
    edges = [h_c - x, *sorted((b for b in eos.breakpoints_h if b < h_c - x), reverse=True), 0.0]
    y = y0
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        sol = solve_ivp(rhs, (a, b), y, method="DOP853", rtol=rtol, atol=1e-30)
        y = sol.y[:, -1]
    return float(y[0]), float(y[1]), float(y[2])


def tov_in_radius(eos, h_c: float, rtol: float = 1e-11):
    """(R, M, M_b) in km, integrating in r with an event at p = 0."""
    p_c, e_c, rho_c = _state(eos, h_c)

    def rhs(r, y):
        p, m, mb = y
        pp = max(p, 0.0)
        _, e, rho = _state(eos, float(eos.enthalpy_of_pressure(np.array([pp]))[0]))
        dp = -(e + pp) * (m + 4 * np.pi * r**3 * pp) / (r * (r - 2 * m))
        return [dp, 4 * np.pi * r * r * e, 4 * np.pi * r * r * rho / np.sqrt(1 - 2 * m / r)]

    def surface(r, y):
        return y[0]

    surface.terminal = True
    surface.direction = -1
    r0 = 1e-5
    # central expansion p = p_c - (2 pi / 3)(e_c + p_c)(e_c + 3 p_c) r^2 (e.g. Glendenning 2000, ch. 3)
    y0 = [p_c - 2 * np.pi / 3 * (e_c + p_c) * (e_c + 3 * p_c) * r0**2,
          4 * np.pi / 3 * e_c * r0**3, 4 * np.pi / 3 * rho_c * r0**3]
    sol = solve_ivp(rhs, (r0, 1e4), y0, method="DOP853", rtol=rtol, atol=[p_c * 1e-28, 1e-30, 1e-30],
                    events=surface)
    R = sol.t_events[0][0]
    _, M, Mb = sol.y_events[0][0]
    return float(R), float(M), float(Mb)
