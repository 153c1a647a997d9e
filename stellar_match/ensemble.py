"""Ensembles: families of parametrised EOS of one kind, solved member by member.

An ``[[ensemble]]`` block names a kind and gives its members either as a CSV
file (one row per member, one column per parameter) or as a seeded uniform
sampler.  The sampler uses numpy's PCG64 generator, whose stream is fixed by
the seed on every platform, so the same seed gives the same members
anywhere.  A member that cannot be built or solved gets a status code; it
never stops the run.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import units
from .csv_columns import read_header
from .eos import EquationOfState, central_enthalpy, registry
from .errors import ConfigError, InputError
from .exterior import star_columns
from .kernels import branch_values
from .schema import MEMBER_STATUS, MEMBER_SUMMARIES, NOT_SOLVED, STAR_DATASETS, group_name_problem
from .sequence import analyse_sequence
from .structure import StepControl, mass_maxima, solve_interiors

__all__ = ["EnsembleSpec", "ENSEMBLE_KINDS", "MEMBER_STATUS", "MEMBER_SUMMARIES", "solve_members"]

#: The EOS kinds an ensemble can have (those whose keys map to member columns), from the one
#: registry of kinds (:mod:`stellar_match.eos.registry`).
ENSEMBLE_KINDS: dict[str, registry.EOSKind] = {k: v for k, v in registry.KINDS.items() if v.columns is not None}


@dataclass(frozen=True)
class EnsembleSpec:
    """One validated ``[[ensemble]]`` block.

    Attributes
    ----------
    index : int
        Position among the config's ensembles.
    name, kind : str
        Label and EOS kind (a key of :data:`ENSEMBLE_KINDS`).
    parameters : ndarray, shape (members, n_parameters)
        Member parameters, one column per entry of ``columns``.
    origin : dict
        How the members were given (file and its sha256, or sampler ranges and
        seed) and the block's ``fixed`` keys, as written in the config.
    columns : tuple of str
        The member columns (:func:`stellar_match.eos.registry.member_columns`);
        default: the kind's required columns given ``fixed``.
    fixed : dict
        The kind's keys given once in the block, for every member (parsed).
    prior_weight : ndarray, shape (members,), or None
        Prior weight of each member, from a ``weight`` column of the members
        CSV (None: every member weighs the same, as for sampled members).
    """

    index: int
    name: str
    kind: str
    parameters: np.ndarray = field(repr=False)
    origin: dict
    columns: tuple[str, ...] = ()
    fixed: dict = field(default_factory=dict, repr=False)
    prior_weight: np.ndarray | None = field(default=None, repr=False)

    def __repr__(self) -> str:
        o = self.origin
        where = f"members from {o['members']}" if "members" in o else (
            f"sampled, seed {o['seed']}" if "seed" in o else "members given")
        return f"EnsembleSpec({self.name!r}, kind={self.kind!r}, {self.size} members, {where})"

    def __post_init__(self) -> None:
        if not self.columns:  # built in code without columns: the kind's required ones, nothing fixed
            object.__setattr__(self, "columns", registry.member_columns(self.kind, self.fixed, set()))

    @property
    def size(self) -> int:
        return int(self.parameters.shape[0])

    @property
    def parameter_names(self) -> tuple[str, ...]:
        return self.columns

    @property
    def extra_datasets(self) -> tuple[str, ...]:
        """Per-star datasets of ``schema.OPTIONAL_STAR_DATASETS`` its kind writes (e.g. core_radius)."""
        extra = ENSEMBLE_KINDS[self.kind].extra_datasets
        base = self.fixed.get("base")
        if isinstance(base, tuple) and base and base[0] in registry.KINDS:  # a phase transition's base: its crust
            extra = extra + tuple(k for k in registry.get_kind(base[0]).extra_datasets if k not in extra)
        return extra

    def member_options(self, i: int) -> dict:
        """The options of member ``i``, as an ``[[eos]]`` block of the kind would give them."""
        return registry.member_options(self.kind, self.fixed, self.columns, self.parameters[i])

    def member_eos(self, i: int) -> EquationOfState:
        """Build member ``i`` (raises InputError for invalid parameters)."""
        return registry.build_eos(self.kind, f"{self.name}[{i}]", self.member_options(i))


def parse_ensemble(index: int, block: dict, source: str, base_dir: Path | None) -> EnsembleSpec:
    """Validate one ``[[ensemble]]`` table (errors name the file and dotted key)."""
    key = f"ensemble[{index}]"

    def fail(sub: str, msg: str) -> ConfigError:
        return ConfigError(msg, source=source, key=f"{key}.{sub}" if sub else key)

    if not isinstance(block, dict):
        raise fail("", "needs a table")
    own = {"name", "kind", "members", "sample"}
    kind = block.get("kind")
    kind_keys = ENSEMBLE_KINDS[kind].keys if isinstance(kind, str) and kind in ENSEMBLE_KINDS else ()
    allowed = own | set(kind_keys)
    for k in block:
        if k not in allowed:
            raise fail(k, f"unknown key (expected one of: {', '.join(sorted(allowed))})")
    name = block.get("name")
    problem = group_name_problem(name)  # the name becomes the run file's /ensemble/<name> group
    if problem:
        raise fail("name", problem)
    if kind not in ENSEMBLE_KINDS:
        raise fail("kind", f"unknown ensemble kind {kind!r} (use one of: {', '.join(ENSEMBLE_KINDS)})")
    # keys given once in the block hold for every member; the others are member columns
    column_keys = frozenset(c.key for c in ENSEMBLE_KINDS[kind].columns)
    _, fixed = registry.parse_options({k: v for k, v in block.items() if k not in own - {"kind"}}, source, key,
                                      base_dir, open_keys=column_keys)
    fixed_raw = {k: block[k] for k in kind_keys if k in block}
    if ("members" in block) == ("sample" in block):
        raise fail("", "needs exactly one of members (a CSV file) or [ensemble.sample]")

    def nothing_varies() -> ConfigError:
        return fail("", f"every key of kind {kind!r} is given in the block or left at its default: nothing "
                    f"varies between members")
    if "members" in block:
        path = block["members"]
        if not isinstance(path, str) or not path:
            raise fail("members", "needs a CSV file path")
        p = Path(path)
        if not p.is_absolute() and base_dir is not None:
            p = base_dir / p
        names = registry.member_columns(kind, fixed, set(read_header(p)) - {WEIGHT_COLUMN})
        if not names:
            raise nothing_varies()
        params, sha, prior_weight = _read_members(p, names, source, f"{key}.members")
        origin = {"members": str(p), "members_sha256": sha}
    else:
        spec = block["sample"]
        if not isinstance(spec, dict):
            raise fail("sample", "needs a table with count, seed and a [low, high] range per parameter")
        names = registry.member_columns(kind, fixed, set(spec) - {"count", "seed"})
        if not names:
            raise nothing_varies()
        for k in spec:
            if k not in {"count", "seed", *names}:
                raise fail(f"sample.{k}", f"unknown key (expected count, seed, {', '.join(names)})")
        count, seed = spec.get("count"), spec.get("seed")
        if isinstance(count, bool) or not isinstance(count, int) or not 1 <= count <= 10**6:
            raise fail("sample.count", f"needs a whole number from 1 to 1000000, got {count!r}")
        if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
            raise fail("sample.seed", f"needs a whole number >= 0, got {seed!r}")
        ranges = []
        for n in names:
            r = spec.get(n)
            if (not isinstance(r, list) or len(r) != 2
                    or any(isinstance(v, bool) or not isinstance(v, int | float) for v in r)
                    or not all(math.isfinite(v) for v in _floats(r)) or not r[0] < r[1]):
                raise fail(f"sample.{n}", f"needs a range [low, high] of finite numbers with low < high, "
                           f"got {r!r}")
            ranges.append(tuple(_floats(r)))
        lo = np.array([r[0] for r in ranges])
        hi = np.array([r[1] for r in ranges])
        rng = np.random.Generator(np.random.PCG64(seed))
        params = lo + (hi - lo) * rng.random((count, len(names)))
        prior_weight = None
        origin = {"sampler": "uniform", "generator": "numpy PCG64", "seed": seed,
                  "ranges": {n: list(r) for n, r in zip(names, ranges, strict=True)}}
    if fixed_raw:
        origin["fixed"] = fixed_raw
    return EnsembleSpec(index=index, name=name, kind=kind, parameters=params.reshape(len(params), len(names)),
                        origin=origin, columns=names, fixed=fixed, prior_weight=prior_weight)


def _floats(values: list) -> list[float]:
    """``values`` as floats; a TOML integer too large for a float becomes inf (and is refused)."""
    out = []
    for v in values:
        try:
            out.append(float(v))
        except OverflowError:
            out.append(math.inf)
    return out


#: Optional column of a members CSV: each member's prior weight (>= 0, not all 0).
WEIGHT_COLUMN = "weight"


def _read_members(path: Path, names: tuple[str, ...], source: str, key: str
                  ) -> tuple[np.ndarray, str, np.ndarray | None]:
    """(parameters (members, names), sha256 of the file, prior weights or None)."""
    from .csv_columns import read_columns

    def fail(message: str, line: int | None = None) -> ConfigError:
        where = f" (line {line})" if line is not None else ""
        return ConfigError(f"members file {path}{where}: {message}", source=source, key=key)

    table, sha, present = read_columns(path, list(names), optional=(WEIGHT_COLUMN,), what="members file",
                                       item="parameter", source=source, key=key)
    if not len(table):
        raise fail("no member rows")
    if len(table) > 10**6:
        raise fail(f"{len(table)} members; at most 1000000 per ensemble")
    weight = None
    if present:
        weight = table[:, -1]
        bad = np.flatnonzero(~np.isfinite(weight) | (weight < 0))
        if bad.size:
            raise fail(f"column {WEIGHT_COLUMN} needs finite numbers >= 0, got {weight[bad[0]]:g} "
                       f"(member {bad[0]}, 0-based)")
        if not weight.sum() > 0:
            raise fail(f"column {WEIGHT_COLUMN} is 0 for every member")
        table = table[:, :-1]
    return table, sha, weight


def solve_members(spec: EnsembleSpec, start: int, stop: int, quantity: str, values,
                  control: StepControl, *, response: bool = True, refine: bool = True) -> dict[str, np.ndarray]:
    """Solve members ``start:stop`` over the sweep: 2-D per-star arrays and 1-D summaries.

    All valid members of the chunk are solved as one batch through an
    :class:`~stellar_match.eos.EOSStack` (results equal member-by-member
    solves to the last bit), and their maxima are refined together.
    ``response=False`` skips the tidal and rotational response (k2, Lambda
    and I are NaN), about twice as fast.  ``refine=False`` takes each
    maximum from the parabola through the three samples around it instead of
    fresh solves (for samplers: the refinement passes cost more than the sweep).

    Returns
    -------
    dict of str -> ndarray
        The per-star run-file columns, shape (stop - start, stars), and the
        :data:`MEMBER_SUMMARIES`, shape (stop - start,).  Failed members have
        NaN rows and a non-zero ``status``.
    """
    from .eos import EOSStack

    values = np.asarray(values, dtype=float)
    n, n_stars = stop - start, values.size
    star_names = [k for k in STAR_DATASETS if k != "stable"] + list(spec.extra_datasets)
    out: dict[str, np.ndarray] = {k: np.full((n, n_stars), np.nan) for k in star_names}
    out["stable"] = np.zeros((n, n_stars), dtype=bool)
    out["star_status"] = np.full((n, n_stars), NOT_SOLVED, dtype=np.int8)
    for k in MEMBER_SUMMARIES:
        out[k] = np.full(n, np.nan)
    out["causal"] = np.zeros(n, dtype=bool)
    out["status"] = np.zeros(n, dtype=np.int8)

    members, rows, h_rows = [], [], []
    for row, i in enumerate(range(start, stop)):
        try:
            eos = spec.member_eos(i)
        except (InputError, ValueError, FloatingPointError, OverflowError):
            out["status"][row] = 1
            continue
        try:
            h_rows.append(central_enthalpy(eos, quantity, values))
        except InputError:
            out["status"][row] = 5
            continue
        members.append(eos)
        rows.append(row)
    if not members:
        return out
    stack = EOSStack(members)
    member = np.repeat(np.arange(len(members)), n_stars)
    with np.errstate(all="ignore"):
        cols = star_columns(solve_interiors(stack.bind(member), np.concatenate(h_rows),
                                            control=control, response=response))
    guesses, brackets, analyses = [], [], []
    for k, row in enumerate(rows):
        sl = slice(k * n_stars, (k + 1) * n_stars)
        for name, v in cols.items():
            if name in out:  # a crust the kind does not declare (a table base): not stored
                out[name][row] = v[sl]
        if not np.any(cols["star_status"][sl] == 0):
            out["status"][row] = 6
            analyses.append(None)
            continue
        a = analyse_sequence(h_rows[k], units.mass_to_geometric(cols["mass"][sl]), cols["radius"][sl], None)
        analyses.append(a)
        out["stable"][row] = a.stable
        if np.isfinite(a.max_enthalpy):
            guesses.append((k, np.log(a.max_enthalpy)))
            brackets.append(a.max_bracket)

    if refine:
        x_max = _located_maxima(stack, guesses, brackets, control)
    else:
        x_max = _vertex_maxima(guesses, h_rows, {k: cols[k] for k in ("mass", "radius")}, n_stars)
    for k, row in enumerate(rows):
        a = analyses[k]
        if a is None:
            continue
        eos = members[k]
        found = k in x_max
        h_top = float(np.exp(x_max[k][0])) if found else float(np.max(h_rows[k]))
        out["causal"][row] = bool(eos.max_sound_speed_squared(h_top) <= 1.0)
        m = out["mass"][row]
        if found:
            m_max, r_max = units.mass_from_geometric(x_max[k][1]), x_max[k][2]
            # never lighter than a stable star of the member's own (a refinement that wandered
            # off, or a fresh solve that missed tolerance): the heaviest stable sample instead
            heaviest = int(np.argmax(np.where(a.stable, m, -np.inf)))
            if not m_max >= m[heaviest] * (1.0 - 1e-6):
                m_max, r_max, h_top = m[heaviest], out["radius"][row][heaviest], float(h_rows[k][heaviest])
            out["max_mass"][row], out["max_mass_radius"][row] = m_max, r_max
            _, _, rho = eos.state(np.array([h_top]))
            out["max_mass_central_density"][row] = units.density_from_geometric(rho[0])
        if not a.stable.any():
            out["status"][row] = 3
        elif not out["causal"][row]:
            out["status"][row] = 2
        elif not found:
            out["status"][row] = 4
        elif np.any(out["star_status"][row] != 0):
            out["status"][row] = 6
    # values at 1.4 Msun along every member's stable branch, all rows at once;
    # Lambda spans orders of magnitude along a branch: interpolate its logarithm
    with np.errstate(divide="ignore", invalid="ignore"):
        log_lam = np.log(out["tidal_deformability"])
    branch_values.values_at_mass(out["mass"], out["radius"], out["stable"], 1.4, True, out["radius_at_1.4"])
    branch_values.values_at_mass(out["mass"], log_lam, out["stable"], 1.4, True, out["tidal_deformability_at_1.4"])
    out["tidal_deformability_at_1.4"] = np.exp(out["tidal_deformability_at_1.4"])
    return out


def _parabola_at_zero(t: np.ndarray, f: np.ndarray) -> float:
    """The parabola through three points (t_i, f_i) at t = 0 (Lagrange's interpolation formula)."""
    t0, t1, t2 = t
    return float(f[0] * t1 * t2 / ((t0 - t1) * (t0 - t2)) + f[1] * t0 * t2 / ((t1 - t0) * (t1 - t2))
                 + f[2] * t0 * t1 / ((t2 - t0) * (t2 - t1)))


def _vertex_maxima(guesses, h_rows, cols, n_stars) -> dict[int, tuple[float, float, float]]:
    """Each member's maximum from a parabola in ln h_c through its three samples nearest the vertex."""
    out = {}
    for k, x_guess in guesses:
        x = np.log(h_rows[k])
        sl = slice(k * n_stars, (k + 1) * n_stars)
        m, r = units.mass_to_geometric(cols["mass"][sl]), cols["radius"][sl]
        ok = np.flatnonzero(np.isfinite(m) & np.isfinite(r))
        if ok.size < 3:
            continue
        near = ok[np.argsort(np.abs(x[ok] - x_guess), kind="stable")[:3]]
        t = x[near] - x_guess
        out[k] = (float(x_guess), _parabola_at_zero(t, m[near]), _parabola_at_zero(t, r[near]))
    return out


def _located_maxima(stack, guesses, brackets, control) -> dict[int, tuple[float, float, float]]:
    """Every member's maximum, located by compiled solves: {member: (ln h_max, M_max km, R km)}.

    :func:`stellar_match.structure.mass_maxima` in each member's bracket, then
    one structure-only solve of all the maxima for M and R with their status.
    Where no maximum is located, the vertex of the samples stands in.
    """
    if not guesses:
        return {}
    ks = np.array([k for k, _ in guesses])
    start = np.array([g for _, g in guesses])
    lo, hi = np.array(brackets, dtype=float).T
    x, found, _ = mass_maxima(stack.bind(ks), lo, hi, start, control)
    x = np.where(found, x, start)
    final = solve_interiors(stack.bind(ks), np.exp(x), control=control, response=False)
    return {int(k): (float(xk), float(m), float(r))
            for k, xk, m, r in zip(ks, x, final.mass, final.radius, strict=True)}
