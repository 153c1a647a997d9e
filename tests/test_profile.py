"""One star's profile (stellar_match.profile): exact interiors, the sweep's surface values, the match, the crust."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from reference_solutions import crust_in_radius

import stellar_match as sm
from stellar_match import units
from stellar_match.eos import central_enthalpy
from stellar_match.profile import read_profile, write_profile
from stellar_match.structure import DEFAULT_STEPS

SLY = dict(log10_p1=34.384, gammas=[3.005, 2.988, 2.851])  # Read et al. 2009, Table III


def _interior(prof):
    return np.char.startswith(prof.columns["region"].astype(str), "interior")


def test_uniform_density_lapse_is_schwarzschilds_exact_interior():
    # Schwarzschild (1916): e^(nu/2) = (3/2) sqrt(1 - 2M/R) - (1/2) sqrt(1 - 2M r^2/R^3) (G = c = 1).
    # Required 1e-9 along the profile; this needs a tolerance of 1e-11 (measured by
    # benchmarks/validation_report.py).
    eos = sm.incompressible("u", 1.0e15)
    C = 0.25
    s = np.sqrt(1 - 2 * C)
    p_c = eos.energy_density * (1 - s) / (3 * s - 1)  # Schwarzschild 1916 (REFERENCE_VALUES.md)
    control = replace(DEFAULT_STEPS, tolerance=1e-11)
    prof = sm.profile(eos, central_pressure=units.pressure_from_geometric(p_c), control=control)
    inside = prof.columns["region"] == "interior"
    r = prof.columns["radius"][inside]
    R = prof.attributes["radius"]
    M = units.mass_to_geometric(prof.attributes["mass"])
    exact = 1.5 * np.sqrt(1 - 2 * M / R) - 0.5 * np.sqrt(1 - 2 * M * r**2 / R**3)
    assert np.max(np.abs(np.sqrt(prof.columns["g_tt_magnitude"][inside]) / exact - 1)) < 1e-9


def test_newtonian_n1_polytrope_density_is_sin_xi_over_xi():
    # Lane-Emden n = 1 (Chandrasekhar 1939): rho / rho_c = sin(xi) / xi, xi = pi r / R.  At
    # rho_c = 1e11 g/cm3 with K = 1e5 cgs the compactness is ~3e-5: relativistic corrections of that
    # order, tolerance 3e-4 of rho_c (common practice: ~10 x GM/Rc^2).
    eos = sm.polytrope("n1", 1.0e5, 2.0)
    prof = sm.profile(eos, central_density=1e11)
    inside = _interior(prof)
    xi = np.pi * prof.columns["radius"][inside] / prof.attributes["radius"]
    with np.errstate(invalid="ignore"):
        lane_emden = np.where(xi > 0, np.sin(xi) / xi, 1.0)
    assert np.max(np.abs(prof.columns["rest_mass_density"][inside] / 1e11 - lane_emden)) < 3e-4


def test_mass_radius_baryon_mass_equal_the_sweeps():
    # the profile's star is the sweep's (the same solve); 1e-12 (issue 12), bit-identical in fact
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    prof = sm.profile(eos, central_density=8e14)
    cols = sm.solve_stars(eos, central_density=[8e14])
    for k in ("mass", "radius", "baryon_mass"):
        assert abs(prof.attributes[k] / cols[k][0] - 1) <= 1e-12, k
    m = prof.columns["enclosed_mass"][_interior(prof)][-1]
    assert abs(m / cols["mass"][0] - 1) <= 1e-12


def test_the_match_at_the_surface():
    # Birkhoff / the match: e^nu and e^lambda continuous at R to 1e-12, dnu/dr continuous (p = 0 at R)
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    prof = sm.profile(eos, mass=1.4)
    a = prof.attributes
    assert abs(a["match_g_tt"]) < 1e-12 and abs(a["match_g_rr"]) < 1e-12 and abs(a["match_dnu_dr"]) < 1e-12
    c = prof.columns
    last_in = np.flatnonzero(_interior(prof))[-1]
    assert c["radius"][last_in] == a["radius"] and c["pressure"][last_in] == 0.0
    # the exterior continues the interior: the first exterior point is close and consistent
    f = 1 - 2 * units.mass_to_geometric(a["mass"]) / c["radius"][last_in + 1:]
    np.testing.assert_allclose(c["g_tt_magnitude"][last_in + 1:], f, rtol=1e-15)
    assert abs(a["mass"] - 1.4) < 1e-5  # stars_at_masses: rtol 1e-6
    assert np.isfinite(a["isco_radius"]) and "exterior isco" in set(c["region"])
    assert np.all(np.diff(c["proper_distance"]) >= 0) and np.all(np.diff(c["radius"]) >= 0)


def test_crust_of_sly_at_1_4_against_a_reference_integration():
    # crust thickness, mass and Delta I_crust/I against solve_ivp in r with an event at p_cc
    # (tests/reference_solutions.py::crust_in_radius, Hartle 1967 frame dragging); tolerance 1e-5
    # relative (the solver's tolerance; the reference is at rtol 1e-11)
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    prof = sm.profile(eos, mass=1.4)
    a = prof.attributes
    h_c = a["central_enthalpy"]
    R, M, r_cc, m_cc, frac = crust_in_radius(eos, h_c, units.density_to_geometric(eos.parameters[
        "crust_core_density"]))
    assert a["crust_thickness"] == pytest.approx(R - r_cc, rel=1e-5)
    assert a["crust_mass"] == pytest.approx(units.mass_from_geometric(M - m_cc), rel=1e-4)
    assert a["crust_inertia_fraction"] == pytest.approx(frac, rel=1e-4)
    regions = prof.columns["region"]
    assert {"interior core", "interior crust"} <= set(regions)


def test_sweep_crust_datasets_against_the_reference():
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    cols = sm.solve_stars(eos, central_density=[5e14, 1.5e15])
    for k, rho in enumerate((5e14, 1.5e15)):
        h = float(central_enthalpy(eos, "central_density", [rho])[0])
        R, M, r_cc, m_cc, frac = crust_in_radius(eos, h, units.density_to_geometric(eos.parameters[
            "crust_core_density"]))
        assert cols["crust_thickness"][k] == pytest.approx(R - r_cc, rel=1e-5)
        assert cols["crust_inertia_fraction"][k] == pytest.approx(frac, rel=1e-4)


@pytest.mark.parametrize("suffix", [".h5", ".ecsv"])
def test_files_round_trip_with_units(tmp_path, suffix):
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    prof = sm.profile(eos, central_density=8e14, outer_radius=5)
    path = write_profile(prof, tmp_path / f"p{suffix}")
    back = read_profile(path)
    assert list(back.columns) == list(prof.columns)
    np.testing.assert_array_equal(back.columns["radius"], prof.columns["radius"])
    assert back.attributes["match_g_rr"] == prof.attributes["match_g_rr"]
    assert [p.name for p in tmp_path.iterdir()] == [path.name]  # no temporary left behind
    assert prof.columns["radius"][-1] == pytest.approx(5 * prof.attributes["radius"])


def test_cli_profile_and_figure(tmp_path, capsys):
    from stellar_match.cli import main

    cfg = tmp_path / "c.toml"
    cfg.write_text('[sweep]\ncentral_density = { min = 3e14, max = 3e15, count = 24 }\n\n'
                   '[[eos]]\nname = "sly"\nkind = "piecewise_polytrope"\nlog10_p1 = 34.384\n'
                   'gammas = [3.005, 2.988, 2.851]\n')
    out, fig = tmp_path / "p.h5", tmp_path / "p.png"
    assert main(["profile", str(cfg), "--eos", "sly", "--mass", "1.4", "-o", str(out), "--figure", str(fig)]) == 0
    text = capsys.readouterr().out
    assert "match at R" in text and out.is_file() and fig.is_file()


def test_twin_branch_is_selectable():
    # runs/example_hybrid.toml, EOS "twins": a third family (flagged by the turning-point rule,
    # tests/test_phase_transition.py); at 1.4 Msun the twin is the smaller star with a core of the new phase
    from pathlib import Path

    cfg = Path(__file__).resolve().parents[1] / "runs" / "example_hybrid.toml"
    ordinary = sm.profile(cfg, eos="twins", mass=1.4)
    twin = sm.profile(cfg, eos="twins", mass=1.4, branch=2)
    assert abs(twin.attributes["mass"] - 1.4) < 1e-6 and abs(ordinary.attributes["mass"] - 1.4) < 1e-5
    assert twin.attributes["radius"] < ordinary.attributes["radius"] - 1.0
    assert "interior high-density phase" in set(twin.columns["region"])
    assert "interior high-density phase" not in set(ordinary.columns["region"])
    with pytest.raises(sm.InputError, match="rising branch"):
        sm.profile(cfg, eos="twins", mass=1.4, branch=5)
