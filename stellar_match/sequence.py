"""Analysis of a one-parameter sequence of stars: maximum mass and stability.

Along a sequence of equilibria parametrised by the central density, the
fundamental radial mode changes stability at every extremum of M(rho_c)
(the turning-point criterion; Harrison, Thorne, Wakano & Wheeler 1965,
"Gravitation Theory and Gravitational Collapse"; Friedman, Ipser & Sorkin
1988, ApJ 325, 722).  A star is flagged stable when dM/d rho_c > 0 and it lies
at or below the first maximum; stars past the first maximum are flagged
unstable even on a later rising branch (a conservative choice; third-family
"twin" branches are not recognised).

The sequence is parametrised here by the central log-enthalpy h_c, which
increases with the central density and pressure for every valid EOS, so the
sign of dM/dh_c is the sign of dM/d rho_c.  That also covers the
incompressible EOS, whose sweep axis is the central pressure.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

__all__ = ["SequenceAnalysis", "analyse_sequence", "EOSSequence", "chirp_mass", "lambda_tilde"]


@dataclass
class SequenceAnalysis:
    """Result of :func:`analyse_sequence` (geometric units).

    Attributes
    ----------
    stable : ndarray of bool
        Turning-point stability of each input star, in input order.
    mass_slope : ndarray
        dM/d ln h_c of each star, from finite differences along the sequence
        (of two extra solves for a single star).
    max_enthalpy : float
        Central log-enthalpy of the first maximum of M, NaN if none.
    max_mass, max_mass_radius : float
        M and R (km) of the maximum-mass star, NaN if none.
    status : str
        "found", or why there is no maximum inside the sweep.
    """

    stable: np.ndarray
    mass_slope: np.ndarray
    max_enthalpy: float
    max_mass: float
    max_mass_radius: float
    status: str


SolveFn = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]


def _slopes(x: np.ndarray, mass: np.ndarray, solve: SolveFn) -> np.ndarray:
    """dM/dx at the samples: second-order finite differences of the samples.

    Finite differences, not a spline: near the minimum mass the sequence
    changes by orders of magnitude between samples and a spline overshoots
    into spurious sign changes.  Single stars get two extra solves.
    """
    if x.size >= 3:
        return np.gradient(mass, x)
    if x.size == 2:
        return np.full(2, (mass[1] - mass[0]) / (x[1] - x[0]))
    dx = 1e-4
    m, _ = solve(np.exp(np.concatenate([x - dx, x + dx])))
    return (m[x.size:] - m[: x.size]) / (2 * dx)


def _refine_maximum(x_guess: float, width: float, solve: SolveFn, rtol: float) -> float:
    """Vertex of M(x) by repeated local quadratic fits to fresh solves.

    Each pass solves five stars across +-width around the estimate and takes
    the root of the fitted dM/dx; the width shrinks 8-fold per pass.  Near
    the maximum M - M_max ~ (x - x*)^2, so a location error dx costs a
    relative mass error of order dx^2: we stop once the fitted parabola
    says the mass is settled to ``rtol * 1e-3``.
    """
    x = x_guess
    for _ in range(8):
        xs = x + width * np.linspace(-1.0, 1.0, 5)
        m, _ = solve(np.exp(xs))
        c2, c1, c0 = np.polyfit(xs - x, m, 2)
        if c2 >= 0:  # not a maximum on this scale: widen the view instead
            width *= 2.0
            continue
        shift = float(np.clip(-c1 / (2 * c2), -width, width))
        x = x + shift
        settled = abs(c2) * (width / 8.0) ** 2 < rtol * 1e-3 * abs(c0)
        width /= 8.0
        if settled and abs(shift) < width * 8.0:
            break
    return x


def analyse_sequence(
    central_enthalpy, mass, solve: SolveFn, *, rtol: float = 1e-6
) -> SequenceAnalysis:
    """Locate the first maximum of M(h_c) and flag turning-point stability.

    Parameters
    ----------
    central_enthalpy : array_like, shape (n,)
        Central log-enthalpies of the sequence, any order.
    mass : array_like, shape (n,)
        Gravitational masses (any consistent unit).
    solve : callable
        ``solve(h_c) -> (mass, radius)`` for new central enthalpies; used to
        refine the maximum by fresh solves rather than by interpolation.
    rtol : float
        Relative accuracy goal for the maximum mass.

    Returns
    -------
    SequenceAnalysis
    """
    h = np.asarray(central_enthalpy, dtype=float)
    m = np.asarray(mass, dtype=float)
    order = np.argsort(h)
    hs, ms = h[order], m[order]
    keep = np.concatenate([[True], np.diff(hs) > 0])
    x = np.log(hs[keep])
    mu = ms[keep]
    nan = float("nan")
    if x.size == 0:
        return SequenceAnalysis(np.zeros(0, bool), np.zeros(0), nan, nan, nan, "empty sweep")

    slope_u = _slopes(x, mu, solve)
    # first interior sample that is a discrete local maximum
    peaks = np.flatnonzero((mu[1:-1] > mu[:-2]) & (mu[1:-1] >= mu[2:])) + 1
    x_max = nan
    status = "found"
    if peaks.size:
        i = int(peaks[0])
        # vertex of the parabola through the three samples as the first guess
        c2, c1, _ = np.polyfit(x[i - 1 : i + 2] - x[i], mu[i - 1 : i + 2], 2)
        guess = x[i] + float(np.clip(-c1 / (2 * c2), x[i - 1] - x[i], x[i + 1] - x[i]))
        width = max(0.5 * (x[i + 1] - x[i - 1]), 1e-6)
        x_max = _refine_maximum(guess, width, solve, rtol)
    elif np.all(slope_u > 0):
        status = "not reached: mass still increasing at the highest central density"
    elif np.all(slope_u <= 0):
        status = "not in range: mass decreasing over the whole sweep"
    else:
        status = "not in range: no maximum between sweep points"

    # slopes back in input order (duplicates share their first copy's slope)
    slope_sorted = np.interp(np.log(hs), x, slope_u)
    slope = np.empty_like(slope_sorted)
    slope[order] = slope_sorted
    limit = x_max if np.isfinite(x_max) else np.inf
    stable = (slope > 0) & (np.log(h) <= limit)

    if np.isfinite(x_max):
        m_max, r_max = solve(np.array([np.exp(x_max)]))
        max_mass, max_radius = float(m_max[0]), float(r_max[0])
        # a sampled star can beat the refined one only through solver noise
        if max_mass < mu.max() * (1 - 1e-9) and mu.argmax() not in (0, mu.size - 1):
            status = "found (refinement did not improve on the samples)"
    else:
        max_mass = max_radius = nan
    return SequenceAnalysis(
        stable=stable,
        mass_slope=slope,
        max_enthalpy=float(np.exp(x_max)) if np.isfinite(x_max) else nan,
        max_mass=max_mass,
        max_mass_radius=max_radius,
        status=status,
    )


@dataclass
class EOSSequence:
    """One EOS's sweep: per-star columns in physical units plus its summary.

    The same object comes back from :func:`stellar_match.sweep.sweep_eos`
    (in memory) and from :func:`stellar_match.runfile.read_run` (from an
    HDF5 run file), with identical names: ``columns`` keys are the run-file
    dataset names and ``summary`` keys its group attributes.

    Attributes
    ----------
    name, kind : str
        EOS label and kind.
    parameters : dict
        Parameters the EOS was built from.
    columns : dict of str -> ndarray
        Per-star datasets in sweep order (units: see ``runfile.STAR_DATASETS``).
    summary : dict
        ``causal``, ``max_mass`` (Msun), ``max_mass_radius`` (km),
        ``max_mass_central_density`` (g/cm^3), ``max_mass_status``, ...
    table_sha256 : str or None
        SHA-256 of the table file for tabulated EOS.
    """

    name: str
    kind: str
    parameters: dict
    columns: dict
    summary: dict
    table_sha256: str | None = None
    groups: dict = None  # subgroups such as "targets" -> {dataset: array}

    def __getitem__(self, key: str) -> np.ndarray:
        return self.columns[key]

    @property
    def stable(self) -> np.ndarray:
        return np.asarray(self.columns["stable"], dtype=bool)


def interpolate_on_stable_branch(seq: EOSSequence, mass: float, column: str) -> float:
    """Value of ``column`` at gravitational mass ``mass`` (Msun) on the stable branch.

    Linear interpolation between the stable stars bracketing ``mass``; NaN
    when the stable branch does not reach it.  For exact values at a mass,
    solve at that mass instead (see the targets of a sweep).
    """
    st = seq.stable
    m = np.asarray(seq["mass"])[st]
    if m.size < 2 or not (m.min() <= mass <= m.max()):
        return float("nan")
    order = np.argsort(m)
    return float(np.interp(mass, m[order], np.asarray(seq[column])[st][order]))


def chirp_mass(m1, m2):
    """Chirp mass (m1 m2)^(3/5) / (m1 + m2)^(1/5), same unit as the inputs."""
    m1, m2 = np.asarray(m1, dtype=float), np.asarray(m2, dtype=float)
    return (m1 * m2) ** 0.6 / (m1 + m2) ** 0.2


def lambda_tilde(m1, m2, lambda1, lambda2):
    """Binary tidal deformability of a pair (Flanagan & Hinderer 2008; Favata 2014, eq. 5).

    Lambda_tilde = (16/13) [(m1 + 12 m2) m1^4 L1 + (m2 + 12 m1) m2^4 L2] / (m1 + m2)^5;
    equal to Lambda for two identical stars.
    """
    m1, m2 = np.asarray(m1, dtype=float), np.asarray(m2, dtype=float)
    l1, l2 = np.asarray(lambda1, dtype=float), np.asarray(lambda2, dtype=float)
    return 16.0 / 13.0 * ((m1 + 12 * m2) * m1**4 * l1 + (m2 + 12 * m1) * m2**4 * l2) / (m1 + m2) ** 5
