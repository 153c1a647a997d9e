"""Ensembles: members from a seeded sampler or a CSV, stacked solves, summaries, bad configs."""

from __future__ import annotations

import json

import h5py
import numpy as np
import pytest
from conftest import assert_one_error_line
from test_runfile import SPEC_UNITS

import stellar_match
from stellar_match import sweep
from stellar_match.config import parse_config
from stellar_match.schema import NOT_SOLVED, STAR_DATASETS

N_STARS = 20
AXIS = f"""\
[sweep]
central_density = {{ min = 3e14, max = 3e15, count = {N_STARS} }}
"""
#: Disjoint ranges, so that a mix-up of parameter columns cannot stay inside them.
RANGES = {"log10_p1": (34.2, 34.7), "gamma1": (3.0, 3.5), "gamma2": (2.0, 2.5), "gamma3": (1.5, 1.9)}


def sampled_config(seed=7, count=12, ranges=RANGES, axis=AXIS):
    lines = "\n".join(f"{k} = [{lo}, {hi}]" for k, (lo, hi) in ranges.items())
    return f"""{axis}
[[ensemble]]
name = "prior"
kind = "piecewise_polytrope"
[ensemble.sample]
count = {count}
seed = {seed}
{lines}
"""


#: Read, Lackey, Owen & Friedman 2009, PRD 79, 124032, Table III: SLy = (34.384, 3.005, 2.988, 2.851).
SLY = (34.384, 3.005, 2.988, 2.851)
#: CSV columns in another order than the kind's parameters: columns are found by name.
CSV_HEADER = "gamma3,log10_p1,gamma1,gamma2,label"
CSV_MEMBERS = [
    (SLY, "sly"),
    ((20.0, 3.0, 3.0, 3.0), "log10_p1 outside 30..40"),  # invalid: status 1
    ((34.4, 0.5, 3.0, 3.0), "gamma1 = 0.5 cannot meet the crust"),  # invalid: status 1
    ((34.5, 3.3, 2.7, 2.4), "stiffer"),
]


def write_members_csv(path, members=CSV_MEMBERS):
    rows = [CSV_HEADER, "# comment lines are skipped"]
    for (p1, g1, g2, g3), label in members:
        rows.append(f"{g3},{p1},{g1},{g2},{label}")
    path.write_text("\n".join(rows) + "\n")
    return path


@pytest.fixture(scope="module")
def csv_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("csv_ensemble")
    write_members_csv(folder / "members.csv")
    cfg = folder / "csv.toml"
    cfg.write_text(f"""{AXIS}
[[ensemble]]
name = "listed"
kind = "piecewise_polytrope"
members = "members.csv"
""")
    return sweep.run_config(cfg, folder / "csv.h5")


@pytest.fixture(scope="module")
def sampled_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("sampled_ensemble")
    cfg = folder / "sampled.toml"
    # the paper's wide prior: some members are acausal or do not reach their maximum
    cfg.write_text(sampled_config(seed=3, ranges={"log10_p1": (34.2, 34.7), "gamma1": (2.0, 4.0),
                                                 "gamma2": (1.5, 3.5), "gamma3": (1.5, 3.0)}))
    config = stellar_match.load_config(cfg)
    return config, sweep.run_config(config, folder / "sampled.h5")


# --- the sampler -------------------------------------------------------------------


def test_sampler_is_deterministic_in_its_seed_and_stays_in_range():
    a = parse_config(sampled_config(seed=7, count=50)).ensembles[0]
    b = parse_config(sampled_config(seed=7, count=50)).ensembles[0]
    c = parse_config(sampled_config(seed=8, count=50)).ensembles[0]
    assert a.parameters.shape == (50, 4)
    assert a.parameter_names == ("log10_p1", "gamma1", "gamma2", "gamma3")
    np.testing.assert_array_equal(a.parameters, b.parameters)
    assert not np.any(a.parameters == c.parameters)  # another seed: another stream throughout
    for j, name in enumerate(a.parameter_names):
        lo, hi = RANGES[name]
        assert np.all((lo <= a.parameters[:, j]) & (a.parameters[:, j] < hi)), name
        # uniform on [lo, hi): 50 draws spread over most of the range (P(fail) < 1e-9)
        assert np.ptp(a.parameters[:, j]) > 0.5 * (hi - lo), name
    assert a.origin["seed"] == 7 and a.origin["ranges"] == {k: list(v) for k, v in RANGES.items()}


def test_a_longer_sample_starts_with_the_shorter_one():
    # The stream is fixed by the seed: adding members must not change the first ones,
    # so a run can be extended without changing the members already solved.
    short = parse_config(sampled_config(count=5)).ensembles[0].parameters
    long = parse_config(sampled_config(count=40)).ensembles[0].parameters
    np.testing.assert_array_equal(long[:5], short)


# --- CSV members -------------------------------------------------------------------


def test_csv_members_invalid_rows_get_status_1_and_nan_rows(csv_run):
    with h5py.File(csv_run, "r") as f:
        g = f["ensemble"]["listed"]
        params = np.array([m for m, _ in CSV_MEMBERS])
        for j, name in enumerate(("log10_p1", "gamma1", "gamma2", "gamma3")):
            np.testing.assert_array_equal(g["members"][name][()], params[:, j], err_msg=name)
        status = g["status"][()]
        assert status.dtype == np.int8
        assert list(status) == [0, 1, 1, 0]
        meaning = json.loads(g.attrs["status_meaning"])
        assert meaning["0"] == "ok" and set(meaning) == {str(k) for k in range(7)}
        assert meaning["1"].startswith("invalid parameters")
        for bad in (1, 2):
            for col in STAR_DATASETS:
                row = g[col][bad]
                if col == "stable":
                    assert not row.any()
                elif col == "star_status":  # never solved, and saying so
                    assert np.all(row == NOT_SOLVED)
                else:
                    assert np.all(np.isnan(row)), col
            for col in ("max_mass", "max_mass_radius", "max_mass_central_density", "radius_at_1.4",
                        "tidal_deformability_at_1.4"):
                assert np.isnan(g[col][bad]), col
            assert not g["causal"][bad]
        for good in (0, 3):  # the run went on past the invalid rows
            assert np.all(np.isfinite(g["mass"][good])) and g["stable"][good].any()
            assert np.isfinite(g["max_mass"][good]) and g["causal"][good]


def test_csv_sly_member_maximum_mass(csv_run):
    # Read, Lackey, Owen & Friedman 2009, PRD 79, 124032, Table III (from memory):
    # the SLy fit has M_max = 2.049 Msun; 1.5% covers the fit's rounding.
    with h5py.File(csv_run, "r") as f:
        g = f["ensemble"]["listed"]
        assert g["max_mass"][0] == pytest.approx(2.049, rel=0.015)
        # the same paper's SLy R(1.4) = 11.7 km (Table III, from memory); 2%
        assert g["radius_at_1.4"][0] == pytest.approx(11.7, rel=0.02)


def test_ensemble_dataset_shapes_and_units(csv_run):
    n = len(CSV_MEMBERS)
    with h5py.File(csv_run, "r") as f:
        g = f["ensemble"]["listed"]
        assert g.attrs["kind"] == "piecewise_polytrope"
        assert g.attrs["sweep_quantity"] == "central_density"
        np.testing.assert_allclose(g["sweep_values"][()], np.geomspace(3e14, 3e15, N_STARS), rtol=1e-15)
        assert g["sweep_values"].attrs["unit"] == "g / cm3"  # astropy's spelling since format 3
        for col, unit in SPEC_UNITS.items():  # the per-star units the issue specifies
            d = g[col]
            assert d.shape == (n, N_STARS) and d.dtype.kind == ("i" if col == "star_status" else "f"), col
            assert d.attrs["unit"] == unit, col
        assert g["stable"].shape == (n, N_STARS) and g["stable"].dtype == np.bool_
        summaries = {"max_mass": "solMass", "max_mass_radius": "km", "max_mass_central_density": "g / cm3",
                     "radius_at_1.4": "km", "tidal_deformability_at_1.4": ""}
        for col, unit in summaries.items():
            d = g[col]
            assert d.shape == (n,) and d.dtype.kind == "f", col
            assert d.attrs["unit"] == unit, col
        assert g["causal"].shape == (n,) and g["causal"].dtype == np.bool_
        assert g["status"].shape == (n,)
        for name in ("log10_p1", "gamma1", "gamma2", "gamma3"):
            assert g["members"][name].shape == (n,)


# --- stacked solver against the per-EOS one ----------------------------------------------


def test_members_equal_single_eos_sweeps(sampled_run):
    # Definition: an ensemble member is the EOS of its parameters; the stacked batch
    # must give what the single-EOS sweep gives for that EOS.
    config, path = sampled_run
    ens = config.ensembles[0]
    values = config.axis.values
    with h5py.File(path, "r") as f:
        g = f["ensemble"]["prior"]
        status = g["status"][()]
        assert set(status) >= {0}, status  # the sample holds ordinary members
        compared = 0
        for i in range(ens.size):
            if status[i] == 1:
                continue
            p = ens.parameters[i]
            seq = sweep.sweep_eos(stellar_match.read_piecewise_polytrope("m", p[0], p[1:]), config.axis.quantity,
                                  values)
            for col in ("mass", "radius"):
                np.testing.assert_allclose(g[col][i], seq[col], rtol=1e-12, atol=0, err_msg=f"{col} member {i}")
            np.testing.assert_allclose(g["tidal_deformability"][i], seq["tidal_deformability"], rtol=1e-12)
            np.testing.assert_array_equal(g["stable"][i], seq.stable, err_msg=f"member {i}")
            m_single = seq.summary["max_mass"]
            if np.isfinite(m_single):
                # the same bracket, the same compiled search, the same structure-only solve at its end
                assert g["max_mass"][i] == pytest.approx(m_single, rel=1e-12), i
                assert g["max_mass_radius"][i] == pytest.approx(seq.summary["max_mass_radius"], rel=1e-12), i
            else:
                assert np.isnan(g["max_mass"][i]) and status[i] in (3, 4), i
            assert bool(g["causal"][i]) == bool(seq.summary["causal"]), i
            compared += 1
        assert compared >= 10


def _exact_at_1_4(g, i, params, config):
    eos = stellar_match.read_piecewise_polytrope("m", params[0], params[1:])
    seq = sweep.sweep_eos(eos, config.axis.quantity, config.axis.values)
    return sweep.stars_at_masses(eos, seq, [1.4])


def test_radius_at_1_4_matches_an_exact_target_solve(sampled_run):
    # Common practice: a cubic spline on 20 stable-branch samples is good to ~1e-4 in R.
    config, path = sampled_run
    ens = config.ensembles[0]
    with h5py.File(path, "r") as f:
        g = f["ensemble"]["prior"]
        ok = [i for i in np.flatnonzero(g["status"][()] == 0) if np.isfinite(g["radius_at_1.4"][i])][:3]
        assert len(ok) == 3
        for i in ok:
            exact = _exact_at_1_4(g, i, ens.parameters[i], config)
            assert g["radius_at_1.4"][i] == pytest.approx(exact["radius"][0], rel=1e-4), i


def test_tidal_deformability_at_1_4_matches_an_exact_target_solve(sampled_run):
    # Lambda spans ~6 decades along a 20-star branch; interpolating log(Lambda) gives ~1e-3
    # against exact solves (measured here), 1% is common practice for population studies.
    config, path = sampled_run
    ens = config.ensembles[0]
    with h5py.File(path, "r") as f:
        g = f["ensemble"]["prior"]
        for i in np.flatnonzero(np.isfinite(g["tidal_deformability_at_1.4"][()])):
            exact = _exact_at_1_4(g, i, ens.parameters[i], config)
            assert g["tidal_deformability_at_1.4"][i] == pytest.approx(exact["tidal_deformability"][0],
                                                                       rel=0.01), i


# --- bad ensemble configs --------------------------------------------------------------------


def _sample_block(**override):
    spec = {"count": "4", "seed": "1", **{k: f"[{lo}, {hi}]" for k, (lo, hi) in RANGES.items()}}
    spec.update(override)
    body = "\n".join(f"{k} = {v}" for k, v in spec.items() if v is not None)
    return f'[[ensemble]]\nname = "e"\nkind = "piecewise_polytrope"\n[ensemble.sample]\n{body}\n'


BAD_CONFIGS = {
    "unknown key": ('[[ensemble]]\nname = "e"\nkind = "piecewise_polytrope"\ncolour = "red"\n'
                    'members = "m.csv"\n', "ensemble[0].colour"),
    "unknown sample key": (_sample_block(gamma4="[1, 2]"), "ensemble[0].sample.gamma4"),
    "missing range": (_sample_block(gamma3=None), "ensemble[0].sample.gamma3"),
    "low >= high": (_sample_block(gamma1="[3.5, 3.5]"), "ensemble[0].sample.gamma1"),
    "count 0": (_sample_block(count="0"), "ensemble[0].sample.count"),
    "seed negative": (_sample_block(seed="-1"), "ensemble[0].sample.seed"),
    "both members and sample": (_sample_block().replace('kind = "piecewise_polytrope"\n',
                                                        'kind = "piecewise_polytrope"\nmembers = "m.csv"\n'),
                                "ensemble[0]"),
    "unknown kind": ('[[ensemble]]\nname = "e"\nkind = "quark_bag"\nmembers = "m.csv"\n', "ensemble[0].kind"),
}


@pytest.mark.parametrize("case", list(BAD_CONFIGS))
def test_bad_ensemble_config_is_one_line_naming_file_and_key(case, tmp_path, run_cli):
    block, key = BAD_CONFIGS[case]
    cfg = tmp_path / "bad.toml"
    cfg.write_text(f"{AXIS}\n{block}")
    code, out, err = run_cli("sweep", cfg, "-o", tmp_path / "bad.h5", "--workers", "1")
    assert code == 2, (case, out, err)
    line = assert_one_error_line(err)
    assert f"{cfg}: {key}: " in line, line
    assert not list(tmp_path.glob("bad.h5*"))


def _members_config(tmp_path, csv_text):
    if csv_text is not None:
        (tmp_path / "members.csv").write_text(csv_text)
    cfg = tmp_path / "ens.toml"
    cfg.write_text(f'{AXIS}\n[[ensemble]]\nname = "e"\nkind = "piecewise_polytrope"\nmembers = "members.csv"\n')
    return cfg


@pytest.mark.parametrize("csv_text, words", [
    (None, ["not found"]),
    ("log10_p1,gamma1,gamma2\n34.4,3,3\n", ["gamma3"]),
    ("log10_p1,gamma1,gamma2,gamma3\n34.4,3,3,three\n", ["line 2", "not a number"]),
], ids=["file missing", "column missing", "not a number"])
def test_bad_members_file_is_one_line_naming_the_file(csv_text, words, tmp_path, run_cli):
    cfg = _members_config(tmp_path, csv_text)
    code, _, err = run_cli("sweep", cfg, "-o", tmp_path / "ens.h5")
    assert code == 2
    line = assert_one_error_line(err)
    assert str(tmp_path / "members.csv") in line, line
    for w in words:
        assert w in line, line


def test_members_file_error_names_the_config_key(tmp_path, run_cli):
    cfg = _members_config(tmp_path, None)
    _, _, err = run_cli("sweep", cfg, "-o", tmp_path / "ens.h5")
    assert "ensemble[0].members" in assert_one_error_line(err)


def test_vertex_maxima_agree_with_refined_ones():
    # [solver] ensemble_maxima = "vertex": the parabola through the three samples around each maximum
    # against the default fresh-solve refinement (issue 10: fewer solves for very large ensembles)
    import numpy as np

    from stellar_match.ensemble import EnsembleSpec, solve_members
    from stellar_match.structure import StepControl

    params = np.array([[34.384, 3.005, 2.988, 2.851], [34.269, 2.830, 3.445, 3.348], [34.5, 3.2, 2.7, 2.4]])
    spec = EnsembleSpec(0, "t", "piecewise_polytrope", params, {})
    values = np.geomspace(2.5e14, 3.5e15, 40)
    refined = solve_members(spec, 0, 3, "central_density", values, StepControl())
    vertex = solve_members(spec, 0, 3, "central_density", values, StepControl(), refine=False)
    ok = refined["status"] == 0
    assert ok.sum() >= 2
    assert np.allclose(vertex["max_mass"][ok], refined["max_mass"][ok], rtol=1e-4)
    assert np.all(vertex["max_mass"][ok] <= refined["max_mass"][ok] * (1 + 1e-6))  # the refined one is the top
    assert np.array_equal(vertex["mass"], refined["mass"], equal_nan=True)  # the stars themselves are the same
