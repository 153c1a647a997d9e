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


def hinderer_k2(C: float, y: float) -> float:
    """Closed form of k2, Hinderer (2008, ApJ 677, 1216, erratum 2009), eq. 23.

    Its terms cancel through O(C^4): below C ~ 0.05 it loses too many digits to be a reference.
    """
    assert C >= 0.05, "closed form too cancellation-prone below C = 0.05"
    num = 8 / 5 * C**5 * (1 - 2 * C) ** 2 * (2 + 2 * C * (y - 1) - y)
    den = (2 * C * (6 - 3 * y + 3 * C * (5 * y - 8))
           + 4 * C**3 * (13 - 11 * y + C * (3 * y - 2) + 2 * C**2 * (1 + y))
           + 3 * (1 - 2 * C) ** 2 * (2 - y + 2 * C * (y - 1)) * np.log(1 - 2 * C))
    return num / den


def tidal_and_inertia_in_radius(eos, h_c: float, rtol: float = 1e-11):
    """(R, M, k2, Lambda, I) in km / km^3, all in the r-form, by solve_ivp DOP853.

    State (p, m, nu, y, omega, varpi) with
    * y: r y' + y^2 + y e^lambda [1 + 4 pi r^2 (p - eps)] + r^2 Q = 0,
      Q = 4 pi e^lambda (5 eps + 9 p + (eps + p)/c_s^2) - 6 e^lambda / r^2 - nu'^2
      (Hinderer 2008; Postnikov, Prakash & Lattimer 2010, PRD 82, 024016, eq. 13);
    * omega, varpi = r^4 j omega', j = e^-(nu + lambda)/2 (Hartle 1967, ApJ 150, 1005, eq. 43):
      varpi' = 16 pi r^4 (eps + p) e^lambda j omega; I = J / Omega with J = R^4 omega'(R)/6,
      Omega = omega(R) + 2 J / R^3.
    The y jump -4 pi R^3 eps(R-)/M at a surface density jump follows Damour & Nagar 2009.
    """
    p_c, e_c, rho_c = _state(eos, h_c)

    def eos_at(p):
        h = float(eos.enthalpy_of_pressure(np.array([max(p, 0.0)]))[0])
        _, e, _ = _state(eos, h)
        cs2 = float(np.asarray(eos.sound_speed_squared(np.array([max(h, 1e-300)])))[0])
        return e, cs2

    def rhs(r, s):
        p, m, nu, y, om, vp = s
        pp = max(p, 0.0)
        e, cs2 = eos_at(pp)
        elam = 1 / (1 - 2 * m / r)
        dnu = 2 * (m + 4 * np.pi * r**3 * pp) / (r * (r - 2 * m))
        dp = -(e + pp) * dnu / 2
        # (eps + p)/c_s^2 -> 0 at p = 0 for a surface piece with Gamma < 2, and 0 for c_s = inf
        inv_cs2 = 0.0 if (not np.isfinite(cs2) or cs2 == 0.0) else (e + pp) / cs2
        Q = 4 * np.pi * elam * (5 * e + 9 * pp + inv_cs2) - 6 * elam / r**2 - dnu**2
        dy = -(y * y + y * elam * (1 + 4 * np.pi * r * r * (pp - e)) + r * r * Q) / r
        j = np.exp(-nu / 2) * np.sqrt(1 - 2 * m / r)
        return [dp, 4 * np.pi * r * r * e, dnu, dy, vp / (r**4 * j), 16 * np.pi * r**4 * (e + pp) * elam * j * om]

    def surface(r, s):
        return s[0]

    surface.terminal = True
    surface.direction = -1
    r0 = 1e-5
    s0 = [p_c - 2 * np.pi / 3 * (e_c + p_c) * (e_c + 3 * p_c) * r0**2, 4 * np.pi / 3 * e_c * r0**3, 0.0, 2.0,
          1.0, 16 * np.pi / 5 * (e_c + p_c) * r0**5]
    sol = solve_ivp(rhs, (r0, 1e4), s0, method="DOP853", rtol=rtol, atol=[p_c * 1e-28, 1e-30, 1e-30, 1e-30,
                    1e-30, 1e-40], events=surface)
    R = sol.t_events[0][0]
    p, M, nu, y, om, vp = sol.y_events[0][0]
    C = M / R
    y -= 4 * np.pi * R**3 * eos.surface_energy_density / M
    k2 = hinderer_k2(C, y)
    j_R = np.exp(-nu / 2) * np.sqrt(1 - 2 * C)
    J = vp / j_R / 6  # omega' = varpi/(R^4 j); J = R^4 omega'(R)/6 with the true j(R) = 1
    I = J / (om + 2 * J / R**3)
    return R, M, k2, 2 / 3 * k2 / C**5, I


def hybrid_star_in_radius(eos, h_c: float, rtol: float = 1e-11, smear: float = 1e-8):
    """(R, M, M_b, k2, Lambda, I, r_core, m_core) in km for a star across an interior density jump.

    An EOS with one energy-density jump (``eos.interior_jumps``: h_t, [eps], p_t) is integrated in
    the r-form of :func:`tidal_and_inertia_in_radius`, extended by the baryon mass, in three legs:

    1. from the centre to p = p_t (1 + L smear) in r, on the high-density phase;
    2. across the jump with the pressure as the independent variable, on an EOS whose energy density
       goes over smoothly from one side to the other, eps(p) = eps_out(p) + [eps_in(p) - eps_out(p)] S,
       S = (1 + tanh((p - p_t)/(smear p_t)))/2, each side continued linearly in p with its own c_s^2.
       The tidal equation then sees (eps + p) d eps/dp with the smooth spike [eps] S'(p): no jump
       condition is assumed, the solver integrates through it (error O(smear));
    3. from p_t (1 - L smear) to the surface, on the low-density phase.

    Only the EOS's p, eps, rho and c_s^2 on either side are shared with the product.
    """
    h_t = float(eos.interior_jumps.h[0])
    p_t = float(eos.interior_jumps.pressure[0])
    assert h_c > h_t, "the star must have a core of the new phase"
    p_c, e_c, rho_c = _state(eos, h_c)
    in_side = [float(x[0]) for x in eos.state(np.array([h_t * (1 + 1e-13)]))]
    out_side = [float(x[0]) for x in eos.state(np.array([h_t]))]
    cs_in = float(eos.sound_speed_squared(np.array([h_t * (1 + 1e-13)]))[0])
    cs_out = float(eos.sound_speed_squared(np.array([h_t]))[0])
    width, L = smear * p_t, 20.0

    def sharp(p):
        h = float(eos.enthalpy_of_pressure(np.array([max(p, 0.0)]))[0])
        _, e, rho = _state(eos, h)
        cs2 = float(np.asarray(eos.sound_speed_squared(np.array([max(h, 1e-300)])))[0])
        return e, rho, (0.0 if (not np.isfinite(cs2) or cs2 == 0.0) else (e + max(p, 0.0)) / cs2)

    def smooth(p):
        z = (p - p_t) / width
        S, dS = 0.5 * (1 + np.tanh(z)), 0.5 / np.cosh(z) ** 2 / width
        e_in, e_out = in_side[1] + (p - p_t) / cs_in, out_side[1] + (p - p_t) / cs_out
        r_in, r_out = in_side[2] * (1 + (p - p_t) / (cs_in * (in_side[1] + p_t))), \
            out_side[2] * (1 + (p - p_t) / (cs_out * (out_side[1] + p_t)))
        e = e_out + (e_in - e_out) * S
        de_dp = 1 / cs_out + (1 / cs_in - 1 / cs_out) * S + (e_in - e_out) * dS
        return e, r_out + (r_in - r_out) * S, (e + p) * de_dp

    def d_dr(r, s, eos_at):
        p, m, mb, nu, y, om, vp = s
        pp = max(p, 0.0)
        e, rho, inv_cs2 = eos_at(pp)
        elam = 1 / (1 - 2 * m / r)
        dnu = 2 * (m + 4 * np.pi * r**3 * pp) / (r * (r - 2 * m))
        Q = 4 * np.pi * elam * (5 * e + 9 * pp + inv_cs2) - 6 * elam / r**2 - dnu**2
        dy = -(y * y + y * elam * (1 + 4 * np.pi * r * r * (pp - e)) + r * r * Q) / r
        j = np.exp(-nu / 2) * np.sqrt(1 - 2 * m / r)
        return np.array([-(e + pp) * dnu / 2, 4 * np.pi * r * r * e, 4 * np.pi * r * r * rho * np.sqrt(elam), dnu,
                         dy, vp / (r**4 * j), 16 * np.pi * r**4 * (e + pp) * elam * j * om])

    def reach(p_stop):
        def ev(r, s):
            return s[0] - p_stop
        ev.terminal, ev.direction = True, -1
        return ev

    atol = [p_c * 1e-28, 1e-30, 1e-30, 1e-30, 1e-30, 1e-30, 1e-40]
    r0 = 1e-5
    s0 = [p_c - 2 * np.pi / 3 * (e_c + p_c) * (e_c + 3 * p_c) * r0**2, 4 * np.pi / 3 * e_c * r0**3,
          4 * np.pi / 3 * rho_c * r0**3, 0.0, 2.0, 1.0, 16 * np.pi / 5 * (e_c + p_c) * r0**5]
    leg1 = solve_ivp(lambda r, s: d_dr(r, s, sharp), (r0, 1e4), s0, method="DOP853", rtol=rtol, atol=atol,
                     events=reach(p_t * (1 + L * smear)))
    r1, s1 = leg1.t_events[0][0], leg1.y_events[0][0]

    def d_dp(p, state):  # state (r, m, mb, nu, y, om, vp) with p as the variable
        r, rest = state[0], state[1:]
        f = d_dr(r, np.concatenate([[p], rest]), smooth)
        return np.concatenate([[1.0], f[1:]]) / f[0]

    leg2 = solve_ivp(d_dp, (p_t * (1 + L * smear), p_t * (1 - L * smear)), np.concatenate([[r1], s1[1:]]),
                     method="DOP853", rtol=rtol, atol=[1e-30] * 7, max_step=width / 4, dense_output=True)
    r2, rest = leg2.y[0, -1], leg2.y[1:, -1]
    at_jump = leg2.sol(p_t)
    core = (at_jump[0], at_jump[1])  # r and m at p = p_t
    surface = reach(0.0)
    leg3 = solve_ivp(lambda r, s: d_dr(r, s, sharp), (r2, 1e4), np.concatenate([[p_t * (1 - L * smear)], rest]),
                     method="DOP853", rtol=rtol, atol=atol, events=surface)
    R = leg3.t_events[0][0]
    p, M, Mb, nu, y, om, vp = leg3.y_events[0][0]
    C = M / R
    y -= 4 * np.pi * R**3 * eos.surface_energy_density / M
    k2 = hinderer_k2(C, y)
    j_R = np.exp(-nu / 2) * np.sqrt(1 - 2 * C)
    J = vp / j_R / 6
    I = J / (om + 2 * J / R**3)
    return R, M, Mb, k2, 2 / 3 * k2 / C**5, I, core[0], core[1]



def assert_star_matches_references(eos, h_c: float, *, response: bool = True, k2: bool = True,
                                   structure_rtol: float = 1e-6, response_rtol: float = 1e-5) -> None:
    """Solve one star with the package and check it against the references above.

    M, R, M_b against :func:`tov_in_enthalpy` (``structure_rtol``); with
    ``response``, Lambda and I (and k2 unless ``k2=False``) against
    :func:`tidal_and_inertia_in_radius` (``response_rtol``).
    """
    import pytest

    from stellar_match.structure import solve_interiors

    star = solve_interiors(eos, np.array([h_c]), response=response)
    assert star.status[0] == 0
    R, M, Mb = tov_in_enthalpy(eos, h_c)
    assert star.mass[0] == pytest.approx(M, rel=structure_rtol)
    assert star.radius[0] == pytest.approx(R, rel=structure_rtol)
    assert star.baryon_mass[0] == pytest.approx(Mb, rel=structure_rtol)
    if not response:
        return
    _, _, k2_ref, lam, inertia = tidal_and_inertia_in_radius(eos, h_c)
    if k2:
        assert star.love_number_k2[0] == pytest.approx(k2_ref, rel=response_rtol)
    assert star.tidal_deformability[0] == pytest.approx(lam, rel=response_rtol)
    assert star.moment_of_inertia[0] == pytest.approx(inertia, rel=response_rtol)


def crust_in_radius(eos, h_c: float, crust_core_density_geom: float, rtol: float = 1e-11):
    """(R, M, r_cc, m_cc, Delta I_crust / I) in km, integrating in r with events at p_cc and p = 0.

    State (p, m, nu, omega, varpi), varpi = r^4 j omega' (Hartle 1967, ApJ 150, 1005, eq. 43) as in
    :func:`tidal_and_inertia_in_radius`; J(r) = varpi / 6 up to the constant of j, so
    Delta I_crust / I = 1 - varpi(r_cc) / varpi(R).  p_cc is the EOS's pressure at the crust-core
    rest-mass density.
    """
    p_c, e_c, _ = _state(eos, h_c)
    h_cc = float(eos.enthalpy_of_density(np.array([crust_core_density_geom]))[0])
    p_cc, _, _ = _state(eos, h_cc)

    def rhs(r, s):
        p, m, nu, om, vp = s
        pp = max(p, 0.0)
        _, e, _ = _state(eos, float(eos.enthalpy_of_pressure(np.array([pp]))[0]))
        elam = 1 / (1 - 2 * m / r)
        dnu = 2 * (m + 4 * np.pi * r**3 * pp) / (r * (r - 2 * m))
        j = np.exp(-nu / 2) * np.sqrt(1 - 2 * m / r)
        return [-(e + pp) * dnu / 2, 4 * np.pi * r * r * e, dnu, vp / (r**4 * j),
                16 * np.pi * r**4 * (e + pp) * elam * j * om]

    def boundary(r, s):
        return s[0] - p_cc

    def surface(r, s):
        return s[0]

    surface.terminal = True
    surface.direction = -1
    boundary.direction = -1
    r0 = 1e-5
    s0 = [p_c - 2 * np.pi / 3 * (e_c + p_c) * (e_c + 3 * p_c) * r0**2, 4 * np.pi / 3 * e_c * r0**3, 0.0, 1.0,
          16 * np.pi / 5 * (e_c + p_c) * r0**5]
    sol = solve_ivp(rhs, (r0, 1e4), s0, method="DOP853", rtol=rtol,
                    atol=[p_c * 1e-28, 1e-30, 1e-30, 1e-30, 1e-40], events=[boundary, surface])
    r_cc = sol.t_events[0][0]
    _, m_cc, _, _, vp_cc = sol.y_events[0][0]
    R = sol.t_events[1][0]
    _, M, _, _, vp_R = sol.y_events[1][0]
    return float(R), float(M), float(r_cc), float(m_cc), float(1.0 - vp_cc / vp_R)

def radial_mode_reference(eos, h_c: float, bracket: tuple[float, float], junction: str = "rapid",
                          rtol: float = 1e-10, surface_fraction: float = 1e-9) -> float:
    """omega^2 (km^-2) of the radial mode in ``bracket`` by shooting, independent of the product's solver.

    The first-order system of Gondek, Haensel & Zdunik (1997, A&A 325, 217; from memory) in
    xi = Delta r / r and Delta p, integrated in r with solve_ivp (DOP853) together with the TOV
    background (p, m, nu):

        dxi/dr = -(3 xi + Delta p / (Gamma_1 p)) / r - p' xi / (eps + p),
        dDelta p/dr = xi [omega^2 e^(lambda - nu) (eps + p) r - 4 p' + p'^2 r / (eps + p)
                          - 8 pi e^lambda (eps + p) p r] + Delta p [p' / (eps + p) - 4 pi (eps + p) r e^lambda],

    Gamma_1 p = (eps + p) c_s^2 (equilibrium), from xi = 1, Delta p = -3 Gamma_1 p at the centre to
    p = ``surface_fraction`` p_c, where Delta p / p_c must vanish (brentq on omega^2).  At an interior
    jump p = p_t (Pereira, Flores & Lugones 2018, ApJ 860, 12; from memory) Delta p is continuous and
    xi too (slow), or xi jumps by (Delta p / r)(1/p'_+ - 1/p'_-) (rapid).  nu starts at 0; the match
    nu(R) = ln(1 - 2M/R) rescales omega^2 by exp(ln(1 - 2M/R) - nu(R)) afterwards.
    Only the EOS's p, eps and c_s^2 are shared with the product.
    """
    from scipy.optimize import brentq

    jumps = getattr(eos, "interior_jumps", None)
    p_t = float(jumps.pressure[0]) if jumps is not None else -1.0
    p_c, e_c, _ = _state(eos, h_c)

    def matter(p):
        h = float(eos.enthalpy_of_pressure(np.array([max(p, 0.0)]))[0])
        _, e, _ = _state(eos, h)
        cs2 = float(eos.sound_speed_squared(np.array([max(h, 1e-300)]))[0])
        return e, (e + p) * cs2

    def rhs(r, s, sigma):
        p, m, nu, xi, dp = s
        e, gp = matter(p)
        elam = 1 / (1 - 2 * m / r)
        dpdr = -(e + p) * (m + 4 * np.pi * r**3 * p) / (r * (r - 2 * m))
        dxi = -(3 * xi + dp / gp) / r - dpdr * xi / (e + p)
        ddp = (xi * (sigma * elam * np.exp(-nu) * (e + p) * r - 4 * dpdr + dpdr**2 * r / (e + p)
                     - 8 * np.pi * elam * (e + p) * p * r) + dp * (dpdr / (e + p) - 4 * np.pi * (e + p) * r * elam))
        return [dpdr, 4 * np.pi * r * r * e, -2 * dpdr / (e + p), dxi, ddp]

    def event(level):
        def ev(r, s, sigma):
            return s[0] - level
        ev.terminal, ev.direction = True, -1
        return ev

    def shoot(sigma):
        r0 = 1e-4
        _, gp_c = matter(p_c)
        s = [p_c - 2 * np.pi / 3 * (e_c + p_c) * (e_c + 3 * p_c) * r0**2, 4 * np.pi / 3 * e_c * r0**3, 0.0,
             1.0, -3 * gp_c]
        r = r0
        if p_t > 0 and p_c > p_t:
            leg = solve_ivp(rhs, (r, 1e4), s, args=(sigma,), method="DOP853", rtol=rtol, atol=1e-40,
                            events=event(p_t))
            r, s = leg.t_events[0][0], list(leg.y_events[0][0])
            p, m, nu, xi, dp = s
            e_out = _state(eos, float(jumps.h[0]))[1]
            e_in = e_out + float(jumps.delta_eps[0])
            g = (m + 4 * np.pi * r**3 * p) / (r * (r - 2 * m))
            if junction == "rapid":
                s[3] = xi + dp / r * (1 / (-(e_out + p) * g) - 1 / (-(e_in + p) * g))
            s[0] = p_t * (1 - 1e-14)
        leg = solve_ivp(rhs, (r, 1e4), s, args=(sigma,), method="DOP853", rtol=rtol, atol=1e-40,
                        events=event(surface_fraction * p_c))
        p, m, nu, xi, dp = leg.y_events[0][0]
        return dp / p_c, leg.t_events[0][0], m, nu

    a, b = bracket
    # omega^2 e^(-c): first the background's nu(R) at a trial value, then the root in sigma
    _, R, M, nu_R = shoot(a)
    scale = np.exp(np.log(1 - 2 * M / R) - nu_R)  # omega^2 = sigma * scale
    sigma = brentq(lambda x: shoot(x)[0], a / scale, b / scale, xtol=1e-14, rtol=1e-12)
    return float(sigma * scale)
