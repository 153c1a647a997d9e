"""Redshift exports: ECSV/CSV/HDF5 tables, stars at given masses, the (M, R) grid, inverse z."""

from __future__ import annotations

import csv
import io
import shutil
import urllib.parse

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
#: An EOS name with every character plain CSV readers stumble on (issue 13): comma, quote, hash, percent.
COMMA_NAME = 'pp "a,b" #1 50%'
COMMA_BLOCK = f"""\
[[eos]]
name = '{COMMA_NAME}'
kind = "polytrope"
K = 1.0e5
gamma = 2.0
"""
#: 30 stars per EOS: small but spanning the maximum of both.
CONFIG = ("[sweep]\ncentral_density = { min = 2.5e14, max = 3e15, count = 30 }\n\n" + SLY_BLOCK + "\n" + TABLE_BLOCK
          + "\n" + COMMA_BLOCK)
ENSEMBLE_CONFIG = """\
[sweep]
central_density = { min = 2.5e14, max = 3e15, count = 8 }

[[ensemble]]
name = "prior"
kind = "piecewise_polytrope"
[ensemble.sample]
count = 4
seed = 3
log10_p1 = [34.2, 34.6]
gamma1 = [2.5, 3.5]
gamma2 = [2.5, 3.5]
gamma3 = [2.5, 3.5]
"""


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


#: The units each export column must carry, as astropy spells them (issue 13; astropy.units.Unit parses each).
EXPECTED_UNITS = {"central_density": "g / cm3", "mass": "solMass", "radius": "km", "baryon_mass": "solMass",
                  "surface_gravity": "cm / s2", "log10_surface_gravity": "dex(cm / s2)", "radiation_radius": "km",
                  "redshift_velocity": "km / s", "moment_of_inertia": "g cm2"}
#: Columns without a unit: dimensionless numbers, flags, codes and text.
UNITLESS = ("eos", "compactness", "surface_redshift", "love_number_k2", "tidal_deformability", "stable",
            "star_status")
#: Run-file columns an export copies bit for bit.
COPIED = ("central_density", "mass", "radius", "baryon_mass", "compactness", "surface_redshift", "surface_gravity",
          "love_number_k2", "tidal_deformability", "moment_of_inertia")


def selected_stars(run, name):
    """The stars an export keeps by default: stable and computed within tolerance (issue 13)."""
    seq = run.eos[name]
    keep = seq.stable & (np.asarray(seq["star_status"]) == 0)
    return {k: np.asarray(seq[k])[keep] for k in COPIED}


def read_back(path, fmt):
    """The table read by astropy.table.Table.read alone (the reference reader, not the product's)."""
    table_mod = pytest.importorskip("astropy.table")
    if fmt == "csv":  # plain CSV carries no units: the documented ones are passed to the reader
        header = path.read_text().splitlines()[0].split(",")
        return table_mod.Table.read(path, format="ascii.csv",
                                    units={k: v for k, v in EXPECTED_UNITS.items() if k in header})
    if fmt == "h5":
        return table_mod.Table.read(path, path="table", character_as_bytes=False)
    return table_mod.Table.read(path, format="ascii.ecsv")


@pytest.mark.parametrize("fmt", ["ecsv", "csv", "h5"])
def test_every_format_reads_back_with_astropy_units_and_values(tiny_run, tmp_path, fmt):
    u = pytest.importorskip("astropy.units")
    run = read_run(tiny_run)
    path = write_table(redshift_table(select_sequences([run])), tmp_path / f"z.{fmt}")
    t = read_back(path, fmt)
    for col, unit in EXPECTED_UNITS.items():
        assert t[col].unit == u.Unit(unit), col
    for col in UNITLESS:
        assert t[col].unit is None, col
    names = [urllib.parse.unquote(str(n)) for n in t["eos"]] if fmt == "csv" else [str(n) for n in t["eos"]]
    assert set(names) == set(run.eos) and COMMA_NAME in names
    for name in run.eos:
        rows = np.array(names) == name
        want = selected_stars(run, name)
        for col, values in want.items():  # repr of a float64 round-trips, so the values are the run's, bit for bit
            np.testing.assert_array_equal(np.asarray(t[col][rows], dtype=float), values, err_msg=(fmt, name, col))
        assert np.all(np.asarray(t["stable"][rows]) == (True if fmt != "csv" else "True"))
        assert np.all(np.asarray(t["star_status"][rows]) == 0)
    assert len(t) == sum(len(selected_stars(run, n)["mass"]) for n in run.eos)


def test_csv_reads_with_pandas_and_numpy_defaults(tiny_run, tmp_path):
    run = read_run(tiny_run)
    path = write_table(redshift_table(select_sequences([run])), tmp_path / "z.csv")
    text = path.read_text()
    assert not any(line.startswith("#") for line in text.splitlines())  # no comment or unit lines
    rows = list(csv.reader(io.StringIO(text)))  # the csv module: every row as wide as the header
    assert {len(r) for r in rows} == {len(rows[0])}
    a = np.genfromtxt(path, delimiter=",", names=True, dtype=None, encoding="utf-8")
    names = [urllib.parse.unquote(str(n)) for n in a["eos"]]
    assert COMMA_NAME in names  # a name with , # % " survives numpy's reader (percent-encoded)
    pd = pytest.importorskip("pandas")
    frame = pd.read_csv(path)
    assert list(frame.columns) == list(a.dtype.names) == rows[0]
    assert frame["stable"].dtype == bool and a["stable"].dtype == bool
    for name in run.eos:
        want = selected_stars(run, name)
        sel = np.array(names) == name
        for col, values in want.items():
            np.testing.assert_array_equal(a[col][sel], values, err_msg=col)
            np.testing.assert_array_equal(frame[col].to_numpy()[sel], values, err_msg=col)
    assert [urllib.parse.unquote(n) for n in frame["eos"]] == names


def test_csv_columns_obey_the_exterior_formulas(tiny_run, tmp_path):
    run = read_run(tiny_run)
    path = write_table(redshift_table(select_sequences([run])), tmp_path / "z.csv")
    a = np.genfromtxt(path, delimiter=",", names=True, dtype=None, encoding="utf-8")
    z, g = exterior_z_and_g(a["mass"], a["radius"])
    # tolerance: the run file's z, g come from geometric-unit arithmetic; 1e-12 covers rounding only
    np.testing.assert_allclose(a["surface_redshift"], z, rtol=1e-12)
    np.testing.assert_allclose(a["surface_gravity"], g, rtol=1e-12)
    np.testing.assert_allclose(a["log10_surface_gravity"], np.log10(g), rtol=1e-13)
    # radiation radius R_inf = R (1 + z) (e.g. Lattimer & Prakash 2007, Phys. Rep. 442, 109)
    np.testing.assert_allclose(a["radiation_radius"], a["radius"] * (1 + z), rtol=1e-12)
    # c z in km/s with c from astropy's CODATA 2018
    from astropy.constants import codata2018

    np.testing.assert_allclose(a["redshift_velocity"], codata2018.c.to("km/s").value * z, rtol=1e-12)


def test_hdf5_table_is_plain_h5py_too(tiny_run, tmp_path):
    run = read_run(tiny_run)
    path = write_table(redshift_table(select_sequences([run], ["sly"])), tmp_path / "z.h5")
    with h5py.File(path, "r") as f:  # astropy's layout: one compound dataset, a field per column
        np.testing.assert_array_equal(f["table"]["radius"], selected_stars(run, "sly")["radius"])
        assert {x.decode() for x in f["table"]["eos"]} == {"sly"}


def test_unstable_and_nan_stars_are_left_out_by_default(tiny_run):
    run = read_run(tiny_run)
    sequences = select_sequences([run])
    default = redshift_table(sequences)
    everything = redshift_table(sequences, keep_unstable=True)
    assert len(everything) == sum(len(s["mass"]) for s in run.eos.values())
    assert len(default) < len(everything)  # the sweep passes the maximum mass: unstable stars exist
    assert default.columns["stable"].all() and not everything.columns["stable"].all()
    assert np.all(default.columns["star_status"] == 0)


def test_empty_export_is_one_error_line_and_no_file(tmp_path, run_cli):
    # Read et al. 2009: SLy's maximum is near 2.9e15 g/cm^3 (Table III M_max 2.049), so these stars are unstable
    cfg = tmp_path / "past.toml"
    cfg.write_text("[sweep]\ncentral_density = { values = [5e15, 6e15, 7e15] }\n\n" + SLY_BLOCK)
    run = run_config(cfg, tmp_path / "past.h5")
    out = tmp_path / "z.csv"
    code, _, err = run_cli("redshift", run, "-o", out)
    assert code == 2 and "no star to export" in assert_one_error_line(err) and "--keep-unstable" in err
    assert not out.exists()
    code, stdout, err = run_cli("redshift", run, "-o", out, "--keep-unstable")
    assert code == 0, err
    assert "(3 rows)" in stdout


def test_qtable_of_an_export_has_quantities(tiny_run):
    u = pytest.importorskip("astropy.units")
    q = redshift_table(select_sequences([read_run(tiny_run)])).to_table()
    assert q["mass"].unit == u.solMass and isinstance(q["radius"], u.Quantity)
    # astropy converts: 1 Msun in kg is IAU 2015's nominal mass (astropy.constants.iau2015)
    from astropy.constants import iau2015

    np.testing.assert_allclose(q["mass"].to(u.kg).value, np.asarray(q["mass"].value) * iau2015.M_sun.value,
                               rtol=1e-15)


def test_read_table_gives_every_format_with_units(tiny_run, tmp_path):
    from stellar_match.exports import read_table

    table = redshift_table(select_sequences([read_run(tiny_run)]))
    for fmt in ("ecsv", "csv", "h5"):
        q = read_table(write_table(table, tmp_path / f"z.{fmt}"))
        assert list(q.colnames) == list(table.columns), fmt
        assert str(q["mass"].unit) == "solMass" and q["stable"].dtype == bool, fmt
        assert list(q["eos"]) == list(table.columns["eos"]), fmt


@pytest.fixture(scope="module")
def ensemble_run(tmp_path_factory):
    """An ensemble-only run file: 4 sampled members x 8 central densities."""
    folder = tmp_path_factory.mktemp("ens_export")
    (folder / "e.toml").write_text(ENSEMBLE_CONFIG)
    return run_config(folder / "e.toml", folder / "e.h5")


def test_ensemble_only_run_exports_member_stars(ensemble_run, tmp_path, run_cli):
    out = tmp_path / "e.ecsv"
    code, stdout, err = run_cli("redshift", ensemble_run, "-o", out, "--members", "1:3")
    assert code == 0, err
    t = read_back(out, "ecsv")
    run = read_run(ensemble_run)
    assert set(t["member"]) <= {1, 2} and set(t["eos"]) == {"prior"}
    assert str(t["mass"].unit) == "solMass" and str(t["log10_p1"].unit) == "dex(dyn / cm2)"
    mass = run.ensemble_dataset("prior", "mass")
    stable = run.ensemble_dataset("prior", "stable") & (run.ensemble_dataset("prior", "star_status") == 0)
    for m in (1, 2):
        rows = np.asarray(t["member"]) == m
        np.testing.assert_array_equal(np.asarray(t["mass"][rows]), mass[m][stable[m]])
        np.testing.assert_array_equal(np.asarray(t["gamma1"][rows]), run.ensembles["prior"].members["gamma1"][m])
    assert len(t) == int(stable[1:3].sum())
    code, stdout, err = run_cli("redshift", ensemble_run, "-o", tmp_path / "all.csv", "--keep-unstable")
    assert code == 0 and f"({mass.size} rows)" in stdout, err


@pytest.mark.parametrize(("extra", "needle"), [
    (["--members", "7:9"], "selects none"),
    (["--members", "2:1"], "--members"),
    (["--members", "a:b"], "--members"),
    (["--masses", "1:2:0.5"], "--masses"),
])
def test_ensemble_export_errors(ensemble_run, tmp_path, run_cli, extra, needle):
    code, _, err = run_cli("redshift", ensemble_run, "-o", tmp_path / "x.csv", *extra)
    assert code == 2 and needle in assert_one_error_line(err)
    assert not (tmp_path / "x.csv").exists()


def test_stars_at_masses_reproduce_the_mass(tiny_run):
    run = read_run(tiny_run)
    for seq in (run.eos["sly"], run.eos["medium"]):  # the polytrope's maximum is above the sweep
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
