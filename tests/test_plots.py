"""Overlay figures: forbidden-region boundaries as data, branches, measurements, files, errors."""

from __future__ import annotations

import shutil

import numpy as np
import pytest
from conftest import EOS_TABLES, SLY_BLOCK, assert_one_error_line

from stellar_match import units
from stellar_match.errors import ConfigError
from stellar_match.exports import select_sequences
from stellar_match.plots import load_constraints, overlay_figure, parse_constraints
from stellar_match.runfile import read_run
from stellar_match.sweep import run_config

STIFF_BLOCK = """\
[[eos]]
name = "stiff"
kind = "piecewise_polytrope"
log10_p1 = 34.62
gammas = [3.35, 3.05, 2.60]
"""
AXIS = "[sweep]\ncentral_density = { min = 2.5e14, max = 3.5e15, count = 30 }\n\n"

CONSTRAINTS = """\
title = "test"
[[mass]]
label = "pulsar A"
mass = 2.0
sigma = 0.05
two_sigma = true
[[ellipse]]
label = "source B"
mass = 1.4
radius = 12.0
sigma_mass = 0.1
sigma_radius = 0.6
correlation = 0.5
[[box]]
label = "range C"
mass_min = 1.5
mass_max = 1.8
radius_min = 10.0
radius_max = 11.0
"""


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("plots")
    one = folder / "one.toml"
    one.write_text(AXIS + SLY_BLOCK)
    two = folder / "two.toml"
    two.write_text(AXIS + STIFF_BLOCK)
    return run_config(one, folder / "one.h5"), run_config(two, folder / "two.h5")


def lines_by_gid(fig):
    return {ln.get_gid(): ln for ax in fig.axes for ln in ax.get_lines() if ln.get_gid()}


def test_forbidden_boundaries_in_the_plotted_data(runs):
    fig = overlay_figure(select_sequences([read_run(runs[0])]))
    lines = lines_by_gid(fig)
    # boundaries R = k GM/c^2: horizon k = 2 (Schwarzschild), Buchdahl 1959 k = 9/4,
    # causality k = 2.9 (Lattimer & Prakash 2007, Phys. Rep. 442, 109)
    for name, k in (("horizon", 2.0), ("buchdahl", 2.25), ("causality", 2.9)):
        ln = lines[f"forbidden:{name}"]
        r, m = np.asarray(ln.get_xdata()), np.asarray(ln.get_ydata())
        np.testing.assert_allclose(m * k * units.SOLAR_MASS_KM, r, rtol=1e-12, atol=1e-12)
        assert r.max() >= fig.axes[0].get_xlim()[1]  # the line spans the plotted radii
    texts = {t.get_gid(): t.get_text() for t in fig.axes[0].texts}
    assert "horizon" in texts["label:horizon"] and "Buchdahl" in texts["label:buchdahl"]
    assert fig.axes[0].get_xlabel() == "Radius R [km]"
    assert fig.axes[0].get_ylabel() == r"Mass M [M$_\odot$]"


def test_branches_and_maximum_marker(runs):
    seq = read_run(runs[0]).eos["sly"]
    fig = overlay_figure([("sly", seq)])
    lines = lines_by_gid(fig)
    assert lines["sly:stable"].get_linestyle() == "-"
    assert lines["sly:unstable"].get_linestyle() != "-"  # dashed
    mx = lines["sly:max_mass"]
    assert mx.get_xdata()[0] == seq.summary["max_mass_radius"]
    assert mx.get_ydata()[0] == seq.summary["max_mass"]
    # the stable curve ends exactly at the maximum-mass star
    assert lines["sly:stable"].get_ydata().max() == seq.summary["max_mass"]
    legend = fig.legends[0]
    assert "sly" in [t.get_text() for t in legend.get_texts()]


def test_constraints_drawn(runs):
    c = parse_constraints(CONSTRAINTS)
    fig = overlay_figure(select_sequences([read_run(runs[0])]), c)
    ax = fig.axes[0]
    patches = {p.get_gid(): p for p in ax.patches if p.get_gid()}
    # a Mahalanobis-n ellipse of a 2-D Gaussian projects onto each axis as +- n sigma
    for n in (1, 2):
        e = patches[f"ellipse:source B:{n}sigma"]
        box = e.get_path().get_extents(e.get_patch_transform())  # exact extents of the Bezier arcs
        assert box.x1 - 12.0 == pytest.approx(n * 0.6, rel=1e-6)
        assert box.y1 - 1.4 == pytest.approx(n * 0.1, rel=1e-6)
    box = patches["box:range C"]
    assert (box.get_x(), box.get_y(), box.get_width(), box.get_height()) == pytest.approx((10, 1.5, 1, 0.3))
    band = patches["mass:pulsar A"]
    ys = band.get_path().transformed(band.get_patch_transform()).vertices[:, 1]
    assert (ys.min(), ys.max()) == pytest.approx((1.95, 2.05))
    assert fig._suptitle.get_text() == "test"


def test_panels_with_and_without_tidal(runs):
    seq = read_run(runs[0]).eos["sly"]
    if "tidal_deformability" not in seq.columns:  # run files without it: stand-in values
        seq.columns["tidal_deformability"] = 0.01 * np.asarray(seq["compactness"]) ** -6
    fig = overlay_figure([("sly", seq)], panels=True)
    assert len(fig.axes) == 4
    assert fig.axes[3].get_yscale() == "log"
    del seq.columns["tidal_deformability"]
    assert len(overlay_figure([("sly", seq)], panels=True).axes) == 3


@pytest.mark.parametrize("ext", ["png", "pdf", "svg"])
def test_cli_writes_figure_for_one_and_several_runs(runs, tmp_path, run_cli, ext):
    magic = {"png": b"\x89PNG", "pdf": b"%PDF", "svg": b"<?xml"}[ext]
    one = tmp_path / f"one.{ext}"
    code, out, err = run_cli("overlay", runs[0], "-o", one)
    assert code == 0, err
    assert one.read_bytes().startswith(magic)
    several = tmp_path / f"several.{ext}"
    code, out, err = run_cli("overlay", runs[0], runs[1], "-o", several, "--panels", "--eos", "sly", "stiff")
    assert code == 0, err
    assert several.read_bytes().startswith(magic)


def test_bundled_constraints_parse():
    c = load_constraints(EOS_TABLES / "demo_constraints.toml")
    assert c.mass and c.ellipse and c.box
    assert "invented" in c.mass[0].label


def test_demo_writes_overlay_and_redshift_table(runs, tmp_path, run_cli, monkeypatch):
    from stellar_match import cli

    # the demo sweep itself is tested in test_cli.py; a small run stands in for it here
    monkeypatch.setattr(cli, "_run_sweep", lambda config, out, force: shutil.copyfile(runs[0], out))
    code, out, err = run_cli("demo", "--out-dir", tmp_path / "demo")
    assert code == 0, err
    assert (tmp_path / "demo" / "demo_overlay.png").read_bytes().startswith(b"\x89PNG")
    assert (tmp_path / "demo" / "demo_redshift.ecsv").read_text().startswith("# %ECSV 1.0")


@pytest.mark.parametrize(("text", "key"), [
    ("[[mass]]\nlabel = 'a'\nmass = 2.0\nsigma = 0.1\ncolour = 'red'\n", "mass[0].colour"),
    ("[[mass]]\nlabel = 'a'\nmass = '2.0'\nsigma = 0.1\n", "mass[0].mass"),
    ("[[mass]]\nlabel = 'a'\nmass = 2.0\n", "mass[0].sigma"),
    ("[[mass]]\nlabel = 'a'\nmass = 2.0\nsigma = 0.1\ntwo_sigma = 1\n", "mass[0].two_sigma"),
    ("[[ellipse]]\nlabel='b'\nmass=1.4\nradius=12.0\nsigma_mass=0.1\nsigma_radius=0.5\ncorrelation=1.0\n",
     "ellipse[0].correlation"),
    ("[[box]]\nlabel='c'\nmass_min=1.8\nmass_max=1.5\nradius_min=10\nradius_max=11\n", "box[0].mass_max"),
    ("pulsars = 3\n", "pulsars"),
    ("mass = 2.0\n", "mass"),
])
def test_bad_constraints(tmp_path, run_cli, runs, text, key):
    path = tmp_path / "c.toml"
    path.write_text(text)
    with pytest.raises(ConfigError) as info:
        load_constraints(path)
    assert info.value.key == key and info.value.source == str(path)
    code, _, err = run_cli("overlay", runs[0], "-o", tmp_path / "f.png", "--constraints", path)
    assert code == 2
    assert f"{path}: {key}:" in assert_one_error_line(err)


@pytest.mark.parametrize(("argv", "needle"), [
    (["overlay", "{run}", "-o", "{tmp}/f.jpg"], "unsupported output format '.jpg'"),
    (["overlay", "{run}", "-o", "{tmp}/f.png", "--eos", "nope"], "unknown EOS 'nope'"),
    (["overlay", "{tmp}/missing.h5", "-o", "{tmp}/f.png"], "run file not found"),
    (["overlay", "{run}", "-o", "{tmp}/f.png", "--constraints", "{tmp}/none.toml"], "constraints file not found"),
])
def test_overlay_cli_errors(runs, tmp_path, run_cli, argv, needle):
    code, _, err = run_cli(*[a.format(run=runs[0], tmp=tmp_path) for a in argv])
    assert code == 2
    assert needle in assert_one_error_line(err)


def test_table_runs_copy_alongside(tmp_path):
    # a table EOS overlays like any other (its group has a table path and hash)
    shutil.copyfile(EOS_TABLES / "hdm_soft.csv", tmp_path / "hdm_soft.csv")
    cfg = tmp_path / "t.toml"
    cfg.write_text(AXIS + '[[eos]]\nname = "soft"\nkind = "table"\npath = "hdm_soft.csv"\n[eos.columns]\n'
                   'pressure = { column = "P", unit = "dyn/cm2" }\nenergy_density = { column = "eps", '
                   'unit = "erg/cm3" }\nrest_mass_density = { column = "rho", unit = "g/cm3" }\n')
    fig = overlay_figure(select_sequences([read_run(run_config(cfg, tmp_path / "t.h5"))]))
    assert "soft:stable" in lines_by_gid(fig)
