"""Speed of every EOS kind against the Read et al. piecewise polytrope (issue 11).

    python benchmarks/bench_kinds.py

2000 stars with k2, Lambda and I from 10^14.4 to 10^15.5 g/cm^3 (white dwarfs: 10^4 to 10^11 g/cm^3)
through solve_interiors, best of 3; prints stars/s, mean steps per star (all grids of the error control)
and the largest error estimate.
"""

from __future__ import annotations

import time

import numpy as np

import stellar_match as sm
from stellar_match import units
from stellar_match.structure import solve_interiors

SLY = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
KINDS = {
    "piecewise_polytrope (SLy)": SLY,
    "quark_matter (B = 57)": sm.quark_matter("q", 57.0),
    "phase_transition (SLy, 1e35, 3e14, 1)": sm.phase_transition("pt", SLY, 1.0e35, 3.0e14, 1.0),
    "spectral (4 coefficients)": sm.spectral("s", [0.9865, 0.1110, -0.0301, 0.0022]),
    "sound_speed_nodes (5 nodes)": sm.sound_speed_nodes("n", [1.5e14, 3e14, 6e14, 1.2e15, 2.4e15],
                                                        [0.05, 0.3, 0.6, 0.4, 0.5]),
    "electron_gas (mu_e = 2, white dwarfs)": sm.electron_gas("wd", 2.0),
}


def main() -> None:
    print("| kind | stars/s | steps per star | largest error estimate |")
    print("|---|---|---|---|")
    for label, eos in KINDS.items():
        lo, hi = (4.0, 11.0) if eos.kind == "electron_gas" else (14.4, 15.5)
        rho = np.geomspace(10**lo, 10**hi, 2000)
        if eos.kind == "quark_matter":
            rho = np.maximum(rho, 1.05 * units.density_from_geometric(eos.surface_density))
        h = eos.enthalpy_of_density(units.density_to_geometric(rho))
        solve_interiors(eos, h[:10])
        best = np.inf
        for _ in range(3):
            t = time.perf_counter()
            stars = solve_interiors(eos, h)
            best = min(best, time.perf_counter() - t)
        print(f"| {label} | {h.size / best:.0f} | {stars.steps.mean():.0f} | {stars.error_estimate.max():.1e} |")


if __name__ == "__main__":
    main()
