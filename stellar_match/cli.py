"""The ``stellar-match`` command line: argument parsing and printing only.

Every user mistake -- and every output that cannot be written: disk full, a
file-size limit, a read-only folder, an output held by another run -- surfaces
as one line on stderr and exit status 2.  An interrupt of a sweep (Ctrl-C, or
SIGTERM from a batch system at its time limit) stops its workers, keeps the
finished chunks in ``<out>.parts`` and exits 130 (SIGINT) or 143 (SIGTERM).
"""

from __future__ import annotations

import argparse
import os
import shutil
import signal
import sys
import threading
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from importlib import resources
from pathlib import Path

import numpy as np

from . import __version__
from .errors import InputError
from .runfile import read_run
from .schema import STAR_STATUS
from .sequence import interpolate_on_stable_branch

PROG = "stellar-match"
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


def _progress_bar(total: int, desc: str):
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, unit="star", file=sys.stderr, disable=None,
                dynamic_ncols=True, leave=False)


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


def summary_table(run) -> str:
    """Plain-text table: one row per EOS of a run file."""
    head = ("EOS", "kind", "M_max", "R(M_max)", "rho_c(M_max)", "R(1.4)", "z(1.4)", "Lambda(1.4)",
            "I(1.4)", "causal")
    units_row = ("", "", "[Msun]", "[km]", "[g/cm3]", "[km]", "[1]", "[1]", "[1e45 g cm2]", "")
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


def _run_sweep(config_path: Path, out: Path | None, force: bool, *, resume: bool = False,
               workers: int = 1, scheduler: str | None = None) -> Path:
    from .config import load_config
    from .sweep import run_config

    config = load_config(config_path)
    out = out if out is not None else config_path.with_suffix(".h5")
    total = config.axis.values.size * (len(config.eos) + sum(e.size for e in config.ensembles))
    members = sum(e.size for e in config.ensembles)
    bar = _LazyBar(total, "sweep", members)
    try:
        with _sweep_signals():
            path = run_config(config, out, force=force, resume=resume, workers=workers, scheduler=scheduler,
                              progress=bar.update)
    except KeyboardInterrupt as exc:  # Terminated too: keep the kind, add where the parts are
        bar.close()
        raise type(exc)(f"{out}.parts") from None
    finally:
        bar.close()
    return path


class _LazyBar:
    """A progress bar that appears with the first finished chunk, so that input
    errors found while building the EOS print as one clean line.  It shows
    stars/s, members/s (ensembles) and the time left."""

    def __init__(self, total: int, desc: str, members: int = 0) -> None:
        self.total, self.desc, self.members, self.bar = total, desc, members, None
        self.done_members = 0
        self.t0 = None

    def update(self, stars: int, members: int = 0) -> None:
        import time

        if self.bar is None:
            self.bar = _progress_bar(self.total, self.desc)
            self.t0 = time.perf_counter()
        self.bar.update(stars)
        if self.members:
            self.done_members += members
            rate = self.done_members / max(time.perf_counter() - self.t0, 1e-9)
            self.bar.set_postfix_str(f"{self.done_members}/{self.members} members, {rate:.1f} members/s",
                                     refresh=False)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None


def cmd_sweep(args) -> int:
    if args.workers is not None and args.workers < 1:
        raise InputError(f"--workers needs a whole number >= 1, got {args.workers}", key="--workers")
    workers = args.workers if args.workers is not None else (os.cpu_count() or 1)
    path = _run_sweep(Path(args.config), Path(args.out) if args.out else None, args.force,
                      resume=args.resume, workers=workers, scheduler=args.scheduler)
    print(f"wrote {path}")
    print(summary_table(read_run(path)))
    return 0


def cmd_summary(args) -> int:
    print(summary_table(read_run(args.run)))
    return 0


def cmd_demo(args) -> int:
    out_dir = Path(args.out_dir)
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create output folder ({exc.strerror})", source=str(out_dir)) from None
    # Copy the bundled config and tables so the user can read and edit them.
    bundled = resources.files("stellar_match.bundled_tables")
    demo_dir = out_dir / "demo_inputs"
    demo_dir.mkdir(exist_ok=True)
    for item in bundled.iterdir():
        if item.name.endswith((".csv", ".toml")):
            with resources.as_file(item) as src:
                shutil.copyfile(src, demo_dir / item.name)
    run_path = _run_sweep(demo_dir / "demo.toml", out_dir / "demo.h5", force=True)
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
    return 0


def _read_runs(paths: list[str]):
    return [read_run(p) for p in paths]


def cmd_overlay(args) -> int:
    from .exports import check_output_path, select_sequences
    from .plots import FIGURE_FORMATS, load_constraints, overlay_figure, save_figure

    out = check_output_path(args.out, FIGURE_FORMATS)
    constraints = load_constraints(args.constraints) if args.constraints else None
    sequences = select_sequences(_read_runs(args.runs), args.eos)
    save_figure(overlay_figure(sequences, constraints, panels=args.panels), out)
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


class _OneLineParser(argparse.ArgumentParser):
    """argparse, but a usage mistake is one line on stderr and exit status 2."""

    def error(self, message: str):
        self.exit(2, f"{PROG}: error: {message} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    p = _OneLineParser(
        prog=PROG,
        description="Solve TOV interiors of dense stars, match them to the exterior "
        "Schwarzschild metric, and store mass-radius sequences in HDF5 run files.",
    )
    p.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    p.add_argument("--show-warnings", action="store_true",
                   help="print Python warnings (e.g. numpy RuntimeWarnings) on stderr, for debugging")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND", parser_class=_OneLineParser)

    s = sub.add_parser("sweep", help="run a sweep config into an HDF5 run file")
    s.add_argument("config", help="TOML sweep config")
    s.add_argument("-o", "--out", help="run file to write (default: CONFIG with .h5)")
    s.add_argument("--force", action="store_true", help="overwrite an existing run file (and unfinished parts)")
    s.add_argument("--resume", action="store_true",
                   help="continue an interrupted run from OUT.h5.parts, computing only missing chunks")
    s.add_argument("--workers", type=int, metavar="N",
                   help="local worker processes (default: the number of cores)")
    s.add_argument("--scheduler", metavar="ADDRESS",
                   help="send chunks to an existing Dask scheduler, e.g. tcp://host:8786")
    s.set_defaults(func=cmd_sweep)

    s = sub.add_parser("summary", help="print max mass, R and z at 1.4 Msun, causality per EOS")
    s.add_argument("run", help="HDF5 run file")
    s.set_defaults(func=cmd_summary)

    s = sub.add_parser("demo", help="run the bundled demo (three invented candidate EOS)")
    s.add_argument("--out-dir", default="runs", help="folder for the demo outputs (default: ./runs)")
    s.set_defaults(func=cmd_demo)

    s = sub.add_parser("overlay", help="plot mass-radius curves of run files over forbidden regions and measurements")
    s.add_argument("runs", nargs="+", metavar="RUN.h5", help="one or more HDF5 run files")
    s.add_argument("-o", "--out", required=True, metavar="FIG", help="figure to write (.png, .pdf or .svg)")
    s.add_argument("--eos", action="extend", nargs="+", metavar="NAME", help="only these EOS (default: all)")
    s.add_argument("--constraints", metavar="FILE.toml", help="measurements to draw (TOML constraints file)")
    s.add_argument("--panels", action="store_true", help="add M(rho_c), z(M) and Lambda(M) panels")
    s.set_defaults(func=cmd_overlay)

    s = sub.add_parser("redshift", help="export surface redshifts and gravities for spectral fitting")
    s.add_argument("run", nargs="?", metavar="RUN.h5", help="HDF5 run file (not with --grid-*)")
    s.add_argument("-o", "--out", metavar="OUT", help="table to write (.ecsv, .csv or .h5)")
    s.add_argument("--eos", action="extend", nargs="+", metavar="NAME",
                   help="only these EOS or ensembles (default: all of the run file)")
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
    return p


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``stellar-match`` console script."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # usage errors (one line, status 2), --help and --version (status 0)
        return int(exc.code or 0)
    with warnings.catch_warnings():
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
