"""Speed of radial modes: 200 SLy stars, N = 3 (README's performance line).

    PYTHONPATH=. python benchmarks/bench_radial_modes.py
"""

import time

import numpy as np

import stellar_match as sm
from stellar_match import radial_modes as rmod
from stellar_match.eos import central_enthalpy
from stellar_match.structure import solve_interiors


def main() -> None:
    eos = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])  # Read et al. 2009, Table III
    h = central_enthalpy(eos, "central_density", np.geomspace(3e14, 3e15, 200))
    rmod.radial_modes_of_eos(eos, h[:4], modes=3)  # warm-up
    best_modes = best_tov = np.inf
    for _ in range(3):
        t = time.perf_counter()
        rmod.radial_modes_of_eos(eos, h, modes=3)
        best_modes = min(best_modes, time.perf_counter() - t)
        t = time.perf_counter()
        solve_interiors(eos, h, response=False)
        best_tov = min(best_tov, time.perf_counter() - t)
    print(f"radial modes, 200 SLy stars, N = 3 (background solve included): {best_modes:.3f} s "
          f"({best_modes / 200 * 1e3:.2f} ms/star); the TOV solve alone: {best_tov:.3f} s")


if __name__ == "__main__":
    main()
