"""Inference at the speed of a plain sweep: the table of the compiled solver, measured side by side.

    python benchmarks/bench_inference.py [--members 10000] [--wide-members 10000] [--calls 200]
                                         [--json OUT.json] [--markdown OUT.md] [--readme] [--quick]

Every sweep runs ``stellar-match sweep`` in a child process, as a user runs it
(wall time includes the start-up and the numba cache load; resident memory of
the main process and of every worker sampled every 0.2 s with psutil), with
the default solver settings ([solver] tolerance 1e-5), on the same machine in
one run of this script:

  plain        the SLy piecewise polytrope (Read et al. 2009, Table III), central
               densities log-spaced in [2.5e14, 3.5e15] g/cm^3, 2 workers: 20 000 (as
               the issue measured it, where start-up is a third of the time) and
               200 000 (the rate the ratios divide by: as long a run as the ensembles');
  ensemble 60  MEMBERS Read et al. piecewise polytropes of the demo prior
               (eos_tables/demo_prior.toml) x 60 stars in the same range, 2 workers
               and 1 worker (the speed-up);
  ensemble 10  the same members x 10 stars, 2 workers;
  wide prior   WIDE_MEMBERS members of benchmarks/bench_wide_prior.py's prior x 20 stars, 2 workers;
  scoring      ``score_runs`` of the ensemble-60 file against eos_tables/demo_constraints.toml;
  sampler      ``EOSLikelihood("piecewise_polytrope", demo constraints)`` at SLy's parameters
               (60 stars, four measurements with a binary), CALLS calls on one core, median.

The 10^6-member figure is extrapolated linearly from the ensemble-60 run
(2 workers) and its scoring.  --markdown writes the table as the docs show it;
--readme replaces the table between the markers in README.md.  --quick runs
tiny sizes (a smoke test; numbers not meaningful).
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))
from bench_wide_prior import config_text as wide_prior_config  # noqa: E402
from child_runs import run_sampling_memory  # noqa: E402
from readme_tables import write_table  # noqa: E402

SLY = (34.384, [3.005, 2.988, 2.851])  # Read et al. (2009), Table III
RANGE = (2.5e14, 3.5e15)  # g/cm^3, the demo prior's sweep


def plain_config(stars: int) -> str:
    return f"""[sweep]
central_density = {{ min = {RANGE[0]:g}, max = {RANGE[1]:g}, count = {stars} }}

[[eos]]
name = "sly"
kind = "piecewise_polytrope"
log10_p1 = {SLY[0]}
gammas = {SLY[1]}
"""


def prior_config(members: int, stars: int) -> str:
    text = (ROOT / "eos_tables" / "demo_prior.toml").read_text()
    text = text.replace("count = 32", f"count = {stars}").replace("count = 1000", f"count = {members}")
    return text.replace("tolerance = 1e-4", "tolerance = 1e-5")  # the sweep default


def cli_sweep(text: str, workers: int, folder: Path, name: str) -> dict:
    """One ``stellar-match sweep`` in a child process: wall time and peak resident memory."""
    cfg = folder / f"{name}.toml"
    cfg.write_text(text)
    out = folder / f"{name}.h5"
    cmd = [sys.executable, "-m", "stellar_match.cli", "sweep", str(cfg), "-o", str(out), "--workers", str(workers),
           "--force", "-q"]
    wall, peak, code, stderr = run_sampling_memory(cmd)
    if code != 0:
        raise SystemExit(f"{name}: sweep failed ({code}): {stderr}")
    main_pid = next(iter(peak))
    workers_rss = sorted((v / 2**20 for k, v in peak.items() if k != main_pid), reverse=True)
    return {"wall_s": wall, "workers": workers, "main_rss_mib": peak[main_pid] / 2**20,
            "largest_worker_rss_mib": workers_rss[0] if workers_rss else float("nan"), "file": str(out)}


def sampler_call_ms(calls: int) -> dict:
    """Median and best of ``calls`` likelihood calls at SLy's parameters, one core."""
    import stellar_match as sm

    constraints = sm.load_constraints(ROOT / "eos_tables" / "demo_constraints.toml")
    like = sm.EOSLikelihood("piecewise_polytrope", constraints)
    theta = [SLY[0], *SLY[1]]
    value = like(theta)  # warm-up: imports, caches
    times = []
    for _ in range(calls):
        t0 = time.perf_counter()
        like(theta)
        times.append(time.perf_counter() - t0)
    return {"median_ms": 1e3 * statistics.median(times), "best_ms": 1e3 * min(times), "log_likelihood": value,
            "stars": int(like.values.size), "calls": calls}


def sampler_breakdown(calls: int) -> dict:
    """Milliseconds per sampler call spent in each stage, by wrapping the stages' functions with timers."""
    import stellar_match as sm
    from stellar_match import ensemble, inference, structure

    constraints = sm.load_constraints(ROOT / "eos_tables" / "demo_constraints.toml")
    like = sm.EOSLikelihood("piecewise_polytrope", constraints)
    theta = [SLY[0], *SLY[1]]
    like(theta)
    spent: dict[str, float] = {}
    stages = {"compiled solve of the stars": (structure, "_run_kernel"),
              "surface values and error estimates": (structure, "_surface_values"),
              "whole star solve (the two above included)": (ensemble, "solve_interiors"),
              "sequence analysis": (ensemble, "analyse_sequence"),
              "member solve (EOS build and lowering, star solve, analysis)": (inference, "solve_members"),
              "stable branches as cubic pieces": (inference, "stable_branches"),
              "likelihood quadratures": (inference, "log_likelihoods")}
    saved = []
    for label, (module, name) in stages.items():
        original = getattr(module, name)
        saved.append((module, name, original))

        def timed(*a, _f=original, _label=label, **k):
            t0 = time.perf_counter()
            try:
                return _f(*a, **k)
            finally:
                spent[_label] = spent.get(_label, 0.0) + time.perf_counter() - t0

        setattr(module, name, timed)
    try:
        t0 = time.perf_counter()
        for _ in range(calls):
            like(theta)
        total = time.perf_counter() - t0
    finally:
        for module, name, original in saved:
            setattr(module, name, original)
    out = {label: 1e3 * spent.get(label, 0.0) / calls for label in stages}
    out["whole call"] = 1e3 * total / calls
    return out


def scoring_s(path: str) -> float:
    import stellar_match as sm

    constraints = sm.load_constraints(ROOT / "eos_tables" / "demo_constraints.toml")
    t0 = time.perf_counter()
    sm.score_runs([path], constraints)
    return time.perf_counter() - t0


def measure(members: int, wide_members: int, calls: int, plain_stars: int) -> dict:
    # single-threaded numerics in every process, as the workers run them
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    r: dict = {}
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        cli_sweep(plain_config(100), 1, folder, "warm")  # the numba cache, compiled once before timing
        r["start_up"] = cli_sweep(plain_config(200), 2, folder, "tiny") | {"stars": 200}
        r["plain_20000"] = cli_sweep(plain_config(plain_stars // 10), 2, folder, "plain20") | {
            "stars": plain_stars // 10}
        r["plain"] = cli_sweep(plain_config(plain_stars), 2, folder, "plain") | {"stars": plain_stars}
        r["ensemble_60"] = cli_sweep(prior_config(members, 60), 2, folder, "e60") | {"stars": members * 60}
        r["ensemble_60_one_worker"] = cli_sweep(prior_config(members, 60), 1, folder, "e60w1") | {
            "stars": members * 60}
        r["ensemble_10"] = cli_sweep(prior_config(members, 10), 2, folder, "e10") | {"stars": members * 10}
        r["wide_prior"] = cli_sweep(wide_prior_config(wide_members), 2, folder, "wide") | {
            "stars": wide_members * 20}
        r["scoring_60_s"] = scoring_s(r["ensemble_60"]["file"])
    r["sampler"] = sampler_call_ms(calls)
    r["sampler_stages_ms"] = sampler_breakdown(calls)
    for v in r.values():
        if isinstance(v, dict) and "stars" in v and "wall_s" in v:
            v["stars_per_s"] = v["stars"] / v["wall_s"]
            v.pop("file", None)
    plain_rate = r["plain"]["stars_per_s"]
    r["ratio_60"] = r["ensemble_60"]["stars_per_s"] / plain_rate
    r["ratio_10"] = r["ensemble_10"]["stars_per_s"] / plain_rate
    r["speed_up_2_over_1"] = r["ensemble_60_one_worker"]["wall_s"] / r["ensemble_60"]["wall_s"]
    per_member = (r["ensemble_60"]["wall_s"] + r["scoring_60_s"]) / members
    r["implied_1e6_x_60_h"] = per_member * 1e6 / 3600
    # a run without worker processes (one worker, or one chunk) did its work in the main process
    r["peak_worker_rss_mib"] = max(v["largest_worker_rss_mib"] if np.isfinite(v["largest_worker_rss_mib"])
                                   else v["main_rss_mib"] for v in r.values()
                                   if isinstance(v, dict) and "largest_worker_rss_mib" in v)
    r["members"], r["wide_members"] = members, wide_members
    return r


def machine() -> str:
    import numba

    return (f"{platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}, "
            f"numpy {np.__version__}, numba {numba.__version__}")


def markdown(r: dict, command: str) -> str:
    m, w = r["members"], r["wide_members"]
    rows = [
        (f"plain SLy sweep, {r['plain_20000']['stars']} stars, 2 workers: stars/s (start-up included)",
         f"{r['plain_20000']['stars_per_s']:,.0f}", "12 900", "not lower; aim for 2x"),
        (f"plain SLy sweep, {r['plain']['stars']} stars, 2 workers: stars/s (the ratios' divisor)",
         f"{r['plain']['stars_per_s']:,.0f}", "", ""),
        ("start-up: a 200-star sweep, 2 workers, wall time (imports, numba cache, workers, run file)",
         f"{r['start_up']['wall_s']:.2f} s", "", ""),
        (f"ensemble stars/s / plain stars/s, {m} members x 60 stars", f"{r['ratio_60']:.2f}", "0.36", ">= 0.8"),
        ("the same with 10 stars per member", f"{r['ratio_10']:.2f}", "0.09", ">= 0.5"),
        (f"{m} members x 10 stars, 2 workers", f"{r['ensemble_10']['wall_s']:.1f} s", "135 s", "<= 15 s"),
        (f"wide prior, {w} members x 20 stars, 2 workers", f"{r['wide_prior']['wall_s']:.1f} s", "372 s",
         "<= 40 s"),
        ("sampler call, 60 stars, four measurements with a binary, one core, median",
         f"{r['sampler']['median_ms']:.1f} ms", "58 to 88 ms", "<= 5 ms"),
        ("README's emcee example, 32 walkers x 2000 steps = 64 000 calls at that median, one core",
         f"{64_000 * r['sampler']['median_ms'] / 6e4:.1f} min", "more than an hour", "minutes, not hours"),
        (f"10^6 members x 60 stars solved and scored, 2 cores (from {m} members)",
         f"{r['implied_1e6_x_60_h']:.2f} h", "about 44 h", "<= 1 h"),
        (f"2 workers over 1 on 2 cores, ensemble ({m} x 60)", f"{r['speed_up_2_over_1']:.2f}x", "1.37x",
         ">= 1.8x"),
        ("peak RSS per worker, any run above", f"{r['peak_worker_rss_mib']:.0f} MiB", "about 110 MiB", "<= 300 MiB"),
    ]
    lines = [f"Measured {r['date']} on {r['machine']}, by `{command}` (one run, side by side).", "",
             "| quantity | measured | before the compiled solver | target |", "|---|---|---|---|"]
    lines += [f"| {a} | **{b}** | {c} | {d} |" for a, b, c, d in rows]
    lines += ["", "Where a sampler call goes (the same call, its stages timed; ms per call, one core):", "",
              "| stage | ms |", "|---|---|"]
    lines += [f"| {k} | {v:.2f} |" for k, v in r["sampler_stages_ms"].items()]
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--members", type=int, default=10_000)
    ap.add_argument("--wide-members", type=int, default=10_000)
    ap.add_argument("--calls", type=int, default=200)
    ap.add_argument("--json", type=Path, default=ROOT / "benchmarks" / "results" / "bench_inference.json")
    ap.add_argument("--markdown", type=Path)
    ap.add_argument("--readme", action="store_true", help="write the table into README.md between its markers")
    ap.add_argument("--quick", action="store_true", help="tiny sizes: a smoke test, numbers not meaningful")
    args = ap.parse_args(argv)
    if args.quick:
        args.members, args.wide_members, args.calls = 20, 20, 5
    result = measure(args.members, args.wide_members, args.calls, 400 if args.quick else 200_000)
    result["date"] = datetime.date.today().isoformat()
    result["machine"] = machine()
    result["quick"] = args.quick
    command = "python benchmarks/bench_inference.py" + (" --quick" if args.quick else "")
    table = markdown(result, command)
    print(table)
    args.json.parent.mkdir(parents=True, exist_ok=True)
    args.json.write_text(json.dumps(result, indent=2, default=float))
    print(f"wrote {args.json}")
    if args.markdown:
        args.markdown.write_text(table)
        print(f"wrote {args.markdown}")
    if args.readme:
        if args.quick:
            raise SystemExit("--readme needs a full run, not --quick")
        write_table("bench_inference", table)
        print("wrote README.md")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
