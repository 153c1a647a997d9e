"""The ``stellar-match`` command line: argument parsing and printing only.

Every user mistake -- and every output that cannot be written: disk full, a
file-size limit, a read-only folder, an output held by another run -- surfaces
as one line on stderr and exit status 2.  An interrupt of a sweep (Ctrl-C, or
SIGTERM from a batch system at its time limit) stops its workers, keeps the
finished chunks in ``<out>.parts`` and exits 130 (SIGINT) or 143 (SIGTERM).

This is the only module that configures logging: the library's modules log
through ``logging.getLogger(__name__)``; here one handler on the
``stellar_match`` logger writes to stderr, at the level of ``-v``/``-q``.
"""

from __future__ import annotations

import argparse
import logging
import math
import os
import signal
import sys
import threading
import time
import tomllib
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from importlib import resources
from pathlib import Path

import numpy as np

from . import __version__
from .errors import InputError
from .runfile import read_run
from .schema import RADIAL_STATUS as MODE_STATUS
from .schema import STAR_STATUS
from .sequence import interpolate_on_stable_branch

PROG = "stellar-match"
#: Seconds between two progress lines of a sweep whose stderr is not a terminal (``--log-interval``).
DEFAULT_LOG_INTERVAL = 30.0
#: By name, not __name__: under ``python -m stellar_match.cli`` that is ``__main__``, outside the package logger.
logger = logging.getLogger("stellar_match.cli")
#: Exit status after SIGINT / SIGTERM: 128 + the signal number, as a shell reports a signal death.
EXIT_SIGINT = 128 + signal.SIGINT
EXIT_SIGTERM = 128 + signal.SIGTERM


class Terminated(KeyboardInterrupt):
    """SIGTERM, handled like Ctrl-C: every cleanup that runs for KeyboardInterrupt runs for it."""


def _raise_terminated(signum, frame) -> None:
    # a second SIGTERM must not break the orderly stop the first one started
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    raise Terminated()


@contextmanager
def _sweep_signals() -> Iterator[None]:
    """Signal handling of a sweep: SIGINT and SIGTERM interrupt, SIGXFSZ is ignored.

    SIGINT interrupts even where the shell started the sweep with it ignored
    (a background job of a script), so that ``kill -INT`` always stops a
    run.  With SIGXFSZ ignored, a write past a file-size limit fails with EFBIG and
    is reported as one line, instead of the signal killing the process
    (CPython ignores it already; this keeps it so when embedded).
    """
    if threading.current_thread() is not threading.main_thread():  # handlers belong to the main thread
        yield
        return
    old_int = signal.signal(signal.SIGINT, signal.default_int_handler)
    old_term = signal.signal(signal.SIGTERM, _raise_terminated)
    old_xfsz = signal.signal(signal.SIGXFSZ, signal.SIG_IGN) if hasattr(signal, "SIGXFSZ") else None
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, old_int)
        signal.signal(signal.SIGTERM, old_term)
        if old_xfsz is not None:
            signal.signal(signal.SIGXFSZ, old_xfsz)


def _fmt(x: float, spec: str) -> str:
    return format(x, spec) if np.isfinite(x) else "-"


def _at_1_4(seq, column: str) -> tuple[float, bool]:
    """Value at 1.4 Msun: the exact target solve when the run has one, else interpolated."""
    t = (seq.groups or {}).get("targets")
    if t is not None and column in t:
        hit = np.flatnonzero(np.isclose(np.asarray(t["requested_mass"]), 1.4, rtol=0, atol=1e-12))
        if hit.size:
            return float(np.asarray(t[column])[hit[0]]), True
    if column not in seq.columns:
        return float("nan"), True
    return interpolate_on_stable_branch(seq, 1.4, column), False


#: Columns of the summary table: (heading, unit, meaning); `summary --help` lists them from here.
SUMMARY_COLUMNS = (
    ("EOS", "", "name of the /eos/<name> group"),
    ("kind", "", "EOS kind (piecewise_polytrope, polytrope, table, incompressible)"),
    ("M_max", "[Msun]", "maximum mass ending the stable branch ('-': none in the sweep)"),
    ("R(M_max)", "[km]", "radius of the maximum-mass star"),
    ("rho_c(M_max)", "[g/cm3]", "central rest-mass density of the maximum-mass star"),
    ("R(1.4)", "[km]", "radius at 1.4 Msun"),
    ("z(1.4)", "[1]", "surface redshift at 1.4 Msun"),
    ("Lambda(1.4)", "[1]", "tidal deformability at 1.4 Msun"),
    ("I(1.4)", "[1e45 g cm2]", "moment of inertia at 1.4 Msun"),
    ("causal", "", "yes if c_s <= c up to the maximum-mass central density"),
)
SUMMARY_NOTES = """\
Values at 1.4 Msun are exact solves where the run has 1.4 in [sweep] target_masses, else
interpolated along the stable branch (a note says so).  Notes below the table: an EOS
without a maximum and why; per EOS, how many stars are NaN for each star_status and why;
per [[ensemble]], its members, how many are ok with their M_max range, and the counts of
every other member status."""


def summary_table(run) -> str:
    """Plain-text table: one row per EOS of a run file (columns: :data:`SUMMARY_COLUMNS`)."""
    head = tuple(c[0] for c in SUMMARY_COLUMNS)
    units_row = tuple(c[1] for c in SUMMARY_COLUMNS)
    rows = []
    interpolated = False
    for name, seq in run.eos.items():
        s = seq.summary
        at = {c: _at_1_4(seq, c) for c in ("radius", "surface_redshift", "tidal_deformability",
                                            "moment_of_inertia")}
        interpolated |= any(np.isfinite(v) and not exact for v, exact in at.values())
        rows.append((
            name,
            seq.kind,
            _fmt(s.get("max_mass", np.nan), ".4f"),
            _fmt(s.get("max_mass_radius", np.nan), ".3f"),
            _fmt(s.get("max_mass_central_density", np.nan), ".3e"),
            _fmt(at["radius"][0], ".3f"),
            _fmt(at["surface_redshift"][0], ".4f"),
            _fmt(at["tidal_deformability"][0], ".1f"),
            _fmt(at["moment_of_inertia"][0] / 1e45, ".4f"),
            "yes" if s.get("causal") else "NO",
        ))
    widths = [max(len(r[i]) for r in (head, units_row, *rows)) for i in range(len(head))]
    lines = ["  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip()
             for r in (head, units_row, *rows)]
    notes = [f"  {n}: maximum {seq.summary['max_mass_status']}" for n, seq in run.eos.items()
             if not str(seq.summary.get("max_mass_status", "found")).startswith("found")]
    for n, seq in run.eos.items():  # stars without a result are NaN; say how many and why
        codes = np.asarray(seq.columns.get("star_status", []), dtype=int)
        for code in np.unique(codes[codes != 0]):
            notes.append(f"  {n}: {int((codes == code).sum())} of {codes.size} stars NaN, star_status {code}: "
                         f"{STAR_STATUS.get(int(code), 'unknown')}")
    for n, seq in run.eos.items():  # radial modes: where omega_0^2 > 0 and the turning points disagree
        if "radial_stable" not in seq.columns:
            continue
        rstat = np.asarray(seq.columns["radial_status"], dtype=int)
        radial = np.asarray(seq.columns["radial_stable"], dtype=bool)
        turning = np.asarray(seq.stable, dtype=bool)
        differ = np.flatnonzero((rstat == 0) & (radial != turning))
        if differ.size:
            shown = ", ".join(str(int(i)) for i in differ[:10]) + (" ..." if differ.size > 10 else "")
            notes.append(f"  {n}: {differ.size} stars where stable and radial_stable disagree (stars {shown})")
        else:
            notes.append(f"  {n}: radial modes of {int((rstat == 0).sum())} stars; stable and radial_stable agree")
        for code in np.unique(rstat[rstat != 0]):
            notes.append(f"  {n}: {int((rstat == code).sum())} of {rstat.size} stars without radial modes, "
                         f"radial_status {code}: {MODE_STATUS.get(int(code), 'unknown')}")
    for name, ens in run.ensembles.items():
        status = np.asarray(ens["status"])
        mm = np.asarray(ens["max_mass"])
        ok = status == 0
        counts = ", ".join(f"{int((status == k).sum())} {ens.status_meaning.get(k, k)}"
                           for k in np.unique(status) if k != 0)
        mm_ok = mm[ok & np.isfinite(mm)]
        span = f"M_max {mm_ok.min():.3f}-{mm_ok.max():.3f} Msun" if mm_ok.size else "no M_max"
        notes.append(f"  ensemble {name}: {status.size} members, {int(ok.sum())} ok ({span})"
                     + (f"; {counts}" if counts else ""))
    if interpolated:
        notes.append("  values at 1.4 Msun interpolated on the stable branch; add 1.4 to "
                     "[sweep] target_masses for exact solves of the [[eos]] blocks")
    return "\n".join(lines + notes)


def _run_sweep(config, out: Path | None, force: bool, *, resume: bool = False,
               workers: int = 1, scheduler: str | None = None,
               log_interval: float = DEFAULT_LOG_INTERVAL) -> Path:
    """Run a config (its path, or a loaded SweepConfig) with progress on stderr and the CLI's signals."""
    from .config import SweepConfig, load_config
    from .sweep import run_config

    if not isinstance(config, SweepConfig):
        config = load_config(config)
    out = out if out is not None else config.path.with_suffix(".h5")
    total = config.axis.values.size * (len(config.eos) + sum(e.size for e in config.ensembles))
    members = sum(e.size for e in config.ensembles)
    progress = _Progress(total, members, interval=log_interval)
    try:
        with _sweep_signals():
            path = run_config(config, out, force=force, resume=resume, workers=workers, scheduler=scheduler,
                              progress=progress)
        progress.close(finished=True)
    except KeyboardInterrupt as exc:  # Terminated too: keep the kind, add where the parts are
        progress.close()
        raise type(exc)(f"{out}.parts") from None
    finally:
        progress.close()
    return path


def _duration(seconds: float) -> str:
    seconds = int(round(seconds))
    return f"{seconds // 3600}:{seconds // 60 % 60:02d}:{seconds % 60:02d}"


class _Progress:
    """Progress of long work on stderr: a bar on a terminal, else a log line every ``interval`` s.

    Called as ``progress(done, members)`` per finished piece (a sweep's
    chunk: its stars and ensemble members).  The bar (tqdm) appears with the
    first piece, so that input errors found before it print as one clean
    line; it shows the rate, members/s (ensembles) and the time left.  Where
    stderr is no terminal (a batch job's log file, a pipe), an INFO line of
    the ``stellar_match.cli`` logger says how much is done, the rates and
    the time left, at most every ``interval`` seconds and the first one
    ``interval`` seconds after the start, so a short run prints nothing
    extra; a run that printed progress lines ends with a ``done`` line.
    With ``-q`` neither is shown.  Chunks found finished on resume
    (:meth:`resumed`) count as done but not in the rates.
    """

    def __init__(self, total: int, members: int = 0, *, interval: float = DEFAULT_LOG_INTERVAL,
                 what: str = "sweep", unit: str = "star") -> None:
        self.total, self.members, self.interval, self.what, self.unit = total, members, interval, what, unit
        self.done = self.done_members = self.resumed_done = self.resumed_members = 0
        self.start = self.last = time.monotonic()
        self.lines = 0
        self.bar = None
        shown = logger.isEnabledFor(logging.INFO)  # -q: errors only, no bar either
        self.use_bar = shown and sys.stderr.isatty()
        self.use_log = shown and not self.use_bar

    def resumed(self, done: int, members: int = 0) -> None:
        """Pieces finished by an earlier run: done, but not computed now."""
        self.resumed_done += done
        self.resumed_members += members
        self.start = self.last = time.monotonic()  # the rates start with the first piece computed now
        self._count(done, members)

    def __call__(self, done: int, members: int = 0) -> None:
        self._count(done, members)
        now = time.monotonic()
        if self.use_log and now - self.last >= self.interval:
            logger.info("%s: %s", self.what, self._status(now))
            self.last = now
            self.lines += 1

    def _count(self, done: int, members: int) -> None:
        self.done += done
        self.done_members += members
        if not self.use_bar:
            return
        if self.bar is None:
            from tqdm import tqdm

            self.bar = tqdm(total=self.total, desc=self.what, unit=self.unit, file=sys.stderr, dynamic_ncols=True,
                            leave=False)
        self.bar.update(done)
        if self.members:
            rate = (self.done_members - self.resumed_members) / max(time.monotonic() - self.start, 1e-9)
            self.bar.set_postfix_str(f"{self.done_members}/{self.members} members, {rate:.1f} members/s",
                                     refresh=False)

    def _status(self, now: float) -> str:
        elapsed = max(now - self.start, 1e-9)
        rate = (self.done - self.resumed_done) / elapsed
        units = f"{self.unit}s"
        text = f"{self.done}/{self.total} {units} ({100.0 * self.done / max(self.total, 1):.1f} %)"
        if self.members:
            text += f", {self.done_members}/{self.members} members"
        text += f", {rate:.4g} {units}/s"
        if self.members:
            text += f", {(self.done_members - self.resumed_members) / elapsed:.4g} members/s"
        left = self.total - self.done
        text += f", ETA {_duration(left / rate)}" if rate > 0 else (", ETA unknown" if left else "")
        if self.resumed_done:
            text += f" ({self.resumed_done} {units} from resumed chunks)"
        return text

    def close(self, finished: bool = False) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None
        if finished and self.lines:
            logger.info("%s: done, %d %ss in %s", self.what, self.done, self.unit,
                        _duration(time.monotonic() - self.start))
            self.lines = 0


def cmd_sweep(args) -> int:
    from .config import load_config
    from .sweep import run_is_complete

    config_path = Path(args.config)
    out = Path(args.out) if args.out else config_path.with_suffix(".h5")
    if args.resume and not args.force and run_is_complete(load_config(config_path), out):
        print(f"{out}: complete already (a finished run of this config); nothing to resume")
        print(summary_table(read_run(out)))
        return 0
    workers = args.workers if args.workers is not None else (os.cpu_count() or 1)
    path = _run_sweep(config_path, out, args.force, resume=args.resume, workers=workers,
                      scheduler=args.scheduler, log_interval=args.log_interval)
    print(f"wrote {path}")
    print(summary_table(read_run(path)))
    return 0


def cmd_summary(args) -> int:
    run = read_run(args.run)
    print(summary_table(run))
    if args.crust_inertia_above is not None:
        print(crust_inertia_lines(run, args.crust_inertia_above))
    return 0


def crust_inertia_lines(run, threshold: float) -> str:
    """Stars of every EOS whose crust_inertia_fraction is at least ``threshold`` (a fraction, 0.014 = 1.4 %)."""
    lines = [f"stars with Delta I_crust / I >= {threshold:g} (crust_inertia_fraction):"]
    for name, seq in run.eos.items():
        if "crust_inertia_fraction" not in seq.columns:
            lines.append(f"  {name}: no crust datasets")
            continue
        frac = np.asarray(seq["crust_inertia_fraction"], dtype=float)
        hit = np.flatnonzero(frac >= threshold)
        stable = np.asarray(seq.stable, dtype=bool)
        m = np.asarray(seq["mass"], dtype=float)
        if not hit.size:
            lines.append(f"  {name}: none")
            continue
        on = hit[stable[hit]]
        span = f"; stable ones M {m[on].min():.4f}-{m[on].max():.4f} Msun" if on.size else ""
        lines.append(f"  {name}: {hit.size} of {frac.size} stars (indices {hit[0]}..{hit[-1]}){span}")
    return "\n".join(lines)


def cmd_profile(args) -> int:
    from .exports import check_output_path
    from .profile import profile, profile_figure, write_profile

    out = check_output_path(args.out, (".h5", ".hdf5", ".ecsv"))
    figure = check_output_path(args.figure, (".png", ".pdf", ".svg")) if args.figure else None
    for path in (out, figure):
        if path is not None and not path.parent.is_dir():
            raise InputError("folder does not exist; create it first", source=str(path.parent))
    prof = profile(args.source, eos=args.eos, mass=args.mass, central_density=args.central_density,
                   central_pressure=args.central_pressure, outer_radius=args.outer_radius, branch=args.branch)
    a = prof.attributes
    print(f"{a['eos_name']}: M = {a['mass']:.6f} Msun, R = {a['radius']:.6f} km, "
          f"rho_c = {a['central_density']:.6e} g/cm3, p_c = {a['central_pressure']:.6e} dyn/cm2")
    print(f"match at R (relative jumps, exterior - interior): g_tt {a['match_g_tt']:.3e}, "
          f"g_rr {a['match_g_rr']:.3e}, dnu/dr {a['match_dnu_dr']:.3e}")
    if "crust_thickness" in a:
        print(f"crust: thickness {a['crust_thickness']:.4f} km, mass {a['crust_mass']:.4e} Msun, "
              f"Delta I/I {a['crust_inertia_fraction']:.4f}")
    print(f"wrote {write_profile(prof, out)} ({len(prof.columns['radius'])} rows)")
    if figure is not None:
        profile_figure(prof, figure)
        print(f"wrote {figure}")
    return 0


def _demo_inputs(demo_dir: Path, force: bool) -> None:
    """Copy the bundled config, tables and constraints into ``demo_dir`` for the user to read and edit.

    A copy that still equals the bundled file is rewritten silently; one the
    user has edited is overwritten only with ``--force``.  Every copy is
    checked before any is written, so a refusal changes nothing.
    """
    bundled = resources.files("stellar_match.bundled_tables")
    items = sorted((i for i in bundled.iterdir() if i.name.endswith((".csv", ".toml"))), key=lambda i: i.name)
    copies = [(demo_dir / item.name, item.read_bytes()) for item in items]
    for dest, data in copies:
        if dest.is_dir():
            raise InputError("is a folder where the demo puts a file; move it away", source=str(dest))
        try:
            edited = dest.exists() and dest.read_bytes() != data
        except OSError as exc:
            raise InputError(f"cannot read ({exc.strerror or exc})", source=str(dest)) from None
        if edited and not force:
            raise InputError("differs from the bundled demo file (edited?); pass --force to overwrite it, "
                             "or give another --out-dir", source=str(dest))
    try:
        demo_dir.mkdir(exist_ok=True)
        for dest, data in copies:
            if not dest.exists() or dest.read_bytes() != data:
                dest.write_bytes(data)
    except OSError as exc:
        raise InputError(f"cannot write the demo inputs ({exc.strerror or exc})",
                         source=str(exc.filename or demo_dir)) from None


def cmd_demo(args) -> int:
    out_dir = Path(args.out_dir)
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create output folder ({exc.strerror})", source=str(out_dir)) from None
    demo_dir = out_dir / "demo_inputs"
    _demo_inputs(demo_dir, args.force)
    run_path = _run_sweep(demo_dir / "demo.toml", out_dir / "demo.h5", True, log_interval=args.log_interval)
    print(f"demo inputs: {demo_dir}")
    print(f"wrote {run_path}")
    run = read_run(run_path)
    print(summary_table(run))
    from .exports import redshift_table, select_sequences, write_table
    from .plots import load_constraints, overlay_figure, save_figure

    sequences = select_sequences([run])
    figure = overlay_figure(sequences, load_constraints(demo_dir / "demo_constraints.toml"))
    print(f"wrote {save_figure(figure, out_dir / 'demo_overlay.png')}")
    table = redshift_table(sequences, meta={"software": f"{PROG} {__version__}", "source_run_file": str(run_path)})
    print(f"wrote {write_table(table, out_dir / 'demo_redshift.ecsv')}")
    _demo_likelihood(args, demo_dir, out_dir, run_path)
    return 0


def _demo_likelihood(args, demo_dir: Path, out_dir: Path, run_path: Path) -> None:
    """The demo's second half: a prior ensemble scored against the invented measurements."""
    import re

    from .config import load_config, parse_config
    from .constraints import load_constraints
    from .plots import bands_from_results, overlay_figure, save_figure
    from .scoring import score_runs, write_scores

    prior_config = demo_dir / "demo_prior.toml"
    config = load_config(prior_config)
    if args.prior_members is not None:  # the config solved (and stored in the run file), not the user's copy
        text = re.sub(r"(?m)^count = \d+", f"count = {args.prior_members}", config.text, count=1)
        config = parse_config(text, source=str(prior_config), base_dir=demo_dir)
    print(f"solving the prior ensemble of {prior_config.name} (about 30 s on 2 cores) ...")
    prior_path = _run_sweep(config, out_dir / "demo_prior.h5", force=True, log_interval=args.log_interval)
    print(f"wrote {prior_path}")
    constraints = load_constraints(demo_dir / "demo_constraints.toml")
    scores = score_runs([run_path, prior_path], constraints)
    print(_likelihood_report(scores))
    results = write_scores(scores, out_dir / "demo_likelihood.h5")
    print(f"wrote {results}")
    table = scores.table()
    table.write(out_dir / "demo_likelihood.ecsv", format="ascii.ecsv", overwrite=True)
    print(f"wrote {out_dir / 'demo_likelihood.ecsv'}")
    from .exports import select_sequences
    from .runfile import read_run

    figure = overlay_figure(select_sequences([read_run(run_path)]), constraints,
                            bands=bands_from_results(results))
    print(f"wrote {save_figure(figure, out_dir / 'demo_bands.png')}")


def _read_runs(paths: list[str]):
    return [read_run(p) for p in paths]


def _central_axis(runs) -> str:
    """p_c for the first side panel when some run swept central pressure (its config says so)."""
    for run in runs:
        try:
            sweep = tomllib.loads(str(run.attrs.get("config_toml", ""))).get("sweep", {})
        except tomllib.TOMLDecodeError:
            continue
        if "central_pressure" in sweep:
            return "central_pressure"
    return "auto"


def cmd_overlay(args) -> int:
    from .exports import check_output_path, select_sequences
    from .plots import FIGURE_FORMATS, bands_from_results, ensemble_band, load_constraints, overlay_figure, save_figure

    out = check_output_path(args.out, FIGURE_FORMATS)
    constraints = load_constraints(args.constraints) if args.constraints else None
    runs = _read_runs(args.runs)
    sequences = select_sequences(runs, args.eos) if any(r.eos for r in runs) else []
    if args.likelihood:  # posterior and prior bands of the scored ensembles
        bands = bands_from_results(args.likelihood)
    else:  # an ensemble run file alone: its prior band
        floor = constraints.mass_floor if constraints is not None else 0.5
        bands = [ensemble_band(r, n, mass_floor=floor) for r in runs for n in r.ensembles]
    save_figure(overlay_figure(sequences, constraints, panels=args.panels and bool(sequences), bands=bands,
                               central=_central_axis(runs)), out)
    print(f"wrote {out}")
    return 0


def cmd_redshift(args) -> int:
    from . import exports

    meta = {"software": f"{PROG} {__version__}"}
    grid = args.grid_mass is not None or args.grid_radius is not None
    if grid:
        if args.run is not None or args.masses or args.observed_z is not None or args.members is not None:
            raise InputError("--grid-mass/--grid-radius tabulate without a run file: give no RUN.h5, "
                             "--masses, --members or --observed-z with them")
        if args.grid_mass is None or args.grid_radius is None:
            raise InputError("the grid needs both --grid-mass and --grid-radius")
        if args.out is None:
            raise InputError("give -o OUT.csv|ecsv|h5 for the grid")
        out = exports.check_output_path(args.out, exports.TABLE_FORMATS)
        table = exports.redshift_grid(exports.parse_range(args.grid_mass, "--grid-mass"),
                                      exports.parse_range(args.grid_radius, "--grid-radius"), meta=meta)
        print(f"wrote {exports.write_table(table, out)} ({len(table)} rows)")
        return 0
    if args.run is None:
        raise InputError("give a run file RUN.h5 (or --grid-mass and --grid-radius)")
    if (args.observed_z is None) != (args.sigma is None):
        raise InputError("--observed-z and --sigma go together")
    out = exports.check_output_path(args.out, exports.TABLE_FORMATS) if args.out else None
    if out is None and args.observed_z is None:
        raise InputError("give -o OUT.csv|ecsv|h5")
    masses = exports.parse_range(args.masses, "--masses") if args.masses else None
    members = exports.parse_members(args.members) if args.members is not None else None
    if members is not None and (masses is not None or args.observed_z is not None):
        raise InputError("--members selects ensemble stars of the star table; not with --masses or --observed-z",
                         key="--members")
    run = read_run(args.run)
    sequences, ensembles = exports.select_stars([run], args.eos)
    meta["source_run_file"] = str(run.path)
    if args.observed_z is not None:
        table = exports.redshift_window(sequences, args.observed_z, args.sigma, meta=meta)
        print(table.meta["window"])
        print(exports.format_text_table(table))
    elif masses is not None:
        table, notes = exports.redshift_table_at_masses(sequences, masses, control=exports.control_of_run(run),
                                                        meta=meta)
        for note in notes:
            print(f"{PROG}: note: {note}", file=sys.stderr)
    else:
        if members is not None and not ensembles:
            raise InputError("--members selects ensemble members, and the selection has no ensemble",
                             key="--members")
        table = exports.redshift_table(sequences, keep_unstable=args.keep_unstable, ensembles=ensembles,
                                       members=members, meta=meta)
    if out is not None:
        print(f"wrote {exports.write_table(table, out)} ({len(table)} rows)")
    return 0


def _likelihood_report(scores) -> str:
    """The lines `likelihood` prints: candidates with ln L and Bayes factors, ensembles with their posteriors."""
    from .likelihood import LIKELIHOOD_STATUS

    lines = [f"measurements with a likelihood ({len(scores.labels)}): {', '.join(scores.labels)}; "
             f"mass prior uniform on the stable branch above {scores.constraints.mass_floor:g} Msun"]
    if scores.candidates:
        width = max(len(n) for n in [*scores.candidates, "candidate"]) + 2
        lines.append(f"{'candidate':<{width}}{'ln L':>10}  {'Bayes factor':>12}  note")
        for c in sorted(scores.candidates.values(), key=lambda c: -c.log_likelihood
                        if np.isfinite(c.log_likelihood) else np.inf):
            note = "best" if c.log_bayes_factor == 0 else ""
            if c.status:
                note = LIKELIHOOD_STATUS[c.status]
            lines.append(f"{c.name:<{width}}{c.log_likelihood:>10.3f}  {c.bayes_factor:>12.4g}  {note}".rstrip())
    for e in scores.ensembles.values():
        c = e.counts
        lines.append(f"ensemble {e.name}: {c['scored']} of {c['members']} members scored "
                     f"({c['zero_likelihood']} with L = 0), effective sample size {e.effective_sample_size:.1f}, "
                     f"ln evidence {e.log_evidence:.3f}")
        from .schema import MEMBER_STATUS

        for table, meanings, what in ((c["excluded_by_member_status"], MEMBER_STATUS, "member status"),
                                      (c["excluded_by_likelihood_status"], LIKELIHOOD_STATUS, "likelihood status")):
            for code, count in table.items():
                lines.append(f"  weight 0: {count} with {what} {code} ({meanings[int(code)]})")
        if c["scored"] and not e.weight.sum() > 0:
            lines.append("  no member has L > 0: every weight is 0 (the measurements exclude the whole ensemble)")
        for q, label, spec in (("max_mass", "M_max [Msun]", ".3f"), ("radius_at_1.4", "R(1.4) [km]", ".2f"),
                               ("tidal_deformability_at_1.4", "Lambda(1.4)", ".0f")):
            post, prior = e.quantiles[q], e.prior_quantiles[q]
            lines.append(f"  {label:<14} posterior {_fmt(post[1], spec)} [{_fmt(post[0], spec)}, "
                         f"{_fmt(post[2], spec)}]   prior {_fmt(prior[1], spec)} [{_fmt(prior[0], spec)}, "
                         f"{_fmt(prior[2], spec)}]   (median [5 %, 95 %])")
    return "\n".join(lines)


def cmd_likelihood(args) -> int:
    from .constraints import load_constraints
    from .exports import check_output_path, parse_range
    from .scoring import score_runs, write_scores

    out = check_output_path(args.out, (".h5", ".hdf5"))
    table_path = check_output_path(args.table, (".ecsv", ".csv")) if args.table else None
    _refuse_run_file(out)
    constraints = load_constraints(args.constraints)
    masses = parse_range(args.band_masses, "--band-masses") if args.band_masses else None
    runs = _read_runs(args.runs)
    total = sum(e.size for r in runs for e in r.ensembles.values())
    bar = _Progress(total, interval=args.log_interval, what="scoring", unit="member") if total else None
    try:
        scores = score_runs(runs, constraints, band_masses=masses, eos=args.eos, ensembles=args.ensemble,
                            progress=bar)
        if bar:
            bar.close(finished=True)
    finally:
        if bar:
            bar.close()
    print(_likelihood_report(scores))
    print(f"wrote {write_scores(scores, out)}")
    if table_path is not None:
        table = scores.table()
        try:
            table.write(table_path, format="ascii.ecsv" if table_path.suffix.lower() == ".ecsv" else "ascii.csv",
                        overwrite=True)
        except OSError as exc:
            raise InputError(f"cannot write here ({exc.strerror or exc})", source=str(table_path)) from None
        print(f"wrote {table_path} ({len(table)} rows)")
    return 0


def _refuse_run_file(path: Path) -> None:
    """Never overwrite a run file with a results file."""
    import h5py

    if not path.is_file():
        return
    try:
        with h5py.File(path, "r") as f:
            is_run = f.attrs.get("format") == "stellar_match.run"
    except OSError:
        return
    if is_run:
        raise InputError("is a run file; the results go to a file of their own", source=str(path))


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"needs a whole number, got {text!r}") from None
    if not 1 <= value <= 10**6:
        raise argparse.ArgumentTypeError(f"needs a whole number from 1 to 1000000, got {value}")
    return value


class _OneLineParser(argparse.ArgumentParser):
    """argparse, but a usage mistake is one line on stderr and exit status 2."""

    def error(self, message: str):
        self.exit(2, f"{PROG}: error: {message} (see {self.prog} --help)\n")


def _workers(text: str) -> int:
    """``--workers``: the rule is said here, once."""
    try:
        n = int(text)
    except ValueError:
        n = 0
    if n < 1:
        raise argparse.ArgumentTypeError(f"needs a whole number >= 1 (1: solve in this process), got {text!r}")
    return n


def _seconds(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        x = -1.0
    if not (math.isfinite(x) and x >= 0):
        raise argparse.ArgumentTypeError(f"needs a number of seconds >= 0, got {text!r}")
    return x


def _add_log_interval(s: argparse.ArgumentParser) -> None:
    s.add_argument("--log-interval", type=_seconds, default=DEFAULT_LOG_INTERVAL, metavar="SECONDS",
                   help="when stderr is not a terminal (a batch job's log), log the progress every SECONDS "
                        f"(done so far, rate, time left; default {DEFAULT_LOG_INTERVAL:g}); "
                        "on a terminal a progress bar shows it")


def _add_eos_filter(s: argparse.ArgumentParser) -> None:
    # One name per option, repeated for more.  With nargs="+" the option took every word after it,
    # the positional run files included (`overlay --eos sly RUN.h5 -o x.png` lost RUN.h5).
    s.add_argument("--eos", action="append", metavar="NAME",
                   help="only this EOS; repeat for more: --eos sly --eos apr4 (default: all)")


def _verbosity_options(parser: argparse.ArgumentParser, suppress: bool) -> None:
    """-v/-q, on the top-level parser and again after the command (``stellar-match sweep C -q``)."""
    default = {"default": argparse.SUPPRESS} if suppress else {"default": None}
    g = parser.add_mutually_exclusive_group()
    g.add_argument("-v", "--verbose", dest="verbosity", action="store_const", const="verbose", **default,
                   help="also log debug lines (tasks as they start, resume and assembly steps)")
    g.add_argument("-q", "--quiet", dest="verbosity", action="store_const", const="quiet", **default,
                   help="log errors only: no progress bar or progress lines")


def build_parser() -> argparse.ArgumentParser:
    p = _OneLineParser(
        prog=PROG,
        description="Solve TOV interiors of dense stars, match them to the exterior "
        "Schwarzschild metric, and store mass-radius sequences in HDF5 run files.",
    )
    p.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    p.add_argument("--show-warnings", action="store_true",
                   help="print Python warnings (e.g. numpy RuntimeWarnings) on stderr, for debugging")
    _verbosity_options(p, suppress=False)
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND", parser_class=_OneLineParser)

    def command(name: str, **kwargs) -> argparse.ArgumentParser:
        s = sub.add_parser(name, **kwargs)
        _verbosity_options(s, suppress=True)
        return s

    s = command("sweep", help="run a sweep config into an HDF5 run file")
    s.add_argument("config", help="TOML sweep config")
    s.add_argument("-o", "--out", help="run file to write (default: CONFIG with .h5)")
    s.add_argument("--force", action="store_true", help="overwrite an existing run file (and unfinished parts)")
    s.add_argument("--resume", action="store_true",
                   help="continue an interrupted run from OUT.h5.parts, computing only missing chunks "
                        "(a finished run of this config: says so and exits 0)")
    s.add_argument("--workers", type=_workers, metavar="N",
                   help="local worker processes (default: the number of cores)")
    s.add_argument("--scheduler", metavar="ADDRESS",
                   help="send chunks to an existing Dask scheduler, e.g. tcp://host:8786")
    _add_log_interval(s)
    s.set_defaults(func=cmd_sweep)

    width = max(len(c[0]) + len(c[1]) for c in SUMMARY_COLUMNS) + 3
    columns = "\n".join(f"  {(name + ' ' + unit).strip():<{width}}{meaning}" for name, unit, meaning in SUMMARY_COLUMNS)
    s = command("summary", help="print max mass, R and z at 1.4 Msun, causality per EOS",
                formatter_class=argparse.RawDescriptionHelpFormatter,
                description=f"Print a table with one row per EOS of a run file:\n\n{columns}\n\n{SUMMARY_NOTES}")
    s.add_argument("run", help="HDF5 run file")
    s.add_argument("--crust-inertia-above", type=float, metavar="FRACTION",
                   help="also list the stars with crust_inertia_fraction >= FRACTION (glitch studies use about "
                        "0.014-0.016; Link, Epstein & Lattimer 1999, from memory)")
    s.set_defaults(func=cmd_summary)

    s = command("profile", help="one star's profile: interior on the solver's nodes, Schwarzschild exterior, "
                "the match at R (HDF5 or ECSV, optional figure)")
    s.add_argument("source", metavar="SOURCE", help="TOML config or HDF5 run file holding the EOS")
    s.add_argument("--eos", metavar="NAME", help="the EOS's name in SOURCE (may be left out if it has one)")
    g = s.add_mutually_exclusive_group(required=True)
    g.add_argument("--mass", type=float, metavar="M", help="gravitational mass [Msun] (stable branch, see --branch)")
    g.add_argument("--central-density", type=float, metavar="RHO", help="central rest-mass density [g/cm3]")
    g.add_argument("--central-pressure", type=float, metavar="P", help="central pressure [dyn/cm2]")
    s.add_argument("-o", "--out", required=True, metavar="OUT", help="profile to write (.h5 or .ecsv)")
    s.add_argument("--figure", metavar="FIG", help="also a figure (.png, .pdf or .svg)")
    s.add_argument("--outer-radius", type=float, default=10.0, metavar="K",
                   help="the exterior reaches K R (default 10)")
    s.add_argument("--branch", type=int, default=1, metavar="N",
                   help="with --mass: 1 the stable branch (default), 2, 3, ... later rising (twin) branches")
    s.set_defaults(func=cmd_profile)

    s = command("demo", help="run the bundled demo (three invented candidate EOS)")
    s.add_argument("--out-dir", default="runs", help="folder for the demo outputs (default: ./runs)")
    s.add_argument("--force", action="store_true",
                   help="overwrite files in OUT_DIR/demo_inputs that differ from the bundled ones (edited)")
    s.add_argument("--prior-members", type=_positive_int, metavar="N",
                   help="members of the demo's prior ensemble (default: as in demo_prior.toml, 1000)")
    _add_log_interval(s)
    s.set_defaults(func=cmd_demo)

    s = command("overlay", help="plot mass-radius curves of run files over forbidden regions and measurements")
    s.add_argument("runs", nargs="+", metavar="RUN.h5", help="one or more HDF5 run files")
    s.add_argument("-o", "--out", required=True, metavar="FIG", help="figure to write (.png, .pdf or .svg)")
    _add_eos_filter(s)
    s.add_argument("--constraints", metavar="FILE.toml", help="measurements to draw (TOML constraints file)")
    s.add_argument("--panels", action="store_true",
                   help="add M(rho_c) (M(p_c) for central-pressure sweeps), z(M) and Lambda(M) panels")
    s.add_argument("--likelihood", metavar="RESULTS.h5",
                   help="draw the prior and posterior R(M) bands of the ensembles scored in this results file")
    s.set_defaults(func=cmd_overlay)

    s = command("redshift", help="export surface redshifts and gravities for spectral fitting")
    s.add_argument("run", nargs="?", metavar="RUN.h5", help="HDF5 run file (not with --grid-*)")
    s.add_argument("-o", "--out", metavar="OUT", help="table to write (.ecsv, .csv or .h5)")
    _add_eos_filter(s)
    s.add_argument("--keep-unstable", action="store_true",
                   help="also export unstable stars and stars without a result (NaN, star_status > 0)")
    s.add_argument("--stable-only", action="store_true", help=argparse.SUPPRESS)  # the default since format 3
    s.add_argument("--members", metavar="START:STOP",
                   help="only these ensemble members (0-based, STOP excluded; default: all)")
    s.add_argument("--masses", metavar="MIN:MAX:STEP", help="solve stable-branch stars at these masses [Msun]")
    s.add_argument("--grid-mass", metavar="MIN:MAX:STEP", help="EOS-independent grid: masses [Msun]")
    s.add_argument("--grid-radius", metavar="MIN:MAX:STEP", help="EOS-independent grid: radii [km]")
    s.add_argument("--observed-z", type=float, metavar="Z", help="list M and R ranges consistent with this z")
    s.add_argument("--sigma", type=float, metavar="S", help="1-sigma uncertainty of --observed-z")
    s.set_defaults(func=cmd_redshift)

    s = command("likelihood", help="score run files against measurements: ln L, Bayes factors, "
                "ensemble weights and credible bands")
    s.add_argument("runs", nargs="+", metavar="RUN.h5", help="one or more HDF5 run files (only read)")
    s.add_argument("--constraints", required=True, metavar="FILE.toml", help="measurements (TOML constraints file)")
    s.add_argument("-o", "--out", required=True, metavar="OUT.h5", help="results file to write (HDF5)")
    s.add_argument("--table", metavar="OUT.ecsv", help="also a table, one row per EOS and ensemble (.ecsv or .csv)")
    _add_eos_filter(s)
    s.add_argument("--ensemble", action="append", metavar="NAME",
                   help="only this ensemble; repeat for more (default: all)")
    s.add_argument("--band-masses", metavar="MIN:MAX:STEP",
                   help="masses of the credible bands [Msun] (default: mass_floor to the heaviest member, step 0.02)")
    _add_log_interval(s)
    s.set_defaults(func=cmd_likelihood)
    return p


class _StderrHandler(logging.Handler):
    """Log records on stderr, as one line each, written past a progress bar (tqdm.write)."""

    def emit(self, record: logging.LogRecord) -> None:
        try:
            from tqdm import tqdm

            tqdm.write(self.format(record), file=sys.stderr)
        except Exception:  # noqa: BLE001 - logging must never break the run
            self.handleError(record)


@contextmanager
def _logging_to_stderr(level: int) -> Iterator[None]:
    """The only logging configuration of the package: one handler on the ``stellar_match`` logger."""
    package = logging.getLogger("stellar_match")
    handler = _StderrHandler()
    handler.setFormatter(logging.Formatter("%(asctime)s %(name)s %(levelname)s: %(message)s",
                                           datefmt="%Y-%m-%d %H:%M:%S"))
    old = package.level, package.propagate
    package.addHandler(handler)
    package.setLevel(level)
    package.propagate = False  # a host application's root handlers would print every line twice
    try:
        yield
    finally:
        package.removeHandler(handler)
        package.setLevel(old[0])
        package.propagate = old[1]


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``stellar-match`` console script."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # usage errors (one line, status 2), --help and --version (status 0)
        return int(exc.code or 0)
    level = {"quiet": logging.ERROR, "verbose": logging.DEBUG}.get(args.verbosity, logging.INFO)
    with warnings.catch_warnings(), _logging_to_stderr(level):
        # A warning is extra stderr lines: they would break the one-line error contract
        # and bury the real message.  Python's own -W / PYTHONWARNINGS still apply.
        if not (args.show_warnings or sys.warnoptions):
            warnings.simplefilter("ignore")
        return _run(args)


def _run(args) -> int:
    try:
        return args.func(args)
    except InputError as exc:
        print(f"{PROG}: error: {exc.one_line()}", file=sys.stderr)
        return 2
    except KeyboardInterrupt as exc:
        what = " (SIGTERM)" if isinstance(exc, Terminated) else ""
        parts = exc.args[0] if exc.args else None
        if parts is None:  # not a sweep
            print(f"{PROG}: interrupted{what}", file=sys.stderr)
        elif Path(parts).is_dir():
            print(f"{PROG}: interrupted{what}; finished chunks are kept in {parts}: rerun with --resume",
                  file=sys.stderr)
        else:
            print(f"{PROG}: interrupted{what} before any chunk was saved; no run file was written",
                  file=sys.stderr)
        return EXIT_SIGTERM if isinstance(exc, Terminated) else EXIT_SIGINT


if __name__ == "__main__":
    sys.exit(main())
