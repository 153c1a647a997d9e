"""Likelihoods of EOS sequences given measurements, marginalised over the stars' unknown masses.

The stable branches of one or many sequences (an EOS, or every member of an
ensemble) become :class:`StableBranches`: each interval between two
neighbouring stable stars is a cubic Hermite piece of M, R and ln Lambda in
x = ln p_c (the sweep's own order), with slopes from three-point finite
differences; each stable segment that ends in a maximum gets a last piece
from its heaviest stable star to the maximum (the refined maximum of the
sweep, or the vertex of a parabola through the samples around it for other
maxima), on which M(R) is the parabola M_top - a (R - R_top)^2 that a
turning point traces; a segment that starts at a minimum (a twin-star
branch) gets a first piece from that minimum the same way.  :func:`log_likelihoods` integrates each
measurement's density along those pieces with Gauss-Legendre nodes, all
sequences at once.

The mass prior is uniform on the stable branch above ``mass_floor``: with
weight |dM| along every stable segment (twin-star branches included),
normalised by the branch's total length in mass above the floor.  For an
ordinary sequence (one stable segment from below the floor to M_max) that
length is M_max - M_floor and the likelihoods are

* mass, Gaussian: L = [Phi((M_max - mu)/sigma) - Phi((M_floor - mu)/sigma)] / (M_max - M_floor);
* mass, samples: the same with the samples' kernel density estimate;
* mass and radius: L = (M_max - M_floor)^-1 * integral of rho(M, R(M)) dM along the stable branch;
* surface redshift: the same with rho(z(M)), z = (1 - 2GM/(Rc^2))^(-1/2) - 1;
* binary: L = (1 - q_min)^-1 * integral over q in [q_min, 1] of rho(q, Lambda-tilde(Mc, q)) dq, with
  m1 = Mc (1+q)^(1/5) / q^(3/5), m2 = q m1 and Lambda-tilde of Flanagan & Hinderer (2008) (Favata 2014,
  eq. 5); a q whose component mass has no stable star contributes 0, and where a mass has several stable
  stars (twin stars) the density is averaged over the combinations.

This marginalisation over a population-agnostic mass prior follows the
usual practice of EOS inference from mass-radius measurements (e.g. Steiner,
Lattimer & Brown 2010, ApJ 722, 33; Raaijmakers et al. 2019, ApJL 887,
L22); the choice of a uniform prior with a fixed floor, the twin-star
normalisation and the upper-limit form below are common practice, not from
one paper.  An upper limit U on Lambda-tilde at credibility c is the
half-normal density on Lambda-tilde >= 0 with P(Lambda-tilde < U) = c.

Kernel density estimates are scipy.stats.gaussian_kde (bandwidth rule
"scott", "silverman" or a factor), tabulated once on a grid of an eighth of
the kernel width (2-D: in whitened coordinates, ln rho by bicubic spline;
the tabulation changes ln L by less than 1e-6, see tests/test_likelihood.py)
over the samples' range plus :data:`KDE_REACH` kernel widths; beyond that
reach the estimate is taken as zero (it is below e^-72 of one kernel's peak
there).  Samples of (q, Lambda-tilde) are reflected about q = 1.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy.special import erfinv, log_ndtr, logsumexp

from . import units
from .constraints import (
    BinaryMeasurement,
    Constraints,
    EllipseMeasurement,
    MassMeasurement,
    MassRadiusSamples,
    RedshiftMeasurement,
)

__all__ = [
    "LIKELIHOOD_STATUS",
    "StableBranches",
    "stable_branches",
    "branches_of_sequence",
    "log_likelihoods",
    "values_at_masses",
    "KDE_REACH",
]

#: Per-sequence status of a likelihood (dataset ``likelihood_status`` of a results file).
LIKELIHOOD_STATUS: dict[int, str] = {
    0: "ok",
    1: "no usable sequence (the EOS or member failed, or no star of its sweep was computed to tolerance)",
    2: "maximum mass below mass_floor: L = 0 exactly (ln L = -inf)",
    3: "the sweep starts above mass_floor on the stable branch: the lower end of the mass prior is not covered",
    4: "maximum mass not reached in the sweep: the upper end of the mass prior is not known",
    5: "no tidal deformability in the sweep (a binary measurement needs it)",
    6: "a binary's lighter star can lie below the sweep's lightest star, which is stable: start the sweep lower",
}
#: Gauss-Legendre nodes per piece (each piece is split in SUBDIVISIONS intervals first).
NODES = 8
SUBDIVISIONS = 2
#: Most intervals a piece is split into for a narrow measurement.
MAX_SUBDIVISIONS = 4096
#: Gauss-Legendre nodes in q for binaries: panels x nodes per panel.
Q_PANELS, Q_NODES = 4, 12
#: Kernel widths beyond the outermost sample where a kernel density estimate is taken as 0.
KDE_REACH = 12.0
#: Grid spacing of a tabulated kernel density estimate, in kernel widths.
KDE_SPACING = 1.0 / 8.0


@dataclass
class StableBranches:
    """The stable branches of ``n`` sequences as cubic pieces in a local parameter s in [0, 1].

    Attributes
    ----------
    n : int
        Number of sequences.
    owner : ndarray of int, shape (P,)
        Sequence of each piece, non-decreasing.
    mass, radius, log_lambda : ndarray, shape (P, 4)
        Polynomial coefficients c0 + c1 s + c2 s^2 + c3 s^3 (Msun, km, ln Lambda; NaN without Lambda).
    floor_s : ndarray, shape (P,)
        Where the piece crosses ``mass_floor`` (0 if entirely above, 1 if entirely below).
    max_mass : ndarray, shape (n,)
        Maximum mass of each sequence (Msun).
    prior_length : ndarray, shape (n,)
        Total mass length (Msun) of the stable branch above the floor: the mass prior's normalisation.
    status : ndarray of int8, shape (n,)
        :data:`LIKELIHOOD_STATUS` code of each sequence.
    mass_floor : float
    has_lambda : ndarray of bool, shape (n,)
    sweep_start_stable : ndarray of bool, shape (n,)
        The lightest star of the sweep is stable: the branch may continue below the sweep.
    """

    n: int
    owner: np.ndarray
    mass: np.ndarray
    radius: np.ndarray
    log_lambda: np.ndarray
    floor_s: np.ndarray
    max_mass: np.ndarray
    prior_length: np.ndarray
    status: np.ndarray
    mass_floor: float
    has_lambda: np.ndarray
    sweep_start_stable: np.ndarray | None = None

    def __repr__(self) -> str:
        return f"StableBranches(n={self.n}, pieces={self.owner.size}, mass_floor={self.mass_floor:g})"


def _poly(c: np.ndarray, s: np.ndarray) -> np.ndarray:
    """Cubic with coefficients c (..., 4) at s (broadcast)."""
    return c[..., 0] + s * (c[..., 1] + s * (c[..., 2] + s * c[..., 3]))


def _dpoly(c: np.ndarray, s: np.ndarray) -> np.ndarray:
    return c[..., 1] + s * (2.0 * c[..., 2] + s * 3.0 * c[..., 3])


def _slopes(x: np.ndarray, f: np.ndarray, n_good: np.ndarray) -> np.ndarray:
    """df/dx at every valid node of each row (three-point formulas on the non-uniform grid)."""
    d = np.full_like(f, np.nan)
    m = x.shape[1]
    if m < 2:
        return d
    j = np.arange(m)[None, :]
    with np.errstate(invalid="ignore", divide="ignore"):
        # interior: derivative of the parabola through the node and its two neighbours
        h0 = x[:, 1:-1] - x[:, :-2]
        h1 = x[:, 2:] - x[:, 1:-1]
        inner = (h0**2 * f[:, 2:] - h1**2 * f[:, :-2] + (h1**2 - h0**2) * f[:, 1:-1]) / (h0 * h1 * (h0 + h1))
        d[:, 1:-1] = inner
        # first node: one-sided parabola
        a0, a1 = x[:, 1] - x[:, 0], (x[:, 2] - x[:, 1]) if m > 2 else np.full(x.shape[0], np.nan)
        first = (-(2 * a0 + a1) / (a0 * (a0 + a1)) * f[:, 0] + (a0 + a1) / (a0 * a1) * f[:, 1]
                 - a0 / (a1 * (a0 + a1)) * (f[:, 2] if m > 2 else 0.0))
        d[:, 0] = np.where(n_good >= 3, first, (f[:, 1] - f[:, 0]) / a0)
        # last valid node of each row
        rows = np.arange(x.shape[0])
        k = np.clip(n_good - 1, 0, m - 1)
        k1, k2 = np.clip(k - 1, 0, m - 1), np.clip(k - 2, 0, m - 1)
        b0 = x[rows, k] - x[rows, k1]
        b1 = x[rows, k1] - x[rows, k2]
        last = ((2 * b0 + b1) / (b0 * (b0 + b1)) * f[rows, k] - (b0 + b1) / (b0 * b1) * f[rows, k1]
                + b0 / (b1 * (b0 + b1)) * f[rows, k2])
        last = np.where(n_good >= 3, last, (f[rows, k] - f[rows, k1]) / b0)
        d[rows, k] = np.where(n_good >= 2, last, np.nan)
    d[j >= n_good[:, None]] = np.nan
    return d


def _hermite(f0, f1, d0, d1, dx) -> np.ndarray:
    """Cubic Hermite coefficients on s in [0, 1] from end values and x-slopes."""
    c = np.empty(np.shape(f0) + (4,))
    c[..., 0] = f0
    c[..., 1] = dx * d0
    c[..., 2] = 3.0 * (f1 - f0) - dx * (2.0 * d0 + d1)
    c[..., 3] = 2.0 * (f0 - f1) + dx * (d0 + d1)
    return c


def _solve_cubic(c: np.ndarray, target: np.ndarray, lo: np.ndarray, hi: np.ndarray, iterations: int = 48):
    """s in [lo, hi] with cubic(c, s) = target (the cubic is monotone on stable pieces).

    Newton's method from the linear guess, kept inside the bracket; the few
    that do not converge in 8 steps are finished by bisection.
    """
    lo, hi = lo.astype(float).copy(), hi.astype(float).copy()
    f_lo, f_hi = _poly(c, lo) - target, _poly(c, hi) - target
    with np.errstate(invalid="ignore", divide="ignore"):
        s = np.clip(lo + (hi - lo) * f_lo / (f_lo - f_hi), lo, hi)
        s = np.where(np.isfinite(s), s, 0.5 * (lo + hi))
        for _ in range(8):
            step = (_poly(c, s) - target) / _dpoly(c, s)
            s = np.clip(s - np.where(np.isfinite(step), step, 0.0), lo, hi)
    scale = np.maximum(np.abs(target), 1.0)
    slow = np.flatnonzero(~(np.abs(_poly(c, s) - target) <= 1e-13 * scale))
    if slow.size:
        cs, ts, a, b = c[slow], target[slow], lo[slow], hi[slow]
        rising = _poly(cs, b) >= _poly(cs, a)
        for _ in range(iterations):
            mid = 0.5 * (a + b)
            below = (_poly(cs, mid) < ts) == rising
            a = np.where(below, mid, a)
            b = np.where(below, b, mid)
        s[slow] = 0.5 * (a + b)
    return s


def stable_branches(central_pressure, mass, radius, stable, *, tidal_deformability=None, max_mass=None,
                    max_mass_radius=None, usable=None, mass_floor: float = 1.0) -> StableBranches:
    """Stable branches of sequences given star by star (rows: sequences, columns: stars).

    Parameters
    ----------
    central_pressure, mass, radius : array_like, shape (n, m) or (m,)
        Per-star values (any order along a row); central pressure orders the
        stars (dyn/cm^2), mass in Msun, radius in km.  Stars with a NaN take no part,
        nor repeats of a central pressure (sweeps through the gap of a density jump).
    stable : array_like of bool, shape (n, m) or (m,)
        Turning-point stability of each star.
    tidal_deformability : array_like, optional
        Lambda of each star (needed by binary measurements).
    max_mass, max_mass_radius : array_like, shape (n,), optional
        The refined maximum of each sequence; the last piece of its heaviest
        stable segment ends there.  Without it (or NaN) the vertex of a
        parabola through the samples is used.
    usable : array_like of bool, shape (n,), optional
        False for sequences that must not be scored (a failed ensemble member).
    mass_floor : float
        Lower end (Msun) of the mass prior.
    """
    p = np.atleast_2d(np.asarray(central_pressure, dtype=float))
    m = np.atleast_2d(np.asarray(mass, dtype=float))
    r = np.atleast_2d(np.asarray(radius, dtype=float))
    st = np.atleast_2d(np.asarray(stable, dtype=bool))
    n, n_stars = m.shape
    lam = (np.full_like(m, np.nan) if tidal_deformability is None
           else np.atleast_2d(np.asarray(tidal_deformability, dtype=float)))
    use = np.ones(n, bool) if usable is None else np.asarray(usable, dtype=bool).reshape(n)
    top_m = np.full(n, np.nan) if max_mass is None else np.asarray(max_mass, dtype=float).reshape(n)
    top_r = np.full(n, np.nan) if max_mass_radius is None else np.asarray(max_mass_radius, dtype=float).reshape(n)

    with np.errstate(invalid="ignore", divide="ignore"):
        good = use[:, None] & np.isfinite(p) & np.isfinite(m) & np.isfinite(r) & (p > 0) & (m > 0) & (r > 0)
        take = np.take_along_axis
        # central densities inside the gap of a density jump all give the star at p_t: keep one of them
        order = np.argsort(np.where(good, p, np.inf), axis=1, kind="stable")
        p_sorted = take(np.where(good, p, np.inf), order, 1)
        repeat = np.zeros_like(good)
        repeat[:, 1:] = np.isfinite(p_sorted[:, 1:]) & (p_sorted[:, 1:] == p_sorted[:, :-1])
        np.put_along_axis(repeat, order, repeat.copy(), axis=1)
        good &= ~repeat
        order = np.argsort(np.where(good, p, np.inf), axis=1, kind="stable")
        x = np.where(take(good, order, 1), np.log(take(np.where(good, p, 1.0), order, 1)), np.nan)
        m, r, lam, st = (take(v, order, 1) for v in (m, r, lam, st))
        good = take(good, order, 1)
        n_good = good.sum(axis=1)
        st = st & good
        loglam = np.where(good & (lam > 0), np.log(np.where(lam > 0, lam, 1.0)), np.nan)
        dm, dr, dl = (_slopes(x, f, n_good) for f in (m, r, loglam))

    status = np.zeros(n, dtype=np.int8)
    status[n_good == 0] = 1
    rows = np.arange(n)
    # pieces between neighbouring stable stars
    pi, pj = np.nonzero(st[:, :-1] & st[:, 1:])
    dx = x[pi, pj + 1] - x[pi, pj]
    pieces_m = _hermite(m[pi, pj], m[pi, pj + 1], dm[pi, pj], dm[pi, pj + 1], dx)
    pieces_r = _hermite(r[pi, pj], r[pi, pj + 1], dr[pi, pj], dr[pi, pj + 1], dx)
    pieces_l = _hermite(loglam[pi, pj], loglam[pi, pj + 1], dl[pi, pj], dl[pi, pj + 1], dx)

    # tops: a stable star followed by an unstable one ends a segment at a maximum
    nxt = np.zeros_like(st)
    nxt[:, :-1] = good[:, 1:] & ~st[:, 1:]
    ti, tj = np.nonzero(st & nxt)
    m_top, r_top = _vertex(x, m, r, ti, tj)
    # the heaviest segment's top is the sweep's refined maximum, where known
    if ti.size:
        key = np.where(np.isfinite(m_top), m_top, m[ti, tj])
        order_t = np.lexsort((key, ti))  # by row, then by mass: the last of each row is its heaviest top
        is_last = np.append(ti[order_t][1:] != ti[order_t][:-1], True)
        k = order_t[is_last]
        rows_k = ti[k]
        known = np.isfinite(top_m[rows_k]) & np.isfinite(top_r[rows_k]) & (top_m[rows_k] >= m[ti[k], tj[k]])
        m_top[k[known]] = top_m[rows_k[known]]
        r_top[k[known]] = top_r[rows_k[known]]
    ok = np.isfinite(m_top) & (m_top > m[ti, tj])
    ti, tj, m_top, r_top = ti[ok], tj[ok], m_top[ok], r_top[ok]
    dM = m_top - m[ti, tj]
    top_m_c = np.stack([m[ti, tj], 2.0 * dM, -dM, np.zeros_like(dM)], axis=-1)
    top_r_c = np.stack([r[ti, tj], r_top - r[ti, tj], np.zeros_like(dM), np.zeros_like(dM)], axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = dl[ti, tj] / dr[ti, tj]  # d ln Lambda / dR, carried on to the maximum
    top_l_c = np.stack([loglam[ti, tj], slope * (r_top - r[ti, tj]), np.zeros_like(dM), np.zeros_like(dM)],
                       axis=-1)

    # bottoms: a stable star after an unstable one starts a segment at a minimum (a twin branch)
    prv = np.zeros_like(st)
    prv[:, 1:] = good[:, :-1] & ~st[:, :-1]
    bi, bj = np.nonzero(st & prv)
    m_bot, r_bot = _vertex(x, m, r, bi, bj, minimum=True)
    keep_b = np.isfinite(m_bot) & (m_bot < m[bi, bj])
    bi, bj, m_bot, r_bot = bi[keep_b], bj[keep_b], m_bot[keep_b], r_bot[keep_b]
    dB = m[bi, bj] - m_bot  # M(s) = M_bot + dB s^2 with R linear in s: the parabola M(R) of a turning point
    zero = np.zeros_like(dB)
    bot_m_c = np.stack([m_bot, zero, dB, zero], axis=-1)
    bot_r_c = np.stack([r_bot, r[bi, bj] - r_bot, zero, zero], axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        slope_b = dl[bi, bj] / dr[bi, bj]
    bot_l_c = np.stack([loglam[bi, bj] - slope_b * (r[bi, bj] - r_bot), slope_b * (r[bi, bj] - r_bot), zero, zero],
                       axis=-1)

    owner = np.concatenate([pi, ti, bi])
    position = np.concatenate([pj.astype(float), tj + 0.5, bj - 0.5])
    sort = np.lexsort((position, owner))
    owner = owner[sort]
    c_m = np.concatenate([pieces_m, top_m_c, bot_m_c])[sort]
    c_r = np.concatenate([pieces_r, top_r_c, bot_r_c])[sort]
    c_l = np.concatenate([pieces_l, top_l_c, bot_l_c])[sort]

    # the mass floor
    m0, m1 = _poly(c_m, 0.0), _poly(c_m, 1.0)
    lo, hi = np.minimum(m0, m1), np.maximum(m0, m1)
    floor_s = np.where(lo >= mass_floor, 0.0, 1.0)
    cross = (lo < mass_floor) & (hi > mass_floor)
    if cross.any():
        s = _solve_cubic(c_m[cross], np.full(cross.sum(), mass_floor), np.zeros(cross.sum()), np.ones(cross.sum()))
        floor_s[cross] = s
    length = np.abs(m1 - _poly(c_m, floor_s)) * (floor_s < 1.0)
    prior_length = np.bincount(owner, weights=length, minlength=n)

    # the sequence's maximum: the refined one, else the heaviest top or stable star
    heaviest_star = np.max(np.where(st, m, -np.inf), axis=1, initial=-np.inf)
    piece_top = np.full(n, -np.inf)
    np.maximum.at(piece_top, owner, hi)
    seq_max = np.where(np.isfinite(top_m), np.maximum(top_m, heaviest_star), np.maximum(piece_top, heaviest_star))
    # a stable last star: the branch still rises where the sweep ends
    last = np.clip(n_good - 1, 0, n_stars - 1)
    rising_at_end = (n_good > 0) & st[rows, last]
    first_stable_above = (n_good > 0) & st[:, 0] & (m[:, 0] > mass_floor)
    # a stable last star: the sweep ends on a rising branch (also a twin branch above a maximum
    # that was found), so the top of the mass prior is not known
    status[(status == 0) & rising_at_end] = 4
    status[(status == 0) & ~(seq_max >= mass_floor) & np.isfinite(seq_max)] = 2
    status[(status == 0) & ~np.any(st, axis=1)] = 1
    status[(status == 0) & first_stable_above] = 3
    sweep_start_stable = (n_good > 0) & st[:, 0]
    has_lambda = np.zeros(n, bool)
    if owner.size:
        finite_l = np.all(np.isfinite(c_l), axis=1)
        has_lambda = np.bincount(owner, weights=(~finite_l).astype(float), minlength=n) == 0
    return StableBranches(n=n, owner=owner, mass=c_m, radius=c_r, log_lambda=c_l, floor_s=floor_s,
                          max_mass=seq_max, prior_length=prior_length, status=status, mass_floor=float(mass_floor),
                          has_lambda=has_lambda & (np.bincount(owner, minlength=n) > 0),
                          sweep_start_stable=sweep_start_stable)


def _vertex(x, m, r, ti, tj, minimum: bool = False):
    """Vertex (M, R) of the parabola in x through the stars around each top (or bottom), NaN where none.

    A top lies between star j and the next one, a bottom between the previous one and j.
    """
    n_stars = x.shape[1]
    ok = (tj >= 1) & (tj + 1 < n_stars)
    j0, j1, j2 = np.clip(tj - 1, 0, n_stars - 1), tj, np.clip(tj + 1, 0, n_stars - 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        t0, t2 = x[ti, j0] - x[ti, j1], x[ti, j2] - x[ti, j1]

        def quad(f):
            f0, f1, f2 = f[ti, j0], f[ti, j1], f[ti, j2]
            # f = f1 + b t + a t^2 through (t0, f0), (0, f1), (t2, f2)
            a = ((f2 - f1) / t2 - (f0 - f1) / t0) / (t2 - t0)
            b = (f2 - f1) / t2 - a * t2
            return f1, b, a

        c0, b, a = quad(m)
        t = np.clip(-b / (2 * a), t0, 0.0) if minimum else np.clip(-b / (2 * a), 0.0, t2)
        curved = (a > 0) if minimum else (a < 0)
        m_top = np.where(ok & curved, c0 + b * t + a * t**2, np.nan)
        r0, rb, ra = quad(r)
        r_top = np.where(ok & curved, r0 + rb * t + ra * t**2, np.nan)
        # no parabola bending the right way (a kink, e.g. at a phase transition): the neighbouring
        # star beyond the turning point bounds it; take that star
        jn = j0 if minimum else j2
        beyond = (m[ti, jn] < c0) if minimum else (m[ti, jn] > c0)
        use = ~(ok & curved) & (jn != j1) & beyond
        m_top = np.where(use, m[ti, jn], m_top)
        r_top = np.where(use, r[ti, jn], r_top)
    return m_top, r_top


def branches_of_sequence(seq, *, mass_floor: float = 1.0) -> StableBranches:
    """:func:`stable_branches` of one :class:`~stellar_match.sequence.EOSSequence` (from a sweep or a run file)."""
    cols = seq.columns
    usable = True
    if "star_status" in cols:
        status = np.asarray(cols["star_status"])
        usable = bool(np.any(status == 0))
    return stable_branches(cols["central_pressure"], cols["mass"], cols["radius"], seq.stable,
                           tidal_deformability=cols.get("tidal_deformability"),
                           max_mass=[seq.summary.get("max_mass", np.nan)],
                           max_mass_radius=[seq.summary.get("max_mass_radius", np.nan)],
                           usable=[usable], mass_floor=mass_floor)


# --- densities ----------------------------------------------------------------------------------

def _kde(samples: np.ndarray, bandwidth):
    from scipy.stats import gaussian_kde

    return gaussian_kde(np.atleast_2d(samples.T) if samples.ndim > 1 else samples, bw_method=bandwidth)


def _chunked_logpdf(kde, points: np.ndarray, chunk: int = 4096) -> np.ndarray:
    """kde.logpdf on many points without a (samples x points) array of them all."""
    out = np.empty(points.shape[-1])
    step = max(1, chunk * 1000 // max(kde.n, 1))
    for a in range(0, points.shape[-1], step):
        out[a : a + step] = kde.logpdf(points[..., a : a + step])
    return out


class _Tabulated1D:
    """A 1-D kernel density estimate tabulated as ln rho, ln CDF and ln(1 - CDF) on a fine grid."""

    def __init__(self, samples: np.ndarray, bandwidth) -> None:
        from scipy.interpolate import CubicSpline

        kde = _kde(samples, bandwidth)
        width = float(np.sqrt(kde.covariance[0, 0]))
        lo, hi = samples.min() - KDE_REACH * width, samples.max() + KDE_REACH * width
        grid = np.linspace(lo, hi, int(math.ceil((hi - lo) / (KDE_SPACING * width))) + 1)
        self.lo, self.hi = lo, hi
        z = (grid[None, :] - samples[:, None]) / width
        w = -math.log(samples.size)
        self._logpdf = CubicSpline(grid, _chunked_logpdf(kde, grid[None, :]))
        self._logcdf = CubicSpline(grid, logsumexp(log_ndtr(z), axis=0) + w)
        self._logsf = CubicSpline(grid, logsumexp(log_ndtr(-z), axis=0) + w)
        self.median = float(np.median(samples))
        self.resolve = {"x": (width, float(samples.min()), float(samples.max()))}

    def logpdf(self, x):
        x = np.asarray(x, dtype=float)
        inside = (x >= self.lo) & (x <= self.hi)
        return np.where(inside, self._logpdf(np.clip(x, self.lo, self.hi)), -np.inf)

    def logcdf(self, x):
        x = np.asarray(x, dtype=float)
        v = self._logcdf(np.clip(x, self.lo, self.hi))
        return np.where(x < self.lo, -np.inf, np.where(x > self.hi, 0.0, np.minimum(v, 0.0)))

    def logsf(self, x):
        x = np.asarray(x, dtype=float)
        v = self._logsf(np.clip(x, self.lo, self.hi))
        return np.where(x > self.hi, -np.inf, np.where(x < self.lo, 0.0, np.minimum(v, 0.0)))


class _Gaussian1D:
    def __init__(self, mean: float, sigma: float) -> None:
        self.mean, self.sigma, self.median = mean, sigma, mean
        self.resolve = {"x": (sigma, mean, mean)}

    def logpdf(self, x):
        z = (np.asarray(x, dtype=float) - self.mean) / self.sigma
        return -0.5 * z * z - math.log(self.sigma * math.sqrt(2.0 * math.pi))

    def logcdf(self, x):
        return log_ndtr((np.asarray(x, dtype=float) - self.mean) / self.sigma)

    def logsf(self, x):
        return log_ndtr((self.mean - np.asarray(x, dtype=float)) / self.sigma)


class _HalfNormal:
    """Half-normal density on [0, inf) with P(x < upper) = credibility."""

    def __init__(self, upper: float, credibility: float) -> None:
        self.sigma = upper / (math.sqrt(2.0) * float(erfinv(credibility)))

    def logpdf(self, x):
        x = np.asarray(x, dtype=float)
        z = x / self.sigma
        with np.errstate(invalid="ignore"):
            v = math.log(2.0) - 0.5 * z * z - math.log(self.sigma * math.sqrt(2.0 * math.pi))
        return np.where(x >= 0, v, -np.inf)


def _resolve_2d(cov: np.ndarray, lo, hi) -> dict:
    """Widths in M and R that a curve crossing a 2-D Gaussian of covariance ``cov`` must resolve:
    the conditional standard deviations sqrt(cov_ii (1 - rho^2))."""
    rho2 = cov[0, 1] ** 2 / (cov[0, 0] * cov[1, 1])
    keep = max(1.0 - rho2, 1e-12)
    return {"m": (math.sqrt(cov[0, 0] * keep), float(lo[0]), float(hi[0])),
            "r": (math.sqrt(cov[1, 1] * keep), float(lo[1]), float(hi[1]))}


class _Gaussian2D:
    def __init__(self, mean, cov) -> None:
        self.mean = np.asarray(mean, dtype=float)
        cov = np.asarray(cov, dtype=float)
        self.inv = np.linalg.inv(cov)
        self.norm = -math.log(2.0 * math.pi) - 0.5 * math.log(np.linalg.det(cov))
        self.resolve = _resolve_2d(cov, self.mean, self.mean)

    def logpdf(self, a, b):
        da, db = np.asarray(a, dtype=float) - self.mean[0], np.asarray(b, dtype=float) - self.mean[1]
        q = self.inv[0, 0] * da * da + 2.0 * self.inv[0, 1] * da * db + self.inv[1, 1] * db * db
        return self.norm - 0.5 * q


class _Tabulated2D:
    """A 2-D kernel density estimate tabulated as ln rho, bicubic spline between nodes.

    The grid lies in whitened coordinates u = L^-1 (x - centre), L the
    Cholesky factor of the kernel covariance, where every kernel is a unit
    circle: the grid's size and accuracy do not depend on how correlated the
    samples are, and the estimate on the grid is one matrix product of the
    kernels' separable factors, exp(-(u0 - u0_i)^2 / 2) exp(-(u1 - u1_i)^2 / 2)
    (scipy's gaussian_kde gives the kernel covariance; its own evaluation
    is the test reference).  ``reflect_first`` reflects the samples about
    a boundary of the first coordinate and keeps a <= that boundary: mass
    ratios q <= 1 of binary samples, whose estimate would otherwise leak
    across q = 1 (the reflection method; Silverman 1986, "Density Estimation
    for Statistics and Data Analysis", sec. 2.10, from memory).
    """

    def __init__(self, samples: np.ndarray, bandwidth, reflect_first: float | None = None) -> None:
        from scipy.interpolate import RectBivariateSpline

        kde = _kde(samples, bandwidth)
        cov = np.asarray(kde.covariance, dtype=float)
        self._chol = np.linalg.cholesky(cov)
        self._centre = samples.mean(axis=0)
        points = samples
        if reflect_first is not None:
            points = np.vstack([samples, np.column_stack([2.0 * reflect_first - samples[:, 0], samples[:, 1]])])
        u = np.linalg.solve(self._chol, (points - self._centre).T)
        u_own = u[:, : samples.shape[0]]
        self.lo = u_own.min(axis=1) - KDE_REACH
        self.hi = u_own.max(axis=1) + KDE_REACH
        axes = [np.linspace(self.lo[d], self.hi[d], int(math.ceil((self.hi[d] - self.lo[d]) / KDE_SPACING)) + 1)
                for d in range(2)]
        total = np.zeros((axes[0].size, axes[1].size))
        for a in range(0, u.shape[1], 4096):  # bounded memory for many samples
            f0 = np.exp(-0.5 * (axes[0][:, None] - u[0, None, a : a + 4096]) ** 2)
            f1 = np.exp(-0.5 * (axes[1][:, None] - u[1, None, a : a + 4096]) ** 2)
            total += f0 @ f1.T
        log_norm = -math.log(samples.shape[0] * 2.0 * math.pi) - float(np.log(np.diag(self._chol)).sum())
        with np.errstate(divide="ignore"):
            values = np.log(np.maximum(total, _TINY)) + log_norm
        self._floor = math.log(_TINY) + log_norm + 50.0  # below: no sample within reach (taken as 0)
        self.reflect_first = reflect_first
        self._spline = RectBivariateSpline(axes[0], axes[1], values, kx=3, ky=3)
        self.grid_points = total.size
        self.resolve = _resolve_2d(cov, samples.min(axis=0), samples.max(axis=0))

    def logpdf(self, a, b):
        a, b = np.broadcast_arrays(np.asarray(a, dtype=float), np.asarray(b, dtype=float))
        shape = a.shape
        x = np.vstack([a.ravel(), b.ravel()]) - self._centre[:, None]
        u = np.linalg.solve(self._chol, x)
        inside = np.all((u >= self.lo[:, None]) & (u <= self.hi[:, None]), axis=0) & np.all(np.isfinite(u), axis=0)
        if self.reflect_first is not None:
            inside &= a.ravel() <= self.reflect_first
        out = np.full(u.shape[1], -np.inf)
        if inside.any():
            v = self._spline.ev(u[0, inside], u[1, inside])
            out[inside] = np.where(v > self._floor, v, -np.inf)
        return out.reshape(shape)


#: Smallest tabulated kernel sum (the products of kernel factors underflow below about 1e-308).
_TINY = 1e-280


def density_of(measurement):
    """The probability density a measurement stands for (an object with ``logpdf``).

    Mass: 1-D in M (also ``logcdf``/``logsf``); ellipse and mass-radius
    samples: 2-D in (M, R); redshift: 1-D in z; binary: 1-D in
    Lambda-tilde (Gaussian, upper limit) or 2-D in (q, Lambda-tilde) (samples).
    """
    if isinstance(measurement, MassMeasurement | RedshiftMeasurement):
        if measurement.samples is not None:
            return _Tabulated1D(np.asarray(measurement.samples, dtype=float), measurement.bandwidth)
        mean = measurement.mass if isinstance(measurement, MassMeasurement) else measurement.z
        return _Gaussian1D(mean, measurement.sigma)
    if isinstance(measurement, EllipseMeasurement):
        return _Gaussian2D([measurement.mass, measurement.radius], measurement.covariance())
    if isinstance(measurement, MassRadiusSamples):
        return _Tabulated2D(np.asarray(measurement.samples, dtype=float), measurement.bandwidth)
    if isinstance(measurement, BinaryMeasurement):
        if measurement.form == "samples":  # q <= 1: the estimate is reflected about q = 1
            return _Tabulated2D(np.asarray(measurement.samples, dtype=float), measurement.bandwidth,
                                reflect_first=1.0)
        if measurement.form == "upper_limit":
            return _HalfNormal(measurement.lambda_tilde_upper, measurement.credibility)
        return _Gaussian1D(measurement.lambda_tilde, measurement.sigma)
    raise TypeError(f"no likelihood for {type(measurement).__name__}")


# --- integration ------------------------------------------------------------------------------------

def _log_between(dist, a, b):
    """ln(CDF(b) - CDF(a)) for a <= b, accurate in both tails."""
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        left = dist.logcdf(b) + np.log1p(-np.exp(dist.logcdf(a) - dist.logcdf(b)))
        right = dist.logsf(a) + np.log1p(-np.exp(dist.logsf(b) - dist.logsf(a)))
        middle = np.log1p(-(np.exp(dist.logcdf(a)) + np.exp(dist.logsf(b))))
    out = np.where(b <= dist.median, left, np.where(a >= dist.median, right, middle))
    return np.where(b > a, np.nan_to_num(out, nan=-np.inf), -np.inf)


def _group_logsumexp(values: np.ndarray, group: np.ndarray, n: int) -> np.ndarray:
    """ln sum exp(values) per group (-inf for groups without a finite value)."""
    top = np.full(n, -np.inf)
    np.maximum.at(top, group, values)
    safe = np.where(np.isfinite(top), top, 0.0)
    with np.errstate(invalid="ignore", over="ignore"):
        total = np.bincount(group, weights=np.exp(values - safe[group]), minlength=n)
    with np.errstate(divide="ignore"):
        return np.where(total > 0, np.log(total) + safe, -np.inf)


@functools.lru_cache(maxsize=8)
def _gauss_legendre(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights on [-1, 1] (numpy's leggauss), computed once per order."""
    g, w = np.polynomial.legendre.leggauss(n)
    g.setflags(write=False)
    w.setflags(write=False)
    return g, w


def _nodes(branches: StableBranches, resolve: dict | None = None):
    """Gauss-Legendre nodes over the part of every piece above the floor: (piece, s, ln weight in Msun).

    Each piece is split into at least SUBDIVISIONS intervals, and into more
    where it crosses the measurement's region (``resolve``: axis -> (width,
    low, high) for the axes "m", "r", "z"), so that no interval is longer
    than the density's width there (8 nodes integrate a Gaussian over one
    width to about 1e-10).
    """
    g, w = _gauss_legendre(NODES)
    keep = np.flatnonzero(branches.floor_s < 1.0)
    a = branches.floor_s[keep]
    k = np.full(keep.size, SUBDIVISIONS)
    if resolve:
        ends = {"m": (_poly(branches.mass[keep], a), _poly(branches.mass[keep], 1.0)),
                "r": (_poly(branches.radius[keep], a), _poly(branches.radius[keep], 1.0))}
        if "z" in resolve:
            with np.errstate(invalid="ignore", divide="ignore"):
                ends["z"] = tuple(1.0 / np.sqrt(1.0 - 2.0 * units.SOLAR_MASS_KM * mm / rr) - 1.0
                                  for mm, rr in zip(ends["m"], ends["r"], strict=True))
        for axis, (width, lo, hi) in resolve.items():
            e0, e1 = ends[axis]
            near = (np.maximum(e0, e1) >= lo - KDE_REACH * width) & (np.minimum(e0, e1) <= hi + KDE_REACH * width)
            with np.errstate(invalid="ignore"):
                need = np.ceil(np.abs(e1 - e0) / width)
            k = np.where(near & np.isfinite(need), np.maximum(k, np.minimum(need, MAX_SUBDIVISIONS)), k)
    k = k.astype(np.int64)
    piece_of_interval = np.repeat(np.arange(keep.size), k)
    index = np.arange(piece_of_interval.size) - np.repeat(np.cumsum(k) - k, k)
    a_i = a[piece_of_interval]
    span = (1.0 - a_i) / k[piece_of_interval]
    lo = a_i + index * span
    s = (lo + 0.5 * span)[:, None] + 0.5 * span[:, None] * g[None, :]
    piece = np.repeat(keep[piece_of_interval], NODES)
    s = s.ravel()
    weight = (0.5 * span[:, None] * w[None, :]).ravel() * np.abs(_dpoly(branches.mass[piece], s))
    with np.errstate(divide="ignore"):
        return piece, s, np.log(weight)


def _log_mass_integral(branches: StableBranches, dist) -> np.ndarray:
    """ln of the integral of the mass density over the stable branch above the floor, per sequence."""
    keep = np.flatnonzero(branches.floor_s < 1.0)
    c = branches.mass[keep]
    ma, mb = _poly(c, branches.floor_s[keep]), _poly(c, 1.0)
    return _group_logsumexp(_log_between(dist, np.minimum(ma, mb), np.maximum(ma, mb)), branches.owner[keep],
                            branches.n)


def _along_branch(branches: StableBranches, logpdf_of_star, resolve: dict | None = None) -> np.ndarray:
    """ln of the integral of a density of (M, R) along the stable branch above the floor, per sequence."""
    piece, s, log_w = _nodes(branches, resolve)
    m, r = _poly(branches.mass[piece], s), _poly(branches.radius[piece], s)
    return _group_logsumexp(logpdf_of_star(m, r) + log_w, branches.owner[piece], branches.n)


def values_at_masses(branches: StableBranches, masses: np.ndarray, which="radius", *,
                     owners: np.ndarray | None = None):
    """Every stable star at given masses: (owner, query index, value) triples.

    Parameters
    ----------
    masses : ndarray, shape (q,) or (n, q)
        Query masses (Msun), the same for every sequence or one row each.
    which : {"radius", "log_lambda"} or a tuple of them
        The value(s) wanted (a tuple gives a tuple of value arrays, from one root-finding).

    Returns
    -------
    owner, query, value : ndarray
        One entry per (sequence, query mass, stable star of that mass);
        a mass with twin stars has several entries, a mass off the branch none.
    """
    masses = np.asarray(masses, dtype=float)
    c_m = branches.mass
    m0, m1 = _poly(c_m, 0.0), _poly(c_m, 1.0)
    lo, hi = np.minimum(m0, m1), np.maximum(m0, m1)
    # half-open [lo, hi) so that a mass at the joint of two pieces counts once; the segment's top is closed
    last = np.ones(branches.owner.size, bool)
    last[:-1] = branches.owner[1:] != branches.owner[:-1]
    if masses.ndim == 2:
        rows = masses[branches.owner]
        hit = (rows >= lo[:, None]) & ((rows < hi[:, None]) | ((rows == hi[:, None]) & last[:, None]))
        piece, query = np.nonzero(hit)
        target = rows[piece, query]
    else:  # sorted queries: each piece's range of query indices by binary search, no pieces x queries array
        order = np.argsort(masses, kind="stable")
        sorted_m = masses[order]
        first = np.searchsorted(sorted_m, lo, side="left")
        stop = np.where(last, np.searchsorted(sorted_m, hi, side="right"), np.searchsorted(sorted_m, hi, side="left"))
        count = np.maximum(stop - first, 0)
        piece = np.repeat(np.arange(lo.size), count)
        offset = np.arange(piece.size) - np.repeat(np.cumsum(count) - count, count)
        query = order[first[piece] + offset]
        target = masses[query]
    s = _solve_cubic(c_m[piece], target, np.zeros(piece.size), np.ones(piece.size))
    coeffs = {"radius": branches.radius, "log_lambda": branches.log_lambda}
    if isinstance(which, tuple):
        return branches.owner[piece], query, tuple(_poly(coeffs[w][piece], s) for w in which)
    return branches.owner[piece], query, _poly(coeffs[which][piece], s)


def _q_where(mc: float, mass: np.ndarray, heavier: bool, q_min: float) -> np.ndarray:
    """q in [q_min, 1] where the heavier (m1) or lighter (m2) component has the given mass.

    m1 = Mc (1+q)^(1/5) / q^(3/5) falls and m2 = q m1 rises with q.  In t = ln q,
    ln m1 = ln Mc + ln(1 + e^t)/5 - 3t/5 has a slope between -3/5 and -1/2 (ln m2: between
    2/5 and 3/5), nearly straight, so Newton's method from t = 0 reaches rounding in a few
    steps; the result is clipped to [q_min, 1] (a mass beyond the range gives an end).
    """
    mass = np.asarray(mass, dtype=float)
    usable = np.isfinite(mass) & (mass > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        goal = np.log(np.where(usable, mass, 1.0) / mc)
    t = np.zeros(mass.shape)
    for _ in range(8):
        sigma = 1.0 / (1.0 + np.exp(-t))  # e^t / (1 + e^t)
        base = 0.2 * np.logaddexp(0.0, t)
        f, df = (base - 0.6 * t, 0.2 * sigma - 0.6) if heavier else (base + 0.4 * t, 0.2 * sigma + 0.4)
        t = np.clip(t - (f - goal) / df, -50.0, 0.0)  # q <= 1
    q = np.clip(np.exp(t), q_min, 1.0)
    # a mass of 0 or infinity lies beyond every q: the end where the component passes it
    light_end = 1.0 if heavier else q_min
    beyond = np.where(mass == np.inf, q_min if heavier else 1.0, np.where(mass <= 0, light_end, q_min))
    return np.where(usable, q, beyond)


def _binary(branches: StableBranches, meas: BinaryMeasurement, dist) -> np.ndarray:
    """ln L of a binary measurement (see the module docstring), nodes per sequence.

    The integrand vanishes where a component leaves the stable branch; the
    nodes of each sequence cover only the q where both components lie
    within its branch's mass range, so the quadrature never straddles that
    step (the normalisation stays 1 / (1 - q_min)).
    """
    n = branches.n
    c_m = branches.mass
    m0, m1_ = _poly(c_m, 0.0), _poly(c_m, 1.0)
    lowest = np.full(n, np.inf)
    highest = np.full(n, -np.inf)
    np.minimum.at(lowest, branches.owner, np.minimum(m0, m1_))
    np.maximum.at(highest, branches.owner, np.maximum(m0, m1_))
    mc, q_min = meas.chirp_mass, meas.q_min
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        q_lo = np.maximum(_q_where(mc, np.where(np.isfinite(highest), highest, 0.0), True, q_min),
                          _q_where(mc, np.where(np.isfinite(lowest), lowest, np.inf), False, q_min))
    q_lo = np.where(np.isfinite(lowest), q_lo, 1.0)
    g, w = _gauss_legendre(Q_NODES)
    t = np.linspace(0.0, 1.0, Q_PANELS + 1)
    a, b = t[:-1], t[1:]
    unit = ((0.5 * (a + b))[:, None] + 0.5 * (b - a)[:, None] * g[None, :]).ravel()  # nodes on [0, 1]
    unit_w = (0.5 * (b - a)[:, None] * w[None, :]).ravel()
    if q_min == 1.0:  # equal masses only: the density at q = 1
        q = np.ones((n, 1))
        wq = np.ones((n, 1))
    else:
        span = (1.0 - q_lo)[:, None]
        q = q_lo[:, None] + span * unit[None, :]
        wq = span * unit_w[None, :] / (1.0 - q_min)
    nq = q.shape[1]
    m1 = mc * (1.0 + q) ** 0.2 / q**0.6
    m2 = q * m1
    owner, query, loglam = values_at_masses(branches, np.concatenate([m1, m2], axis=1), "log_lambda")
    # up to K stars per (sequence, component mass): twin branches give two
    K = 3
    slots = np.full((n, 2 * nq, K), np.nan)
    flat = owner * (2 * nq) + query
    order = np.argsort(flat, kind="stable")
    flat_sorted = flat[order]
    first = np.searchsorted(flat_sorted, flat_sorted, side="left")
    rank = np.arange(flat_sorted.size) - first
    ok = rank < K
    slots.reshape(-1, K)[flat_sorted[ok], rank[ok]] = loglam[order][ok]
    lam1 = np.exp(slots[:, :nq, :, None])  # (n, q, K, 1)
    lam2 = np.exp(slots[:, nq:, None, :])  # (n, q, 1, K)
    a1, a2 = m1[:, :, None, None], m2[:, :, None, None]
    lt = 16.0 / 13.0 * ((a1 + 12 * a2) * a1**4 * lam1 + (a2 + 12 * a1) * a2**4 * lam2) / (a1 + a2) ** 5
    valid = np.isfinite(lt)
    if meas.form == "samples":
        logd = dist.logpdf(np.broadcast_to(q[:, :, None, None], lt.shape), np.where(valid, lt, 0.0))
    else:
        logd = dist.logpdf(np.where(valid, lt, 0.0))
    logd = np.where(valid, logd, -np.inf)
    count = valid.sum(axis=(2, 3))
    with np.errstate(divide="ignore", invalid="ignore"):
        per_q = logsumexp(logd.reshape(n, nq, -1), axis=2) - np.log(np.maximum(count, 1))
        per_q = np.where(count > 0, per_q, -np.inf)
        out = logsumexp(per_q + np.log(wq), axis=1)
    out = np.where(q_lo < 1.0, out, -np.inf) if q_min < 1.0 else out
    # the lighter star at q_min below the sweep's lightest star, which is stable: the branch goes on
    # below the sweep, so part of the q range is missing from the sweep, not from the EOS
    m2_min = q_min * mc * (1.0 + q_min) ** 0.2 / q_min**0.6
    start = branches.sweep_start_stable if branches.sweep_start_stable is not None else np.zeros(n, bool)
    return out, start & (m2_min < lowest)


def log_likelihoods(branches: StableBranches, constraints: Constraints, *, densities: list | None = None
                    ) -> tuple[np.ndarray, np.ndarray]:
    """ln L of every sequence for every measurement that carries a likelihood.

    Parameters
    ----------
    branches : StableBranches
    constraints : Constraints
    densities : list, optional
        ``[density_of(m) for m in constraints.scored()]``, to reuse the
        tabulated kernel density estimates across calls.

    Returns
    -------
    log_likelihood : ndarray, shape (n, measurements)
        NaN for a sequence with a non-zero status other than 2; -inf where
        L = 0 (status 2: maximum mass below the floor).
    status : ndarray of int8, shape (n,)
        :data:`LIKELIHOOD_STATUS` of each sequence: ``branches.status``, or 5
        where a binary measurement needs a Lambda the sweep does not have.
    """
    scored = constraints.scored()
    if densities is None:
        densities = [density_of(m) for m in scored]
    out = np.empty((branches.n, len(scored)))
    status = branches.status.copy()
    with np.errstate(divide="ignore"):
        log_length = np.log(branches.prior_length)
    km_per_msun = units.SOLAR_MASS_KM
    with np.errstate(invalid="ignore"):  # -inf - -inf for sequences without a branch: NaN, set below
        _fill(out, status, branches, scored, densities, log_length, km_per_msun)
    out[status == 2] = -np.inf
    out[(status != 0) & (status != 2)] = np.nan
    return out, status


def _fill(out, status, branches, scored, densities, log_length, km_per_msun) -> None:
    for k, (meas, dist) in enumerate(zip(scored, densities, strict=True)):
        if isinstance(meas, MassMeasurement):
            v = _log_mass_integral(branches, dist) - log_length
        elif isinstance(meas, EllipseMeasurement | MassRadiusSamples):
            v = _along_branch(branches, dist.logpdf, dist.resolve) - log_length
        elif isinstance(meas, RedshiftMeasurement):
            def z_of(m, r, dist=dist):
                with np.errstate(invalid="ignore", divide="ignore"):
                    z = 1.0 / np.sqrt(1.0 - 2.0 * m * km_per_msun / r) - 1.0
                return np.where(np.isfinite(z), dist.logpdf(np.where(np.isfinite(z), z, 0.0)), -np.inf)
            v = _along_branch(branches, z_of, {"z": dist.resolve["x"]}) - log_length
        else:
            v, below_sweep = _binary(branches, meas, dist)
            status[(status == 0) & ~branches.has_lambda] = 5
            status[(status == 0) & below_sweep] = 6
        out[:, k] = v
