"""Scoring run files against measurements: per-EOS likelihoods, Bayes factors, ensemble weights and bands.

:func:`score_runs` reads run files (never changing them), computes the
likelihoods of :mod:`stellar_match.likelihood` for every ``/eos/<name>``
candidate and every ensemble member, and returns :class:`Scores`;
:func:`write_scores` stores them in a results file (HDF5, layout in
README.md), :meth:`Scores.table` gives one row per candidate and ensemble.

Candidates: ln L per measurement, the total, and the Bayes factor against
the best candidate with equal prior odds, B = exp(ln L - max ln L).

Ensembles: member weights w_i = pi_i L_i / sum_j pi_j L_j (pi: uniform, or
the members CSV's ``weight`` column), the Kish (1965, "Survey Sampling")
effective sample size (sum w)^2 / sum w^2, the log evidence ln sum_i pi_i L_i
(pi normalised; comparable with a candidate's ln L), weighted quantiles of
the member summaries, and credible bands of R(M) and Lambda(M) on a mass
grid.  Members with a non-zero status (or a likelihood status other than 0
and 2) get weight 0 and are counted.

Weighted quantiles interpolate linearly between the plotting positions
p_i = C_i - w_i / 2 (C_i the cumulative normalised weight of the sorted
values), the weighted form of Hazen's (1914) positions: with equal weights
they equal ``numpy.quantile(..., method="hazen")``.  The bands use the same
rule on weighted histograms (the centres of bins of :data:`BAND_RADIUS_BIN`
km and :data:`BAND_LOG_LAMBDA_BIN` in ln Lambda, so within a bin of the
quantiles of the values), so that 10^6 members take a fixed amount of
memory; a star of a twin-star mass shares its member's weight with the
member's other stars of that mass.
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .constraints import Constraints
from .errors import InputError
from .likelihood import LIKELIHOOD_STATUS, density_of, log_likelihoods, stable_branches, values_at_masses
from .schema import MEMBER_STATUS, PRIOR_WEIGHT

__all__ = [
    "CandidateScore",
    "EnsembleScore",
    "Scores",
    "score_runs",
    "score_ensemble",
    "write_scores",
    "read_scores",
    "weighted_quantile",
    "bayes_factors",
    "effective_sample_size",
    "QUANTILE_LEVELS",
    "BAND_LEVELS",
    "RESULTS_FORMAT",
]

RESULTS_FORMAT = "stellar_match.likelihood"
RESULTS_FORMAT_VERSION = 1
#: Levels of the weighted quantiles of the member summaries.
QUANTILE_LEVELS = (0.05, 0.5, 0.95)
#: Levels of the credible bands: 5-95 %, 16-84 % and the median.
BAND_LEVELS = (0.05, 0.16, 0.5, 0.84, 0.95)
#: Histogram bins of the bands: 2 m in R, 0.1 % in Lambda.
BAND_RADIUS_BIN = 0.002
BAND_LOG_LAMBDA_BIN = 1e-3
_RADIUS_RANGE = (2.0, 60.0)
_LOG_LAMBDA_RANGE = (-3.0, 16.0)
#: Default band grid: from the mass floor to the heaviest scored member, in steps of this (Msun).
BAND_MASS_STEP = 0.02
#: Members read and scored at once.
MEMBER_CHUNK = 2000
#: Member summaries with weighted quantiles.
SUMMARY_QUANTITIES = ("max_mass", "radius_at_1.4", "tidal_deformability_at_1.4")


def weighted_quantile(values, weights, levels) -> np.ndarray:
    """Weighted quantiles with the weighted Hazen plotting positions (see the module docstring).

    Non-finite values and zero weights take no part; NaN when nothing is left.
    """
    v = np.asarray(values, dtype=float).ravel()
    w = np.broadcast_to(np.asarray(weights, dtype=float), np.shape(values)).ravel()
    keep = np.isfinite(v) & (w > 0)
    v, w = v[keep], w[keep]
    levels = np.asarray(levels, dtype=float)
    if v.size == 0:
        return np.full(levels.shape, np.nan)
    order = np.argsort(v, kind="stable")
    v, w = v[order], w[order] / w.sum()
    position = np.cumsum(w) - 0.5 * w
    return np.interp(levels, position, v)


def bayes_factors(log_likelihoods) -> tuple[np.ndarray, np.ndarray]:
    """Bayes factors against the best model, equal prior odds: (B, ln B).

    ln B = ln L - max ln L over the finite ln L; a model with L = 0 (ln L =
    -inf) has B = 0; a NaN ln L (not computable) has NaN and takes no part.
    """
    ll = np.asarray(log_likelihoods, dtype=float)
    finite = ll[np.isfinite(ll)]
    best = finite.max() if finite.size else np.nan
    with np.errstate(invalid="ignore"):
        log_b = np.where(ll == -np.inf, -np.inf, ll - best)
    return np.exp(log_b), log_b


def effective_sample_size(weights) -> float:
    """Kish's effective sample size (sum w)^2 / sum w^2 (0 when every weight is 0)."""
    w = np.asarray(weights, dtype=float)
    s2 = float(np.sum(w * w))
    return float(np.sum(w)) ** 2 / s2 if s2 > 0 else 0.0


def _histogram_quantiles(hist: np.ndarray, lo: float, width: float, levels) -> np.ndarray:
    """Quantiles (levels x rows) of weighted histograms (rows x bins): :func:`weighted_quantile` of the
    occupied bins' centres, so that they differ from the quantiles of the values by less than a bin."""
    out = np.full((len(levels), hist.shape[0]), np.nan)
    for row in range(hist.shape[0]):
        occupied = np.flatnonzero(hist[row] > 0)
        if occupied.size:
            out[:, row] = weighted_quantile(lo + (occupied + 0.5) * width, hist[row, occupied], levels)
    return out


@dataclass
class CandidateScore:
    """One ``/eos/<name>`` candidate scored against the measurements.

    Attributes
    ----------
    name, run_file : str
    log_likelihood_by_measurement : ndarray, shape (measurements,)
    log_likelihood : float
        Total ln L (sum over measurements; -inf when L = 0, NaN when not computable, see ``status``).
    status : int
        :data:`~stellar_match.likelihood.LIKELIHOOD_STATUS` code.
    bayes_factor, log_bayes_factor : float
        Against the best candidate of the scoring (equal prior odds).
    max_mass : float
    """

    name: str
    run_file: str
    log_likelihood_by_measurement: np.ndarray
    log_likelihood: float
    status: int
    max_mass: float
    bayes_factor: float = math.nan
    log_bayes_factor: float = math.nan

    def __repr__(self) -> str:
        return (f"CandidateScore({self.name!r}, ln L = {self.log_likelihood:.4g}, "
                f"B = {self.bayes_factor:.3g}, status {self.status})")


@dataclass
class EnsembleScore:
    """One ensemble scored against the measurements: member likelihoods, weights, quantiles and bands.

    Attributes
    ----------
    name, run_file : str
    log_likelihood : ndarray, shape (members,)
    log_likelihood_by_measurement : ndarray, shape (members, measurements)
    likelihood_status : ndarray of int8, shape (members,)
    member_status : ndarray of int8, shape (members,)
    prior_weight, weight : ndarray, shape (members,)
        Normalised prior and posterior weights (sum 1; 0 for excluded members).
    effective_sample_size, prior_effective_sample_size : float
    log_evidence : float
        ln sum_i pi_i L_i.
    quantiles, prior_quantiles : dict of str -> ndarray
        :data:`QUANTILE_LEVELS` quantiles of each :data:`SUMMARY_QUANTITIES` entry.
    band_mass : ndarray, shape (masses,)
    band_radius, band_radius_prior, band_tidal_deformability, band_tidal_deformability_prior : ndarray
        Shape (levels, masses), levels :data:`BAND_LEVELS`; NaN where no weighted member reaches the mass.
    band_support, band_support_prior : ndarray, shape (masses,)
        Weight of the members whose stable branch reaches each mass.
    counts : dict
        Members scored, excluded (by member and likelihood status), with L = 0.
    """

    name: str
    run_file: str
    log_likelihood: np.ndarray
    log_likelihood_by_measurement: np.ndarray
    likelihood_status: np.ndarray
    member_status: np.ndarray
    prior_weight: np.ndarray
    weight: np.ndarray
    effective_sample_size: float
    prior_effective_sample_size: float
    log_evidence: float
    quantiles: dict
    prior_quantiles: dict
    band_mass: np.ndarray
    band_radius: np.ndarray
    band_radius_prior: np.ndarray
    band_tidal_deformability: np.ndarray
    band_tidal_deformability_prior: np.ndarray
    band_support: np.ndarray
    band_support_prior: np.ndarray
    counts: dict = field(default_factory=dict)

    @property
    def size(self) -> int:
        return int(self.log_likelihood.size)

    def __repr__(self) -> str:
        r = self.quantiles.get("radius_at_1.4", [np.nan] * 3)
        return (f"EnsembleScore({self.name!r}, {self.size} members, ESS {self.effective_sample_size:.1f}, "
                f"R(1.4) {r[1]:.2f} [{r[0]:.2f}, {r[2]:.2f}] km)")


@dataclass
class Scores:
    """Everything :func:`score_runs` computed.

    Attributes
    ----------
    constraints : Constraints
    labels : list of str
        The likelihood-bearing measurements, in file order.
    candidates : dict of str -> CandidateScore
    ensembles : dict of str -> EnsembleScore
    run_files : list of (path, sha256)
    """

    constraints: Constraints
    labels: list[str]
    candidates: dict[str, CandidateScore]
    ensembles: dict[str, EnsembleScore]
    run_files: list[tuple[str, str]]

    def __repr__(self) -> str:
        return (f"Scores({len(self.labels)} measurements, candidates={list(self.candidates)}, "
                f"ensembles={list(self.ensembles)})")

    def table(self):
        """One row per candidate and per ensemble, as an astropy Table with units and descriptions."""
        from astropy.table import Table

        rows = list(self.candidates.values())
        ens = list(self.ensembles.values())
        t = Table()
        t["name"] = [c.name for c in rows] + [e.name for e in ens]
        t["type"] = ["eos"] * len(rows) + ["ensemble"] * len(ens)
        t["run_file"] = [c.run_file for c in rows] + [e.run_file for e in ens]
        t["log_likelihood"] = [c.log_likelihood for c in rows] + [e.log_evidence for e in ens]
        t["log_likelihood"].description = "total ln L (an ensemble: ln of its prior-weighted mean likelihood)"
        t["bayes_factor"] = [c.bayes_factor for c in rows] + [math.nan] * len(ens)
        t["bayes_factor"].description = "against the best candidate EOS, equal prior odds (NaN for ensembles)"
        t["log_bayes_factor"] = [c.log_bayes_factor for c in rows] + [math.nan] * len(ens)
        for k, label in enumerate(self.labels):
            t[f"log_likelihood:{label}"] = ([c.log_likelihood_by_measurement[k] for c in rows]
                                            + [_log_mean(e, k) for e in ens])
        t["max_mass"] = [c.max_mass for c in rows] + [e.quantiles["max_mass"][1] for e in ens]
        t["max_mass"].unit = "solMass"
        t["max_mass"].description = "maximum mass (an ensemble: weighted median)"
        t["effective_sample_size"] = [math.nan] * len(rows) + [e.effective_sample_size for e in ens]
        t["status"] = [c.status for c in rows] + [0] * len(ens)
        t["status"].description = "likelihood status (0 ok; meanings in the table's meta)"
        t.meta["likelihood_status"] = {str(k): v for k, v in LIKELIHOOD_STATUS.items()}
        t.meta["measurements"] = list(self.labels)
        t.meta["constraints"] = self.constraints.source
        t.meta["mass_floor_solMass"] = self.constraints.mass_floor
        return t


def _log_mean(e: EnsembleScore, k: int) -> float:
    """ln of the prior-weighted mean likelihood of one measurement over an ensemble."""
    v = e.log_likelihood_by_measurement[:, k]
    ok = e.prior_weight > 0
    return _log_weighted_sum(v[ok], e.prior_weight[ok])


def _log_weighted_sum(log_values: np.ndarray, weights: np.ndarray) -> float:
    keep = weights > 0
    lv = log_values[keep]
    if lv.size == 0 or not np.any(np.isfinite(lv)):
        return -math.inf
    top = float(np.max(lv[np.isfinite(lv)]))
    return top + math.log(float(np.sum(weights[keep] * np.exp(lv - top))))


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _candidate_branches(seq, mass_floor):
    from .likelihood import branches_of_sequence

    return branches_of_sequence(seq, mass_floor=mass_floor)


def score_runs(runs: Sequence, constraints: Constraints, *, band_masses=None, eos: list[str] | None = None,
               ensembles: list[str] | None = None, progress: Callable[[int], None] | None = None,
               member_chunk: int = MEMBER_CHUNK) -> Scores:
    """Score the candidates and ensembles of run files against a constraints object.

    Parameters
    ----------
    runs : sequence of str, Path or RunFile
        Run files; they are only read.
    constraints : Constraints
        From :func:`~stellar_match.constraints.load_constraints`; at least
        one measurement must carry a likelihood.
    band_masses : array_like, optional
        Masses (Msun) of the credible bands (default: mass floor to the
        heaviest scored member in steps of :data:`BAND_MASS_STEP`).
    eos, ensembles : list of str, optional
        Names to score (default: all).
    progress : callable, optional
        Called with the number of members just scored.
    member_chunk : int
        Members read and scored at once (memory, not results: the results do not depend on it).

    Returns
    -------
    Scores

    Raises
    ------
    InputError
        No likelihood-bearing measurement, a name in no run file, or a run
        file that cannot be read (RunFileError).
    """
    from .exports import select_sequences
    from .runfile import RunFile, read_run

    if not constraints.scored():
        raise InputError("has no measurement with a likelihood (every entry is drawn only)",
                         source=constraints.source)
    runs = [r if isinstance(r, RunFile) else read_run(r) for r in runs]
    densities = [density_of(m) for m in constraints.scored()]
    candidates: dict[str, CandidateScore] = {}
    files = {str(r.path): r for r in runs}
    seq_file = {id(s): str(r.path) for r in runs for s in r.eos.values()}
    pairs = select_sequences(runs, eos) if (eos is None or eos) and any(r.eos for r in runs) else []
    for label, seq in pairs:
        br = _candidate_branches(seq, constraints.mass_floor)
        ll, status = log_likelihoods(br, constraints, densities=densities)
        total = float(np.sum(ll[0])) if ll.shape[1] else math.nan
        candidates[label] = CandidateScore(label, seq_file[id(seq)], ll[0], total, int(status[0]),
                                           float(br.max_mass[0]))
    factors, log_factors = bayes_factors([c.log_likelihood for c in candidates.values()])
    for c, b, lb in zip(candidates.values(), factors, log_factors, strict=True):
        c.bayes_factor, c.log_bayes_factor = float(b), float(lb)

    scored_ens: dict[str, EnsembleScore] = {}
    available = [(r, n) for r in runs for n in r.ensembles]
    known = {n for _, n in available}
    for n in ensembles or []:
        if n not in known:
            raise InputError(f"unknown ensemble {n!r}; the run file(s) hold: {', '.join(sorted(known)) or 'none'}",
                             key="--ensemble")
    counts: dict[str, int] = {}
    for _, n in available:
        counts[n] = counts.get(n, 0) + 1
    for run, n in available:
        if ensembles and n not in ensembles:
            continue
        label = n if counts[n] == 1 else f"{n} ({Path(run.path).stem})"
        scored_ens[label] = score_ensemble(run, n, constraints, band_masses=band_masses, densities=densities,
                                           progress=progress, member_chunk=member_chunk, label=label)
    return Scores(constraints=constraints, labels=constraints.labels, candidates=candidates,
                  ensembles=scored_ens, run_files=[(p, _sha256(Path(p))) for p in files])


_ENSEMBLE_COLUMNS = ("central_pressure", "mass", "radius", "tidal_deformability", "stable")


def _member_branches(g, a: int, b: int, summaries: dict, usable: np.ndarray, mass_floor: float):
    cols = {k: g[k][a:b] for k in _ENSEMBLE_COLUMNS}
    if "star_status" in g:
        cols["mass"] = np.where(g["star_status"][a:b] == 0, cols["mass"], np.nan)
    return stable_branches(cols["central_pressure"], cols["mass"], cols["radius"], cols["stable"],
                           tidal_deformability=cols["tidal_deformability"],
                           max_mass=summaries["max_mass"][a:b], max_mass_radius=summaries["max_mass_radius"][a:b],
                           usable=usable[a:b], mass_floor=mass_floor)


def score_ensemble(run, name: str, constraints: Constraints, *, band_masses=None, densities=None,
                   progress: Callable[[int], None] | None = None, member_chunk: int = MEMBER_CHUNK,
                   label: str | None = None) -> EnsembleScore:
    """Score one ensemble of a run file (see :func:`score_runs`)."""
    from .runfile import RunFile, _open_run, read_run

    run = run if isinstance(run, RunFile) else read_run(run)
    summary = run.ensembles[name]
    n = summary.size
    densities = densities or [density_of(m) for m in constraints.scored()]
    member_status = np.asarray(summary["status"], dtype=np.int8)
    prior = np.asarray(summary.summaries.get(PRIOR_WEIGHT, np.ones(n)), dtype=float)
    usable = member_status == 0
    k = len(constraints.scored())
    ll_by = np.full((n, k), np.nan)
    lstatus = np.ones(n, dtype=np.int8)
    with _open_run(Path(run.path)) as f:
        g = f["ensemble"][name]
        for a in range(0, n, member_chunk):
            b = min(n, a + member_chunk)
            br = _member_branches(g, a, b, summary.summaries, usable, constraints.mass_floor)
            ll_by[a:b], lstatus[a:b] = log_likelihoods(br, constraints, densities=densities)
            if progress is not None:
                progress(b - a)
    lstatus[~usable] = 1
    with np.errstate(invalid="ignore"):
        ll = np.sum(ll_by, axis=1) if k else np.full(n, np.nan)
    counted = usable & ((lstatus == 0) | (lstatus == 2))
    prior_w = np.where(counted, prior, 0.0)
    prior_sum = prior_w.sum()
    prior_w = prior_w / prior_sum if prior_sum > 0 else prior_w
    log_evidence = _log_weighted_sum(np.where(counted, ll, -np.inf), prior_w)
    if np.isfinite(log_evidence):
        with np.errstate(over="ignore", invalid="ignore"):
            weight = np.where(counted & (prior_w > 0), prior_w * np.exp(np.where(counted, ll, -np.inf)
                                                                        - log_evidence), 0.0)
        weight = weight / weight.sum()
    else:
        weight = np.zeros(n)
    quantiles = {q: weighted_quantile(summary[q], weight, QUANTILE_LEVELS) for q in SUMMARY_QUANTITIES}
    prior_quantiles = {q: weighted_quantile(summary[q], prior_w, QUANTILE_LEVELS) for q in SUMMARY_QUANTITIES}

    top = float(np.nanmax(np.where(prior_w > 0, summary["max_mass"], np.nan))) if np.any(prior_w > 0) else math.nan
    if band_masses is None:
        if math.isfinite(top) and top > constraints.mass_floor:
            band_masses = np.arange(constraints.mass_floor, top + 1e-9, BAND_MASS_STEP)
        else:
            band_masses = np.array([constraints.mass_floor])
    band_masses = np.asarray(band_masses, dtype=float)
    bands = _bands(run, name, summary, usable, {"posterior": weight, "prior": prior_w}, band_masses,
                   constraints.mass_floor, member_chunk)
    excluded = {str(s): int(np.sum(member_status == s)) for s in np.unique(member_status) if s != 0}
    lexcluded = {str(s): int(np.sum(usable & (lstatus == s))) for s in np.unique(lstatus[usable]) if s not in (0, 2)}
    counts = {"members": n, "scored": int(counted.sum()), "zero_likelihood": int(np.sum(counted & (ll == -np.inf))),
              "excluded_by_member_status": excluded, "excluded_by_likelihood_status": lexcluded}
    return EnsembleScore(
        name=label or name, run_file=str(run.path), log_likelihood=ll, log_likelihood_by_measurement=ll_by,
        likelihood_status=lstatus, member_status=member_status, prior_weight=prior_w, weight=weight,
        effective_sample_size=effective_sample_size(weight), prior_effective_sample_size=effective_sample_size(prior_w),
        log_evidence=log_evidence, quantiles=quantiles, prior_quantiles=prior_quantiles, band_mass=band_masses,
        band_radius=bands["posterior"]["radius"], band_radius_prior=bands["prior"]["radius"],
        band_tidal_deformability=bands["posterior"]["lambda"],
        band_tidal_deformability_prior=bands["prior"]["lambda"],
        band_support=bands["posterior"]["support"], band_support_prior=bands["prior"]["support"], counts=counts)


def ensemble_bands(run, name: str, weights=None, *, band_masses, mass_floor: float = 1.0,
                   member_chunk: int = MEMBER_CHUNK) -> dict[str, np.ndarray]:
    """Credible bands of R(M) and Lambda(M) of an ensemble under given member weights.

    Parameters
    ----------
    run : str, Path or RunFile
    name : str
        Ensemble name.
    weights : array_like, shape (members,), optional
        Member weights (default: the prior: uniform or the members CSV's
        weights, over the members with status 0).
    band_masses : array_like
        Masses (Msun).

    Returns
    -------
    dict
        ``radius`` and ``lambda`` (levels x masses, levels :data:`BAND_LEVELS`) and ``support`` (masses).
    """
    from .runfile import RunFile, read_run

    run = run if isinstance(run, RunFile) else read_run(run)
    summary = run.ensembles[name]
    usable = np.asarray(summary["status"]) == 0
    if weights is None:
        weights = np.where(usable, np.asarray(summary.summaries.get(PRIOR_WEIGHT, np.ones(summary.size)), float), 0.0)
    w = np.asarray(weights, dtype=float)
    return _bands(run, name, summary, usable, {"w": w / w.sum() if w.sum() > 0 else w},
                  np.asarray(band_masses, dtype=float), mass_floor, member_chunk)["w"]


def _bands(run, name, summary, usable, weightings: dict, masses: np.ndarray, mass_floor: float,
           member_chunk: int) -> dict:
    from .runfile import _open_run

    n = summary.size
    nr = int(round((_RADIUS_RANGE[1] - _RADIUS_RANGE[0]) / BAND_RADIUS_BIN))
    nl = int(round((_LOG_LAMBDA_RANGE[1] - _LOG_LAMBDA_RANGE[0]) / BAND_LOG_LAMBDA_BIN))
    hists = {key: [np.zeros((masses.size, nr)), np.zeros((masses.size, nl)), np.zeros(masses.size)]
             for key in weightings}
    active = np.zeros(n, bool)
    for w in weightings.values():
        active |= w > 0
    with _open_run(Path(run.path)) as f:
        g = f["ensemble"][name]
        for a in range(0, n, member_chunk):
            b = min(n, a + member_chunk)
            if not active[a:b].any():
                continue
            br = _member_branches(g, a, b, summary.summaries, usable & active, mass_floor)
            owner, query, (radius, log_lambda) = values_at_masses(br, masses, ("radius", "log_lambda"))
            # a twin-star mass: its stars share the member's weight
            pair = owner * masses.size + query
            share = 1.0 / np.bincount(pair, minlength=(b - a) * masses.size)[pair]
            for col, value, lo, width in ((0, radius, _RADIUS_RANGE[0], BAND_RADIUS_BIN),
                                          (1, log_lambda, _LOG_LAMBDA_RANGE[0], BAND_LOG_LAMBDA_BIN)):
                ok = np.isfinite(value)
                n_bins = hists[next(iter(hists))][col].shape[1]
                bins = np.clip(((value[ok] - lo) / width).astype(np.int64), 0, n_bins - 1)
                flat = query[ok] * n_bins + bins
                for key, w in weightings.items():
                    ww = w[a:b][owner[ok]] * share[ok]
                    hists[key][col] += np.bincount(flat, weights=ww, minlength=masses.size * n_bins).reshape(
                        masses.size, n_bins)
                    if col == 0:
                        hists[key][2] += np.bincount(query[ok], weights=ww, minlength=masses.size)
    out = {}
    for key, (hr, hl, support) in hists.items():
        radius = _histogram_quantiles(hr, _RADIUS_RANGE[0], BAND_RADIUS_BIN, BAND_LEVELS)
        lam = np.exp(_histogram_quantiles(hl, _LOG_LAMBDA_RANGE[0], BAND_LOG_LAMBDA_BIN, BAND_LEVELS))
        out[key] = {"radius": radius, "lambda": lam, "support": support}
    return out


# --- results file ------------------------------------------------------------------------------------

def write_scores(scores: Scores, path: str | Path, *, force: bool = True) -> Path:
    """Write a results file (HDF5; layout in README.md), atomically: ``<name>.partial`` then a rename.

    Raises
    ------
    InputError
        If the path cannot be written.
    """
    import os

    import h5py

    from . import __version__

    path = Path(path)
    if path.suffix.lower() not in (".h5", ".hdf5"):
        raise InputError("needs a .h5 or .hdf5 file name", source=str(path))
    for p, _ in scores.run_files:
        if Path(p).resolve() == path.resolve():
            raise InputError("is one of the run files being scored; choose another output name", source=str(path))
    partial = path.with_name(path.name + ".partial")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        with h5py.File(partial, "w", track_order=True) as f:
            f.attrs["format"] = RESULTS_FORMAT
            f.attrs["format_version"] = RESULTS_FORMAT_VERSION
            f.attrs["software_version"] = __version__
            f.attrs["constraints_file"] = scores.constraints.source
            f.attrs["constraints_toml"] = scores.constraints.text
            f.attrs["constraints_sha256"] = scores.constraints.sha256
            f.attrs["sample_files"] = json.dumps(scores.constraints.sample_files)
            f.attrs["run_files"] = json.dumps([{"path": p, "sha256": s} for p, s in scores.run_files])
            f.attrs["mass_floor"] = scores.constraints.mass_floor
            f.attrs["labels"] = json.dumps(scores.labels)
            f.attrs["kinds"] = json.dumps([m.kind for m in scores.constraints.scored()])
            f.attrs["likelihood_status_meaning"] = json.dumps({str(k): v for k, v in LIKELIHOOD_STATUS.items()})
            ge = f.create_group("eos", track_order=True)
            for c in scores.candidates.values():
                g = ge.create_group(c.name)
                g.attrs["log_likelihood"] = c.log_likelihood
                g.attrs["bayes_factor"] = c.bayes_factor
                g.attrs["log_bayes_factor"] = c.log_bayes_factor
                g.attrs["status"] = c.status
                g.attrs["max_mass"] = c.max_mass
                g.attrs["run_file"] = c.run_file
                d = g.create_dataset("log_likelihood_by_measurement", data=c.log_likelihood_by_measurement)
                d.attrs["labels"] = json.dumps(scores.labels)
            gn = f.create_group("ensemble", track_order=True)
            for e in scores.ensembles.values():
                _write_ensemble_score(gn.create_group(e.name), e, scores.labels)
        os.replace(partial, path)
    except OSError as exc:
        partial.unlink(missing_ok=True)
        raise InputError(f"cannot write the results file ({exc.strerror or exc})", source=str(path)) from None
    except BaseException:
        partial.unlink(missing_ok=True)
        raise
    return path


def _write_ensemble_score(g, e: EnsembleScore, labels: list[str]) -> None:
    g.attrs["run_file"] = e.run_file
    g.attrs["effective_sample_size"] = e.effective_sample_size
    g.attrs["prior_effective_sample_size"] = e.prior_effective_sample_size
    g.attrs["log_evidence"] = e.log_evidence
    g.attrs["quantile_levels"] = np.array(QUANTILE_LEVELS)
    for q in SUMMARY_QUANTITIES:
        g.attrs[f"{q}_quantiles"] = e.quantiles[q]
        g.attrs[f"{q}_prior_quantiles"] = e.prior_quantiles[q]
    g.attrs["counts"] = json.dumps(e.counts)
    g.attrs["member_status_meaning"] = json.dumps({str(k): v for k, v in MEMBER_STATUS.items()})
    data = {
        "log_likelihood": (e.log_likelihood, "", "total ln L of each member (NaN: not scored, see likelihood_status)"),
        "log_likelihood_by_measurement": (e.log_likelihood_by_measurement, "", "ln L, members x measurements"),
        "likelihood_status": (e.likelihood_status, "", "likelihood status of each member"),
        "weight": (e.weight, "", "posterior weight of each member (sums to 1)"),
        "prior_weight": (e.prior_weight, "", "normalised prior weight of each member"),
        "band_mass": (e.band_mass, "solMass", "masses of the credible bands"),
        "band_radius": (e.band_radius, "km", "posterior quantiles of R(M): levels x masses"),
        "band_radius_prior": (e.band_radius_prior, "km", "prior quantiles of R(M): levels x masses"),
        "band_tidal_deformability": (e.band_tidal_deformability, "", "posterior quantiles of Lambda(M)"),
        "band_tidal_deformability_prior": (e.band_tidal_deformability_prior, "", "prior quantiles of Lambda(M)"),
        "band_support": (e.band_support, "", "posterior weight of members whose stable branch reaches the mass"),
        "band_support_prior": (e.band_support_prior, "", "prior weight of members reaching the mass"),
    }
    for k, (values, unit, description) in data.items():
        d = g.create_dataset(k, data=values, compression="gzip" if np.size(values) > 4096 else None)
        d.attrs["unit"] = unit
        d.attrs["description"] = description
        if k.startswith("band_") and k not in ("band_mass", "band_support", "band_support_prior"):
            d.attrs["levels"] = np.array(BAND_LEVELS)
    g["log_likelihood_by_measurement"].attrs["labels"] = json.dumps(labels)
    g.attrs["levels"] = np.array(BAND_LEVELS)


def read_scores(path: str | Path) -> dict:
    """Read a results file back: {"attrs": ..., "eos": {name: {...}}, "ensemble": {name: {...}}}.

    Raises
    ------
    InputError
        If the file is missing or not a stellar_match results file.
    """
    import h5py

    path = Path(path)
    try:
        f = h5py.File(path, "r")
    except (OSError, FileNotFoundError):
        raise InputError("not found, or not an HDF5 file", source=str(path)) from None
    with f:
        if f.attrs.get("format") != RESULTS_FORMAT:
            raise InputError(f"not a stellar_match likelihood results file (format {f.attrs.get('format')!r})",
                             source=str(path))
        out = {"attrs": {k: _plain(v) for k, v in f.attrs.items()}, "eos": {}, "ensemble": {}}
        for group in ("eos", "ensemble"):
            for name, g in f[group].items():
                item = {k: _plain(v) for k, v in g.attrs.items()}
                item.update({k: d[()] for k, d in g.items()})
                out[group][name] = item
    return out


def _plain(v):
    if isinstance(v, bytes):
        return v.decode()
    if isinstance(v, np.generic):
        return v.item()
    return v
