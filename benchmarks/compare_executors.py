"""Run one config serially, on 2 local workers and on a Dask LocalCluster; compare bit for bit.

    python benchmarks/compare_executors.py runs/example_ensemble.toml [--workers 2]

Prints the wall time of each run and whether every dataset of the three run
files is identical (NaN-aware, byte for byte).  The LocalCluster runs on
loopback with worker processes.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import h5py
import numpy as np

import stellar_match as sm


def datasets(path: Path) -> dict[str, np.ndarray]:
    out: dict[str, np.ndarray] = {}
    with h5py.File(path, "r") as f:
        f.visititems(lambda name, obj: out.__setitem__(name, obj[()]) if isinstance(obj, h5py.Dataset) else None)
    return out


def identical(a: dict, b: dict) -> bool:
    return a.keys() == b.keys() and all(np.asarray(a[k]).tobytes() == np.asarray(b[k]).tobytes() for k in a)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("config", type=Path)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    from dask.distributed import LocalCluster

    with tempfile.TemporaryDirectory() as tmp:
        runs = {}
        t = time.perf_counter()
        runs["serial"] = sm.run_config(args.config, Path(tmp) / "serial.h5", workers=1)
        print(f"serial: {time.perf_counter() - t:.1f} s")
        t = time.perf_counter()
        runs["local"] = sm.run_config(args.config, Path(tmp) / "local.h5", workers=args.workers)
        print(f"{args.workers} local workers: {time.perf_counter() - t:.1f} s")
        with LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True, host="127.0.0.1",
                          dashboard_address=None) as cluster:
            t = time.perf_counter()
            runs["dask"] = sm.run_config(args.config, Path(tmp) / "dask.h5", scheduler=cluster.scheduler_address)
            print(f"Dask LocalCluster ({args.workers} workers): {time.perf_counter() - t:.1f} s")
        ref = datasets(runs["serial"])
        for name in ("local", "dask"):
            print(f"{name} == serial, every dataset bit for bit: {identical(ref, datasets(runs[name]))}")
        print(f"{len(ref)} datasets compared")


if __name__ == "__main__":
    main()
