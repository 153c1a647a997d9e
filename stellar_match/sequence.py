"""Analysis of a one-parameter sequence of stars: maximum mass and stability.

Along a sequence of equilibria parametrised by the central density, the
stability of one radial mode changes at every extremum of M(rho_c) (the
turning-point criterion; Harrison, Thorne, Wakano & Wheeler 1965,
"Gravitation Theory and Gravitational Collapse"; Friedman, Ipser & Sorkin
1988, ApJ 325, 722).  Which way it changes follows the rule of Bardeen,
Thorne & Meltzer (1966, ApJ 145, 505): where the M(R) curve bends
counter-clockwise (R on the horizontal axis) one more mode becomes unstable,
where it bends clockwise one mode regains stability.  At an extremum the
bend is the sign of R' M'' (' = d/d ln rho_c).

The lowest-density star of the sweep is taken as stable when dM/d rho_c > 0
there and as having one unstable mode otherwise; a star is flagged stable
when no mode is unstable.  For the usual neutron-star sweep this is exactly
"dM/d rho_c > 0 up to the maximum"; it also flags correctly a sweep that
starts on the white-dwarf branch (stable, unstable past its maximum, stable
again past the minimum mass) or contains a third-family (twin-star) branch.
The reported maximum mass is the largest maximum that ends a stable branch.

The sequence is parametrised here by the central log-enthalpy h_c, which
increases with the central density and pressure for every valid EOS, so the
sign of dM/dh_c is the sign of dM/d rho_c.  That also covers the
incompressible EOS, whose sweep axis is the central pressure.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from . import units
from .kernels import branch_values

__all__ = [
    "SequenceAnalysis", "analyse_sequence", "value_on_stable_branch", "EOSSequence",
    "chirp_mass", "lambda_tilde",
]


@dataclass
class SequenceAnalysis:
    """Result of :func:`analyse_sequence` (geometric units).

    Attributes
    ----------
    stable : ndarray of bool
        Turning-point stability of each input star, in input order.
    mass_slope : ndarray
        dM/d ln h_c of each star, from finite differences along the sequence
        (of extra solves when the sweep has fewer than five stars).
    unstable_modes : ndarray of int
        Number of unstable radial modes of each star (0 = stable; -1 for a
        star without a result, NaN mass or radius, which is never stable).
    max_enthalpy : float
        Central log-enthalpy of the maximum-mass star, NaN if none.
    max_mass, max_mass_radius : float
        M and R (km) of the maximum-mass star, NaN if none.
    status : str
        "found", or why there is no maximum inside the sweep.
    max_bracket : tuple of float
        (lowest, highest) ln h_c between which the maximum lies: the samples
        either side of the one nearest it; NaN if there is none.
    """

    stable: np.ndarray
    mass_slope: np.ndarray
    unstable_modes: np.ndarray
    max_enthalpy: float
    max_mass: float
    max_mass_radius: float
    status: str
    max_bracket: tuple[float, float] = (float("nan"), float("nan"))

    def __repr__(self) -> str:
        return (f"SequenceAnalysis({self.stable.size} stars, {int(np.count_nonzero(self.stable))} stable; "
                f"max_mass={self.max_mass:.6g} km, max_mass_radius={self.max_mass_radius:.6g} km; "
                f"status={self.status!r})")


SolveFn = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]
MaximiseFn = Callable[[float, float, float], float]
#: Location accuracy in x = ln h_c of a maximum found by fresh solves: M - M_max ~ M'' dx^2 / 2 keeps
#: the mass within about 1e-8 relative (M'' = O(1) Msun per unit x^2 on Read et al. 2009 sequences).
MAXIMUM_X_TOLERANCE = 1e-4
#: Sweeps with fewer stars get their slopes from two extra solves per star.
FEW_STARS = 5


def _gradient(y: np.ndarray, x: np.ndarray) -> np.ndarray:
    """dy/dx at the samples: numpy's ``gradient`` for uneven spacing (second order inside, first at the ends).

    The three-point formula of Fornberg (1988, Math. Comp. 51, 699) for uneven steps; written out
    because ``np.gradient`` costs more in argument handling than the arithmetic of a short sweep.
    """
    out = np.empty_like(y)
    d1, d2 = np.diff(x[:-1]), np.diff(x[1:])
    out[1:-1] = (-d2 / (d1 * (d1 + d2)) * y[:-2] + (d2 - d1) / (d1 * d2) * y[1:-1]
                 + d1 / (d2 * (d1 + d2)) * y[2:])
    out[0] = (y[1] - y[0]) / (x[1] - x[0])
    out[-1] = (y[-1] - y[-2]) / (x[-1] - x[-2])
    return out


def _slopes(x: np.ndarray, mass: np.ndarray, radius: np.ndarray, solve: SolveFn, x_limit: float):
    """dM/dx and dR/dx at the samples.

    Finite differences of the samples, not a spline: near the minimum mass
    the sequence changes by orders of magnitude between samples and a spline
    overshoots into spurious sign changes.  Short sweeps use +-1e-4 solves.
    """
    if x.size >= FEW_STARS:
        return _gradient(mass, x), _gradient(radius, x)
    if solve is None:
        # Ensembles (no solve function) with fewer distinct good stars than FEW_STARS: stars that were
        # NaN, or central densities inside the gap of a density jump, which all sit at its h.  Finite
        # differences of what is left; a single star has no slope and is not called stable.
        if x.size >= 2:
            return _gradient(mass, x), _gradient(radius, x)
        return np.full(x.size, np.nan), np.full(x.size, np.nan)
    dx = 1e-4
    lo, hi = x - dx, np.minimum(x + dx, x_limit)  # one-sided at the top of a table
    m, r = solve(np.exp(np.concatenate([lo, hi])))
    n = x.size
    return (m[n:] - m[:n]) / (hi - lo), (r[n:] - r[:n]) / (hi - lo)


def analyse_sequence(
    central_enthalpy, mass, radius, solve: SolveFn, *, rtol: float = 1e-6, h_limit: float = np.inf,
    maximise: MaximiseFn | None = None,
) -> SequenceAnalysis:
    """Locate the maximum of M(h_c) and flag turning-point stability.

    Parameters
    ----------
    central_enthalpy : array_like, shape (n,)
        Central log-enthalpies of the sequence, any order.
    mass, radius : array_like, shape (n,)
        Gravitational masses and radii (any consistent units).
    solve : callable or None
        ``solve(h_c) -> (mass, radius)`` for new central enthalpies; used to
        locate the maximum by fresh solves rather than by interpolation
        (scipy's bounded Brent minimiser on -M, unless ``maximise`` is
        given) and to give M and R there.  With None the maximum is the
        vertex of a parabola through the three samples around it, and
        ``max_mass`` is NaN (for callers that locate many maxima together;
        :attr:`SequenceAnalysis.max_bracket` holds the bracket).
    rtol : float
        Relative accuracy goal for the maximum mass.
    h_limit : float
        Largest central log-enthalpy ``solve`` accepts (the top of a table).
    maximise : callable, optional
        ``maximise(x_lo, x_hi, x_guess) -> x`` locating the maximum of M in
        x = ln h_c inside the bracket (NaN where there is none), e.g. the
        compiled :func:`stellar_match.structure.mass_maxima`.

    Returns
    -------
    SequenceAnalysis
    """
    h = np.asarray(central_enthalpy, dtype=float)
    mass, radius = np.asarray(mass, dtype=float), np.asarray(radius, dtype=float)
    # Stars the solver could not compute to tolerance are NaN: they take no part
    # in the analysis and are never stable.
    good = np.isfinite(mass) & np.isfinite(radius) & (mass > 0)
    nan = float("nan")
    if not good.any():
        return SequenceAnalysis(np.zeros(h.size, bool), np.full(h.size, nan), np.full(h.size, -1), nan, nan, nan,
                                "no star of the sweep computed to tolerance")
    if not good.all():
        sub = analyse_sequence(h[good], mass[good], radius[good], solve, rtol=rtol, h_limit=h_limit)
        stable = np.zeros(h.size, dtype=bool)
        slope = np.full(h.size, np.nan)
        modes = np.full(h.size, -1)
        stable[good], slope[good], modes[good] = sub.stable, sub.mass_slope, sub.unstable_modes
        return SequenceAnalysis(stable, slope, modes, sub.max_enthalpy, sub.max_mass, sub.max_mass_radius,
                                sub.status, sub.max_bracket)
    x_limit = float(np.log(h_limit))
    order = np.argsort(h)
    hs = h[order]
    keep = np.concatenate([[True], np.diff(hs) > 0])
    x = np.log(hs[keep])
    mu = np.asarray(mass, dtype=float)[order][keep]
    ru = np.asarray(radius, dtype=float)[order][keep]

    slope, r_slope = _slopes(x, mu, ru, solve, x_limit)
    rising = slope > 0
    # extrema lie between consecutive samples whose slopes differ in sign
    turns = np.flatnonzero(rising[:-1] != rising[1:])
    modes = np.empty(x.size, dtype=int)
    n = 0 if rising[0] else 1
    start = 0
    ends_of_stable = []  # sample index at each maximum that ends a stable branch
    for i in turns:
        modes[start : i + 1] = n
        peak = bool(rising[i])  # + then -: a maximum
        j = i if peak == (mu[i] >= mu[i + 1]) else i + 1  # the sample nearer the extremum
        r_prime = r_slope[j]
        bend = np.sign(r_prime) * (-1.0 if peak else 1.0)  # sign(R' M'')
        if peak and n == 0 and bend > 0:
            ends_of_stable.append(j)
        n = max(n + (1 if bend > 0 else -1), 0)
        start = i + 1
    modes[start:] = n
    stable_u = (modes == 0) & rising

    x_max = nan
    status = "found"
    bracket = (nan, nan)
    if ends_of_stable:
        j = max(ends_of_stable, key=lambda k: mu[k])
        lo, hi = max(j - 1, 0), min(j + 1, x.size - 1)
        guess = x[j]
        if hi - lo == 2:  # the vertex of the parabola through the three samples (Lagrange form)
            ta, tb = x[lo] - x[j], x[hi] - x[j]
            sa, sb = (mu[lo] - mu[j]) / ta, (mu[hi] - mu[j]) / tb
            c2 = (sb - sa) / (tb - ta)
            c1 = sa - c2 * ta
            if c2 < 0:
                guess = x[j] + float(np.clip(-c1 / (2 * c2), ta, tb))
        # the slopes change sign between samples i and i + 1, both inside [x[j - 1], x[j + 1]]
        bracket = (float(x[lo]), float(min(x[hi], x_limit)))
        if solve is None:  # the caller locates it (ensembles locate all members' maxima at once)
            x_max, status = guess, "found (vertex of the samples, not refined)"
        else:
            if maximise is None:
                from scipy.optimize import minimize_scalar

                best = minimize_scalar(lambda t: -float(solve(np.array([np.exp(t)]))[0][0]), bounds=bracket,
                                       method="bounded", options={"xatol": MAXIMUM_X_TOLERANCE})
                x_max = float(best.x) if best.success and np.isfinite(best.fun) else nan
            else:
                x_max = float(maximise(*bracket, guess))
            if not np.isfinite(x_max):
                x_max, status = float(x[j]), "found (largest sample; the search found no maximum)"
    elif np.all(rising):
        status = "not reached: mass still increasing at the highest central density"
    elif not np.any(rising):
        status = "not in range: mass decreasing over the whole sweep"
    else:
        status = "not in range: no stable branch ends inside the sweep"

    def back(values_sorted_unique):  # to input order (duplicates share their first copy)
        full = values_sorted_unique[np.searchsorted(x, np.log(hs))]
        out = np.empty_like(full)
        out[order] = full
        return out

    if np.isfinite(x_max):
        if solve is None:
            max_mass = max_radius = nan
        else:
            m_max, r_max = solve(np.array([np.exp(x_max)]))
            max_mass, max_radius = float(m_max[0]), float(r_max[0])
            # the maximum is never lighter than the stable sample it ends (a refinement that
            # wandered off, or a fresh solve that missed tolerance): take that sample instead
            if not (max_mass >= mu[j] * (1.0 - rtol)):
                x_max, max_mass, max_radius = float(x[j]), float(mu[j]), float(ru[j])
                status = "found (largest sample; the refined maximum was not consistent with it)"
        # samples past the refined maximum on the same branch are unstable
        past = (x > x_max) & (modes == 0) & (x <= x[min(j + 1, x.size - 1)])
        stable_u = stable_u & ~past
    else:
        max_mass = max_radius = nan
    return SequenceAnalysis(
        stable=back(stable_u),
        mass_slope=back(slope),
        unstable_modes=back(modes),
        max_enthalpy=float(np.exp(x_max)) if np.isfinite(x_max) else nan,
        max_mass=max_mass,
        max_mass_radius=max_radius,
        status=status,
        max_bracket=bracket,
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

    def __repr__(self) -> str:
        # a sequence holds ~20 arrays of up to 10^7 stars: name what it is, not every value
        n = int(np.size(self.columns.get("mass", ())))
        stable = int(np.count_nonzero(self.stable)) if "stable" in self.columns else 0
        m_max = self.summary.get("max_mass")
        m_max = (f"{m_max:.4f} Msun" if isinstance(m_max, int | float) and np.isfinite(m_max)
                 else f"none ({self.summary.get('max_mass_status', 'not analysed')})")
        groups = f", groups={sorted(self.groups)}" if self.groups else ""
        return (f"EOSSequence({self.name!r}, kind={self.kind!r}, {n} stars ({stable} stable), "
                f"max_mass={m_max}{groups})")

    @property
    def stable(self) -> np.ndarray:
        return np.asarray(self.columns["stable"], dtype=bool)

    def to_table(self, group: str | None = None):
        """The stars (or a subgroup) as an ``astropy.table.QTable`` with units.

        Parameters
        ----------
        group : {None, "targets", "binaries"}
            None: one row per star of the sweep, the run-file columns with
            their units (``mass`` in solMass, ``radius`` in km, ...); the
            summary (``max_mass`` ... as Quantities) and the EOS parameters are
            in ``meta``.  "targets": one row per requested mass, with the
            per-target ``status``.  "binaries": one row per pair.

        Returns
        -------
        astropy.table.QTable

        Raises
        ------
        KeyError
            For a subgroup this sequence does not have.
        """
        import astropy.units as au

        from .schema import BINARY_DATASETS, STAR_DATASETS, SUMMARY_ATTRIBUTES, TARGET_DATASETS

        meta = {"name": self.name, "kind": self.kind, "parameters": self.parameters}
        if group is None:
            summary = {k: (v * au.Unit(SUMMARY_ATTRIBUTES[k]) if SUMMARY_ATTRIBUTES.get(k)
                           and isinstance(v, float | int) and not isinstance(v, bool) else v)
                       for k, v in self.summary.items()}
            unit_of = {k: unit for k, (unit, _) in STAR_DATASETS.items()}
            text_of = {k: text for k, (_, text) in STAR_DATASETS.items()}
            return units.quantity_table(self.columns, unit_of, descriptions=text_of,
                                        meta=meta | {"summary": summary})
        if group not in (self.groups or {}):
            raise KeyError(f"EOS {self.name!r} has no {group!r} subgroup (it has: {', '.join(self.groups or {})})")
        data = dict(self.groups[group])
        attrs = data.pop("attrs", {})
        unit_of = {"targets": TARGET_DATASETS, "binaries": BINARY_DATASETS}.get(group, {})
        columns = dict(data)
        status = attrs.get("status")
        if status is not None and np.ndim(status) == 1 and len(status) == len(next(iter(columns.values()))):
            columns["status"] = np.array([s.decode() if isinstance(s, bytes) else str(s) for s in status])
        return units.quantity_table(columns, unit_of, meta=meta | {"group": group})


def value_on_stable_branch(mass, values, stable, target: float, *, cubic: bool = False) -> float:
    """``values`` at gravitational mass ``target`` by interpolation along the stable stars.

    Linear between the two stable stars bracketing ``target``, or the
    not-a-knot cubic spline in M through all of them (``cubic``; linear
    below four stars; :mod:`stellar_match.kernels.branch_values`).
    NaN when the stable branch (its stars with finite values) does not
    reach ``target``.  For exact values
    at a mass, solve at that mass instead (see the targets of a sweep).
    """
    # stars without a value (NaN: not computed to tolerance, or Lambda of a star without one) take no part
    out = np.empty(1)
    branch_values.values_at_mass(np.asarray(mass, dtype=float)[None, :], np.asarray(values, dtype=float)[None, :],
                                 np.asarray(stable, dtype=bool)[None, :], float(target), bool(cubic), out)
    return float(out[0])


def interpolate_on_stable_branch(seq: EOSSequence, mass: float, column: str) -> float:
    """Value of ``column`` of a sequence at ``mass`` (Msun or a mass Quantity), linear along the stable branch."""
    mass = float(units.to_unit(mass, units.MASS_UNIT, name="mass"))
    return value_on_stable_branch(seq["mass"], seq[column], seq.stable, mass)


def chirp_mass(m1, m2):
    """Chirp mass (m1 m2)^(3/5) / (m1 + m2)^(1/5), same unit as plain inputs (Quantities: in Msun)."""
    m1 = np.asarray(units.to_unit(m1, units.MASS_UNIT, name="m1"), dtype=float)
    m2 = np.asarray(units.to_unit(m2, units.MASS_UNIT, name="m2"), dtype=float)
    return (m1 * m2) ** 0.6 / (m1 + m2) ** 0.2


def lambda_tilde(m1, m2, lambda1, lambda2):
    """Binary tidal deformability of a pair (Flanagan & Hinderer 2008; Favata 2014, eq. 5).

    Lambda_tilde = (16/13) [(m1 + 12 m2) m1^4 L1 + (m2 + 12 m1) m2^4 L2] / (m1 + m2)^5;
    equal to Lambda for two identical stars.  The masses may be in any one
    unit, or Quantities.
    """
    m1 = np.asarray(units.to_unit(m1, units.MASS_UNIT, name="m1"), dtype=float)
    m2 = np.asarray(units.to_unit(m2, units.MASS_UNIT, name="m2"), dtype=float)
    l1, l2 = np.asarray(lambda1, dtype=float), np.asarray(lambda2, dtype=float)
    return 16.0 / 13.0 * ((m1 + 12 * m2) * m1**4 * l1 + (m2 + 12 * m1) * m2**4 * l2) / (m1 + m2) ** 5
