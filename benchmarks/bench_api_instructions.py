"""Instructions per call of the public sm.sweep_eos, counted by valgrind's callgrind (not seconds).

    python benchmarks/bench_api_instructions.py [--stars 2000] [--pythonpath DIR] [--json OUT.json]

Wall-clock rates on a shared machine vary by more than the few per cent a
change at the API's edge could cost; instruction counts are repeatable.  Each
variant runs in a fresh interpreter under callgrind twice, with 1 and with 2
calls of sm.sweep_eos on the SLy stars of bench_sequence.py's case 1 (the
first call also pays for lazy imports and warm-up), and the difference is the
cost of one steady-state call:
given plain floats (g/cm^3), and astropy Quantities (kg/m^3) where the
measured stellar_match takes them.  --pythonpath measures another source tree
(e.g. an older commit unpacked with ``git archive``), to compare before and after.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

SNIPPET = """
import sys
import numpy as np
import stellar_match as sm
calls, kind, stars = int(sys.argv[1]), sys.argv[2], int(sys.argv[3])
sly = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])  # Read et al. 2009, Table III
rho = np.geomspace(10**14.4, 10**15.5, stars)
values = rho
if kind == "quantity":
    import astropy.units as u
    values = (rho * u.g / u.cm**3).to(u.kg / u.m**3)
for _ in range(calls):
    sm.sweep_eos(sly, "central_density", values)
"""


def instructions(script: Path, calls: int, kind: str, stars: int, env: dict) -> int:
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "callgrind.out"
        subprocess.run(["valgrind", "--tool=callgrind", f"--callgrind-out-file={out}", sys.executable,
                        str(script), str(calls), kind, str(stars)], env=env, check=True,
                       stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        return int(re.search(r"^summary:\s+(\d+)", out.read_text(), re.M).group(1))


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stars", type=int, default=2000)
    ap.add_argument("--pythonpath", type=Path, default=Path(__file__).resolve().parents[1],
                    help="source tree whose stellar_match to measure (default: this one)")
    ap.add_argument("--json", type=Path, default=Path(__file__).parent / "results" / "bench_api_instructions.json")
    args = ap.parse_args(argv)
    if shutil.which("valgrind") is None:
        sys.exit("valgrind is not installed (Debian package valgrind)")
    env = dict(os.environ, PYTHONPATH=str(args.pythonpath), OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1")
    takes_quantities = subprocess.run(
        [sys.executable, "-c", "import stellar_match.units as u; print(hasattr(u, 'to_unit'))"], env=env,
        capture_output=True, text=True, check=True).stdout.strip() == "True"
    report = {"stars": args.stars, "source": str(args.pythonpath), "python": sys.executable}
    with tempfile.TemporaryDirectory() as tmp:
        script = Path(tmp) / "call.py"
        script.write_text(SNIPPET)
        for kind in ("floats", "quantity") if takes_quantities else ("floats",):
            first = instructions(script, 1, kind, args.stars, env)
            second = instructions(script, 2, kind, args.stars, env)
            report[kind] = {"with_one_call": first, "per_call": second - first}
            print(f"sweep_eos ({kind}): {second - first:,} instructions per call of {args.stars} stars "
                  f"(setup and first call {first:,})")
    args.json.parent.mkdir(parents=True, exist_ok=True)
    args.json.write_text(json.dumps(report, indent=2))
    print(f"wrote {args.json}")
    return report


if __name__ == "__main__":
    main()
