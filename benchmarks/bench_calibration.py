"""How the per-star error estimate compares with the true error, over random stars of every regime.

    python benchmarks/bench_calibration.py [--stars 120] [--seed 1] [--json OUT.json] [--readme]

Draws STARS random stars from each of four groups and solves them at the
default tolerance (1e-5), with and without the tidal and rotational response
equations:
  wide prior     Read et al. (2009) piecewise polytropes, log10_p1 in [33.8, 35.6],
                 every Gamma in [0.6, 6], rho_c in [1e14, 4e15] g/cm^3 (the
                 prior of tests/test_error_control.py);
  white dwarfs   the electron gas, mu_e = 2, rho_c in [1e4, 1e11] g/cm^3;
  puffed up      SLy at rho_c in [5e13, 2e14] g/cm^3 (near and below the minimum mass);
  quark matter   the bag model, B in [40, 120] MeV/fm^3, rho_c from 1.2 to 4 times the surface density.
Each status-0 star's true error, the largest relative error in M, R and M_b
(and, with the response equations, in k2, Lambda and I) against scipy's
solve_ivp (DOP853, rtol 1e-11, tests/reference_solutions.py: the h-form for
the structure, the r-form for the response), is compared with the tolerance
and with the star's reported estimate.  With the response equations the steps
are set by the k2, Lambda and I estimates, so M, R and M_b come out far more
accurate than the tolerance; the response errors are reported on their own too.
Prints, per group and overall, the quantiles of true error / tolerance and
of estimate / true error, and the mean steps per star; --readme writes the
table into README.md between its markers.
"""

from __future__ import annotations

import argparse
import datetime
import json
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))
from reference_solutions import tidal_and_inertia_in_radius, tov_in_enthalpy  # noqa: E402

sys.path.insert(0, str(ROOT / "benchmarks"))
from readme_tables import write_table  # noqa: E402

QUANTILES = (0.0, 0.1, 0.5, 0.9, 1.0)


def draw(group: str, rng: np.random.Generator):
    """(EOS, central density in g/cm^3) of one random star of ``group``, or None when it cannot be built."""
    import stellar_match as sm
    from stellar_match.errors import InputError

    try:
        if group == "wide prior":
            eos = sm.read_piecewise_polytrope("w", rng.uniform(33.8, 35.6), list(rng.uniform(0.6, 6.0, 3)))
            return eos, 10 ** rng.uniform(14.0, np.log10(4e15))
        if group == "white dwarfs":
            return sm.electron_gas("wd", 2.0), 10 ** rng.uniform(4.0, 11.0)
        if group == "puffed up":
            return sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851]), 10 ** rng.uniform(
                np.log10(5e13), np.log10(2e14))
        eos = sm.quark_matter("q", rng.uniform(40.0, 120.0))
        return eos, None
    except InputError:
        return None


def measure(stars: int, seed: int) -> dict:
    from stellar_match import units
    from stellar_match.eos import central_enthalpy
    from stellar_match.errors import InputError
    from stellar_match.structure import DEFAULT_TOLERANCE, solve_interiors

    rng = np.random.default_rng(seed)
    out: dict = {}
    for group in ("wide prior", "white dwarfs", "puffed up", "quark matter"):
        cases = []
        while len(cases) < stars:
            got = draw(group, rng)
            if got is None:
                continue
            eos, rho = got
            try:
                if rho is None:  # quark matter: from the surface density up
                    _, _, rho_s = eos.state(np.array([1e-9]))
                    rho = float(units.density_from_geometric(rho_s[0])) * rng.uniform(1.2, 4.0)
                h = central_enthalpy(eos, "central_density", np.array([rho]))
            except (InputError, ValueError):
                continue
            cases.append((eos, h))
        references, responses = {}, {}
        for response in (True, False):
            ratios, sharpness, steps, response_ratios = [], [], [], []
            t0 = time.perf_counter()
            for index, (eos, h) in enumerate(cases):
                s = solve_interiors(eos, h, response=response)
                steps.append(int(s.steps[0]))
                if s.status[0] != 0:
                    continue
                if index not in references:
                    with np.errstate(all="ignore"):
                        try:
                            references[index] = tov_in_enthalpy(eos, float(h[0]))
                        except (ValueError, IndexError, ZeroDivisionError):
                            references[index] = (np.nan, np.nan, np.nan)
                R, M, Mb = references[index]
                if not (np.isfinite(R) and M > 0):
                    continue
                true = max(abs(s.radius[0] / R - 1), abs(s.mass[0] / M - 1), abs(s.baryon_mass[0] / Mb - 1))
                if response:
                    if index not in responses:
                        with np.errstate(all="ignore"):
                            try:
                                responses[index] = tidal_and_inertia_in_radius(eos, float(h[0]))[2:]
                            except (ValueError, IndexError, ZeroDivisionError, AssertionError):
                                # AssertionError: the reference's closed-form k2 refuses C < 0.05
                                responses[index] = (np.nan, np.nan, np.nan)
                    got = (s.love_number_k2[0], s.tidal_deformability[0], s.moment_of_inertia[0])
                    errors = [abs(g / r - 1) for g, r in zip(got, responses[index], strict=True) if np.isfinite(r)]
                    if errors:
                        response_ratios.append(max(errors) / DEFAULT_TOLERANCE)
                        true = max(true, max(errors))
                ratios.append(true / DEFAULT_TOLERANCE)
                sharpness.append(s.error_estimate[0] / max(true, 1e-16))
            key = f"{group}, {'with' if response else 'without'} response"
            out[key] = {
                "stars": len(ratios),
                "true_over_tolerance": dict(zip(map(str, QUANTILES), np.quantile(ratios, QUANTILES).tolist(),
                                                strict=True)),
                "estimate_over_true": dict(zip(map(str, QUANTILES), np.quantile(sharpness, QUANTILES).tolist(),
                                               strict=True)),
                "beyond_tolerance": int(np.sum(np.array(ratios) > 1.0)),
                "response_true_over_tolerance": (dict(zip(map(str, QUANTILES), np.quantile(
                    response_ratios, QUANTILES).tolist(), strict=True)) if response_ratios else None),
                "mean_steps": float(np.mean(steps)),
                "seconds": time.perf_counter() - t0,
            }
            extra = (f"  (k2, Lambda, I: median {np.median(response_ratios):.2e})" if response_ratios else "")
            print(f"{key:40s} n={len(ratios):4d}  true/tol median {np.median(ratios):.2e} max {np.max(ratios):.2e}"
                  f"  estimate/true min {np.min(sharpness):.2f} median {np.median(sharpness):.1f}"
                  f"  steps {np.mean(steps):.0f}{extra}", flush=True)
    return out


def markdown(groups: dict, stars: int, seed: int) -> str:
    """The distribution as README shows it."""
    lines = [f"Measured {datetime.date.today().isoformat()} by `python benchmarks/bench_calibration.py --stars {stars}"
             f" --seed {seed}` (tolerance 1e-5; true error: the largest relative error in M, R, M_b, and with the"
             " response equations also in k2, Λ, I, against solve_ivp):", "",
             "| stars | solved | true error / tolerance: median (max) | estimate / true error: median (min) "
             "| steps per star |", "|---|---|---|---|---|"]
    for key, g in groups.items():
        group, solved = key.split(", ", 1)
        t, e = g["true_over_tolerance"], g["estimate_over_true"]
        lines.append(f"| {group} ({g['stars']}) | {solved} | {t['0.5']:.2g} ({t['1.0']:.2g}) | "
                     f"{e['0.5']:.3g} ({e['0.0']:.3g}) | {g['mean_steps']:.0f} |")
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stars", type=int, default=120, help="stars per group")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--json", type=Path, default=ROOT / "benchmarks" / "results" / "bench_calibration.json")
    ap.add_argument("--readme", action="store_true", help="write the table into README.md between its markers")
    args = ap.parse_args(argv)
    result = {"stars_per_group": args.stars, "seed": args.seed, "groups": measure(args.stars, args.seed)}
    args.json.parent.mkdir(parents=True, exist_ok=True)
    args.json.write_text(json.dumps(result, indent=2))
    print(f"wrote {args.json}")
    table = markdown(result["groups"], args.stars, args.seed)
    print(table)
    if args.readme:
        write_table("bench_calibration", table)
        print("wrote README.md")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
