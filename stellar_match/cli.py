"""The ``stellar-match`` command line: argument parsing and printing only.

Every user mistake surfaces as one line on stderr and exit status 2; an
interrupt (Ctrl-C) keeps finished work in ``<out>.partial`` and exits 130.
"""

from __future__ import annotations

import argparse
import shutil
import sys
from importlib import resources
from pathlib import Path

import numpy as np

from . import __version__
from .errors import InputError
from .runfile import read_run
from .sequence import interpolate_on_stable_branch

PROG = "stellar-match"


def _progress_bar(total: int, desc: str):
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, unit="star", file=sys.stderr, disable=None,
                dynamic_ncols=True, leave=False)


def _fmt(x: float, spec: str) -> str:
    return format(x, spec) if np.isfinite(x) else "-"


def summary_table(run) -> str:
    """Plain-text table: one row per EOS of a run file."""
    head = ("EOS", "kind", "M_max", "R(M_max)", "rho_c(M_max)", "R(1.4)", "z(1.4)", "causal")
    units_row = ("", "", "[Msun]", "[km]", "[g/cm3]", "[km]", "[1]", "")
    rows = []
    for name, seq in run.eos.items():
        s = seq.summary
        rows.append((
            name,
            seq.kind,
            _fmt(s.get("max_mass", np.nan), ".4f"),
            _fmt(s.get("max_mass_radius", np.nan), ".3f"),
            _fmt(s.get("max_mass_central_density", np.nan), ".3e"),
            _fmt(interpolate_on_stable_branch(seq, 1.4, "radius"), ".3f"),
            _fmt(interpolate_on_stable_branch(seq, 1.4, "surface_redshift"), ".4f"),
            "yes" if s.get("causal") else "NO",
        ))
    widths = [max(len(r[i]) for r in (head, units_row, *rows)) for i in range(len(head))]
    lines = ["  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip()
             for r in (head, units_row, *rows)]
    notes = [f"  {n}: maximum {seq.summary['max_mass_status']}" for n, seq in run.eos.items()
             if not str(seq.summary.get("max_mass_status", "found")).startswith("found")]
    return "\n".join(lines + notes)


def _run_sweep(config_path: Path, out: Path | None, force: bool) -> Path:
    from .config import load_config
    from .sweep import run_config

    config = load_config(config_path)
    out = out if out is not None else config_path.with_suffix(".h5")
    total = config.axis.values.size * len(config.eos)
    bar = _progress_bar(total, "sweep")
    try:
        path = run_config(config, out, force=force, progress=bar.update)
    finally:
        bar.close()
    return path


def cmd_sweep(args) -> int:
    path = _run_sweep(Path(args.config), Path(args.out) if args.out else None, args.force)
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
    print(summary_table(read_run(run_path)))
    return 0


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog=PROG,
        description="Solve TOV interiors of dense stars, match them to the exterior "
        "Schwarzschild metric, and store mass-radius sequences in HDF5 run files.",
    )
    p.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    s = sub.add_parser("sweep", help="run a sweep config into an HDF5 run file")
    s.add_argument("config", help="TOML sweep config")
    s.add_argument("-o", "--out", help="run file to write (default: CONFIG with .h5)")
    s.add_argument("--force", action="store_true", help="overwrite an existing run file")
    s.set_defaults(func=cmd_sweep)

    s = sub.add_parser("summary", help="print max mass, R and z at 1.4 Msun, causality per EOS")
    s.add_argument("run", help="HDF5 run file")
    s.set_defaults(func=cmd_summary)

    s = sub.add_parser("demo", help="run the bundled demo (three invented candidate EOS)")
    s.add_argument("--out-dir", default="runs", help="folder for the demo outputs (default: ./runs)")
    s.set_defaults(func=cmd_demo)
    return p


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``stellar-match`` console script."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except InputError as exc:
        print(f"{PROG}: error: {exc.one_line()}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"{PROG}: interrupted; finished stars are kept in the .partial file", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
