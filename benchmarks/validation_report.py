"""Print the measured results behind README's validation table.

    python benchmarks/validation_report.py

Each row: case, source, tolerance required by the tests, measured worst
relative error.  Uses the independent references in tests/reference_solutions.py.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

from reference_solutions import (  # noqa: E402
    hybrid_star_in_radius,
    tidal_and_inertia_in_radius,
    tov_in_enthalpy,
    tov_in_radius,
)

import stellar_match as sm  # noqa: E402
from stellar_match import units  # noqa: E402
from stellar_match.structure import solve_interiors  # noqa: E402

SLY = (34.384, [3.005, 2.988, 2.851])


def rel(a, b):
    return float(np.max(np.abs(np.asarray(a) / np.asarray(b) - 1)))


def row(case, source, tol, measured):
    print(f"| {case} | {source} | {tol} | {measured} |")


def main() -> None:
    print("| case | source | tolerance | measured |")
    print("|---|---|---|---|")
    # uniform density
    eos = sm.incompressible("u", 1e15)
    worst_m = worst_r = 0.0
    for C in (0.01, 0.1, 0.2, 0.3, 0.4, 0.44):
        s = np.sqrt(1 - 2 * C)
        st = solve_interiors(eos, eos.enthalpy_of_pressure(np.array([eos.energy_density * (1 - s) / (3 * s - 1)])))
        R = np.sqrt(3 * C / (4 * np.pi * eos.energy_density))
        worst_r = max(worst_r, rel(st.radius, R))
        worst_m = max(worst_m, rel(st.mass, C * R))
    row("uniform density, C = 0.01-0.44: M, R", "Schwarzschild 1916 exact interior", "1e-6",
        f"{worst_m:.1e} (M), {worst_r:.1e} (R)")
    # n=1 polytrope
    K = 1e5
    poly = sm.polytrope("n1", K, 2.0)
    G = units.GRAVITATIONAL_CONSTANT_SI * 1e3
    alpha = np.sqrt(K / (2 * np.pi * G))
    c = sm.solve_stars(poly, central_density=[1e10])
    row("Newtonian n = 1 polytrope radius, rho_c = 1e10 g/cm3", "Chandrasekhar 1939 (Lane-Emden)", "3e-4",
        f"{rel(c['radius'], np.pi * alpha / 1e5):.1e}")
    # SLy vs solve_ivp
    sly = sm.read_piecewise_polytrope("sly", *SLY)
    hs = sly.enthalpy_of_density(units.density_to_geometric(np.array([4e14, 7e14, 1.2e15, 2e15, 3.2e15])))
    ref = np.array([tov_in_enthalpy(sly, float(h)) for h in hs])
    refr = np.array([tov_in_radius(sly, float(h)) for h in hs])
    st = solve_interiors(sly, hs)
    row("SLy (Read et al. 2009) 0.6-2.0 Msun: M, R, M_b", "solve_ivp DOP853 rtol 1e-11, r-form and h-form", "1e-6",
        f"{rel(st.mass, ref[:, 1]):.1e} (M), {rel(st.radius, ref[:, 0]):.1e} (R), "
        f"{rel(st.baryon_mass, ref[:, 2]):.1e} (M_b); references agree to {rel(ref, refr):.0e}")
    # Read Table III
    table = {"SLy": (34.384, 3.005, 2.988, 2.851, 2.049), "APR4": (34.269, 2.830, 3.445, 3.348, 2.213),
             "FPS": (34.283, 2.985, 2.863, 2.600, 1.799), "MS1": (34.858, 3.224, 3.033, 1.325, 2.767),
             "H4": (34.669, 2.909, 2.246, 2.144, 2.032), "MPA1": (34.495, 3.446, 3.572, 2.887, 2.461),
             "ENG": (34.437, 3.514, 3.130, 3.168, 2.240), "WFF1": (34.031, 2.519, 3.791, 3.660, 2.133),
             "ALF2": (34.616, 4.070, 2.411, 1.890, 1.989)}
    devs = {}
    for k, (lp, g1, g2, g3, mm) in table.items():
        e = sm.read_piecewise_polytrope(k, lp, [g1, g2, g3])
        s = sm.sweep_eos(e, "central_density", np.geomspace(5e14, 5e15, 30))
        devs[k] = s.summary["max_mass"] / mm - 1
    worst = max(devs, key=lambda k: abs(devs[k]))
    row("M_max of 9 Read et al. EOS", "Read et al. 2009, Table III (from memory)", "1.5 %",
        f"worst {worst} {100 * devs[worst]:+.2f} %; median {100 * np.median(np.abs(list(devs.values()))):.2f} %")
    # tidal / inertia
    worst = {"k2": 0.0, "Lambda": 0.0, "I": 0.0}
    for rho in (4.3e14, 8.9e14, 1.6e15):
        h = float(sly.enthalpy_of_density(units.density_to_geometric(np.array([rho])))[0])
        R, M, k2, lam, inertia = tidal_and_inertia_in_radius(sly, h)
        st = solve_interiors(sly, [h])
        worst["k2"] = max(worst["k2"], rel(st.love_number_k2, k2))
        worst["Lambda"] = max(worst["Lambda"], rel(st.tidal_deformability, lam))
        worst["I"] = max(worst["I"], rel(st.moment_of_inertia, inertia))
    row("SLy 0.6-2.0 Msun: k2, Lambda, I", "solve_ivp DOP853 rtol 1e-11, r-form y and Hartle equations", "1e-5",
        ", ".join(f"{v:.1e} ({k})" for k, v in worst.items()))
    st = solve_interiors(poly, poly.enthalpy_of_density(units.density_to_geometric(np.array([1e9]))))
    k2n = (15 - np.pi**2) / (2 * np.pi**2)
    row("n = 1 polytrope, C = 2e-7: k2, I/(MR^2)", "Hinderer 2008; textbook (2/3)(1 - 6/pi^2)", "1e-5",
        f"{rel(st.love_number_k2, k2n):.1e} (k2), "
        f"{rel(st.moment_of_inertia / (st.mass * st.radius**2), 2 / 3 * (1 - 6 / np.pi**2)):.1e} (I)")
    st = solve_interiors(eos, eos.enthalpy_of_pressure(units.pressure_to_geometric(np.array([1e28]))))
    row("uniform density, C = 2e-8: k2, I/(MR^2)", "Hinderer 2008 (3/4, with the surface jump); 2/5", "1e-5",
        f"{rel(st.love_number_k2, 0.75):.1e} (k2), "
        f"{rel(st.moment_of_inertia / (st.mass * st.radius**2), 0.4):.1e} (I)")
    worst_il = 0.0
    for lp, g in ((34.384, [3.005, 2.988, 2.851]), (34.269, [2.830, 3.445, 3.348]), (34.669, [2.909, 2.246, 2.144]),
                  (34.495, [3.446, 3.572, 2.887])):
        e = sm.read_piecewise_polytrope("r", lp, g)
        s = sm.sweep_eos(e, "central_density", np.geomspace(3e14, 3e15, 25))
        ok = s.stable & (s["mass"] > 1.0) & (s["tidal_deformability"] < 5000)
        mk = units.mass_to_geometric(s["mass"][ok])
        ibar = s["moment_of_inertia"][ok] / units.MOMENT_OF_INERTIA_GEOM_TO_CGS / mk**3
        x = np.log(s["tidal_deformability"][ok])
        fit = np.exp(1.47 + 0.0817 * x + 0.0149 * x**2 + 2.87e-4 * x**3 - 3.64e-5 * x**4)
        worst_il = max(worst_il, rel(ibar, fit))
    row("I-Love, SLy/APR4/H4/MPA1, M > 1 Msun", "Yagi & Yunes 2013 fit (from memory)", "1.5 %",
        f"{100 * worst_il:.2f} %")
    earth = units.EARTH_MASS_PARAMETER_SI / units.SOLAR_MASS_PARAMETER_SI
    row("Schwarzschild radius of Sun / Earth", "common values 2.95 km / 8.87 mm", "5e-3 abs",
        f"{float(sm.exterior.schwarzschild_radius(1.0)):.4f} km / "
        f"{float(sm.exterior.schwarzschild_radius(earth)) * 1e6:.3f} mm")

    kinds_of_issue_11()


def _h(eos, rho):
    return eos.enthalpy_of_density(units.density_to_geometric(np.atleast_1d(np.asarray(rho, dtype=float))))


def kinds_of_issue_11() -> None:
    """The rows of the EOS kinds added by issue 11."""
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
    row("quark stars (B = 57 MeV/fm3): M, R; Lambda, I", "solve_ivp DOP853 rtol 1e-11", "1e-6; 1e-5",
        f"{worst[0]:.1e} (M), {worst[1]:.1e} (R); {worst[2]:.1e} (Lambda), {worst[3]:.1e} (I)")
    q56 = sm.quark_matter("q56", 56.0)
    rho_s = units.density_from_geometric(q56.surface_density)
    m56 = sm.sweep_eos(q56, "central_density", rho_s * np.geomspace(1.2, 12.0, 30)).summary["max_mass"]
    row("quark M_max, B = 56 MeV/fm3", "2.033 Msun (Witten 1984; from memory)", "0.5 %", f"{m56:.4f} Msun")
    sly = sm.read_piecewise_polytrope("sly", *SLY)
    pt = sm.phase_transition("pt", sly, 1.0e35, 3.0e14, 1.0)
    worst = [0.0] * 3
    for h in (0.25, 0.5):
        st = solve_interiors(pt, np.array([h]))
        R, M, Mb, _, lam, _, r_core, _ = hybrid_star_in_radius(pt, h)
        worst = [max(w, v) for w, v in zip(worst, (max(rel(st.mass, M), rel(st.radius, R), rel(st.baryon_mass, Mb)),
                                                   rel(st.tidal_deformability, lam), rel(st.core_radius, r_core)),
                                           strict=True)]
    row("hybrid stars, SLy + p_t = 1e35, jump 3e14 g/cm3, c_s^2 = 1", "solve_ivp across a smoothed jump",
        "1e-6; 1e-5", f"{worst[0]:.1e} (M, R, M_b); {worst[1]:.1e} (Lambda); {worst[2]:.1e} (core radius)")
    for name, eos in (("spectral [0.9865, 0.1110, -0.0301, 0.0022]",
                       sm.spectral("s", [0.9865, 0.1110, -0.0301, 0.0022])),
                      ("sound-speed nodes", sm.sound_speed_nodes("n", [1.5e14, 3e14, 6e14, 1.2e15, 2.4e15],
                                                                 [0.05, 0.3, 0.6, 0.4, 0.5]))):
        h = float(_h(eos, 1.1e15)[0])
        st = solve_interiors(eos, np.array([h]))
        R, M, Mb = tov_in_enthalpy(eos, h)
        row(f"{name}, rho_c = 1.1e15: M, R, M_b", "solve_ivp DOP853 rtol 1e-11 (h-form)", "1e-6",
            f"{max(rel(st.mass, M), rel(st.radius, R), rel(st.baryon_mass, Mb)):.1e}")
    wd = sm.electron_gas("wd", 2.0)
    seq = sm.sweep_eos(wd, "central_density", np.geomspace(5e9, 1e11, 9)).summary
    row("white-dwarf GR maximum, mu_e = 2", "solve_ivp reference at the same central density", "1e-6",
        f"{seq['max_mass']:.5f} Msun at {seq['max_mass_central_density']:.3e} g/cm3")


if __name__ == "__main__":
    main()
