"""Redshift exports: ECSV/CSV/HDF5 tables, stars at given masses, the (M, R) grid, inverse z."""

from __future__ import annotations

import shutil

import h5py
import numpy as np
import pytest
from conftest import EOS_TABLES, SLY_BLOCK, assert_one_error_line

from stellar_match import units
from stellar_match.errors import InputError
from stellar_match.exports import (
    forbidden_region,
    parse_range,
    redshift_grid,
    redshift_table,
    redshift_window,
    select_sequences,
    write_table,
)
from stellar_match.runfile import read_run
from stellar_match.sweep import eos_from_sequence, run_config, stars_at_masses

TABLE_BLOCK = """\
[[eos]]
name = "medium"
kind = "table"
path = "hdm_medium.csv"
[eos.columns]
pressure = { column = "p", unit = "MeV/fm3" }
energy_density = { column = "e", unit = "MeV/fm3" }
baryon_density = { column = "nb", unit = "fm-3" }
"""
#: 30 stars per EOS: small but spanning the maximum of both.
CONFIG = "[sweep]\ncentral_density = { min = 2.5e14, max = 3e15, count = 30 }\n\n" + SLY_BLOCK + "\n" + TABLE_BLOCK


@pytest.fixture(scope="module")
def tiny_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("exports")
    shutil.copyfile(EOS_TABLES / "hdm_medium.csv", folder / "hdm_medium.csv")
    (folder / "tiny.toml").write_text(CONFIG)
    return run_config(folder / "tiny.toml", folder / "tiny.h5")


def exterior_z_and_g(mass_msun, radius_km):
    """z = (1 - 2GM/Rc^2)^(-1/2) - 1 and g = GM/(R^2 sqrt(1 - 2GM/Rc^2)) in cm/s^2, recomputed here.

    Source: the exterior Schwarzschild metric (e.g. Misner, Thorne & Wheeler 1973, sec. 31.2;
    the formulas as written in issue 4).
    """
    m = np.asarray(mass_msun) * units.SOLAR_MASS_KM  # GM/c^2 in km
    r = np.asarray(radius_km)
    lapse = np.sqrt(1.0 - 2.0 * m / r)
    return 1.0 / lapse - 1.0, m / (r**2 * lapse) * units.ACCELERATION_GEOM_TO_CGS


def test_ecsv_reads_back_with_astropy_units_and_values(tiny_run, tmp_path):
    table_mod = pytest.importorskip("astropy.table")
    u = pytest.importorskip("astropy.units")
    run = read_run(tiny_run)
    path = write_table(redshift_table(select_sequences([run])), tmp_path / "z.ecsv")
    t = table_mod.Table.read(path, format="ascii.ecsv")
    # units as astropy parses them (APE 6: the ECSV header carries astropy unit strings)
    expected = {"central_density": "g / cm3", "mass": "solMass", "radius": "km", "surface_gravity": "cm / s2",
                "apparent_radius": "km"}
    for col, unit in expected.items():
        assert t[col].unit == u.Unit(unit), col
    assert t["compactness"].unit is None and t["surface_redshift"].unit is None
    assert str(t["log10_surface_gravity"].unit) == "dex(cm / s2)"
    # values equal to the run file's, to the last bit (repr round-trips float64)
    for name, seq in run.eos.items():
        rows = t[t["eos"] == name]
        for col in ("central_density", "mass", "radius", "compactness", "surface_redshift", "surface_gravity"):
            np.testing.assert_array_equal(np.asarray(rows[col]), np.asarray(seq[col]), err_msg=col)
    assert len(t) == sum(len(s["mass"]) for s in run.eos.values())


def test_csv_reads_back_with_numpy_and_exterior_formulas_hold(tiny_run, tmp_path):
    run = read_run(tiny_run)
    path = write_table(redshift_table(select_sequences([run]), stable_only=True), tmp_path / "z.csv")
    lines = path.read_text().splitlines()
    assert lines[1].startswith("# units: ,g / cm3,solMass,km,")
    a = np.genfromtxt(path, delimiter=",", names=True, dtype=None, encoding="utf-8")
    assert len(a) == sum(int(s.stable.sum()) for s in run.eos.values())
    z, g = exterior_z_and_g(a["mass"], a["radius"])
    # tolerance: the run file's z, g come from geometric-unit arithmetic; 1e-12 covers rounding only
    np.testing.assert_allclose(a["surface_redshift"], z, rtol=1e-12)
    np.testing.assert_allclose(a["surface_gravity"], g, rtol=1e-12)
    np.testing.assert_allclose(a["log10_surface_gravity"], np.log10(g), rtol=1e-13)
    # apparent radius R_inf = R (1 + z) (e.g. Lattimer & Prakash 2007, radiation radius)
    np.testing.assert_allclose(a["apparent_radius"], a["radius"] * (1 + z), rtol=1e-12)
    assert np.all(np.isin(a["eos"], ["sly", "medium"]))


def test_hdf5_table_has_units(tiny_run, tmp_path):
    run = read_run(tiny_run)
    path = write_table(redshift_table(select_sequences([run], ["sly"])), tmp_path / "z.h5")
    with h5py.File(path, "r") as f:
        assert f["mass"].attrs["unit"] == "solMass"
        assert f["surface_gravity"].attrs["unit"] == "cm / s2"
        np.testing.assert_array_equal(f["radius"][()], run.eos["sly"]["radius"])
        assert {x.decode() for x in f["eos"][()]} == {"sly"}


def test_stars_at_masses_reproduce_the_mass(tiny_run):
    run = read_run(tiny_run)
    for seq in run.eos.values():
        eos = eos_from_sequence(seq)
        targets = np.array([1.0, 1.4, 0.98 * seq.summary["max_mass"], seq.summary["max_mass"] + 0.1])
        stars = stars_at_masses(eos, seq, targets)
        # issue 4: the fresh solve reproduces the requested mass to 1e-6 relative
        np.testing.assert_allclose(stars["mass"][:3], targets[:3], rtol=1e-6)
        assert np.all(np.isnan([stars[k][3] for k in stars]))  # above M_max: a NaN row
        # the star found lies between the stable samples bracketing it (central density ordering)
        st = seq.stable
        rho, m = np.asarray(seq["central_density"])[st], np.asarray(seq["mass"])[st]
        assert np.all(np.diff(stars["central_density"][:3]) > 0)
        assert rho.min() <= stars["central_density"][0] <= rho.max()
        assert np.interp(1.4, m, rho) == pytest.approx(stars["central_density"][1], rel=0.05)


def test_cli_masses_rows(tiny_run, tmp_path, run_cli):
    out = tmp_path / "m.ecsv"
    code, _, err = run_cli("redshift", tiny_run, "-o", out, "--masses", "1.2:2.4:0.6", "--eos", "sly")
    assert code == 0, err
    assert "NaN rows" in err  # 2.4 Msun is above the SLy maximum (about 2.05 Msun, Read et al. 2009 Table III)
    table_mod = pytest.importorskip("astropy.table")
    t = table_mod.Table.read(out, format="ascii.ecsv")
    np.testing.assert_allclose(t["requested_mass"], [1.2, 1.8, 2.4])
    np.testing.assert_allclose(t["mass"][:2], [1.2, 1.8], rtol=1e-6)  # issue 4: 1e-6 in mass
    assert np.isnan(t["mass"][2]) and np.isnan(t["radius"][2])


def test_changed_table_is_refused(tmp_path):
    shutil.copyfile(EOS_TABLES / "hdm_medium.csv", tmp_path / "hdm_medium.csv")
    cfg = tmp_path / "t.toml"
    cfg.write_text("[sweep]\ncentral_density = { min = 5e14, max = 1e15, count = 3 }\n\n" + TABLE_BLOCK)
    seq = read_run(run_config(cfg, tmp_path / "t.h5")).eos["medium"]
    with (tmp_path / "hdm_medium.csv").open("a") as f:
        f.write("# an edit after the sweep\n")
    with pytest.raises(InputError, match="changed since the run"):
        eos_from_sequence(seq)


def test_grid_regions_and_values(tmp_path, run_cli):
    out = tmp_path / "grid.csv"
    code, _, err = run_cli("redshift", "--grid-mass", "1.0:2.6:0.05", "--grid-radius", "8:16:0.1", "-o", out)
    assert code == 0, err
    a = np.genfromtxt(out, delimiter=",", names=True, dtype=None, encoding="utf-8")
    assert len(a) == 33 * 81
    ok = a["region"] != "horizon"
    z, g = exterior_z_and_g(a["mass"][ok], a["radius"][ok])
    np.testing.assert_allclose(a["surface_redshift"][ok], z, rtol=1e-12)
    np.testing.assert_allclose(a["log10_surface_gravity"][ok], np.log10(g), rtol=1e-13)
    x = a["radius"] / (a["mass"] * units.SOLAR_MASS_KM)  # R in units of GM/c^2
    # boundaries: horizon R = 2GM/c^2; Buchdahl 1959 R = 9/4 GM/c^2; causality ~2.9 GM/c^2 (Lattimer & Prakash 2007)
    assert np.all((a["region"] == "allowed") == (x >= 2.9))
    assert np.all((a["region"] == "causality") == ((x < 2.9) & (x > 2.25)))
    assert set(a["region"]) >= {"allowed", "causality", "buchdahl"}


def test_forbidden_region_boundaries():
    m = 1.0
    r_of = {k: k_ * units.SOLAR_MASS_KM for k, k_ in (("h", 2.0), ("b", 2.25), ("c", 2.9))}
    got = forbidden_region([m] * 5, [r_of["h"] * 0.99, r_of["h"] * 1.01, r_of["b"] * 1.01, r_of["c"] * 0.99,
                                     r_of["c"] * 1.01])
    assert list(got) == ["horizon", "buchdahl", "causality", "causality", "allowed"]
    t = redshift_grid([1.0], [2.0 * units.SOLAR_MASS_KM * 0.5])
    assert np.isnan(t.columns["surface_redshift"][0])  # inside the horizon z is undefined


def test_observed_redshift_window(tiny_run, run_cli, tmp_path):
    run = read_run(tiny_run)
    t = redshift_window(select_sequences([run]), 0.3, 0.02)
    for i, name in enumerate(t.columns["eos"]):
        for mcol, rcol in (("mass_min", "radius_max"), ("mass_max", "radius_min")):
            z, _ = exterior_z_and_g(t.columns[mcol][i], t.columns[rcol][i])
            # interpolated crossings: z of the ends within +-sigma up to the sampling error of 30 stars
            assert 0.28 - 5e-3 <= z <= 0.32 + 5e-3, (name, mcol)
    code, out, err = run_cli("redshift", tiny_run, "--observed-z", "0.3", "--sigma", "0.02",
                             "-o", tmp_path / "w.csv")
    assert code == 0, err
    assert "mass_min" in out and "sly" in out and (tmp_path / "w.csv").is_file()


@pytest.mark.parametrize(("text", "values"), [("1:2:0.5", [1, 1.5, 2]), ("1.0:2.6:0.05", np.arange(33) * 0.05 + 1),
                                               ("2:2:1", [2])])
def test_parse_range(text, values):
    np.testing.assert_allclose(parse_range(text, "--masses"), values)


@pytest.mark.parametrize("text", ["1:2", "a:b:c", "2:1:0.1", "1:2:0", "1:2:-1", "0:1:0.1", "1:2:1e-9"])
def test_parse_range_rejects(text):
    with pytest.raises(InputError, match="--masses"):
        parse_range(text, "--masses")


@pytest.mark.parametrize(("extra", "needle"), [
    (["-o", "{tmp}/x.txt"], "unsupported output format"),
    (["-o", "{tmp}/x.csv", "--eos", "nope"], "unknown EOS 'nope'"),
    (["-o", "{tmp}/x.csv", "--masses", "1:2"], "--masses"),
    (["--observed-z", "0.3"], "go together"),
    (["--observed-z", "0.3", "--sigma", "-1"], "--sigma"),
    ([], "give -o"),
])
def test_cli_errors_with_run(tiny_run, tmp_path, run_cli, extra, needle):
    code, _, err = run_cli("redshift", tiny_run, *[e.format(tmp=tmp_path) for e in extra])
    assert code == 2
    assert needle in assert_one_error_line(err)


@pytest.mark.parametrize(("argv", "needle"), [
    (["redshift", "{tmp}/missing.h5", "-o", "{tmp}/x.csv"], "run file not found"),
    (["redshift", "--grid-mass", "1:2:0.1", "-o", "{tmp}/g.csv"], "both --grid-mass and --grid-radius"),
    (["redshift", "--grid-mass", "1:2:0.1", "--grid-radius", "8:x:1", "-o", "{tmp}/g.csv"], "--grid-radius"),
    (["redshift", "--grid-mass", "1:2:0.1", "--grid-radius", "8:9:1", "-o", "{tmp}/g.fits"], "unsupported"),
    (["redshift", "-o", "{tmp}/x.csv"], "give a run file"),
])
def test_cli_errors_without_run(tmp_path, run_cli, argv, needle):
    code, _, err = run_cli(*[a.format(tmp=tmp_path) for a in argv])
    assert code == 2
    assert needle in assert_one_error_line(err)
