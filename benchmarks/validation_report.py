"""Compute every row of README's validation table.

    python benchmarks/validation_report.py                  # the whole table (about 10-20 min on 2 cores)
    python benchmarks/validation_report.py --list           # the case of every row, nothing computed
    python benchmarks/validation_report.py --only I-Love    # rows whose case contains a word

Each row: case, source, tolerance required by the tests, and the measured
value, computed here (never copied): the worst relative error against an
exact solution, a published value, or the independent references of
tests/reference_solutions.py (scipy solve_ivp, one star at a time).  The
rows are in README order; README's "measured" column is this script's output.
"""

from __future__ import annotations

import argparse
import os
import signal
import subprocess
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path[:0] = [str(ROOT / "tests"), str(ROOT)]  # the references, and the package of this checkout

from reference_solutions import (  # noqa: E402
    hybrid_star_in_radius,
    tidal_and_inertia_in_radius,
    tov_in_enthalpy,
    tov_in_radius,
)

import stellar_match as sm  # noqa: E402
from stellar_match import units  # noqa: E402
from stellar_match.eos import central_enthalpy  # noqa: E402
from stellar_match.errors import InputError  # noqa: E402
from stellar_match.structure import DEFAULT_STEPS, DEFAULT_TOLERANCE, solve_interiors  # noqa: E402

#: Read, Lackey, Owen & Friedman 2009, PRD 79, 124032, Table III (from memory): log10 p1, Gamma 1-3, M_max.
READ_TABLE_III = {"SLy": (34.384, 3.005, 2.988, 2.851, 2.049), "APR4": (34.269, 2.830, 3.445, 3.348, 2.213),
                  "FPS": (34.283, 2.985, 2.863, 2.600, 1.799), "MS1": (34.858, 3.224, 3.033, 1.325, 2.767),
                  "H4": (34.669, 2.909, 2.246, 2.144, 2.032), "MPA1": (34.495, 3.446, 3.572, 2.887, 2.461),
                  "ENG": (34.437, 3.514, 3.130, 3.168, 2.240), "WFF1": (34.031, 2.519, 3.791, 3.660, 2.133),
                  "ALF2": (34.616, 4.070, 2.411, 1.890, 1.989)}
SLY = (34.384, [3.005, 2.988, 2.851])
SOFT_TABLE = ROOT / "eos_tables" / "hdm_soft.csv"
SOFT_COLUMNS = sm.TableColumns(("P", "dyn/cm2"), ("eps", "erg/cm3"), ("rho", "g/cm3"), "rest_mass_density")
#: Per-star promise of issue 9: M and R of a star with status 0 within 1e-5 of the reference.
PROMISE = 1e-5

ROWS = []


def row(case: str, source: str, tolerance: str):
    """Register a function computing the measured value of one README row."""
    def register(fn):
        ROWS.append((case, source, tolerance, fn))
        return fn
    return register


def rel(a, b) -> float:
    return float(np.max(np.abs(np.asarray(a, dtype=float) / np.asarray(b, dtype=float) - 1)))


def h_of(eos, rho_cgs) -> np.ndarray:
    return central_enthalpy(eos, "central_density", np.asarray(rho_cgs, dtype=float))


def sly():
    return sm.read_piecewise_polytrope("sly", *SLY)


def uniform_star_at(eos, compactness: float):
    s = np.sqrt(1 - 2 * compactness)  # Schwarzschild 1916: p_c/eps = (1 - s)/(3 s - 1)
    return solve_interiors(eos, eos.enthalpy_of_pressure(np.array([eos.energy_density * (1 - s) / (3 * s - 1)])))


def worst_against_reference(eos, rho) -> tuple[float, float, float]:
    """Worst relative errors in M, R, M_b against solve_ivp (h-form) at central densities rho."""
    h = h_of(eos, rho)
    st = solve_interiors(eos, h)
    ref = np.array([tov_in_enthalpy(eos, float(x)) for x in h])
    return rel(st.mass, ref[:, 1]), rel(st.radius, ref[:, 0]), rel(st.baryon_mass, ref[:, 2])


def table_from(eos, path: Path, rows: int, with_breaks: bool = False) -> sm.PiecewisePolytrope:
    """A table written from an analytic EOS (as tests/test_eos.py does), read back."""
    rho = units.density_to_geometric(np.geomspace(1e4, 5e15, rows))
    if with_breaks:
        rho = np.unique(np.concatenate([rho, eos.lower_densities[1:]]))
    p, e, r = eos.state(eos.enthalpy_of_density(rho))
    c2 = (units.SPEED_OF_LIGHT_SI * 1e2) ** 2
    mev = units.MEV_PER_FM3_IN_ERG_PER_CM3
    lines = ["nb,p,e"] + [f"{a:.15e},{b:.15e},{c:.15e}" for a, b, c in zip(
        units.density_from_geometric(r) / units.NEUTRON_MASS_G / 1e39, units.pressure_from_geometric(p) / mev,
        units.density_from_geometric(e) * c2 / mev, strict=True)]
    path.write_text("\n".join(lines) + "\n")
    return sm.from_table("t", path, sm.TableColumns(("p", "MeV/fm3"), ("e", "MeV/fm3"), ("nb", "fm-3"),
                                                   "baryon_density"))


# --- structure -----------------------------------------------------------------------------

@row("uniform density, C = 0.01-0.44: M, R", "Schwarzschild 1916 exact interior", "1e-6")
def _uniform():
    eos = sm.incompressible("u", 1e15)
    worst_m = worst_r = 0.0
    for C in (0.01, 0.1, 0.2, 0.3, 0.4, 0.44):
        st = uniform_star_at(eos, C)
        R = np.sqrt(3 * C / (4 * np.pi * eos.energy_density))
        worst_r = max(worst_r, rel(st.radius, R))
        worst_m = max(worst_m, rel(st.mass, C * R))
    return f"{worst_m:.1e} (M), {worst_r:.1e} (R)"


@row("uniform density: baryon mass", "proper-volume integral, closed form", "1e-6")
def _uniform_baryon_mass():
    # M_b = 4 pi eps int r^2 (1 - 2m/r)^(-1/2) dr = (2 pi eps / a^3)(asin(aR) - aR sqrt(1 - a^2 R^2)),
    # a^2 = 8 pi eps / 3 (Schwarzschild 1916 interior)
    eos = sm.incompressible("u", 1e15)
    eps = eos.energy_density
    a = np.sqrt(8 * np.pi * eps / 3)
    worst = 0.0
    for C in (0.01, 0.1, 0.3, 0.44):
        st = uniform_star_at(eos, C)
        R = st.radius[0]
        exact = 2 * np.pi * eps / a**3 * (np.arcsin(a * R) - a * R * np.sqrt(1 - (a * R) ** 2))
        worst = max(worst, rel(st.baryon_mass, exact))
    return f"{worst:.1e} (C = 0.01-0.44)"


@row("Newtonian n = 1 polytrope radius, ρ_c = 1e10 g/cm3", "Chandrasekhar 1939 (Lane-Emden)", "3e-4")
def _lane_emden():
    K = 1e5
    G = units.GRAVITATIONAL_CONSTANT_SI * 1e3
    alpha = np.sqrt(K / (2 * np.pi * G))  # R = pi alpha for n = 1
    c = sm.solve_stars(sm.polytrope("n1", K, 2.0), central_density=[1e10])
    return f"{rel(c['radius'], np.pi * alpha / 1e5):.1e}"


@row("SLy (Read et al. 2009) 0.6-2.0 Msun: M, R, M_b", "solve_ivp DOP853 rtol 1e-11, r-form and h-form", "1e-6")
def _sly():
    eos = sly()
    h = h_of(eos, [4e14, 7e14, 1.2e15, 2e15, 3.2e15])
    ref = np.array([tov_in_enthalpy(eos, float(x)) for x in h])
    refr = np.array([tov_in_radius(eos, float(x)) for x in h])
    st = solve_interiors(eos, h)
    return (f"{rel(st.mass, ref[:, 1]):.1e} (M), {rel(st.radius, ref[:, 0]):.1e} (R), "
            f"{rel(st.baryon_mass, ref[:, 2]):.1e} (M_b); references agree to {rel(ref, refr):.0e}")


@row("polytrope and tabulated EOS: M, R, M_b", "same references", "1e-6")
def _poly_and_table():
    poly = worst_against_reference(sm.polytrope("p", 3.5e4, 2.0), [3e14, 1e15, 4e15])
    table = worst_against_reference(sm.from_table("t", SOFT_TABLE, SOFT_COLUMNS), [6e14, 1.5e15, 2.5e15])
    w = np.maximum(poly, table)
    return f"{w[0]:.1e} (M), {w[1]:.1e} (R), {w[2]:.1e} (M_b)"


@row("SLy stars at ρ_c = 1e11-3e14 g/cm³, incl. puffed-up stars below the minimum mass (R up to 4000 km)",
     "same references", "1e-6")
def _puffed_up():
    eos = sly()
    rho = [1e11, 1e14, 1.7e14, 2e14, 3e14]
    w = worst_against_reference(eos, rho)
    r_max = float(np.max(solve_interiors(eos, h_of(eos, rho)).radius))
    return f"≤ {max(w):.0e} (largest R {r_max:.0f} km)"


@row("stars of a very soft piece (Γ = 0.3) followed by a stiff one (invented Γ = 3.0, 0.3, 4.0)", "same references",
     "1e-6")
def _soft_piece():
    # invented parameters: log10 p1 = 34.4, Gamma = (3.0, 0.3, 4.0); the soft piece lies inside these stars
    eos = sm.read_piecewise_polytrope("soft", 34.4, [3.0, 0.3, 4.0])
    h = h_of(eos, np.geomspace(3e14, 3e15, 8))
    st = solve_interiors(eos, h)
    ok = st.status == 0
    ref = np.array([tov_in_enthalpy(eos, float(x)) for x in h[ok]])
    err = max(rel(st.mass[ok], ref[:, 1]), rel(st.radius[ok], ref[:, 0]))
    return (f"{int(ok.sum())} of {h.size} within tolerance, {int(np.median(st.steps))} steps per star (median), "
            f"worst {err:.1e}")


def _random_eos(rng, kind: str, folder: Path):
    """One EOS as tests/test_error_control.py draws them (numpy PCG64 here instead of hypothesis)."""
    if kind == "piecewise_polytrope":  # the wide prior of issue 9
        return sm.read_piecewise_polytrope("wide", rng.uniform(33.8, 35.6), rng.uniform(0.6, 6.0, 3)), (14.0, 15.6)
    if kind == "polytrope":  # Gamma -> 1 (no bound star) to 3, K over three decades
        gamma = rng.uniform(1.0005, 3.0)
        return sm.polytrope("poly", 10.0 ** (rng.uniform(33.0, 36.0) - 15.0 * gamma), gamma), (12.0, 15.6)
    base = sm.read_piecewise_polytrope("base", rng.uniform(34.0, 35.0), rng.uniform(1.5, 4.5, 3))
    return table_from(base, folder / "random.csv", int(rng.integers(30, 121))), (14.2, 15.5)


def _check_star(eos, h: float, star, i: int) -> str:
    """'ok', 'flagged', 'no reference' or 'WRONG' for star i (the promise of issue 9)."""
    if star.status[i] != 0:
        nan = np.isnan(star.mass[i]) and np.isnan(star.radius[i])
        return "flagged" if nan else "WRONG"
    with np.errstate(all="ignore"):
        try:
            R, M, _ = tov_in_enthalpy(eos, h)
        except (ValueError, IndexError, ZeroDivisionError):
            return "no reference"
    if not (np.isfinite(R) and np.isfinite(M) and R > 0 and M > 0):
        return "no reference"
    err = max(abs(star.mass[i] / M - 1), abs(star.radius[i] / R - 1))
    return "ok" if err <= PROMISE else "WRONG"


@row("every star of random piecewise polytropes (Γ in [0.6, 6], log10 p1 in [33.8, 35.6]), polytropes "
     "(Γ 1.0005-3) and sampled tables: within tolerance or flagged", "solve_ivp DOP853 rtol 1e-11 (h-form)",
     "1e-5, or status ≠ 0 and NaN")
def _random_stars(examples: int = 60):
    rng = np.random.default_rng(2026)
    counts = {"ok": 0, "flagged": 0, "no reference": 0, "WRONG": 0}
    built = 0
    kinds = ["piecewise_polytrope"] * 3 + ["polytrope"] * 2 + ["table"]  # the tests' 30 : 20 : 10
    with tempfile.TemporaryDirectory() as tmp:
        for k in range(examples):
            try:
                eos, (lo, hi) = _random_eos(rng, kinds[k % len(kinds)], Path(tmp))
            except InputError:  # parameters that cannot make an EOS (cannot join the crust)
                continue
            built += 1
            h = h_of(eos, 10.0 ** rng.uniform(lo, hi, 2))
            star = solve_interiors(eos, h)
            for i in range(h.size):
                counts[_check_star(eos, float(h[i]), star, i)] += 1
    return (f"{examples} draws ({built} EOS built), {2 * built} stars: {counts['ok']} within tolerance, "
            f"{counts['flagged']} flagged (status ≠ 0, NaN), {counts['no reference']} without a reference, "
            f"{counts['WRONG']} wrong")


@row("error estimate vs true error, random stars of that prior", "same reference", "estimate ≥ error")
def _estimate_vs_error(stars: int = 1200):
    # Both solves: with the response equations (whose k2, Lambda, I estimates set finer steps) and the
    # structure alone, where the estimate of M, R, M_b sets the steps and is closest to the true error.
    rng = np.random.default_rng(909)
    ratios = {True: [], False: []}
    beyond = 0
    while len(ratios[False]) < stars:
        try:
            gammas = rng.uniform(0.6, 6.0, 3)
            eos = sm.read_piecewise_polytrope("wide", rng.uniform(33.8, 35.6), gammas)
        except InputError:
            continue
        h = h_of(eos, 10.0 ** rng.uniform(14.0, 15.6, 4))
        solved = {response: solve_interiors(eos, h, response=response) for response in (True, False)}
        for i in range(h.size):
            if not all(st.status[i] == 0 for st in solved.values()):
                continue
            with np.errstate(all="ignore"):
                try:
                    R, M, Mb = tov_in_enthalpy(eos, float(h[i]))
                except (ValueError, IndexError, ZeroDivisionError):
                    continue
            if not (np.isfinite(M) and np.isfinite(R) and M > 0 and R > 0):
                continue
            for response, st in solved.items():
                err = max(abs(st.mass[i] / M - 1), abs(st.radius[i] / R - 1), abs(st.baryon_mass[i] / Mb - 1))
                ratios[response].append(err / st.error_estimate[i] if st.error_estimate[i] > 0 else np.inf)
                beyond += err > DEFAULT_TOLERANCE
    parts = []
    for response, label in ((False, "structure only"), (True, "with k2, Λ, I")):
        r = np.array(ratios[response])
        parts.append(f"{label}: error/estimate ≤ {r.max():.2f} (median {np.median(r):.2g})")
    return f"{len(ratios[False])} stars, {'; '.join(parts)}; {beyond} beyond the tolerance"


# --- tables --------------------------------------------------------------------------------

@row("table (500 rows from SLy) vs analytic SLy", "same EOS, two paths", "1e-6")
def _table_vs_analytic():
    eos = sly()
    with tempfile.TemporaryDirectory() as tmp:
        table = table_from(eos, Path(tmp) / "t.csv", 500, with_breaks=True)
        rho = np.array([5e14, 1e15, 2e15])
        a, t = sm.solve_stars(eos, central_density=rho), sm.solve_stars(table, central_density=rho)
    return f"{rel(t['mass'], a['mass']):.1e} (M), {rel(t['radius'], a['radius']):.1e} (R)"


@row("table interpolant obeys dε/dn = (ε + p)/n between rows", "first law (finite differences)", "1e-6")
def _first_law():
    with tempfile.TemporaryDirectory() as tmp:
        table = table_from(sly(), Path(tmp) / "t.csv", 300)
    rho = units.density_to_geometric(np.geomspace(2e4, 4e15, 997))  # mostly between rows
    d = 1e-6
    _, e_lo, _ = table.state(table.enthalpy_of_density(rho * (1 - d)))
    _, e_hi, _ = table.state(table.enthalpy_of_density(rho * (1 + d)))
    p, e, _ = table.state(table.enthalpy_of_density(rho))
    return f"{rel((e_hi - e_lo) / (2 * d * rho), (e + p) / rho):.1e} (997 points, 300-row table)"


# --- sequences -----------------------------------------------------------------------------

@row("M_max of 9 Read et al. EOS", "Read et al. 2009, Table III (from memory)", "1.5 %")
def _read_maxima():
    devs = {}
    for k, (lp, g1, g2, g3, mm) in READ_TABLE_III.items():
        s = sm.sweep_eos(sm.read_piecewise_polytrope(k, lp, [g1, g2, g3]), "central_density",
                         np.geomspace(5e14, 5e15, 30))
        devs[k] = s.summary["max_mass"] / mm - 1
    worst = max(devs, key=lambda k: abs(devs[k]))
    return f"worst {worst} {100 * devs[worst]:+.2f} %; median {100 * np.median(np.abs(list(devs.values()))):.2f} %"


@row("M_max location", "bounded Brent on the solve_ivp reference", "1e-6")
def _maximum_location():
    from scipy.optimize import minimize_scalar

    eos = sly()
    seq = sm.sweep_eos(eos, "central_density", np.geomspace(4e14, 4e15, 12))  # coarse on purpose
    h_seq = h_of(eos, seq["central_density"])
    i = int(np.argmax(seq["mass"]))
    res = minimize_scalar(lambda h: -tov_in_enthalpy(eos, h, rtol=1e-10)[1], bounds=(h_seq[i - 1], h_seq[i + 1]),
                          method="bounded", options={"xatol": 1e-7})
    m_ref = -res.fun / units.SOLAR_MASS_KM
    return (f"{rel(seq.summary['max_mass'], m_ref):.1e} (M_max); largest sample "
            f"{rel(seq['mass'].max(), m_ref):.0e} below")


@row("stability through the white-dwarf branch; twin-star third family",
     "Bardeen, Thorne & Meltzer 1966 turning-point rule", "flags")
def _stability():
    # The ranges of tests/test_sequence.py.  White-dwarf sweep of SLy: stable on the white-dwarf-like
    # branch, lost at its maximum (counter-clockwise bend of M(R)), regained at the minimum mass
    # (clockwise), lost again at the neutron-star maximum.  Twin stars (invented Gamma = 3.5, 0.5, 6):
    # stable, unstable past the first maximum, stable again past the minimum (third family), unstable.
    seq = sm.sweep_eos(sly(), "central_density", np.geomspace(1e6, 3e15, 80))
    rho, st = seq["central_density"], seq.stable
    checks = [(rho < 1e8, True), ((rho > 3e8) & (rho < 1.5e14), False), ((rho > 3e14) & (rho < 1.9e15), True),
              (rho > 2.1e15, False)]
    twin = sm.sweep_eos(sm.read_piecewise_polytrope("twin", 34.6, [3.5, 0.5, 6.0]), "central_density",
                        np.geomspace(3e14, 8e15, 200))
    m = np.asarray(twin["mass"])
    turns = np.flatnonzero(np.diff(np.sign(np.diff(m))) != 0) + 1
    first_max, first_min, second_max = twin["central_density"][turns[:3]]
    r2 = twin["central_density"]
    twin_checks = [(r2 < first_max * 0.99, True), ((r2 > first_max * 1.01) & (r2 < first_min * 0.99), False),
                   ((r2 > first_min * 1.01) & (r2 < second_max * 0.99), True), (r2 > second_max * 1.01, False)]
    wrong = sum(int(np.count_nonzero(st[where] != flag)) for where, flag in checks)
    wrong += sum(int(np.count_nonzero(twin.stable[where] != flag)) for where, flag in twin_checks)
    checked = sum(int(w.sum()) for w, _ in checks) + sum(int(w.sum()) for w, _ in twin_checks)
    return (f"{wrong} of {checked} stars misflagged ({len(checks)} branches of the white-dwarf sweep, "
            f"{len(twin_checks)} of the twin sweep; third family {m[turns[1]]:.3f}-{m[turns[2]]:.3f} Msun)")


ENSEMBLE_CONFIG = """\
[sweep]
central_density = {{ min = 2.5e14, max = 3e15, count = {count} }}
[solver]
chunk_size = {chunk}
member_chunk_size = 4
{eos}
[[ensemble]]
name = "prior"
kind = "piecewise_polytrope"
[ensemble.sample]
count = {members}
seed = 3
log10_p1 = [34.2, 34.7]
gamma1 = [2.0, 4.0]
gamma2 = [1.5, 3.5]
gamma3 = [1.5, 3.0]
"""


@row("ensemble members (stacked batch) vs single-EOS sweeps", "same solver, two batchings",
     "1e-12 (M, R), 1e-9 (M_max)")
def _ensemble_vs_single():
    import h5py

    from stellar_match.config import load_config

    with tempfile.TemporaryDirectory() as tmp:
        cfg = Path(tmp) / "e.toml"
        cfg.write_text(ENSEMBLE_CONFIG.format(count=20, chunk=2048, eos="", members=12))
        config = load_config(cfg)
        path = sm.run_config(config, Path(tmp) / "e.h5", workers=1)
        worst_mr = worst_max = 0.0
        compared = 0
        with h5py.File(path, "r") as f:
            g = f["ensemble"]["prior"]
            for i, p in enumerate(config.ensembles[0].parameters):
                if g["status"][i] == 1:
                    continue
                seq = sm.sweep_eos(sm.read_piecewise_polytrope("m", p[0], p[1:]), "central_density",
                                   config.axis.values)
                worst_mr = max(worst_mr, rel(g["mass"][i], seq["mass"]), rel(g["radius"][i], seq["radius"]))
                if np.isfinite(seq.summary["max_mass"]):
                    worst_max = max(worst_max, rel(g["max_mass"][i], seq.summary["max_mass"]))
                compared += 1
    def shown(x):
        return "bit-identical" if x == 0 else f"{x:.1e}"

    return f"{compared} members: {shown(worst_mr)} (M, R), {shown(worst_max)} (M_max)"


def _datasets(path: Path) -> dict[str, bytes]:
    import h5py

    out = {}
    with h5py.File(path, "r") as f:
        def visit(name, obj):
            if isinstance(obj, h5py.Dataset):
                out[name] = obj[()].tobytes()
        f.visititems(visit)
    return out


@row("resume after SIGKILL; 1 vs 2 workers; Dask LocalCluster", "uninterrupted serial run", "bit for bit")
def _same_bits():
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        cfg = folder / "r.toml"
        block = ('[[eos]]\nname = "sly"\nkind = "piecewise_polytrope"\nlog10_p1 = 34.384\n'
                 'gammas = [3.005, 2.988, 2.851]\n')
        cfg.write_text(ENSEMBLE_CONFIG.format(count=60, chunk=6, eos=block, members=16))
        ref = _datasets(sm.run_config(cfg, folder / "serial.h5", workers=1))
        runs = {"2 workers": _datasets(sm.run_config(cfg, folder / "two.h5", workers=2))}
        # kill -9 the whole sweep once it has saved two parts, then resume
        killed = folder / "killed.h5"
        env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]))
        proc = subprocess.Popen([sys.executable, "-m", "stellar_match.cli", "-q", "sweep", str(cfg), "-o",
                                 str(killed), "--workers", "1"], env=env, start_new_session=True,
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        parts = folder / "killed.h5.parts"
        while proc.poll() is None and len(list(parts.glob("[!.]*.npz"))) < 2:
            time.sleep(0.005)
        was_killed = proc.poll() is None
        if was_killed:
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()
        if was_killed:
            sm.run_config(cfg, killed, resume=True, workers=1)
            runs["resume after kill -9"] = _datasets(killed)
        try:
            from dask.distributed import LocalCluster

            with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
                runs["Dask LocalCluster"] = _datasets(sm.run_config(cfg, folder / "dask.h5",
                                                                    scheduler=cluster.scheduler_address))
            dask_note = ""
        except ImportError:
            dask_note = "; Dask not installed, not compared"
    same = [name for name, data in runs.items() if data == ref]
    differ = [name for name in runs if name not in same]
    text = f"{len(ref)} datasets identical to the serial run: {', '.join(same) or 'none'}"
    if differ:
        text += f"; DIFFERENT: {', '.join(differ)}"
    if not was_killed:
        text += "; (the sweep finished before it could be killed)"
    return text + dask_note


# --- response equations --------------------------------------------------------------------

def worst_response(cases) -> str:
    """Worst relative error of k2, Lambda and I over (eos, h_c) cases against the r-form reference."""
    worst = {"k2": 0.0, "Λ": 0.0, "I": 0.0}
    for eos, h in cases:
        _, _, k2, lam, inertia = tidal_and_inertia_in_radius(eos, h)
        st = solve_interiors(eos, [h])
        worst["k2"] = max(worst["k2"], rel(st.love_number_k2, k2))
        worst["Λ"] = max(worst["Λ"], rel(st.tidal_deformability, lam))
        worst["I"] = max(worst["I"], rel(st.moment_of_inertia, inertia))
    return ", ".join(f"{v:.1e} ({k})" for k, v in worst.items())


@row("SLy 0.6-2.0 Msun: k2, Λ, I", "solve_ivp DOP853 rtol 1e-11, r-form y and Hartle equations", "1e-5")
def _sly_response():
    eos = sly()
    return worst_response([(eos, float(h_of(eos, [rho])[0])) for rho in (4.3e14, 8.9e14, 1.6e15)])


@row("uniform density C = 0.3, table EOS: k2, Λ, I", "same reference", "1e-5")
def _uniform_and_table_response():
    u = sm.incompressible("u", 1e15)
    s = np.sqrt(1 - 2 * 0.3)
    cases = [(u, float(u.enthalpy_of_pressure(np.array([u.energy_density * (1 - s) / (3 * s - 1)]))[0]))]
    table = sm.from_table("t", SOFT_TABLE, SOFT_COLUMNS)
    cases.append((table, float(h_of(table, [1.2e15])[0])))
    return worst_response(cases)


@row("n = 1 polytrope, C = 2e-7: k2, I/(MR²)", "Hinderer 2008 (0.2599); textbook (2/3)(1 − 6/π²)", "1e-5")
def _n1_response():
    poly = sm.polytrope("n1", 1e5, 2.0)
    st = solve_interiors(poly, h_of(poly, [1e9]))
    k2n = (15 - np.pi**2) / (2 * np.pi**2)
    return (f"{rel(st.love_number_k2, k2n):.1e} (k2), "
            f"{rel(st.moment_of_inertia / (st.mass * st.radius**2), 2 / 3 * (1 - 6 / np.pi**2)):.1e} (I)")


@row("uniform density, C = 2e-8: k2, I/(MR²)", "Hinderer 2008 (3/4, with the surface jump); 2/5", "1e-5")
def _uniform_newtonian_response():
    eos = sm.incompressible("u", 1e15)
    st = solve_interiors(eos, eos.enthalpy_of_pressure(units.pressure_to_geometric(np.array([1e28]))))
    return (f"{rel(st.love_number_k2, 0.75):.1e} (k2), "
            f"{rel(st.moment_of_inertia / (st.mass * st.radius**2), 0.4):.1e} (I)")


@row("I-Love, SLy/APR4/H4/MPA1, M > 1 Msun", "Yagi & Yunes 2013 fit (from memory)", "1.5 %")
def _i_love():
    worst = 0.0
    for name in ("SLy", "APR4", "H4", "MPA1"):
        lp, g1, g2, g3, _ = READ_TABLE_III[name]
        s = sm.sweep_eos(sm.read_piecewise_polytrope(name, lp, [g1, g2, g3]), "central_density",
                         np.geomspace(3e14, 3e15, 25))
        ok = s.stable & (s["mass"] > 1.0) & (s["tidal_deformability"] < 5000)
        mk = units.mass_to_geometric(s["mass"][ok])
        ibar = s["moment_of_inertia"][ok] / units.MOMENT_OF_INERTIA_GEOM_TO_CGS / mk**3
        x = np.log(s["tidal_deformability"][ok])
        fit = np.exp(1.47 + 0.0817 * x + 0.0149 * x**2 + 2.87e-4 * x**3 - 3.64e-5 * x**4)
        worst = max(worst, rel(ibar, fit))
    return f"{100 * worst:.2f} %"


@row("target masses reproduce the request; Λ̃(m, m) = Λ(m)", "definition; Favata 2014", "1e-6; 1e-12")
def _targets():
    requested = [1.0, 1.4, 2.0]
    seq = sm.sweep_eos(sly(), "central_density", np.geomspace(3e14, 4e15, 40), target_masses=requested,
                       binaries=[[1.4, 1.4]])
    t, b = seq.groups["targets"], seq.groups["binaries"]
    return (f"{rel(t['mass'], requested):.1e} (mass); "
            f"{rel(b['lambda_tilde'][0], t['tidal_deformability'][1]):.1e} (Λ̃)")


# --- units, exterior, exports --------------------------------------------------------------

def _h(eos, rho):
    return eos.enthalpy_of_density(units.density_to_geometric(np.atleast_1d(np.asarray(rho, dtype=float))))


@row("quark stars (B = 57 MeV/fm³, ρ_c = 6e14, 2e15): M, R; Λ, I",
     "solve_ivp DOP853 rtol 1e-11 (h-form; r-form with the surface jump)", "1e-6; 1e-5")
def _quark_stars():
    q = sm.quark_matter("q", 57.0)
    worst = [0.0] * 4
    for rho in (6e14, 2e15):
        h = float(_h(q, rho)[0])
        st = solve_interiors(q, np.array([h]))
        R, M, _ = tov_in_enthalpy(q, h)
        _, _, _, lam, inertia = tidal_and_inertia_in_radius(q, h)
        worst = [max(w, v) for w, v in zip(worst, (rel(st.mass, M), rel(st.radius, R),
                                                   rel(st.tidal_deformability, lam),
                                                   rel(st.moment_of_inertia, inertia)), strict=True)]
    return f"{worst[0]:.1e} (M), {worst[1]:.1e} (R); {worst[2]:.1e} (Λ), {worst[3]:.1e} (I)"


@row("quark M_max, B = 56 MeV/fm³", "2.033 Msun (Witten 1984; from memory)", "0.5 %")
def _quark_maximum():
    q56 = sm.quark_matter("q56", 56.0)
    rho_s = units.density_from_geometric(q56.surface_density)
    m56 = sm.sweep_eos(q56, "central_density", rho_s * np.geomspace(1.2, 12.0, 30)).summary["max_mass"]
    return f"{m56:.4f} Msun ({m56 / 2.033 - 1:+.2%})"


@row("hybrid stars, SLy + p_t = 1e35, Δε = 3e14 g/cm³, c_s² = 1: M, R, M_b; Λ; core radius",
     "solve_ivp across a jump smoothed over 1e-8 p_t, no jump condition assumed", "1e-6; 1e-5")
def _hybrid_stars():
    pt = sm.phase_transition("pt", sly(), 1.0e35, 3.0e14, 1.0)
    worst = [0.0] * 3
    for h in (0.25, 0.5):
        st = solve_interiors(pt, np.array([h]))
        R, M, Mb, _, lam, _, r_core, _ = hybrid_star_in_radius(pt, h)
        worst = [max(w, v) for w, v in zip(worst, (max(rel(st.mass, M), rel(st.radius, R), rel(st.baryon_mass, Mb)),
                                                   rel(st.tidal_deformability, lam), rel(st.core_radius, r_core)),
                                           strict=True)]
    return f"{worst[0]:.1e} (M, R, M_b); {worst[1]:.1e} (Λ); {worst[2]:.1e} (core radius)"


@row("spectral and sound-speed-node stars at ρ_c = 1.1e15 g/cm³: M, R, M_b", "solve_ivp DOP853 rtol 1e-11 (h-form)",
     "1e-6")
def _smooth_kinds():
    out = []
    for name, eos in (("spectral", sm.spectral("s", [0.9865, 0.1110, -0.0301, 0.0022])),
                      ("nodes", sm.sound_speed_nodes("n", [1.5e14, 3e14, 6e14, 1.2e15, 2.4e15],
                                                     [0.05, 0.3, 0.6, 0.4, 0.5]))):
        h = float(_h(eos, 1.1e15)[0])
        st = solve_interiors(eos, np.array([h]))
        R, M, Mb = tov_in_enthalpy(eos, h)
        out.append(f"{max(rel(st.mass, M), rel(st.radius, R), rel(st.baryon_mass, Mb)):.1e} ({name})")
    return ", ".join(out)


@row("white dwarf, μ_e = 2, ρ_c = 1 g/cm³: M, R", "Newtonian n = 3/2 Lane-Emden, ξ₁ = 3.65375, "
     "−ξ²θ' = 2.71406 (Chandrasekhar 1939, from memory)", "1e-4")
def _white_dwarf_lane_emden():
    c_cgs = units.SPEED_OF_LIGHT_SI * 1e2
    erg_per_mev = units.ELEMENTARY_CHARGE_SI * 1e13
    hbar = units.HBAR_C_MEV_FM * 1e-13 * erg_per_mev / c_cgs  # erg s
    m_e = units.ELECTRON_REST_ENERGY_MEV * erg_per_mev / c_cgs**2  # g
    mu_e, rho_c = 2.0, 1.0
    k_nr = (3 * np.pi**2) ** (2 / 3) * hbar**2 / (5 * m_e * (mu_e * units.ATOMIC_MASS_UNIT_G) ** (5 / 3))
    a = np.sqrt(2.5 * k_nr * rho_c ** (-1 / 3) / (4 * np.pi * units.GRAVITATIONAL_CONSTANT_SI * 1e3))
    star = sm.solve_stars(sm.electron_gas("wd", mu_e), central_density=[rho_c])
    dm = rel(star["mass"], 4 * np.pi * a**3 * rho_c * 2.71406 / units.SOLAR_MASS_G)
    dr = rel(star["radius"], 3.65375 * a / 1e5)
    return f"{dm:.1e} (M), {dr:.1e} (R)"


@row("white-dwarf GR maximum, μ_e = 2", "solve_ivp DOP853 rtol 1e-11 at the same central density", "1e-6")
def _white_dwarf_maximum():
    eos = sm.electron_gas("wd", 2.0)
    summary = sm.sweep_eos(eos, "central_density", np.geomspace(5e9, 1e11, 9)).summary
    rho = summary["max_mass_central_density"]
    reference = units.mass_from_geometric(tov_in_enthalpy(eos, float(_h(eos, rho)[0]))[1])
    return (f"{rel(summary['max_mass'], reference):.1e}; M_max = {summary['max_mass']:.4f} Msun "
            f"at {rho:.3e} g/cm³")


@row("constants, geometric factors", "astropy `codata2018`, `iau2015`", "1e-14")
def _constants():
    try:
        import astropy.units as au
        from astropy.constants import codata2018, iau2015
    except ImportError:
        return "astropy not installed: not compared"
    G, c = codata2018.G, codata2018.c
    pairs = [(units.GRAVITATIONAL_CONSTANT_SI, G.value), (units.SPEED_OF_LIGHT_SI, c.value),
             (units.SOLAR_MASS_PARAMETER_SI, iau2015.GM_sun.value),
             (units.EARTH_MASS_PARAMETER_SI, iau2015.GM_earth.value),
             (units.MEV_PER_FM3_IN_ERG_PER_CM3, (1 * au.MeV / au.fm**3).to(au.erg / au.cm**3).value),
             (units.DENSITY_CGS_TO_GEOM, (G / c**2 * au.g / au.cm**3).to(au.km**-2).value),
             (units.PRESSURE_CGS_TO_GEOM, (G / c**4 * au.dyn / au.cm**2).to(au.km**-2).value),
             (units.SOLAR_MASS_KM, (iau2015.GM_sun / c**2).to(au.km).value)]
    worst = max(abs(a / b - 1) for a, b in pairs)
    return f"{worst:.1e} ({len(pairs)} constants and factors)"


@row("Schwarzschild radius of Sun / Earth", "common values 2.95 km / 8.87 mm", "5e-3 abs")
def _schwarzschild():
    earth = units.EARTH_MASS_PARAMETER_SI / units.SOLAR_MASS_PARAMETER_SI
    return (f"{float(sm.exterior.schwarzschild_radius(1.0)):.4f} km / "
            f"{float(sm.exterior.schwarzschild_radius(earth)) * 1e6:.3f} mm")


@row("redshift, log g columns of exports", "exterior formulas recomputed from M, R", "1e-12")
def _export_columns():
    from stellar_match.exports import redshift_table

    seq = sm.sweep_eos(sly(), "central_density", np.geomspace(3e14, 3e15, 30))
    table = redshift_table([("sly", seq)])
    col = table.columns if hasattr(table, "columns") and isinstance(table.columns, dict) else table

    def values(name):
        return np.asarray(col[name], dtype=float)

    m, r = values("mass"), values("radius")
    x = units.mass_to_geometric(m) / r  # GM/(Rc^2)
    z = 1 / np.sqrt(1 - 2 * x) - 1
    g = units.mass_to_geometric(m) / (r * r * np.sqrt(1 - 2 * x)) * units.ACCELERATION_GEOM_TO_CGS
    return f"{max(rel(values('surface_redshift'), z), rel(values('log10_surface_gravity'), np.log10(g))):.1e}"


# -- issue 12: one star's profile and the crust ---------------------------------------------------

@row("profile, uniform density C = 0.25: e^(nu/2) along r", "Schwarzschild 1916 exact interior", "1e-9")
def _profile_uniform():
    # steps 1/4 of the defaults and tolerance 1e-11 (the default grid gives about 1e-8)
    eos = sm.incompressible("u", 1e15)
    s = np.sqrt(1 - 2 * 0.25)
    p_c = eos.energy_density * (1 - s) / (3 * s - 1)
    prof = sm.profile(eos, central_pressure=units.pressure_from_geometric(p_c),
                      control=replace(DEFAULT_STEPS, tolerance=1e-11))
    inside = prof.columns["region"] == "interior"
    r, R = prof.columns["radius"][inside], prof.attributes["radius"]
    M = units.mass_to_geometric(prof.attributes["mass"])
    exact = 1.5 * np.sqrt(1 - 2 * M / R) - 0.5 * np.sqrt(1 - 2 * M * r**2 / R**3)
    default = sm.profile(eos, central_pressure=units.pressure_from_geometric(p_c))
    inside_d = default.columns["region"] == "interior"
    rd = default.columns["radius"][inside_d]
    exact_d = 1.5 * np.sqrt(1 - 2 * M / R) - 0.5 * np.sqrt(1 - 2 * M * rd**2 / R**3)
    return (f"{rel(np.sqrt(prof.columns['g_tt_magnitude'][inside]), exact):.1e} ({inside.sum()} points); "
            f"default steps {rel(np.sqrt(default.columns['g_tt_magnitude'][inside_d]), exact_d):.1e}")


@row("profile, n = 1 polytrope ρ_c = 1e11 g/cm3: ρ(r)/ρ_c", "sin ξ / ξ (Lane-Emden, Chandrasekhar 1939)", "3e-4")
def _profile_lane_emden():
    prof = sm.profile(sm.polytrope("n1", 1e5, 2.0), central_density=1e11)
    inside = np.char.startswith(prof.columns["region"].astype(str), "interior")
    xi = np.pi * prof.columns["radius"][inside] / prof.attributes["radius"]
    le = np.where(xi > 0, np.sin(xi) / np.where(xi > 0, xi, 1.0), 1.0)
    return f"{np.max(np.abs(prof.columns['rest_mass_density'][inside] / 1e11 - le)):.1e} (absolute, of ρ_c)"


@row("profile of SLy 1.4 Msun: M, R, M_b vs the sweep; match at R", "the same solve; Schwarzschild exterior",
     "1e-12")
def _profile_match():
    eos = sly()
    prof = sm.profile(eos, central_density=8e14)
    cols = sm.solve_stars(eos, central_density=[8e14])
    worst = max(rel(prof.attributes[k], cols[k][0]) for k in ("mass", "radius", "baryon_mass"))
    a = sm.profile(eos, mass=1.4).attributes
    jumps = max(abs(a["match_g_tt"]), abs(a["match_g_rr"]), abs(a["match_dnu_dr"]))
    return f"{worst:.1e} (M, R, M_b); largest relative jump at R {jumps:.1e} (e^nu, e^lambda, dnu/dr)"


@row("SLy 1.4 Msun crust: R - r_cc, M - m(r_cc), ΔI_crust/I", "solve_ivp DOP853 rtol 1e-11, r-form with Hartle "
     "frame dragging, event at p_cc", "1e-5; 1e-4; 1e-4")
def _crust():
    from reference_solutions import crust_in_radius

    eos = sly()
    a = sm.profile(eos, mass=1.4).attributes
    R, M, r_cc, m_cc, frac = crust_in_radius(eos, a["central_enthalpy"], units.density_to_geometric(
        eos.parameters["crust_core_density"]))
    mass_error = rel(a["crust_mass"], units.mass_from_geometric(M - m_cc))
    return (f"{rel(a['crust_thickness'], R - r_cc):.1e}, {mass_error:.1e}, "
            f"{rel(a['crust_inertia_fraction'], frac):.1e} (thickness {a['crust_thickness']:.3f} km, "
            f"ΔI/I = {a['crust_inertia_fraction']:.4f})")

# --- radial oscillation modes (issue 12, section 3) ---
@row("radial modes: Newtonian homogeneous sphere, constant Γ1 = 5/3, 2, 3: ω0²",
     "classical (3Γ1 - 4) 4πGρ/3 (from memory)", "1e-4")
def _radial_homogeneous():
    from stellar_match import radial_modes as rmod
    rho = 1e12
    eos = sm.incompressible("u", rho)
    worst = 0.0
    for gamma1 in (5.0 / 3.0, 2.0, 3.0):
        res = rmod.radial_modes_of_eos(eos, np.array([1e-6]), modes=1, gamma1=gamma1)
        exact = (3 * gamma1 - 4) * 4 * np.pi * sm.units.GRAVITATIONAL_CONSTANT_SI * 1e3 * rho / 3
        worst = max(worst, rel(res.omega_squared[0, 0], exact))
    return f"{worst:.1e}"


@row("radial modes: ω0² = 0 at the SLy maximum-mass star (equilibrium Γ1), in ln ρ_c",
     "turning-point theorem (Harrison et al. 1965, from memory); sweep's refined maximum", "1e-4")
def _radial_turning_point():
    from scipy.optimize import brentq

    from stellar_match import radial_modes as rmod
    eos = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    seq = sm.sweep_eos(eos, "central_density", np.geomspace(1.2e15, 3e15, 12))
    ln_max = np.log(seq.summary["max_mass_central_density"])
    root = brentq(lambda x: rmod.radial_modes(eos, central_density=np.exp(x), modes=1).omega_squared[0, 0],
                  ln_max - 0.05, ln_max + 0.05, xtol=1e-8)
    return f"{abs(root - ln_max):.1e}"


@row("radial modes across a density jump (Γ = 2 polytrope + phase transition): ω0², rapid and slow",
     "Pereira, Flores & Lugones 2018 conditions; solve_ivp shooting (Gondek et al. 1997 system)", "3e-4")
def _radial_junctions():
    import warnings

    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
    from reference_solutions import radial_mode_reference

    from stellar_match import radial_modes as rmod
    hybrid = sm.phase_transition("hybrid", sm.polytrope("p", 1e5, 2.0), 1.0e35, 3.0e14, 1.0)
    h = sm.eos.central_enthalpy(hybrid, "central_pressure", [3e35])
    out = []
    for junction in ("rapid", "slow"):
        w = rmod.radial_modes_of_eos(hybrid, h, modes=1, junction=junction).omega_squared[0, 0]
        w /= sm.units.SPEED_OF_LIGHT_KM_S**2
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            ref = radial_mode_reference(hybrid, float(h[0]), (0.97 * w, 1.03 * w), junction=junction,
                                        rtol=1e-8, surface_fraction=1e-8)
        out.append(f"{rel(w, ref):.1e} ({junction})")
    return ", ".join(out)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--list", action="store_true", help="print the case of every row and stop")
    parser.add_argument("--only", metavar="WORD", help="only rows whose case contains WORD")
    parser.add_argument("--random-examples", type=int, default=60, metavar="N",
                        help="random EOS drawn for the within-tolerance-or-flagged row (default 60, as the tests)")
    parser.add_argument("--error-stars", type=int, default=1200, metavar="N",
                        help="stars of the error-estimate row (default 1200)")
    args = parser.parse_args(argv)
    if args.list:
        for case, *_ in ROWS:
            print(case)
        return
    print("| case | source | tolerance | measured |")
    print("|---|---|---|---|")
    options = {_random_stars: {"examples": args.random_examples}, _estimate_vs_error: {"stars": args.error_stars}}
    for case, source, tolerance, fn in ROWS:
        if args.only and args.only.lower() not in case.lower():
            continue
        with np.errstate(all="ignore"):
            measured = fn(**options.get(fn, {}))
        print(f"| {case} | {source} | {tolerance} | {measured} |", flush=True)



if __name__ == "__main__":
    main()
