"""Likelihood speed: one sampler call, scoring 10^5 members, and what 10^6 members cost end to end.

    python benchmarks/bench_likelihood.py [--solve-members 400] [--score-members 100000]
                                          [--calls 25] [--json OUT.json] [--quick]

Measured on one core (OMP/OPENBLAS threads 1), except the ensemble solve:
  (a) one sampler call, ``EOSLikelihood("piecewise_polytrope", demo constraints)(theta)`` for SLy's
      parameters (Read et al. 2009, Table III): build, 60 stars, stable branch, the demo's four
      measurements (mass, mass-radius, redshift, binary upper limit), best of CALLS; also without the
      binary (no response equations) and with the sweep defaults (step_scale 1, tolerance 1e-5, refined
      maximum), against the issue's goal of 15 ms;
  (b) scoring SCORE_MEMBERS members x 60 stars against the same four measurements from a run file
      already written (``score_runs``, bands included).  The file is made by solving SOLVE_MEMBERS members
      of the demo prior and tiling them: scoring does not depend on whether members differ.  Goal: 60 s;
  (c) solving SOLVE_MEMBERS x 60 stars on 2 local workers, at the sweep defaults and with the faster
      settings ([solver] tolerance = 1e-4, ensemble_maxima = "vertex"), and the time the rates imply for
      10^6 members x 60 stars (solve + score) on this machine, against the goal of 1 h.
--quick runs tiny sizes (a smoke test; numbers not meaningful).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import h5py  # noqa: E402
import numpy as np  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
SLY = [34.384, 3.005, 2.988, 2.851]
GOAL_CALL_MS, GOAL_SCORE_S, GOAL_1E6_H = 15.0, 60.0, 1.0


def prior_config(members: int, stars: int, fast: bool = False) -> str:
    """The demo prior at the sweep defaults, or with tolerance 1e-4 and vertex maxima (``fast``)."""
    text = (ROOT / "eos_tables" / "demo_prior.toml").read_text()
    text = text.replace("count = 32", f"count = {stars}").replace("count = 1000", f"count = {members}")
    if fast:
        return text.replace("tolerance = 1e-4", 'tolerance = 1e-4\nensemble_maxima = "vertex"')
    return text.replace("tolerance = 1e-4", "tolerance = 1e-5")  # the sweep default, as a user would run it


def best_of(fn, n: int) -> float:
    times = []
    for _ in range(n):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def sampler_calls(constraints, calls: int) -> dict:
    import stellar_match as sm
    from stellar_match.config import SolverOptions
    from stellar_match.constraints import parse_constraints

    no_binary = parse_constraints(constraints.text.split("[[binary]]")[0])
    cases = {
        "default_4_measurements": sm.EOSLikelihood("piecewise_polytrope", constraints),
        "default_without_binary": sm.EOSLikelihood("piecewise_polytrope", no_binary),
        "sweep_defaults_4_measurements": sm.EOSLikelihood(
            "piecewise_polytrope", constraints, control=SolverOptions().control(), refine_maximum=True),
    }
    out = {}
    for name, like in cases.items():
        value = like(SLY)  # warm-up (imports, caches of numpy)
        out[name] = {"log_likelihood": value, "best_ms": 1e3 * best_of(lambda like=like: like(SLY), calls),
                     "stars": int(like.values.size)}
    out["goal_ms"] = GOAL_CALL_MS
    return out


def tiled_run_file(source: Path, out: Path, members: int) -> Path:
    """A valid run file whose ensemble repeats the members of ``source`` up to ``members``.

    Written by the project's own writer, part by part, so that it is a run file like any other.
    """
    from types import SimpleNamespace

    import stellar_match as sm
    from stellar_match.ensemble import EnsembleSpec
    from stellar_match.runfile import RunFileWriter
    from stellar_match.schema import MEMBER_SUMMARIES, OPTIONAL_STAR_DATASETS, STAR_DATASETS

    run = sm.read_run(source)
    name = next(iter(run.ensembles))
    summary = run.ensembles[name]
    n = summary.size
    with h5py.File(source, "r") as f:
        g = f["ensemble"][name]
        columns = {k: g[k][()] for k in (*STAR_DATASETS, *MEMBER_SUMMARIES)}
        columns |= {k: g[k][()] for k in OPTIONAL_STAR_DATASETS if k in g}  # e.g. the crust datasets
        axis = SimpleNamespace(quantity=g.attrs["sweep_quantity"], values=g["sweep_values"][()],
                               unit=g["sweep_values"].attrs["unit"])
    names = list(summary.members)
    params = np.column_stack([summary.members[k] for k in names])
    tiled = np.concatenate([params] * (-(-members // n)))[:members]
    spec = EnsembleSpec(index=0, name=name, kind=summary.kind, parameters=tiled, origin={"tiled_from": str(source)})

    def parts():
        for a in range(0, members, n):
            b = min(members, a + n)
            yield SimpleNamespace(start=a, stop=b), {k: v[: b - a] for k, v in columns.items()}

    writer = RunFileWriter(out, config_text=run.attrs.get("config_toml", ""), force=True)
    writer.write_ensemble(spec, axis, parts())
    return writer.close()


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--solve-members", type=int, default=400)
    p.add_argument("--score-members", type=int, default=100_000)
    p.add_argument("--calls", type=int, default=25)
    p.add_argument("--json", type=Path)
    p.add_argument("--quick", action="store_true")
    args = p.parse_args(argv)
    if args.quick:
        args.solve_members, args.score_members, args.calls = 8, 40, 2

    import stellar_match as sm
    from stellar_match.scoring import score_runs

    constraints = sm.load_constraints(ROOT / "eos_tables" / "demo_constraints.toml")
    report: dict = {"quick": args.quick, "machine": {"python": sys.version.split()[0], "platform": platform.platform(),
                                                     "cpus": os.cpu_count()}}
    print("(a) one sampler call ...", flush=True)
    report["sampler_call"] = sampler_calls(constraints, args.calls)
    for k, v in report["sampler_call"].items():
        if isinstance(v, dict):
            print(f"    {k}: {v['best_ms']:.1f} ms (best of {args.calls}, {v['stars']} stars), "
                  f"ln L {v['log_likelihood']:.4f}")

    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        (tmp / "prior.toml").write_text(prior_config(args.solve_members, 60))
        print(f"(c) solving {args.solve_members} members x 60 stars on 2 workers ...", flush=True)
        t0 = time.perf_counter()
        solved = sm.run_config(tmp / "prior.toml", tmp / "prior.h5", workers=2)
        solve_s = time.perf_counter() - t0
        print(f"(b) scoring {args.score_members} members (tiled from the solved ones) on one core ...", flush=True)
        (tmp / "fast.toml").write_text(prior_config(args.solve_members, 60, fast=True))
        t0 = time.perf_counter()
        sm.run_config(tmp / "fast.toml", tmp / "fast.h5", workers=2)
        fast_s = time.perf_counter() - t0
        tiled = tiled_run_file(solved, tmp / "tiled.h5", args.score_members)
        t0 = time.perf_counter()
        scores = score_runs([tiled], constraints)
        score_s = time.perf_counter() - t0
        e = next(iter(scores.ensembles.values()))
    solve_rate = args.solve_members / solve_s
    score_rate = args.score_members / score_s
    report["scoring"] = {"members": args.score_members, "seconds": score_s, "members_per_second": score_rate,
                         "goal_seconds_for_1e5": GOAL_SCORE_S, "seconds_for_1e5": 1e5 / score_rate,
                         "effective_sample_size": e.effective_sample_size, "scored": e.counts["scored"]}
    report["solve"] = {"members": args.solve_members, "stars_per_member": 60, "workers": 2, "seconds": solve_s,
                       "members_per_second": solve_rate}
    fast_rate = args.solve_members / fast_s
    report["solve_fast_settings"] = {"members": args.solve_members, "seconds": fast_s, "members_per_second": fast_rate,
                                     "settings": "tolerance 1e-4, ensemble_maxima vertex"}
    hours = (1e6 / solve_rate + 1e6 / score_rate) / 3600.0
    fast_hours = (1e6 / fast_rate + 1e6 / score_rate) / 3600.0
    report["implied_1e6_members"] = {"solve_hours": 1e6 / solve_rate / 3600.0,
                                     "score_hours": 1e6 / score_rate / 3600.0, "total_hours": hours,
                                     "total_hours_fast_settings": fast_hours, "goal_hours": GOAL_1E6_H}
    print(f"    scoring: {score_s:.1f} s for {args.score_members} members ({score_rate:.0f} members/s; "
          f"10^5 members: {1e5 / score_rate:.1f} s, goal {GOAL_SCORE_S:.0f} s)")
    print(f"    solving: {solve_s:.1f} s for {args.solve_members} members on 2 workers ({solve_rate:.1f} members/s)")
    print(f"    solving with tolerance 1e-4 and vertex maxima: {fast_s:.1f} s ({fast_rate:.1f} members/s)")
    print(f"    10^6 members x 60 stars, fast settings: {fast_hours:.2f} h")
    print(f"    10^6 members x 60 stars: {hours:.2f} h (solve {1e6 / solve_rate / 3600:.2f} h + score "
          f"{1e6 / score_rate / 3600:.2f} h), goal {GOAL_1E6_H:.0f} h")
    if args.json:
        args.json.write_text(json.dumps(report, indent=2))
        print(f"wrote {args.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
