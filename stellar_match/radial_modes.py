"""Adiabatic radial oscillation modes of a batch of stars.

Equation
--------
Chandrasekhar's (1964, ApJ 140, 417) radial pulsation equation, in its
Sturm-Liouville form (G = c = 1; the form as written by Bardeen, Thorne &
Meltzer 1966, ApJ 145, 505, from memory):

    d/dr (P du/dr) + (Q + omega^2 W) u = 0,      u = r^2 e^(-nu/2) Delta r,

    P = e^((lambda + 3 nu)/2) Gamma_1 p / r^2,
    W = e^((3 lambda + nu)/2) (eps + p) / r^2,
    Q = e^((lambda + 3 nu)/2) [ p'^2 / (r^2 (eps + p)) - 4 p' / r^3
                               - 8 pi e^lambda p (eps + p) / r^2 ],

with e^lambda = (1 - 2m/r)^-1, nu = ln(1 - 2M/R) - 2h (the background in
log-enthalpy form) and p' = dp/dr = (eps + p) dh/dr,
dh/dr = -(m + 4 pi r^3 p) / (r (r - 2m)).  The Lagrangian pressure
perturbation is Delta p = -Gamma_1 p e^(nu/2) r^-2 du/dr, so the surface
condition Delta p = 0 is the natural boundary condition P du/dr = 0 of the
variational form, for a surface at p = 0 and for a bare (finite-density)
quark surface alike; u = 0 (u ~ r^3) at the centre.

Method
------
The weak form  int P u' v' - Q u v dr = omega^2 int W u v dr  is discretised
with linear finite elements on each star's own solver nodes
(:func:`stellar_match.structure.solve_profiles`), every interval cut into
``subdivisions`` equal parts in r; h(r) and m(r) between nodes are cubic
Hermite interpolants with their exact slopes dh/dr, dm/dr = 4 pi r^2 eps
from the TOV equations, and p, eps, Gamma_1 p come from the EOS at h(r).
Coefficients are taken at element midpoints (evaluated there, so an element
next to a density jump sees its own phase) and W is lumped, so each star
gives a symmetric tridiagonal eigenproblem, solved for its lowest N
eigenvalues by LAPACK (``scipy.linalg.eigh_tridiagonal``).  Sturm-Liouville
theory orders them: the k-th eigenvalue has k nodes in u, mode k.  The
discretisation error is O(h^2); the result is Richardson-extrapolated from
``subdivisions`` and twice as many.

At an interior density jump (``eos.interior_jumps``, one per EOS) the
junction conditions of Pereira, Flores & Lugones (2018, ApJ 860, 12; from
memory) apply, in xi = Delta r / r: slow conversion, [xi] = 0 and
[Delta p] = 0, is the plain weak form with u continuous; rapid conversion
(default), [Delta p] = 0 and [xi] = (Delta p / r) [1/p'], doubles u at the
jump and adds the interface term [u][v] / kappa (see :func:`junction_coupling`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import eigh_tridiagonal

from . import units
from .eos import EquationOfState
from .eos.base import central_enthalpy as _central_enthalpy
from .schema import RADIAL_STATUS
from .structure import DEFAULT_STEPS, StepControl, solve_profiles

__all__ = ["RadialModes", "MODE_STATUS", "mode_eigenvalues", "radial_modes_of_eos", "radial_modes", "radial_columns"]

FOUR_PI = 4.0 * np.pi
#: Largest number of modes a sweep may ask for (config check).
MAX_MODES = 10
#: Status codes of radial modes (the schema owns them).
MODE_STATUS = RADIAL_STATUS
DEFAULT_SUBDIVISIONS = 6
#: Absolute bisection tolerance (km^-2): far below any omega^2 (1e-8 km^-2 is 1e3 rad^2/s^2), instead of
#: LAPACK's eps ||T||, which the tiny elements near centre and surface make large.
TRIDIAGONAL_TOLERANCE = 1e-300


@dataclass
class RadialModes:
    """Radial modes of a batch of stars.

    Attributes
    ----------
    omega_squared : ndarray, shape (stars, modes)
        omega^2 in (rad/s)^2 (``units.ANGULAR_FREQUENCY_SQUARED_UNIT``); NaN where not computed.
    frequency : ndarray, shape (stars, modes)
        omega / 2 pi in kHz; NaN where omega^2 < 0 or not computed.
    stable : ndarray of bool, shape (stars,)
        omega_0^2 > 0.
    status : ndarray of int8, shape (stars,)
        ``MODE_STATUS`` code.
    """

    omega_squared: np.ndarray
    frequency: np.ndarray
    stable: np.ndarray
    status: np.ndarray

    def __repr__(self) -> str:
        n, k = self.omega_squared.shape
        return f"RadialModes({n} stars x {k} modes, {int(np.count_nonzero(self.stable))} radially stable)"

    def to_table(self):
        """An astropy QTable, one row per star."""
        return units.quantity_table(
            {"radial_omega_squared": self.omega_squared, "radial_frequency": self.frequency,
             "radial_stable": self.stable, "radial_status": self.status},
            {"radial_omega_squared": units.ANGULAR_FREQUENCY_SQUARED_UNIT,
             "radial_frequency": units.FREQUENCY_UNIT, "radial_stable": "", "radial_status": ""},
        )


def mode_eigenvalues(radius, pressure, energy_density, gamma_pressure, mass, nu, modes: int,
                     junction_index=None, junction_coupling=None, interleaved: bool = False):
    """Lowest ``modes`` eigenvalues omega^2 (km^-2) of the discretised pulsation equation.

    Parameters
    ----------
    radius, pressure, energy_density, gamma_pressure, mass, nu : ndarray, shape (stars, points)
        Background at grid points centre -> surface (r = 0 first), geometric
        units, NaN-padded past each star's surface: r, p, eps, Gamma_1 p, m(r), nu(r).
    modes : int
        Number of eigenvalues.
    junction_index : ndarray of int, shape (stars,), optional
        Grid point of an interior density jump with rapid conversion (-1: none).  There u is
        doubled into u_- and u_+ and the two are joined by the interface term [u][v] / kappa.
    junction_coupling : ndarray, shape (stars,), optional
        1 / kappa at that jump (see :func:`junction_coupling`).
    interleaved : bool
        The odd points are the element midpoints (the background evaluated there, on the right
        side of any density jump) and the even points the grid; otherwise midpoint values are
        averages of the neighbouring points.  ``junction_index`` counts grid points.

    Returns
    -------
    omega2 : ndarray, shape (stars, modes)
        NaN for a star with too few points or a non-finite problem.
    status : ndarray of int8, shape (stars,)
    """
    r = np.asarray(radius, dtype=float)
    n_stars = r.shape[0]
    with np.errstate(all="ignore"):
        # element midpoints (coefficients, midpoint rule)
        arrays = (("r", r), ("p", pressure), ("e", energy_density), ("g", gamma_pressure), ("m", mass), ("nu", nu))
        if interleaved:
            mid = {name: np.asarray(a, dtype=float)[:, 1::2] for name, a in arrays}
            r = r[:, ::2]
        else:
            mid = {name: 0.5 * (a[:, 1:] + a[:, :-1]) for name, a in arrays}
        rm, pm, em, gm, mm, num = (mid[k] for k in ("r", "p", "e", "g", "m", "nu"))
        dr = np.diff(r, axis=1)
        e_lam = 1.0 / (1.0 - 2.0 * mm / rm)
        lam = np.log(e_lam)
        dh_dr = -(mm + FOUR_PI * rm**3 * pm) / (rm * (rm - 2.0 * mm))
        dp_dr = (em + pm) * dh_dr
        a1 = np.exp(0.5 * (lam + 3.0 * num))
        P = a1 * gm / rm**2
        W = np.exp(0.5 * (3.0 * lam + num)) * (em + pm) / rm**2
        Q = a1 * (dp_dr**2 / (rm**2 * (em + pm)) - 4.0 * dp_dr / rm**3 - 8.0 * np.pi * e_lam * pm * (em + pm) / rm**2)
        stiff = P / dr  # element stiffness
        wq = 0.5 * W * dr  # lumped mass, half an element to each end
        qq = 0.5 * Q * dr
    omega2 = np.full((n_stars, modes), np.nan)
    status = np.zeros(n_stars, dtype=np.int8)
    for j in range(n_stars):  # one LAPACK call per star; assembly above is batched
        k = np.flatnonzero(np.isfinite(dr[j]) & (dr[j] > 0))
        if k.size < 4 * modes + 8:
            status[j] = 3
            continue
        s, w, q = stiff[j, k], wq[j, k], qq[j, k]
        # unknowns u_1 .. u_N (u_0 = 0 at the centre); node i touches elements i-1 and i
        diag = s + np.append(s[1:], 0.0) - (q + np.append(q[1:], 0.0))
        mass_l = w + np.append(w[1:], 0.0)
        off = -s[1:]
        t = -1 if junction_index is None else int(junction_index[j])
        if 0 < t < k.size:  # rapid conversion: u_- (elements left of point t) and u_+ (right of it)
            a, g = t - 1, junction_coupling[j]
            diag = np.concatenate([diag[:a], [s[t - 1] - q[t - 1] + g, s[t] - q[t] + g], diag[a + 1:]])
            mass_l = np.concatenate([mass_l[:a], [w[t - 1], w[t]], mass_l[a + 1:]])
            off = np.concatenate([off[:a], [-g], off[a:]])
        if not (np.all(np.isfinite(diag)) and np.all(np.isfinite(off)) and np.all(mass_l > 0)):
            status[j] = 2
            continue
        scale = 1.0 / np.sqrt(mass_l)
        vals = eigh_tridiagonal(diag * scale**2, off * scale[1:] * scale[:-1], eigvals_only=True,
                                select="i", select_range=(0, modes - 1), tol=TRIDIAGONAL_TOLERANCE)
        omega2[j] = vals
    return omega2, status


def _refine(eos: EquationOfState, prof, j_rows: np.ndarray, subdivisions: int, gamma1: float | None):
    """Background on each interval cut into ``subdivisions`` parts in r (Hermite h(r), m(r))."""
    r = prof.radius[j_rows]
    h = prof.enthalpy[j_rows]
    m = prof.mass[j_rows]
    p = prof.pressure[j_rows]
    eps = prof.energy_density[j_rows]
    with np.errstate(all="ignore"):
        dh = np.where(r > 0, -(m + FOUR_PI * r**3 * p) / (r * (r - 2.0 * m)), 0.0)
        dm = FOUR_PI * r**2 * eps
        t = (np.arange(subdivisions) / subdivisions)[None, None, :]
        r0, r1 = r[:, :-1, None], r[:, 1:, None]
        L = r1 - r0
        h00, h10, h01, h11 = 2 * t**3 - 3 * t**2 + 1, t**3 - 2 * t**2 + t, -2 * t**3 + 3 * t**2, t**3 - t**2

        def herm(f, df):
            return (h00 * f[:, :-1, None] + h10 * L * df[:, :-1, None] + h01 * f[:, 1:, None]
                    + h11 * L * df[:, 1:, None])

        rr = (r0 + t * L).reshape(r.shape[0], -1)
        hh = herm(h, dh).reshape(r.shape[0], -1)
        mm = herm(m, dm).reshape(r.shape[0], -1)
        # the surface node closes each row (where the row's last finite node is)
        last = np.array([np.flatnonzero(np.isfinite(row))[-1] for row in r])
        rows = np.arange(r.shape[0])
        rr = np.concatenate([rr, np.full((r.shape[0], 1), np.nan)], axis=1)
        hh = np.concatenate([hh, np.full((r.shape[0], 1), np.nan)], axis=1)
        mm = np.concatenate([mm, np.full((r.shape[0], 1), np.nan)], axis=1)
        pos = last * subdivisions
        rr[rows, pos], hh[rows, pos], mm[rows, pos] = r[rows, last], h[rows, last], m[rows, last]
        hh = np.clip(hh, 0.0, None)
        ok = np.isfinite(hh)
        pp, ee = np.full_like(hh, np.nan), np.full_like(hh, np.nan)
        flat_p, flat_e, _ = eos.state(hh[ok])
        pp[ok], ee[ok] = flat_p, flat_e
        if gamma1 is None:
            cs2 = np.full_like(hh, np.nan)
            cs2[ok] = eos.sound_speed_squared(np.maximum(hh[ok], 1e-12 * prof.central_enthalpy[j_rows][
                np.nonzero(ok)[0]]))
            gp = (ee + pp) * cs2
        else:
            gp = gamma1 * pp
        M, R = m[rows, last], r[rows, last]
        nu = np.log(1.0 - 2.0 * M / R)[:, None] - 2.0 * hh
    return rr, pp, ee, gp, mm, nu, hh


def junction_coupling(r_t, m_t, p_t, eps_out, delta_eps, nu_t):
    """1/kappa of the rapid-conversion interface term at an interior density jump (geometric units).

    Pereira, Flores & Lugones (2018, ApJ 860, 12; from memory), rapid conversion: Delta p continuous and
    [xi] = (Delta p / r) [1 / p'], xi = Delta r / r, [f] = f(r_t+) - f(r_t-).  With u = r^3 e^(-nu/2) xi
    and the flux P u' = -e^(lambda/2 + nu) Delta p (continuous), [u] = kappa P u' with
    kappa = -r^2 e^(-(lambda + 3 nu)/2) [1/p'] > 0 (p' = (eps + p) dh/dr, steeper on the dense side);
    the weak form gains [u][v]/kappa.  Slow conversion (xi and Delta p continuous) is the plain weak
    form with u continuous.
    """
    with np.errstate(all="ignore"):  # rows without a core (r_t = 0) are not used
        e_lam = 1.0 / (1.0 - 2.0 * m_t / r_t)
        dh_dr = -(m_t + FOUR_PI * r_t**3 * p_t) / (r_t * (r_t - 2.0 * m_t))
        inv_dp = 1.0 / ((eps_out + p_t) * dh_dr) - 1.0 / ((eps_out + delta_eps + p_t) * dh_dr)
        kappa = -r_t**2 * np.exp(-0.5 * (np.log(e_lam) + 3.0 * nu_t)) * inv_dp
        return 1.0 / kappa


def radial_modes_of_eos(eos: EquationOfState, central_enthalpy, *, modes: int = 3, gamma1: float | None = None,
                        junction: str = "rapid", control: StepControl = DEFAULT_STEPS,
                        subdivisions: int = DEFAULT_SUBDIVISIONS, chunk: int = 256) -> RadialModes:
    """Radial modes of the stars with the given central log-enthalpies (geometric inputs).

    Parameters
    ----------
    eos : EquationOfState
    central_enthalpy : array_like, shape (n,)
    modes : int
        Fundamental plus ``modes - 1`` overtones.
    gamma1 : float, optional
        Constant adiabatic index; None (default) takes the equilibrium
        Gamma_1 = (eps + p) c_s^2 / p of the EOS itself.
    junction : {"rapid", "slow"}
        Conditions at an interior density jump (Pereira, Flores & Lugones 2018): rapid conversion
        (Delta p continuous, xi jumps; default) or slow (xi and Delta p continuous).
    control : StepControl
        Solver control of the background (as in the sweep).
    subdivisions : int
        Elements per solver interval (the result is extrapolated from this and twice it).
    chunk : int
        Stars per batch (memory).
    """
    h_c = np.atleast_1d(np.asarray(central_enthalpy, dtype=float))
    n = h_c.size
    out = np.full((n, modes), np.nan)
    status = np.zeros(n, dtype=np.int8)
    for start in range(0, n, chunk):
        sel = slice(start, min(n, start + chunk))
        stars, prof = solve_profiles(eos, h_c[sel], control=control, response=False)
        st = np.zeros(h_c[sel].size, dtype=np.int8)
        st[np.asarray(prof.status) != 0] = 1
        jumps = getattr(eos, "interior_jumps", None)
        if jumps is not None and np.size(jumps.h) > 1:  # one transition per EOS (README: limitations)
            st[st == 0] = 4
        good = np.flatnonzero(st == 0)
        res = np.full((h_c[sel].size, modes), np.nan)
        if good.size:
            fine = []
            for k in (subdivisions, 2 * subdivisions):
                # 2k points per interval: the odd ones are the midpoints of the k elements
                rr, pp, ee, gp, mm, nu, hh = _refine(eos, prof, good, 2 * k, gamma1)
                index = coupling = None
                if jumps is not None and junction == "rapid":
                    h_t = float(np.ravel(jumps.h)[0])
                    at = hh == h_t
                    index = np.where(at.any(axis=1), np.argmax(at, axis=1), -1)
                    rows = np.arange(good.size)
                    col = np.maximum(index, 0)
                    coupling = junction_coupling(rr[rows, col], mm[rows, col], pp[rows, col], ee[rows, col],
                                                 float(np.ravel(jumps.delta_eps)[0]), nu[rows, col])
                w2, s2 = mode_eigenvalues(rr, pp, ee, gp, mm, nu, modes,
                                          None if index is None else np.where(index >= 0, index // 2, -1),
                                          coupling, interleaved=True)
                fine.append(w2)
                st[good] = np.where(st[good] == 0, s2, st[good])
            # O(h^2) error: Richardson extrapolation
            res[good] = (4.0 * fine[1] - fine[0]) / 3.0
        bad = st != 0
        res[bad] = np.nan
        out[sel], status[sel] = res, st
    w2 = units.angular_frequency_squared_from_geometric(out)
    return RadialModes(omega_squared=w2, frequency=units.frequency_khz_from_angular_squared(w2),
                       stable=np.asarray(w2[:, 0] > 0), status=status)


def radial_modes(eos: EquationOfState, *, central_density=None, central_pressure=None, modes: int = 3,
                 gamma1: float | None = None, junction: str = "rapid",
                 control: StepControl = DEFAULT_STEPS) -> RadialModes:
    """Radial modes of stars chosen by central density (g/cm^3) or pressure (dyn/cm^2), or Quantities.

    Exactly one of ``central_density`` and ``central_pressure``; see :func:`radial_modes_of_eos`.
    """
    if (central_density is None) == (central_pressure is None):
        raise TypeError("give exactly one of central_density and central_pressure")
    quantity = "central_density" if central_density is not None else "central_pressure"
    values = central_density if central_density is not None else central_pressure
    h = _central_enthalpy(eos, quantity, np.atleast_1d(values) if not units.is_quantity(values) else values)
    return radial_modes_of_eos(eos, h, modes=modes, gamma1=gamma1, junction=junction, control=control)


def radial_columns(eos: EquationOfState, central_enthalpy, modes: int, *, gamma1: float | None = None,
                   junction: str = "rapid", control: StepControl = DEFAULT_STEPS) -> dict[str, np.ndarray]:
    """The run-file columns of ``schema.RADIAL_MODE_DATASETS`` for a chunk of stars."""
    res = radial_modes_of_eos(eos, central_enthalpy, modes=modes, gamma1=gamma1, junction=junction,
                              control=control)
    return {"radial_omega_squared": res.omega_squared, "radial_frequency": res.frequency,
            "radial_stable": res.stable, "radial_status": res.status}
