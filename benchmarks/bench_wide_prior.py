"""The wide-prior ensemble of issue 9: wall time, peak memory per process, statuses.

    python benchmarks/bench_wide_prior.py [--members 10000] [--workers 2] [--json OUT.json]

Runs ``stellar-match sweep`` in a child process on an ensemble of Read et al.
(2009) piecewise polytropes drawn uniformly from a prior much wider than the
published fits (log10_p1 in [33.8, 35.6], every Gamma in [0.6, 6.0]) with 20
central densities log-spaced in [1e14, 4e15] g/cm^3.  Before error control,
such a run did not finish a chunk in 4 minutes and a worker grew to 5.5 GB.

Measured: the wall time, the peak resident memory of the main process and of
every worker (sampled every 0.2 s with psutil), the member and star status
distributions, and the two consistency checks of the issue: every member with
status 0 has ``max_mass`` at least the mass of each of its stable stars, and
no member with status 0 has a NaN M_max.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

import h5py
import numpy as np
from child_runs import run_sampling_memory

RANGES = {"log10_p1": (33.8, 35.6), "gamma1": (0.6, 6.0), "gamma2": (0.6, 6.0), "gamma3": (0.6, 6.0)}


def config_text(members: int, seed: int = 2026) -> str:
    ranges = "\n".join(f"{k} = [{lo}, {hi}]" for k, (lo, hi) in RANGES.items())
    return f"""[sweep]
central_density = {{ min = 1e14, max = 4e15, count = 20 }}

[[ensemble]]
name = "wide"
kind = "piecewise_polytrope"
[ensemble.sample]
count = {members}
seed = {seed}
{ranges}
"""


def run(members: int, workers: int, folder: Path) -> dict:
    cfg = folder / "wide.toml"
    cfg.write_text(config_text(members))
    out = folder / "wide.h5"
    cmd = [sys.executable, "-m", "stellar_match.cli", "sweep", str(cfg), "-o", str(out), "--workers", str(workers)]
    wall, peak, code, stderr = run_sampling_memory(cmd)
    if code != 0:
        raise SystemExit(f"sweep failed ({code}): {stderr}")
    main_pid = next(iter(peak))
    with h5py.File(out, "r") as f:
        g = f["ensemble"]["wide"]
        status, star_status = g["status"][()], g["star_status"][()]
        meaning = json.loads(g.attrs["status_meaning"])
        mass, stable, m_max = g["mass"][()], g["stable"][()], g["max_mass"][()]
    ok = status == 0
    heaviest_stable = np.where(stable, mass, -np.inf).max(axis=1)
    return {
        "members": members,
        "workers": workers,
        "wall_s": round(wall, 1),
        "members_per_s": round(members / wall, 1),
        "peak_rss_mib_main": round(peak[main_pid] / 2**20, 1),
        "peak_rss_mib_workers": sorted(round(v / 2**20, 1) for k, v in peak.items() if k != main_pid),
        "member_status": {meaning[str(k)]: int((status == k).sum()) for k in np.unique(status)},
        "star_status": {int(k): int((star_status == k).sum()) for k in np.unique(star_status)},
        "ok_members_below_a_stable_star": int(np.sum(ok & ~(m_max >= heaviest_stable * (1 - 1e-6)))),
        "ok_members_without_max_mass": int(np.sum(ok & ~np.isfinite(m_max))),
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--members", type=int, default=10_000)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--json", type=Path)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        result = run(args.members, args.workers, Path(tmp))
    text = json.dumps(result, indent=2)
    print(text)
    if args.json:
        args.json.write_text(text)


if __name__ == "__main__":
    main()
