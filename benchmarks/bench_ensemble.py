"""Ensemble throughput, multi-worker speed-up and memory, measured on real runs.

    python benchmarks/bench_ensemble.py [--members 2000] [--stars 100]
                                        [--rss-members 10000 100000] [--rss-stars 10]
                                        [--rss-workers 2] [--json OUT.json] [--quick]

Every measurement is a full ``run_config`` (parts, assembly, HDF5 file) in a
fresh child process, timed inside the child (imports excluded):
  (a) MEMBERS Read et al. (2009) piecewise polytropes sampled uniformly
      (log10_p1 in [34.2, 34.8], Gamma_1..3 in [2, 4]) x STARS central
      densities log-spaced in [3e14, 3e15] g/cm^3, on 1 and on 2 local
      workers: members/s, stars/s and the speed-up (target >= 1.7x);
  (b) peak resident memory (ru_maxrss of the main process, and of the
      largest worker) for each of RSS_MEMBERS members at RSS_STARS stars per
      member -- fewer stars than (a) to keep the time sane -- to show that
      memory does not grow with the number of members;
  (c) the time (a)'s rates imply for 10^6 members x STARS stars.
--quick runs a small version of everything (a smoke test, numbers not meaningful).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")  # one core per worker, as the targets are stated
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

#: The prior of issue 6; it covers the fits of Read, Lackey, Owen & Friedman 2009, PRD 79, 124032, Table III.
RANGES = {"log10_p1": (34.2, 34.8), "gamma1": (2.0, 4.0), "gamma2": (2.0, 4.0), "gamma3": (2.0, 4.0)}
SPEED_UP_TARGET = 1.7


def ensemble_config(members: int, stars: int, seed: int = 2009) -> str:
    ranges = "\n".join(f"{k} = [{lo}, {hi}]" for k, (lo, hi) in RANGES.items())
    return f"""# bench_ensemble.py: {members} members x {stars} stars
[sweep]
central_density = {{ min = 3e14, max = 3e15, count = {stars} }}

[[ensemble]]
name = "prior"
kind = "piecewise_polytrope"
[ensemble.sample]
count = {members}
seed = {seed}
{ranges}
"""


def child_main(config: str, out: str, workers: int) -> None:
    """In the child: one run_config, then its time and peak memory as JSON on stdout."""
    from stellar_match import sweep

    t = time.perf_counter()
    sweep.run_config(config, out, force=True, workers=workers)
    seconds = time.perf_counter() - t
    print(json.dumps({
        "seconds": seconds,
        # Linux reports ru_maxrss in KiB
        "main_peak_rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
        "worker_peak_rss_mib": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024,
    }))


def measure(folder: Path, members: int, stars: int, workers: int) -> dict:
    cfg = folder / f"ens_{members}x{stars}.toml"
    cfg.write_text(ensemble_config(members, stars))
    out = folder / f"ens_{members}x{stars}_w{workers}.h5"
    proc = subprocess.run([sys.executable, __file__, "--child", str(cfg), str(out), str(workers)],
                          capture_output=True, text=True, check=False)
    if proc.returncode != 0:
        raise SystemExit(f"child run failed ({proc.returncode}):\n{proc.stderr}")
    result = json.loads(proc.stdout.strip().splitlines()[-1])
    import h5py
    import numpy as np

    with h5py.File(out, "r") as f:
        status = f["ensemble"]["prior"]["status"][()]
    out.unlink()
    result.update(members=members, stars_per_member=stars, workers=workers,
                  members_per_second=members / result["seconds"],
                  stars_per_second=members * stars / result["seconds"],
                  status_counts={str(k): int(v) for k, v in enumerate(np.bincount(status, minlength=7))})
    return result


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--members", type=int, default=2000)
    ap.add_argument("--stars", type=int, default=100)
    ap.add_argument("--rss-members", type=int, nargs="+", default=[10_000, 100_000])
    ap.add_argument("--rss-stars", type=int, default=10)
    ap.add_argument("--rss-workers", type=int, default=2)
    ap.add_argument("--json", type=Path, default=Path(__file__).parent / "results" / "bench_ensemble.json")
    ap.add_argument("--quick", action="store_true", help="small smoke version of every measurement")
    ap.add_argument("--child", nargs=3, metavar=("CONFIG", "OUT", "WORKERS"), help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        child_main(args.child[0], args.child[1], int(args.child[2]))
        return {}
    if args.quick:
        args.members, args.stars, args.rss_members, args.rss_stars = 48, 20, [40, 120], 10

    import numpy as np

    report: dict = {
        "machine": {"python": platform.python_version(), "numpy": np.__version__,
                    "processor": platform.machine(), "cpus": os.cpu_count(), "platform": platform.platform()},
        "quick": bool(args.quick),
    }
    with tempfile.TemporaryDirectory(prefix="bench_ensemble_") as tmp:
        folder = Path(tmp)
        runs = {w: measure(folder, args.members, args.stars, w) for w in (1, 2)}
        for w, r in runs.items():
            print(f"(a) {args.members} members x {args.stars} stars, {w} worker(s): {r['seconds']:.1f} s, "
                  f"{r['members_per_second']:.1f} members/s, {r['stars_per_second']:.0f} stars/s")
        speed_up = runs[1]["seconds"] / runs[2]["seconds"]
        print(f"(a) speed-up 2 workers / 1 worker: {speed_up:.2f}x (target >= {SPEED_UP_TARGET}x)")
        report["throughput"] = {"one_worker": runs[1], "two_workers": runs[2], "speed_up": speed_up,
                                "speed_up_target": SPEED_UP_TARGET}

        memory = []
        for n in args.rss_members:
            r = measure(folder, n, args.rss_stars, args.rss_workers)
            memory.append(r)
            print(f"(b) {n} members x {args.rss_stars} stars ({args.rss_stars} stars per member to keep the "
                  f"time sane), {args.rss_workers} worker(s): {r['seconds']:.1f} s, peak RSS main "
                  f"{r['main_peak_rss_mib']:.0f} MiB, largest worker {r['worker_peak_rss_mib']:.0f} MiB")
        report["memory"] = {"stars_per_member": args.rss_stars, "workers": args.rss_workers, "runs": memory,
                            "note": f"{args.rss_stars} stars per member (not {args.stars}) to keep the time sane"}

    implied = {}
    for w, r in runs.items():
        hours = 1e6 / r["members_per_second"] / 3600
        implied[f"{w}_worker{'s' if w > 1 else ''}_hours"] = hours
        print(f"(c) 10^6 members x {args.stars} stars on {w} core(s): {hours:.1f} h (from (a)'s rate)")
    report["implied_1e6_members"] = {"stars_per_member": args.stars, **implied}

    args.json.parent.mkdir(parents=True, exist_ok=True)
    args.json.write_text(json.dumps(report, indent=2))
    print(f"wrote {args.json}")
    return report


if __name__ == "__main__":
    main()
