"""Throughput and accuracy of the batched solver, measured side by side.

    python benchmarks/bench_sequence.py [--stars 2000] [--baseline-stars 60]
                                        [--reference-stars 40] [--json OUT.json]
                                        [--stream-stars 1000000]

Measures, in one run on one core:
  1. the batched sequence for the Read et al. (2009) SLy piecewise polytrope,
     STARS central densities log-spaced in [10^14.4, 10^15.5] g/cm^3, with and
     without the tidal/inertia response equations;
  2. the same for a 500-row table generated from that polytrope;
  3. a straightforward per-star baseline: scipy's solve_ivp (DOP853) in the
     same log-enthalpy variables, one star at a time, at the tolerance that
     reaches the batched solver's accuracy;
  4. a high-accuracy reference (solve_ivp DOP853, rtol 1e-11) on a subsample,
     for the error figures.
With --stream-stars N it also runs an N-star sweep into a run file in a child
process and reports its peak resident memory.  With --api it also times the
public entry point, sm.sweep_eos on the SLy stars of case 1, given plain
floats and (where the installed stellar_match takes them) astropy Quantities:
the unit handling at the edges must cost nothing measurable.

Prints stars per second and the maximum relative error of every quantity
against case 4, and writes the same as JSON (default benchmarks/results/).
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

os.environ.setdefault("OMP_NUM_THREADS", "1")  # one core, as the targets are stated
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from scipy.integrate import solve_ivp  # noqa: E402

import stellar_match as sm  # noqa: E402
from stellar_match import units  # noqa: E402
from stellar_match.structure import central_series, solve_interiors  # noqa: E402

SLY = (34.384, [3.005, 2.988, 2.851])  # Read et al. 2009, Table III
QUANTITIES = ("mass", "radius", "baryon_mass", "love_number_k2", "tidal_deformability", "moment_of_inertia")


def make_table(eos, path: Path, rows: int = 500) -> sm.PiecewisePolytrope:
    """A `rows`-row table sampled from `eos` (log-spaced in density, piece boundaries included)."""
    rho = units.density_to_geometric(np.geomspace(1e4, 4e15, rows - eos.lower_densities[1:].size))
    rho = np.unique(np.concatenate([rho, eos.lower_densities[1:]]))
    p, e, r = eos.state(eos.enthalpy_of_density(rho))
    lines = ["rho,p,e"] + [
        f"{a:.16e},{b:.16e},{c:.16e}"
        for a, b, c in zip(units.density_from_geometric(r), units.pressure_from_geometric(p),
                           units.density_from_geometric(e), strict=True)
    ]
    path.write_text("\n".join(lines) + "\n")
    cols = sm.TableColumns(("p", "dyn/cm2"), ("e", "g/cm3"), ("rho", "g/cm3"), "rest_mass_density")
    return sm.from_table("sly-table", path, cols)


def per_star_solve_ivp(eos, h_c: float, rtol: float, response: bool) -> dict[str, float]:
    """One star with solve_ivp DOP853 in the same log-enthalpy variables as the product."""
    from stellar_match.structure import love_number_k2, response_rhs, response_series, structure_rhs

    p_c, e_c, r_c = (float(a[0]) for a in eos.state(np.array([h_c])))
    slope_c = float(eos.energy_density_slope(np.array([h_c]))[0])
    x0 = 1e-4 * h_c
    y0 = central_series(p_c, e_c, r_c, slope_c, x0)
    if response:
        y0 = np.concatenate([y0, response_series(p_c, e_c, slope_c, h_c, x0)])
    arrays = eos.piece_arrays()

    def rhs(h, y):
        hh = np.array([max(h, 1e-12 * h_c)])
        idx = eos.piece_index(hh)
        coeff = {k: v[idx] for k, v in arrays.items()}
        p, e, r = eos.state_from_coefficients(hh, coeff)
        yy = y[:, None]
        if response:
            return response_rhs(hh, yy, p, e, r, eos.slope_from_coefficients(p, e, coeff))[:, 0]
        return structure_rhs(yy, p, e, r)[:, 0]

    edges = [h_c - x0, *sorted((b for b in eos.breakpoints_h if b < h_c - x0), reverse=True), 0.0]
    y = y0
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        y = solve_ivp(rhs, (a, b), y, method="DOP853", rtol=rtol, atol=1e-30).y[:, -1]
    u, v, w = y[:3]
    R = np.sqrt(u)
    out = {"radius": R, "mass": v * u * R, "baryon_mass": w * u * R}
    if response:
        C = out["mass"] / R
        k2 = float(love_number_k2(C, y[3]))
        J = R**5 * y[5] / np.sqrt(1 - 2 * C) / 6
        out.update(love_number_k2=k2, tidal_deformability=2 / 3 * k2 / C**5,
                   moment_of_inertia=J / (y[4] + 2 * J / R**3))
    return out


def batched(eos, h_c, response: bool, repeat: int = 3):
    best = np.inf
    for _ in range(repeat):
        t = time.perf_counter()
        res = solve_interiors(eos, h_c, response=response)
        best = min(best, time.perf_counter() - t)
    return res, h_c.size / best


def errors(res, idx, ref) -> dict[str, float]:
    out = {}
    for q in QUANTITIES:
        got = getattr(res, q)
        if got is None or q not in ref[0]:
            continue
        r = np.array([row[q] for row in ref])
        out[q] = float(np.max(np.abs(got[idx] / r - 1)))
    return out


def stream_rss(n_stars: int) -> dict:
    """Peak RSS of an n-star sweep written to a run file, in a fresh child process."""
    with tempfile.TemporaryDirectory() as tmp:
        cfg = Path(tmp) / "stream.toml"
        cfg.write_text(
            f"[sweep]\ncentral_density = {{ min = 3e14, max = 3e15, count = {n_stars} }}\n"
            "[[eos]]\nname = \"sly\"\nkind = \"piecewise_polytrope\"\nlog10_p1 = 34.384\n"
            "gammas = [3.005, 2.988, 2.851]\n"
        )
        code = (
            "import resource, time, stellar_match as sm\n"
            f"t = time.perf_counter(); sm.run_config({str(cfg)!r}, {str(Path(tmp) / 'out.h5')!r})\n"
            "print(time.perf_counter() - t, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)\n"
        )
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
        seconds, rss_kb = out.split()
        size = (Path(tmp) / "out.h5").stat().st_size
    return {"stars": n_stars, "seconds": float(seconds), "peak_rss_mb": float(rss_kb) / 1024,
            "run_file_mb": size / 2**20}


def api_rates(eos, rho, repeat: int = 3) -> dict[str, float]:
    """Stars per second of the whole public call sm.sweep_eos (solve, match, analysis), best of ``repeat``."""
    inputs = {"floats": rho}
    if hasattr(units, "to_unit"):  # stellar_match takes astropy Quantities
        import astropy.units as u

        inputs["Quantity kg/m3"] = (rho * u.g / u.cm**3).to(u.kg / u.m**3)
    out = {}
    for name, values in inputs.items():
        best = np.inf
        for _ in range(repeat):
            t = time.perf_counter()
            sm.sweep_eos(eos, "central_density", values)
            best = min(best, time.perf_counter() - t)
        out[name] = rho.size / best
    return out


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stars", type=int, default=2000)
    ap.add_argument("--baseline-stars", type=int, default=60)
    ap.add_argument("--reference-stars", type=int, default=40)
    ap.add_argument("--baseline-rtol", type=float, default=None,
                    help="solve_ivp rtol of the baseline (default: chosen to match the batched accuracy)")
    ap.add_argument("--stream-stars", type=int, default=0)
    ap.add_argument("--api", action="store_true", help="also time sm.sweep_eos with floats and with Quantities")
    ap.add_argument("--json", type=Path, default=Path(__file__).parent / "results" / "bench_sequence.json")
    args = ap.parse_args(argv)

    sly = sm.read_piecewise_polytrope("sly", *SLY)
    with tempfile.TemporaryDirectory() as tmp:
        table = make_table(sly, Path(tmp) / "sly500.csv")
    rho = np.geomspace(10**14.4, 10**15.5, args.stars)
    h_sly = sly.enthalpy_of_density(units.density_to_geometric(rho))
    h_tab = table.enthalpy_of_density(units.density_to_geometric(rho))
    sub_ref = np.unique(np.linspace(0, args.stars - 1, args.reference_stars).astype(int))
    sub_base = np.unique(np.linspace(0, args.stars - 1, args.baseline_stars).astype(int))

    report: dict = {"machine": {"python": platform.python_version(), "numpy": np.__version__,
                                "processor": platform.processor() or platform.machine(),
                                "cpus": os.cpu_count(), "platform": platform.platform()},
                    "stars": args.stars}
    ref_sly = [per_star_solve_ivp(sly, float(h_sly[i]), 1e-11, True) for i in sub_ref]
    ref_tab = [per_star_solve_ivp(table, float(h_tab[i]), 1e-11, True) for i in sub_ref]

    for key, eos, h, ref in (("case1_sly", sly, h_sly, ref_sly), ("case2_table", table, h_tab, ref_tab)):
        for response in (True, False):
            res, rate = batched(eos, h, response)
            name = key + ("" if response else "_structure_only")
            report[name] = {"stars_per_second": rate, "max_relative_error": errors(res, sub_ref, ref)}

    # baseline: per-star solve_ivp; pick the loosest rtol reaching the batched accuracy in M and R
    target = max(report["case1_sly"]["max_relative_error"][q] for q in ("mass", "radius"))
    candidates = [args.baseline_rtol] if args.baseline_rtol else [1e-6, 1e-7, 1e-8, 1e-9, 1e-10]
    for rtol in candidates:
        probe = [per_star_solve_ivp(sly, float(h_sly[i]), rtol, True) for i in sub_ref[::4]]
        ref_probe = ref_sly[::4]
        err = max(np.max(np.abs(np.array([p[q] for p in probe]) / np.array([r[q] for r in ref_probe]) - 1))
                  for q in ("mass", "radius"))
        if err <= target or rtol == candidates[-1]:
            break
    t = time.perf_counter()
    base = [per_star_solve_ivp(sly, float(h_sly[i]), rtol, True) for i in sub_base]
    base_rate = len(base) / (time.perf_counter() - t)
    report["case3_baseline_solve_ivp"] = {"stars_per_second": base_rate, "rtol": rtol, "max_relative_error_M_R": err}
    report["ratio_case1_over_case3"] = report["case1_sly"]["stars_per_second"] / base_rate
    report["response_cost_factor"] = (report["case1_sly_structure_only"]["stars_per_second"]
                                      / report["case1_sly"]["stars_per_second"])
    if args.stream_stars:
        report["stream"] = stream_rss(args.stream_stars)
    if args.api:
        report["api_sweep_eos"] = api_rates(sly, rho)

    print(f"machine: {report['machine']['processor']}, {report['machine']['cpus']} cpus, "
          f"python {report['machine']['python']}, numpy {report['machine']['numpy']}")
    for name in ("case1_sly", "case1_sly_structure_only", "case2_table", "case2_table_structure_only"):
        r = report[name]
        errs = ", ".join(f"{q} {v:.1e}" for q, v in r["max_relative_error"].items())
        print(f"{name:28s} {r['stars_per_second']:10.0f} stars/s   max rel. error: {errs}")
    print(f"{'case3_baseline_solve_ivp':28s} {base_rate:10.1f} stars/s   (DOP853 rtol {rtol:g}, error {err:.1e})")
    print(f"ratio case1 / case3: {report['ratio_case1_over_case3']:.0f}x;"
          f" response equations cost {report['response_cost_factor']:.2f}x")
    if args.api:
        for k, v in report["api_sweep_eos"].items():
            print(f"{'sweep_eos (' + k + ')':28s} {v:10.0f} stars/s")
    if args.stream_stars:
        s = report["stream"]
        print(f"stream: {s['stars']} stars to a run file in {s['seconds']:.0f} s, peak RSS {s['peak_rss_mb']:.0f} MB,"
              f" file {s['run_file_mb']:.0f} MB")
    args.json.parent.mkdir(parents=True, exist_ok=True)
    args.json.write_text(json.dumps(report, indent=2))
    print(f"wrote {args.json}")
    _ = resource  # kept for the child-process measurement
    return report


if __name__ == "__main__":
    main()
