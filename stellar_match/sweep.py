"""Sweeps: from an EOS and central values to a matched, analysed sequence.

This module strings the layers together -- EOS -> structure solver ->
exterior match -> sequence analysis -> run file -- for one EOS
(:func:`sweep_eos`) or a whole config (:func:`run_config`).  Results go to a
*sink*: in memory by default (notebooks), or a
:class:`~stellar_match.runfile.RunFileWriter` (disk) with the same names.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from contextlib import closing
from pathlib import Path
from typing import Protocol

import numpy as np

from . import units
from .config import SweepConfig, load_config
from .eos import EquationOfState, central_enthalpy
from .errors import ConfigError, InputError, RunFileError, StorageError
from .exterior import star_columns
from .runfile import RunFileWriter
from .schema import (
    BINARY_DATASETS,
    OPTIONAL_STAR_DATASETS,
    RADIAL_MODE_DATASETS,
    STAR_DATASETS,
    TARGET_DATASETS,
    optional_star_datasets,
)
from .sequence import EOSSequence, analyse_sequence, chirp_mass, lambda_tilde
from .structure import DEFAULT_STEPS, StepControl, mass_maxima, solve_interiors, warm_up

__all__ = ["central_enthalpy", "solve_stars", "sweep_eos", "run_config", "run_is_complete", "MemorySink"]

ProgressFn = Callable[[int], None]
logger = logging.getLogger(__name__)


class Sink(Protocol):
    def start_eos(self, name, kind, parameters, table_sha256, columns) -> None: ...
    def append(self, name, chunk) -> None: ...
    def finish_eos(self, name, late_columns, summary, groups=None) -> None: ...


class MemorySink:
    """Collects sweep output in memory (the default sink)."""

    def __init__(self) -> None:
        self.meta: dict[str, dict] = {}
        self.chunks: dict[str, list[dict]] = {}

    def start_eos(self, name, kind, parameters, table_sha256, columns) -> None:
        self.meta[name] = {"kind": kind, "parameters": parameters, "table_sha256": table_sha256}
        self.chunks[name] = []

    def append(self, name, chunk) -> None:
        self.chunks[name].append(chunk)

    def finish_eos(self, name, late_columns, summary, groups=None) -> None:
        self.meta[name].update(late=late_columns, summary=summary, groups=groups or {})

    def sequence(self, name: str) -> EOSSequence:
        m = self.meta[name]
        cols = {k: np.concatenate([c[k] for c in self.chunks[name]]) for k in self.chunks[name][0]}
        cols.update(m["late"])
        groups = {
            k: {n: v for n, (v, _) in g["data"].items()} | {"attrs": g.get("attrs", {})}
            for k, g in m["groups"].items()
        }
        return EOSSequence(name, m["kind"], m["parameters"], cols, m["summary"], m["table_sha256"], groups)


def solve_stars(
    eos: EquationOfState,
    *,
    central_density=None,
    central_pressure=None,
    control: StepControl = DEFAULT_STEPS,
) -> dict[str, np.ndarray]:
    """Solve and match individual stars (no sequence analysis).

    Parameters
    ----------
    eos : EquationOfState
    central_density : array_like or Quantity, optional
        Central rest-mass densities in g/cm^3 (Quantities: any mass density,
        or a baryon number density, times the neutron mass).
    central_pressure : array_like or Quantity, optional
        Central pressures in dyn/cm^2 (give exactly one of the two).
    control : StepControl, optional
        Solver accuracy knobs.

    Returns
    -------
    dict of str -> ndarray
        The per-star run-file columns (``mass`` in Msun, ``radius`` in km, ...;
        see ``runfile.STAR_DATASETS``) except ``stable``.
    """
    if (central_density is None) == (central_pressure is None):
        raise InputError("give exactly one of central_density or central_pressure")
    quantity = "central_density" if central_density is not None else "central_pressure"
    values = central_density if central_density is not None else central_pressure
    unit = units.DENSITY_UNIT if quantity == "central_density" else units.PRESSURE_UNIT
    h = central_enthalpy(eos, quantity, np.atleast_1d(units.to_unit(values, unit, name=quantity)))
    return star_columns(solve_interiors(eos, h, control=control))


def sweep_eos(
    eos: EquationOfState,
    quantity: str,
    values,
    *,
    control: StepControl = DEFAULT_STEPS,
    chunk_size: int = 2048,
    sink: Sink | None = None,
    progress: ProgressFn | None = None,
    target_masses=(),
    binaries=(),
) -> EOSSequence | None:
    """Solve, match and analyse one EOS over a sweep of central values.

    Parameters
    ----------
    eos : EquationOfState
    quantity : {"central_density", "central_pressure"}
        The sweep axis (g/cm^3 or dyn/cm^2).
    values : array_like or Quantity
        Central values in sweep order (Quantities in any unit of the axis).
    control : StepControl, optional
        Solver accuracy knobs.
    chunk_size : int, optional
        Stars per batch; each batch is handed to the sink when done.
    sink : optional
        Where results go; default in memory.
    progress : callable, optional
        Called with the number of stars finished after every chunk.
    target_masses : sequence of float or Quantity, optional
        Masses (Msun) at which to solve stable-branch stars exactly; stored
        in the ``targets`` subgroup.
    binaries : sequence of (m1, m2) or Quantity, optional
        Component masses (Msun) for which to compute chirp mass and
        Lambda-tilde; stored in the ``binaries`` subgroup.

    Returns
    -------
    EOSSequence or None
        The sequence (None when writing to an external sink).
    """
    memory = sink is None
    sink = MemorySink() if memory else sink
    h_all = central_enthalpy(eos, quantity, values)
    target_masses = np.ravel(units.to_unit(target_masses, units.MASS_UNIT, name="target_masses"))
    binaries = np.reshape(units.to_unit(binaries, units.MASS_UNIT, name="binaries"), (-1, 2))

    def chunks():
        for start in range(0, h_all.size, chunk_size):
            h = h_all[start : start + chunk_size]
            cols = star_columns(solve_interiors(eos, h, control=control))
            if progress is not None:
                progress(h.size)
            yield cols

    write_sequence(eos, h_all, chunks(), sink, control=control, target_masses=target_masses, binaries=binaries)
    return sink.sequence(eos.name) if memory else None


_KEPT = ("mass", "radius", "central_density", "central_pressure")


def write_sequence(eos: EquationOfState, h_all: np.ndarray, chunks, sink, *, control: StepControl = DEFAULT_STEPS,
                   target_masses=(), binaries=(), radial_modes: int = 0) -> None:
    """Hand an EOS's star chunks to ``sink``, then analyse and finish the sequence.

    ``chunks`` yields the per-star columns in sweep order; only four columns
    of the whole sequence are kept in memory for the analysis.
    """
    columns = dict(STAR_DATASETS) | {k: OPTIONAL_STAR_DATASETS[k] for k in optional_star_datasets(eos)}
    if radial_modes:  # radial oscillation modes, computed with the stars of each chunk
        columns |= RADIAL_MODE_DATASETS
    sink.start_eos(eos.name, eos.kind, eos.parameters, eos.table_sha256, columns)
    kept = {k: np.empty(h_all.size) for k in _KEPT}
    start = 0
    for cols in chunks:
        n = len(cols["mass"])
        for k, arr in kept.items():
            arr[start : start + n] = cols[k]
        start += n
        sink.append(eos.name, {k: cols[k] for k in columns if k != "stable"})

    def refine(hc):  # M and R only: structure-only solves, as an ensemble's maxima (bit-identical to them)
        r = solve_interiors(eos, hc, control=control, response=False)
        return r.mass, r.radius

    def maximise(x_lo, x_hi, x_guess):
        return float(mass_maxima(eos, [x_lo], [x_hi], [x_guess], control)[0][0])

    analysis = analyse_sequence(h_all, units.mass_to_geometric(kept["mass"]), kept["radius"], refine,
                                h_limit=eos.h_max, maximise=maximise)
    # causality is judged up to the maximum-mass star: the top of the sweep when
    # the maximum is not reached, its bottom when the whole sweep is past it
    if np.isfinite(analysis.max_enthalpy):
        h_top = analysis.max_enthalpy
    elif analysis.status.startswith("not in range: mass decreasing"):
        h_top = float(h_all.min())
    else:
        h_top = float(h_all.max())
    cs2 = eos.max_sound_speed_squared(h_top)
    if np.isfinite(analysis.max_enthalpy):
        _, _, rho_max = eos.state(np.array([analysis.max_enthalpy]))
        rho_max_cgs = float(units.density_from_geometric(rho_max[0]))
    else:
        rho_max_cgs = float("nan")
    summary = {
        "causal": bool(cs2 <= 1.0),
        "max_sound_speed_squared": float(cs2),
        "max_mass": float(units.mass_from_geometric(analysis.max_mass)),
        "max_mass_radius": float(analysis.max_mass_radius),
        "max_mass_central_density": rho_max_cgs,
        "max_mass_status": analysis.status,
    }
    groups = {}
    if len(target_masses) or len(binaries):
        light = EOSSequence(eos.name, eos.kind, eos.parameters, dict(kept, stable=analysis.stable), summary)
        if len(target_masses):
            groups["targets"] = _targets_group(eos, light, target_masses, control)
        if len(binaries):
            groups["binaries"] = _binaries_group(eos, light, binaries, control)
    sink.finish_eos(eos.name, {"stable": analysis.stable}, summary, groups)


def _why_missing(seq: EOSSequence, mass: float) -> str:
    m_max = seq.summary.get("max_mass", np.nan)
    if np.isfinite(m_max) and mass > m_max:
        return f"above the maximum mass {m_max:.4f} Msun"
    stable_m = np.asarray(seq["mass"])[seq.stable]
    if stable_m.size and mass < stable_m.min():
        return f"below the lightest stable star of the sweep ({stable_m.min():.4f} Msun)"
    return "not reached by the stable branch of the sweep"


def _targets_group(eos, seq: EOSSequence, masses, control) -> dict:
    masses = np.asarray(masses, dtype=float)
    stars = stars_at_masses(eos, seq, masses, control=control)
    status = ["found" if np.isfinite(m)
              else "not computed to tolerance within the step budget" if np.isfinite(code) and code != 0
              else _why_missing(seq, t)
              for t, m, code in zip(masses, stars["mass"], stars["star_status"], strict=True)]
    data = {"requested_mass": (masses, TARGET_DATASETS["requested_mass"])}
    for k, unit in TARGET_DATASETS.items():
        if k != "requested_mass":
            data[k] = (stars[k], unit)
    return {"attrs": {"status": status}, "data": data}


def _binaries_group(eos, seq: EOSSequence, pairs, control) -> dict:
    pairs = np.asarray(pairs, dtype=float).reshape(-1, 2)
    unique = np.unique(pairs)
    stars = stars_at_masses(eos, seq, unique, control=control)
    lam = dict(zip(unique, stars["tidal_deformability"], strict=True))
    l1 = np.array([lam[m] for m in pairs[:, 0]])
    l2 = np.array([lam[m] for m in pairs[:, 1]])
    return {"attrs": {}, "data": {
        "mass_1": (pairs[:, 0], BINARY_DATASETS["mass_1"]),
        "mass_2": (pairs[:, 1], BINARY_DATASETS["mass_2"]),
        "chirp_mass": (chirp_mass(pairs[:, 0], pairs[:, 1]), BINARY_DATASETS["chirp_mass"]),
        "lambda_tilde": (lambda_tilde(pairs[:, 0], pairs[:, 1], l1, l2), BINARY_DATASETS["lambda_tilde"]),
    }}


def _build_all(config: SweepConfig) -> list[EquationOfState]:
    built = []
    for spec in config.eos:
        eos = spec.build()
        try:
            central_enthalpy(eos, config.axis.quantity, config.axis.values)
        except InputError as exc:
            raise ConfigError(f"eos[{spec.index}] ({spec.name}): {exc.message}",
                              source=spec.source, key=exc.key) from None
        built.append(eos)
    return built


def run_config(
    config: SweepConfig | str | Path,
    out: str | Path | None = None,
    *,
    force: bool = False,
    resume: bool = False,
    workers: int = 1,
    scheduler: str | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> Path:
    """Run every EOS and ensemble of a config and write one HDF5 run file.

    Parameters
    ----------
    config : SweepConfig or path
        A loaded config or the path of a TOML file.
    out : path, optional
        Run file; default: the config's name with ``.h5`` beside it.
    force : bool
        Overwrite an existing run file and discard unfinished parts.
    resume : bool
        Continue an interrupted run from its ``<out>.parts`` folder,
        computing only the missing chunks.  If ``out`` is already the
        finished run of this config (:func:`run_is_complete`), nothing is
        done and ``out`` is returned.
    workers : int
        Local worker processes (1: in this process).
    scheduler : str, optional
        Address of an existing Dask distributed scheduler to send the chunk
        tasks to instead of local workers.
    progress : callable, optional
        Called as ``progress(stars, members)`` after every finished chunk.
        On resume, the chunks found finished are reported first, through
        ``progress.resumed(stars, members)`` if the callable has such a
        method (so that rates count only what this run computes), else as
        finished chunks.

    Returns
    -------
    Path
        The run file written.

    Raises
    ------
    InputError
        For a bad config or output path.  Its subclass ``StorageError`` when
        another run holds the output (``<out>.lock``), when the output's
        folder does not exist, or when a part or the run file cannot be
        written (disk full, a file-size limit, a read-only or vanished
        folder); the finished parts are kept then, for ``resume``.

    Notes
    -----
    Every EOS is built and checked against the sweep range before any star
    is solved, so a bad config fails at once.  Chunk boundaries come from the
    config only, so the run file is the same, dataset by dataset and bit for
    bit, for any number of workers, on Dask, and after a resume.  On resume,
    a part that cannot be read back whole is deleted and its chunk computed
    again.
    """
    from . import __version__
    from .scheduling import PartStore, RunLock, Work, execute, plan_tasks, task_stars

    if not isinstance(config, SweepConfig):
        config = load_config(config)
    if out is None:
        if config.path is None:
            raise InputError("give an output path for a config that has no file")
        out = config.path.with_suffix(".h5")
    out = Path(out)
    built = _build_all(config)
    if out.is_dir():
        raise RunFileError("is a folder; give a file name for the run file", source=str(out))
    if not out.parent.is_dir():  # a typo in a path should not grow a folder tree
        raise StorageError("folder does not exist; create it first", source=str(out.parent))
    if resume and not force and run_is_complete(config, out):
        logger.info("%s: complete already (the same config); nothing to resume", out)
        return out
    store = PartStore(out, config.text, __version__)
    with RunLock(out):  # everything below touches the output: one run at a time
        _prepare_parts(store, out, force=force, resume=resume)
        # with the lock held, a partial run file is a leftover of a run killed while assembling
        RunFileWriter.partial_path(out).unlink(missing_ok=True)
        tasks = plan_tasks(config)
        if resume:
            store.discard_unusable(tasks)
        todo = [t for t in tasks if not store.done(t)]
        if todo:
            store.check_writable()
        logger.debug("%s: %d tasks, %d finished already, %d to compute (%s)", out, len(tasks),
                     len(tasks) - len(todo), len(todo),
                     f"Dask scheduler {scheduler}" if scheduler else f"up to {workers} local workers")
        if progress is not None:
            report = getattr(progress, "resumed", progress)
            for t in tasks:
                if store.done(t):
                    report(*task_stars(config, t))
        if todo:
            warm_up()  # compiled or loaded once here, so that forked workers start with the kernels
        try:
            # closing(): on an interrupt the executor stops its workers at once, not at exit
            with closing(execute(Work(config, tuple(built)), todo, workers=workers,
                                 scheduler=scheduler)) as results:
                for task, arrays in results:
                    store.save(task, arrays)
                    if progress is not None:
                        progress(*task_stars(config, task))
        except InputError:
            if not any(store.done(t) for t in tasks):  # e.g. an unreachable scheduler: nothing to keep
                store.remove()
            raise
        logger.debug("%s: every chunk done; assembling the run file", out)
        path = _assemble(config, built, tasks, store, out)
        store.remove()
    return path


def run_is_complete(config: SweepConfig, out: str | Path) -> bool:
    """True when ``out`` is a finished run file of exactly this config, with no unfinished run on it.

    A file is written under its final name only once it is whole (see
    :func:`run_config`), so such a file is complete and ``resume`` has
    nothing left to do.  Only the root attributes are read.
    """
    import h5py

    out = Path(out)
    if not out.is_file() or out.with_name(out.name + ".parts").exists():
        return False
    try:
        with h5py.File(out, "r") as f:
            fmt, text = f.attrs.get("format"), f.attrs.get("config_toml")
    except OSError:
        return False
    text = text.decode() if isinstance(text, bytes) else text
    return fmt in ("stellar_match.run", b"stellar_match.run") and text == config.text


def _prepare_parts(store, out: Path, *, force: bool, resume: bool) -> None:
    """Check an output against its parts folder and (re)create the folder as asked."""
    # an existing file may be overwritten with --force, or by resuming an interrupted --force run
    if out.exists() and not force and not (resume and store.exists()):
        if resume:  # run_config returned before the lock if this very run were complete
            raise RunFileError("exists already and holds a different run (not this config); "
                               "pass --force to overwrite it", source=str(out))
        raise RunFileError("exists already; pass --force to overwrite it", source=str(out))
    if store.exists():
        if force:
            store.remove()
        elif resume:
            store.check_resumable()
        else:
            raise RunFileError("holds an unfinished run of this output; pass --resume to continue it "
                               "or --force to start over", source=str(store.folder))
    if not store.exists():
        store.create()


def _assemble(config: SweepConfig, built, tasks, store, out: Path) -> Path:
    """Write the run file from the parts: complete under its final name, or not there at all."""
    control = config.solver.control()
    writer = RunFileWriter(out, config_text=config.text, force=True, **config.output.writer_options())
    try:
        for eos, spec in zip(built, config.eos, strict=True):
            h_all = central_enthalpy(eos, config.axis.quantity, config.axis.values)
            parts = (store.load(t) for t in tasks if t.section == "eos" and t.block == spec.index)
            write_sequence(eos, h_all, parts, writer, control=control,
                           target_masses=config.target_masses, binaries=config.binaries,
                           radial_modes=config.radial_modes)
        for ens in config.ensembles:
            parts = [t for t in tasks if t.section == "ensemble" and t.block == ens.index]
            writer.write_ensemble(ens, config.axis, ((t, store.load(t)) for t in parts))
        return writer.close()
    except StorageError as exc:
        writer.discard()
        if exc.source != str(writer.partial):
            raise  # a part could not be read: its message says what to do
        raise StorageError(f"{exc.message}; the finished chunks are kept in {store.folder}: "
                           "free space or raise the limit, then rerun with --resume", source=exc.source) from None
    except BaseException:
        writer.discard()
        raise


def eos_from_sequence(seq: EOSSequence) -> EquationOfState:
    """Rebuild the EOS of a run-file group from its ``kind`` and ``parameters``.

    Parameters
    ----------
    seq : EOSSequence
        A sequence read from a run file (or returned by :func:`sweep_eos`).

    Returns
    -------
    EquationOfState
        The same EOS the sweep used; a tabulated EOS is read again from the
        table path stored in ``parameters["path"]``.

    Raises
    ------
    InputError
        For an unknown kind, missing parameters, a table file that is gone,
        or one whose SHA-256 differs from the run file's ``table_sha256``
        (the table changed since the sweep, so stars solved now would not
        belong to the stored sequence).
    """
    from .eos import registry

    eos = registry.rebuild_eos(seq.kind, seq.name, seq.parameters)
    if seq.table_sha256 and eos.table_sha256 != seq.table_sha256:
        path = eos.parameters.get("path") or eos.parameters.get("base", {}).get("path")
        raise InputError(
            f"table of EOS {seq.name!r} changed since the run (sha256 {eos.table_sha256[:12]}... "
            f"!= {seq.table_sha256[:12]}... in the run file); re-run the sweep",
            source=str(path),
        )
    return eos


def _stable_branch(seq: EOSSequence, axis: str) -> tuple[np.ndarray, np.ndarray]:
    """(central value, mass) of the stable stars in ascending central value, ending at M_max."""
    x = np.asarray(seq[axis], dtype=float)[seq.stable]
    m = np.asarray(seq["mass"], dtype=float)[seq.stable]
    order = np.argsort(x)
    x, m = x[order], m[order]
    m_max = float(seq.summary.get("max_mass", np.nan))
    x_max = float(seq.summary.get("max_mass_central_density", np.nan))
    if axis == "central_density" and np.isfinite(m_max) and np.isfinite(x_max) and (x.size == 0 or x_max > x[-1]):
        x, m = np.append(x, x_max), np.append(m, m_max)
    return x, m


def stars_at_masses(
    eos: EquationOfState,
    seq: EOSSequence,
    masses,
    *,
    control: StepControl = DEFAULT_STEPS,
    rtol: float = 1e-6,
) -> dict[str, np.ndarray]:
    """Solve the stable-branch star of each requested gravitational mass.

    Each mass is bracketed between the two stable sweep samples around it
    (the maximum-mass star closes the branch) and its central density is
    root-found in ln(rho_c) by the Illinois variant of regula falsi, all
    requested masses advancing together: every iteration is one batched
    solve, not one solve per mass.  The result is a fresh solve at the root.
    The incompressible EOS, whose central density is constant, is
    root-found in the central pressure instead.

    Parameters
    ----------
    eos : EquationOfState
        The EOS of ``seq`` (see :func:`eos_from_sequence`).
    seq : EOSSequence
        Its sweep, whose ``stable`` flags and samples give the brackets.
    masses : array_like or Quantity
        Gravitational masses in Msun.
    control : StepControl, optional
        Solver accuracy knobs (use the run's, for stars consistent with it).
    rtol : float
        Relative accuracy of the mass of every star found.

    Returns
    -------
    dict of str -> ndarray
        The per-star run-file columns of :func:`solve_stars`, one row per
        requested mass; rows are NaN where the stable branch of the sweep
        does not reach the mass (above M_max or below the lightest stable
        sample).
    """
    axis = "central_density" if eos.density_axis else "central_pressure"
    x, m = _stable_branch(seq, axis)
    targets = np.atleast_1d(np.asarray(units.to_unit(masses, units.MASS_UNIT, name="masses"), dtype=float))
    names = [k for k in STAR_DATASETS if k != "stable"]
    names += list(optional_star_datasets(eos))
    out = {k: np.full(targets.size, np.nan) for k in names}
    if x.size < 2:
        return out
    lx = np.log(x)
    which = [np.flatnonzero((m[:-1] <= t) & (t <= m[1:])) for t in targets]
    ok = np.array([w.size > 0 for w in which])
    if not ok.any():
        return out
    idx = np.array([w[0] for w in which if w.size])
    t = targets[ok]

    def miss(log_x, sel):
        cols = solve_stars(eos, control=control, **{axis: np.exp(log_x)})
        return cols["mass"] / t[sel] - 1.0

    every = np.ones(t.size, dtype=bool)

    # brackets from the samples, re-evaluated by fresh solves (solver noise can
    # move a sample across the target; then widen to the neighbours)
    a, b = lx[idx], lx[np.minimum(idx + 1, lx.size - 1)]
    fa, fb = miss(a, every), miss(b, every)
    bad = ~((fa <= 0) & (fb >= 0))
    if bad.any():
        a[bad] = lx[np.maximum(idx[bad] - 1, 0)]
        b[bad] = lx[np.minimum(idx[bad] + 2, lx.size - 1)]
        fa[bad], fb[bad] = miss(a[bad], bad), miss(b[bad], bad)
    valid = (fa <= 0) & (fb >= 0)
    xr = np.where(fa == 0, a, b)
    side = np.zeros(t.size, dtype=int)
    for _ in range(60):
        active = valid & (np.abs(b - a) > 1e-14 * np.abs(b)) & (np.minimum(np.abs(fa), np.abs(fb)) > rtol * 1e-3)
        if not active.any():
            break
        xr = np.where(active, (a * fb - b * fa) / np.where(fb != fa, fb - fa, 1.0), xr)
        fr = np.zeros(t.size)
        fr[active] = miss(xr[active], active)
        left = active & (fr < 0)
        right = active & (fr >= 0)
        a[left], fa[left] = xr[left], fr[left]
        b[right], fb[right] = xr[right], fr[right]
        # Illinois: halve the stale end's value after two moves on the same side
        fb[left & (side == -1)] *= 0.5
        fa[right & (side == 1)] *= 0.5
        side = np.where(left, -1, np.where(right, 1, side))
    root = np.where(np.abs(fa) < np.abs(fb), a, b)
    cols = solve_stars(eos, control=control, **{axis: np.exp(root[valid])})
    rows = np.flatnonzero(ok)[valid]
    for k in names:
        out[k][rows] = cols[k]
    return out
