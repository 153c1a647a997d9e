"""Sweep configs: TOML in, validated specifications and EOS objects out.

Every key is checked: unknown keys, wrong types, missing keys and bad values
raise :class:`~stellar_match.errors.ConfigError` naming the file and the
dotted key, e.g. ``runs/demo.toml: eos[2].gammas: needs 3 numbers``.
The reference of all keys is in README.md ("Config reference").
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from . import eos as eos_module
from .eos import registry
from .eos.registry import check_number
from .errors import ConfigError, InputError
from .schema import group_name_problem
from .structure import DEFAULT_STEPS, DEFAULT_TOLERANCE, StepControl

__all__ = ["SweepAxis", "EOSSpec", "SolverOptions", "OutputOptions", "SweepConfig", "load_config", "parse_config"]

#: The EOS kinds of ``[[eos]]`` blocks (their keys, builders and rebuilds: :mod:`stellar_match.eos.registry`).
EOS_KINDS = registry.kind_names()

# Size limits, checked before anything is allocated.  Each is far beyond any
# real sweep yet keeps the memory a run needs within a few GB: a sweep's
# columns are held whole for the stability analysis and by read_run (about
# 130 bytes per star), and a batch of stars solved together takes about
# 5 kB per star (measured: 10^5 SLy stars in one batch peak at 570 MB).
#: Central values of one sweep axis (``count`` or the length of ``values``): ~1.3 GB of columns.
MAX_SWEEP_VALUES = 10**7
#: Stars an ensemble holds, members x central values (10^6 members x 100
#: stars, README's largest ensemble; its file is ~13 GB on disk, written in chunks).
MAX_ENSEMBLE_STARS = 10**8
#: Stars solved together as one batch: ``chunk_size`` stars of an ``[[eos]]``
#: block, or ``member_chunk_size`` members times the central values (~2.5 GB).
MAX_BATCH_STARS = 500_000
#: Entries of ``target_masses`` and of ``binaries`` (target masses are solved as one batch).
MAX_TARGETS = 10_000


@dataclass(frozen=True)
class SweepAxis:
    """The central values to sweep.

    Attributes
    ----------
    quantity : str
        "central_density" (rest-mass density, g/cm^3) or "central_pressure"
        (dyn/cm^2).
    values : ndarray
        The values, in sweep order (log-spaced when given as min/max/count).
    """

    quantity: str
    values: np.ndarray

    def __repr__(self) -> str:
        v = self.values
        span = f"{v.min():.4g} to {v.max():.4g} {self.unit}" if v.size else "empty"
        return f"SweepAxis({self.quantity!r}, {v.size} values, {span})"

    @property
    def unit(self) -> str:
        return "g/cm3" if self.quantity == "central_density" else "dyn/cm2"


@dataclass(frozen=True)
class EOSSpec:
    """One ``[[eos]]`` block, validated but not yet built."""

    index: int
    name: str
    kind: str
    options: dict[str, Any]
    source: str

    def build(self) -> eos_module.EquationOfState:
        """Construct the EOS; errors name the config file and this block's keys."""
        key = f"eos[{self.index}]"
        try:
            return registry.build_eos(self.kind, self.name, self.options)
        except ConfigError:
            raise
        except InputError as exc:
            if exc.source and exc.row is None and not exc.key:
                # the file as a whole is unusable (unreadable, not text, no header):
                # the mistake is the path this block gives
                raise ConfigError(f"{exc.message} (table {exc.source})", source=self.source,
                                  key=f"{key}.path") from None
            if exc.source and not exc.key:  # a table error already names its file and line
                raise
            # A key (e.g. columns.pressure.unit) is a mistake in this config, even
            # when it was found while reading the table: name the config and block.
            sub = f"{key}.{exc.key}" if exc.key else key
            message = f"{exc.message} (table {exc.source})" if exc.source else exc.message
            raise ConfigError(message, source=self.source, key=sub) from None


@dataclass(frozen=True)
class SolverOptions:
    """The optional ``[solver]`` table.

    Attributes
    ----------
    step_scale : float
        Multiplies every step length of the default step control; 0.5 halves
        the steps (about 30x smaller errors, twice the time).
    chunk_size : int
        Stars of an ``[[eos]]`` block solved and saved per chunk.
    member_chunk_size : int
        Ensemble members solved together and saved per chunk.
    tolerance : float
        Largest relative error in M, R and M_b a star may carry with status
        0; a star the solver cannot bring below it within its step budget is
        NaN with a non-zero ``star_status``.
    ensemble_maxima : {"refined", "vertex"}
        How ensemble members' maxima are found: by fresh solves (default), or
        from the parabola through the three samples around the maximum
        (faster for large ensembles; see README).
    """

    step_scale: float = 1.0
    chunk_size: int = 2048
    member_chunk_size: int = 128
    tolerance: float = DEFAULT_TOLERANCE
    ensemble_maxima: str = "refined"

    def control(self) -> StepControl:
        """The solver's step control for these options."""
        return replace(DEFAULT_STEPS.scaled(self.step_scale), tolerance=self.tolerance)


@dataclass(frozen=True)
class OutputOptions:
    """The optional ``[output]`` table: how the run file is stored.

    Attributes
    ----------
    compression : {"none", "gzip"}
        "gzip" compresses the per-star datasets (of ``[[eos]]`` blocks and
        ensembles) with gzip and HDF5's byte-shuffle filter.  Readers need
        nothing for it; the file is smaller (most for ensembles, whose NaN
        rows of failed members compress to almost nothing) and slower to write.
    compression_level : int
        gzip level, 1 (fastest) to 9 (smallest); default 4.
    """

    compression: str = "none"
    compression_level: int = 4

    def writer_options(self) -> dict:
        """Keyword arguments of :class:`~stellar_match.runfile.RunFileWriter`."""
        return {"compression": None if self.compression == "none" else self.compression,
                "compression_level": self.compression_level}


#: Values of ``[output] compression``.
COMPRESSIONS = ("none", "gzip")


def _output(value: Any, source: str) -> OutputOptions:
    table = _table(value, source, "output")
    _no_unknown(table, {"compression", "compression_level"}, source, "output")
    compression = table.get("compression", "none")
    if compression not in COMPRESSIONS:
        raise _fail(source, "output.compression", f"needs one of {', '.join(map(repr, COMPRESSIONS))}, "
                    f"got {compression!r}")
    level = table.get("compression_level", OutputOptions.compression_level)
    if isinstance(level, bool) or not isinstance(level, int) or not 1 <= level <= 9:
        raise _fail(source, "output.compression_level", f"needs a whole number from 1 to 9, got {level!r}")
    if "compression_level" in table and compression == "none":
        raise _fail(source, "output.compression_level", 'applies to compression = "gzip" only')
    return OutputOptions(compression=compression, compression_level=level)


@dataclass
class SweepConfig:
    """A validated sweep config."""

    path: Path | None
    text: str
    axis: SweepAxis
    eos: list[EOSSpec]
    solver: SolverOptions = field(default_factory=SolverOptions)
    target_masses: list[float] = field(default_factory=list)
    binaries: list[tuple[float, float]] = field(default_factory=list)
    ensembles: list = field(default_factory=list)
    output: OutputOptions = field(default_factory=OutputOptions)
    # --- radial oscillation modes ---
    #: modes per star (0: off); constant Gamma_1 or None (the EOS's equilibrium index); junction conditions
    radial_modes: int = 0
    radial_adiabatic_index: float | None = None
    radial_junction: str = "rapid"

    def __repr__(self) -> str:
        # not the config text and the axis values: those are what the file says
        where = f"{str(self.path)!r}, " if self.path is not None else ""
        return (f"SweepConfig({where}{self.axis!r}, eos={[e.name for e in self.eos]}, "
                f"ensembles={[e.name for e in self.ensembles]})")


def load_config(path: str | Path) -> SweepConfig:
    """Read and validate a sweep config file.

    Relative table paths are resolved against the config file's folder.
    """
    path = Path(path)
    return parse_config(read_text_file(path, "config"), source=str(path), base_dir=path.parent)


def read_text_file(path: Path, what: str) -> str:
    """The UTF-8 text of a user's TOML file; a missing or unreadable file is a ConfigError."""
    try:
        return Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{what} file not found", source=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"cannot read {what} file ({exc})", source=str(path)) from None


# --- radial oscillation modes ---
RADIAL_KEYS = ("radial_modes", "radial_adiabatic_index", "radial_junction")
RADIAL_JUNCTIONS = ("rapid", "slow")


def _radial_modes(sweep: dict, source: str) -> dict:
    """The [sweep] keys of radial modes, each bad value one ConfigError naming its key."""
    from .radial_modes import MAX_MODES

    n = sweep.get("radial_modes", 0)
    if isinstance(n, bool) or not isinstance(n, int) or not 0 <= n <= MAX_MODES:
        raise _fail(source, "sweep.radial_modes", f"needs a whole number of modes from 0 (off) to {MAX_MODES}, "
                    f"got {n!r}")
    gamma = sweep.get("radial_adiabatic_index", "equilibrium")
    if gamma == "equilibrium":
        gamma = None
    elif isinstance(gamma, str) or isinstance(gamma, bool):
        raise _fail(source, "sweep.radial_adiabatic_index", f"needs \"equilibrium\" or a number > 0, got {gamma!r}")
    else:
        gamma = _number(gamma, source, "sweep.radial_adiabatic_index", positive=True)
    junction = sweep.get("radial_junction", "rapid")
    if junction not in RADIAL_JUNCTIONS:
        raise _fail(source, "sweep.radial_junction", f"needs \"rapid\" or \"slow\", got {junction!r}")
    return {"radial_modes": n, "radial_adiabatic_index": gamma, "radial_junction": junction}


def _fail(source: str, key: str, message: str) -> ConfigError:
    return ConfigError(message, source=source, key=key)


def _number(value: Any, source: str, key: str, *, positive: bool = False) -> float:
    return check_number(value, source, key, positive=positive)


def _table(value: Any, source: str, key: str) -> dict:
    if not isinstance(value, dict):
        raise _fail(source, key, f"needs a table, got {type(value).__name__}")
    return value


def _no_unknown(table: dict, allowed: set[str], source: str, key: str) -> None:
    for k in table:
        if k not in allowed:
            where = f"{key}.{k}" if key else k
            raise _fail(source, where, f"unknown key (expected one of: {', '.join(sorted(allowed))})")


def _axis(sweep: dict, source: str) -> SweepAxis:
    present = [q for q in ("central_density", "central_pressure") if q in sweep]
    if len(present) != 1:
        raise _fail(source, "sweep", "needs exactly one of central_density or central_pressure")
    q = present[0]
    key = f"sweep.{q}"
    spec = _table(sweep[q], source, key)
    if "values" in spec:
        _no_unknown(spec, {"values"}, source, key)
        vals = spec["values"]
        if not isinstance(vals, list) or not vals:
            raise _fail(source, f"{key}.values", "needs a non-empty list of numbers")
        if len(vals) > MAX_SWEEP_VALUES:
            raise _fail(source, f"{key}.values", f"{len(vals)} values; at most {MAX_SWEEP_VALUES} per sweep")
        values = np.array([_number(v, source, f"{key}.values", positive=True) for v in vals])
    else:
        _no_unknown(spec, {"min", "max", "count"}, source, key)
        for k in ("min", "max", "count"):
            if k not in spec:
                raise _fail(source, f"{key}.{k}", "missing (give min, max and count, or values)")
        lo = _number(spec["min"], source, f"{key}.min", positive=True)
        hi = _number(spec["max"], source, f"{key}.max", positive=True)
        count = spec["count"]
        if isinstance(count, bool) or not isinstance(count, int) or count < 1:
            raise _fail(source, f"{key}.count", f"needs a whole number >= 1, got {count!r}")
        if count > MAX_SWEEP_VALUES:
            raise _fail(source, f"{key}.count", f"{count} is too many central values (at most {MAX_SWEEP_VALUES})")
        if hi < lo:
            raise _fail(source, f"{key}.max", f"max ({hi:g}) is below min ({lo:g})")
        if count == 1 and hi != lo:
            raise _fail(source, f"{key}.count", "count = 1 needs min = max")
        values = np.geomspace(lo, hi, count)
    return SweepAxis(q, values)


def _eos_spec(index: int, block: Any, source: str, base_dir: Path | None) -> EOSSpec:
    key = f"eos[{index}]"
    block = _table(block, source, key)
    for k in ("name", "kind"):
        if k not in block:
            raise _fail(source, f"{key}.{k}", "missing")
    name, kind = block["name"], block["kind"]
    problem = group_name_problem(name)  # the name becomes the run file's /eos/<name> group
    if problem:
        raise _fail(source, f"{key}.name", problem)
    kind, options = registry.parse_options(block, source, key, base_dir, extra={"name"})
    return EOSSpec(index=index, name=name, kind=kind, options=options, source=source)


def _check_sizes(specs: list[EOSSpec], ensembles: list, axis: SweepAxis, solver: SolverOptions,
                 source: str) -> None:
    """Refuse products of sizes that would exhaust memory, before anything is allocated."""
    stars = axis.values.size
    if specs and min(solver.chunk_size, stars) > MAX_BATCH_STARS:
        raise _fail(source, "solver.chunk_size", f"{solver.chunk_size} stars per batch; at most "
                    f"{MAX_BATCH_STARS}")
    for e in ensembles:
        key = f"ensemble[{e.index}].{'sample.count' if 'sampler' in e.origin else 'members'}"
        if e.size * stars > MAX_ENSEMBLE_STARS:
            raise _fail(source, key, f"{e.size} members x {stars} central values = {e.size * stars} stars; "
                        f"at most {MAX_ENSEMBLE_STARS} per ensemble")
        if min(solver.member_chunk_size, e.size) * stars > MAX_BATCH_STARS:
            raise _fail(source, "solver.member_chunk_size",
                        f"{min(solver.member_chunk_size, e.size)} members x {stars} central values per batch; "
                        f"at most {MAX_BATCH_STARS} stars (lower member_chunk_size)")


def parse_config(text: str, *, source: str = "<config>", base_dir: Path | None = None) -> SweepConfig:
    """Validate config text (see :func:`load_config`)."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"not valid TOML ({exc})", source=source) from None
    _no_unknown(data, {"sweep", "eos", "solver", "ensemble", "output"}, source, "")
    if "sweep" not in data:
        raise _fail(source, "sweep", "missing [sweep] table")
    sweep = _table(data["sweep"], source, "sweep")
    _no_unknown(sweep, {"central_density", "central_pressure", "target_masses", "binaries", *RADIAL_KEYS},
                source, "sweep")
    axis = _axis(sweep, source)
    targets: list[float] = []
    if "target_masses" in sweep:
        tm = sweep["target_masses"]
        if not isinstance(tm, list):
            raise _fail(source, "sweep.target_masses", "needs a list of masses (Msun)")
        if len(tm) > MAX_TARGETS:
            raise _fail(source, "sweep.target_masses", f"{len(tm)} masses; at most {MAX_TARGETS}")
        targets = [_number(m, source, "sweep.target_masses", positive=True) for m in tm]
    binaries: list[tuple[float, float]] = []
    if "binaries" in sweep:
        bl = sweep["binaries"]
        if not isinstance(bl, list) or any(not isinstance(b, list) or len(b) != 2 for b in bl):
            raise _fail(source, "sweep.binaries", "needs a list of [m1, m2] pairs (Msun)")
        if len(bl) > MAX_TARGETS:
            raise _fail(source, "sweep.binaries", f"{len(bl)} pairs; at most {MAX_TARGETS}")
        binaries = [
            (_number(a, source, "sweep.binaries", positive=True), _number(b, source, "sweep.binaries", positive=True))
            for a, b in bl
        ]

    radial = _radial_modes(sweep, source)

    solver = SolverOptions()
    if "solver" in data:
        st = _table(data["solver"], source, "solver")
        _no_unknown(st, {"step_scale", "chunk_size", "member_chunk_size", "tolerance", "ensemble_maxima"}, source,
                    "solver")
        scale = _number(st.get("step_scale", 1.0), source, "solver.step_scale", positive=True)
        if scale > 4:
            raise _fail(source, "solver.step_scale", f"{scale:g} is too coarse to trust (use <= 4)")
        # Stars that miss the error tolerance are solved again with smaller steps by the
        # solver's own error control, so a tiny scale never buys accuracy; it only
        # multiplies the time (0.001 with 5 stars ran for minutes).
        if scale < 0.05:
            raise _fail(source, "solver.step_scale", f"{scale:g} is finer than ever needed (use >= 0.05)")
        sizes = {}
        for k in ("chunk_size", "member_chunk_size"):
            v = st.get(k, getattr(SolverOptions, k))
            if isinstance(v, bool) or not isinstance(v, int) or v < 1:
                raise _fail(source, f"solver.{k}", f"needs a whole number >= 1, got {v!r}")
            sizes[k] = v
        tolerance = _number(st.get("tolerance", DEFAULT_TOLERANCE), source, "solver.tolerance", positive=True)
        # below ~1e-9 round-off in the sums of the hot loop is of the same size; above 1e-3 a
        # "within tolerance" star is too rough for any use of the sequence (common practice)
        if not 1e-9 <= tolerance <= 1e-3:
            raise _fail(source, "solver.tolerance", f"{tolerance:g} is outside 1e-9 to 1e-3")
        maxima = st.get("ensemble_maxima", "refined")
        if maxima not in ("refined", "vertex"):
            raise _fail(source, "solver.ensemble_maxima", f'needs "refined" or "vertex", got {maxima!r}')
        solver = SolverOptions(step_scale=scale, tolerance=tolerance, ensemble_maxima=maxima, **sizes)

    blocks = data.get("eos", [])
    ens_blocks = data.get("ensemble", [])
    if not isinstance(blocks, list) or not isinstance(ens_blocks, list) or not (blocks or ens_blocks):
        raise _fail(source, "eos", "needs at least one [[eos]] or [[ensemble]] block")
    specs = [_eos_spec(i, b, source, base_dir) for i, b in enumerate(blocks)]
    from .ensemble import parse_ensemble

    ensembles = [parse_ensemble(i, b, source, base_dir) for i, b in enumerate(ens_blocks)]
    if ensembles and radial["radial_modes"]:
        raise _fail(source, "sweep.radial_modes", "radial modes are not computed for [[ensemble]] blocks; "
                    "sweep the members you need as [[eos]] blocks")
    if ensembles and axis.values.size < 5:
        raise _fail(source, f"sweep.{axis.quantity}", "ensembles need at least 5 central values per member")
    _check_sizes(specs, ensembles, axis, solver, source)
    # EOS and ensembles live in different groups (/eos, /ensemble): names are unique per kind.
    ens_names: dict[str, int] = {}
    for e in ensembles:
        if e.name in ens_names:
            raise _fail(source, f"ensemble[{e.index}].name",
                        f"duplicate name {e.name!r} (also ensemble[{ens_names[e.name]}])")
        ens_names[e.name] = e.index
    seen: dict[str, int] = {}
    for s in specs:
        if s.name in seen:
            raise _fail(source, f"eos[{s.index}].name", f"duplicate name {s.name!r} (also eos[{seen[s.name]}])")
        seen[s.name] = s.index
        if axis.quantity != "central_pressure" and not registry.get_kind(s.kind).density_axis(s.options):
            raise _fail(source, "sweep.central_density",
                        f"eos[{s.index}] ({s.kind}) has no rest-mass density axis: sweep central_pressure instead")
    return SweepConfig(
        path=Path(source) if source != "<config>" else None,
        text=text,
        axis=axis,
        eos=specs,
        solver=solver,
        target_masses=targets,
        binaries=binaries,
        ensembles=ensembles,
        output=_output(data.get("output", {}), source),
        **radial,
    )
