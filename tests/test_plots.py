"""Overlay figures: forbidden-region boundaries as data, branches, measurements, files, errors."""

from __future__ import annotations

import shutil

import numpy as np
import pytest
from conftest import EOS_TABLES, SLY_BLOCK, assert_one_error_line
from matplotlib.figure import Figure

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
    code, out, err = run_cli("overlay", runs[0], runs[1], "-o", several, "--panels", "--eos", "sly", "--eos", "stiff")
    assert code == 0, err
    assert several.read_bytes().startswith(magic)


def test_bundled_constraints_parse():
    c = load_constraints(EOS_TABLES / "demo_constraints.toml")
    assert c.mass and c.ellipse and c.box
    assert "invented" in c.mass[0].label


def test_demo_writes_overlay_and_redshift_table(runs, tmp_path, run_cli, monkeypatch):
    from stellar_match import cli

    # the demo sweep itself is tested in test_cli.py; a small run stands in for it here
    monkeypatch.setattr(cli, "_run_sweep", lambda config, out, force, **kw: shutil.copyfile(runs[0], out))
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


# --- composing into the user's own layout (issue 13) ------------------------------------

UNIFORM = """\
[sweep]
central_pressure = { min = 1e33, max = 1e36, count = 12 }
[[eos]]
name = "uniform"
kind = "incompressible"
energy_density = 1.0e15
"""


def drawn(ax) -> int:
    """Everything a plot call can leave in an Axes."""
    return len(ax.lines) + len(ax.patches) + len(ax.collections) + len(ax.texts) + (ax.get_legend() is not None)


def test_overlay_into_one_axes_of_a_users_grid(runs):
    seqs = select_sequences([read_run(runs[0]), read_run(runs[1])])
    fig = Figure()
    grid = fig.subplots(2, 2)
    art = overlay_figure(seqs, ax=grid[0, 1])
    assert art.figure is fig and art.axes == {"mr": grid[0, 1]}
    target = grid[0, 1]
    gids = {ln.get_gid() for ln in target.lines}
    assert {"sly:stable", "stiff:stable", "sly:max_mass", "forbidden:horizon"} <= gids
    assert all(ln.axes is target for lines in art.lines.values() for ln in lines)
    assert len(fig.axes) == 4 and not fig.legends and not fig.texts  # nothing else was created
    assert [drawn(a) for a in grid.flat if a is not target] == [0, 0, 0]
    assert target.get_legend() is art.legend


def test_overlay_panels_into_a_dict_or_a_sequence_of_axes(runs):
    seqs = select_sequences([read_run(runs[0])])
    fig = Figure()
    grid = fig.subplots(2, 2)
    art = overlay_figure(seqs, ax={"z": grid[1, 0]}, legend=None)
    assert list(art.axes) == ["z"] and art.legend is None
    assert "sly:stable" in {ln.get_gid() for ln in grid[1, 0].lines}
    assert [drawn(a) for a in (grid[0, 0], grid[0, 1], grid[1, 1])] == [0, 0, 0]
    fig = Figure()
    art = overlay_figure(seqs, ax=fig.subplots(2, 2))  # in the order of PANELS
    assert list(art.axes) == ["mr", "central", "z", "lam"] and len(fig.axes) == 4
    assert all(any(ln.get_gid() == "sly:stable" for ln in a.lines) for a in art.axes.values())
    with pytest.raises(ValueError, match="panels=True"):
        overlay_figure(seqs, ax=fig.axes[0], panels=True)
    with pytest.raises(ValueError, match="unknown panel 'rho'"):
        overlay_figure(seqs, ax={"rho": fig.axes[0]})


def test_a_figure_to_draw_into_gives_the_usual_layout(runs):
    fig = Figure(figsize=(11, 9))
    art = overlay_figure(select_sequences([read_run(runs[0])]), ax=fig, panels=True)
    assert art.figure is fig and len(fig.axes) == 4 and len(fig.legends) == 1
    assert isinstance(overlay_figure(select_sequences([read_run(runs[0])])), Figure)  # no ax: a Figure, as before


def test_palette_and_markers_stay_distinct_for_eight_eos(runs):
    seq = read_run(runs[0]).eos["sly"]
    art = overlay_figure([(f"eos{i}", seq) for i in range(8)], ax=Figure())
    colours = [art.lines[f"eos{i}"][0].get_color() for i in range(8)]
    markers = [art.lines[f"eos{i}"][0].get_marker() for i in range(8)]
    # Okabe & Ito 2008, "Color Universal Design" (jfly.uni-koeln.de/color/): the published eight
    published = {"#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
    assert {c.upper() for c in colours} == published
    assert len(set(markers)) == 8
    stable = art.lines["eos0"][0]
    assert stable.get_gid() == "eos0:stable"
    assert stable.get_markevery() is not None  # markers along the curve, not only at M_max
    starts = {art.lines[f"eos{i}"][0].get_markevery()[0] for i in range(8)}
    assert len(starts) == 8  # staggered: markers of identical curves do not sit on each other


def test_each_forbidden_region_has_a_legend_entry(runs):
    from stellar_match.exports import FORBIDDEN_REGIONS

    fig = overlay_figure(select_sequences([read_run(runs[0])]))
    legend = fig.legends[0]
    texts = [t.get_text() for t in legend.get_texts()]
    regions = {p.get_gid(): p for p in fig.axes[0].collections if (p.get_gid() or "").startswith("region:")}
    for name, (_, label, _) in FORBIDDEN_REGIONS.items():
        i = texts.index(f"forbidden: {label}")
        handle = legend.legend_handles[i]
        # the entry is filled with the region's own grey
        assert tuple(handle.get_facecolor()) == tuple(regions[f"region:{name}"].get_facecolor()[0])


@pytest.mark.parametrize("layout", ["single", "panels", "small_user_axes"])
def test_region_labels_stay_inside_the_axes(runs, layout):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    seqs = select_sequences([read_run(runs[0]), read_run(runs[1])])
    c = parse_constraints(CONSTRAINTS)
    if layout == "small_user_axes":
        fig = Figure(figsize=(5, 4))
        art = overlay_figure(seqs, c, ax=fig.subplots(2, 2)[0, 0], legend=None)
    else:
        fig = Figure(figsize=(11.5, 9.6) if layout == "panels" else (7.6, 7.4))
        art = overlay_figure(seqs, c, ax=fig, panels=layout == "panels")
    FigureCanvasAgg(fig).draw()
    ax = art.axes["mr"]
    box = ax.get_window_extent()
    shown = [t for t in art.labels.values() if t.get_visible() and t.axes is ax]
    assert len(shown) == 3 if layout != "small_user_axes" else shown
    for text in shown:
        extent = text.get_window_extent()
        assert box.x0 <= extent.x0 and extent.x1 <= box.x1 and box.y0 <= extent.y0 and extent.y1 <= box.y1, \
            (text.get_text(), extent, box)


def test_central_pressure_sweep_has_a_pressure_panel(tmp_path):
    cfg = tmp_path / "uniform.toml"
    cfg.write_text(UNIFORM)
    seq = read_run(run_config(cfg, tmp_path / "uniform.h5")).eos["uniform"]
    art = overlay_figure([("uniform", seq)], ax=Figure(), panels=True)
    ax = art.axes["central"]
    assert "p_c" in ax.get_xlabel() and ax.get_xscale() == "log"
    line = next(ln for ln in ax.lines if ln.get_gid() == "uniform:stable")
    np.testing.assert_array_equal(np.sort(line.get_xdata()), np.sort(seq["central_pressure"][seq.stable]))
    # a density sweep keeps rho_c
    assert "rho_c" in overlay_figure([("uniform", seq)], ax=Figure(), panels=True,
                                     central="central_density").axes["central"].get_xlabel()
