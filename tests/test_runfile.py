"""HDF5 run files: the full schema, atomic writing, refusal to overwrite, reading back."""

from __future__ import annotations

import datetime as dt
import hashlib
import json

import h5py
import numpy as np
import pytest
from conftest import EOS_TABLES, SLY_BLOCK

import stellar_match
from stellar_match import sweep
from stellar_match.config import load_config
from stellar_match.errors import RunFileError
from stellar_match.runfile import STAR_DATASETS, read_run
from stellar_match.schema import CRUST_DATASETS

SOFT_TABLE = EOS_TABLES / "hdm_soft.csv"
N_STARS = 20
CONFIG_TEXT = f"""\
# a tiny sweep for the run-file tests
[sweep]
central_density = {{ min = 3e14, max = 3e15, count = {N_STARS} }}

{SLY_BLOCK}
[[eos]]
name = "soft"
kind = "table"
path = "{SOFT_TABLE}"
[eos.columns]
pressure = {{ column = "P", unit = "dyn/cm2" }}
energy_density = {{ column = "eps", unit = "erg/cm3" }}
rest_mass_density = {{ column = "rho", unit = "g/cm3" }}
"""

#: The units the spec (issue) requires for every per-star dataset, in astropy's spelling since
#: format 3 (issue 13: every unit attribute parses with astropy.units.Unit).
SPEC_UNITS = {
    "central_density": "g / cm3",
    "central_energy_density": "g / cm3",
    "central_pressure": "dyn / cm2",
    "mass": "solMass",
    "radius": "km",
    "baryon_mass": "solMass",
    "compactness": "",
    "surface_redshift": "",
    "surface_gravity": "cm / s2",
    # issue #3 additions
    "love_number_k2": "",
    "tidal_deformability": "",
    "moment_of_inertia": "g cm2",
    "binding_energy": "solMass",
    # issue #9 additions: every star's own quality
    "error_estimate": "",
    "star_status": "",
}
SPEC_GROUP_ATTRIBUTES = ("kind", "parameters", "causal", "max_mass", "max_mass_radius", "max_mass_central_density")


def write_config(folder, text=CONFIG_TEXT, name="tiny.toml"):
    path = folder / name
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def tiny_run(tmp_path_factory):
    """(config path, run file) of one tiny sweep, shared by the read-only tests."""
    folder = tmp_path_factory.mktemp("run")
    cfg = write_config(folder)
    return cfg, sweep.run_config(cfg, folder / "tiny.h5")


def test_root_attributes(tiny_run):
    cfg, path = tiny_run
    with h5py.File(path, "r") as f:
        a = f.attrs
        assert a["format"] == "stellar_match.run"
        assert a["format_version"] == 3  # 2: per-star star_status and error_estimate; 3: units, dimension scales
        assert a["software_version"] == stellar_match.__version__
        assert a["config_toml"] == cfg.read_text()
        created = dt.datetime.fromisoformat(a["created_utc"])
        assert created.utcoffset() == dt.timedelta(0)
        assert abs(dt.datetime.now(dt.UTC) - created) < dt.timedelta(minutes=10)
        assert list(f["eos"]) == ["sly", "soft"]  # config order


def test_eos_group_attributes(tiny_run):
    _, path = tiny_run
    with h5py.File(path, "r") as f:
        for name, kind in (("sly", "piecewise_polytrope"), ("soft", "table")):
            g = f["eos"][name]
            for attr in SPEC_GROUP_ATTRIBUTES:
                assert attr in g.attrs, (name, attr)
            assert g.attrs["kind"] == kind
            assert isinstance(json.loads(g.attrs["parameters"]), dict)
            assert isinstance(g.attrs["causal"], np.bool_ | bool)
            mass, stable = g["mass"][()], g["stable"][()]
            # the maximum is refined between samples, so it is at least the largest sample
            assert g.attrs["max_mass"] >= mass[stable].max() - 1e-9
            assert g.attrs["max_mass"] <= mass.max() * 1.01
            assert 8.0 < g.attrs["max_mass_radius"] < 14.0
            assert 3e14 < g.attrs["max_mass_central_density"] < 3e15
        params = json.loads(f["eos"]["sly"].attrs["parameters"])
        assert params["log10_p1"] == 34.384 and params["gammas"] == [3.005, 2.988, 2.851]
        assert "table_sha256" not in f["eos"]["sly"].attrs
        assert f["eos"]["soft"].attrs["table_sha256"] == hashlib.sha256(SOFT_TABLE.read_bytes()).hexdigest()


def test_sly_maximum_mass(tiny_run):
    # Read, Lackey, Owen & Friedman 2009, PRD 79, 124032, Table III: the SLy fit
    # (34.384, 3.005, 2.988, 2.851) has M_max = 2.049 Msun; 0.5% covers the fit's
    # own rounding and the 20-star sampling.
    _, path = tiny_run
    with h5py.File(path, "r") as f:
        assert f["eos"]["sly"].attrs["max_mass"] == pytest.approx(2.049, rel=5e-3)
        assert bool(f["eos"]["sly"].attrs["causal"])


def test_datasets_and_units(tiny_run):
    _, path = tiny_run
    with h5py.File(path, "r") as f:
        for name in ("sly", "soft"):
            g = f["eos"][name]
            datasets = {k for k, v in g.items() if isinstance(v, h5py.Dataset)}
            # star: the dimension scale; the crust datasets of the SLy crust fit (issue 12)
            crust = set(CRUST_DATASETS) if "crust_core_density" in json.loads(g.attrs["parameters"]) else set()
            assert datasets == set(SPEC_UNITS) | {"stable", "star"} | crust
            for col, unit in SPEC_UNITS.items():
                d = g[col]
                assert d.ndim == 1 and d.shape[0] == N_STARS, col
                assert d.dtype.kind == ("i" if col == "star_status" else "f"), col
                assert d.attrs["unit"] == unit, col
                assert np.all(np.isfinite(d[()])), col
            stable = g["stable"]
            assert stable.shape == (N_STARS,)
            assert stable.dtype == np.bool_
            assert "unit" in stable.attrs
            values = stable[()]
            assert values.any() and not values.all()  # the sweep passes the maximum
            np.testing.assert_allclose(g["central_density"][()], np.geomspace(3e14, 3e15, N_STARS), rtol=1e-10)


def test_read_run_matches_in_memory_sweep(tiny_run):
    cfg, path = tiny_run
    run = read_run(path)
    assert run.attrs["format"] == "stellar_match.run"
    config = load_config(cfg)
    assert list(run.eos) == [s.name for s in config.eos]
    for spec in config.eos:
        memory = sweep.sweep_eos(spec.build(), config.axis.quantity, config.axis.values,
                                 chunk_size=config.solver.chunk_size)
        disk = run.eos[spec.name]
        crust = list(CRUST_DATASETS) if spec.kind == "piecewise_polytrope" else []  # issue 12
        assert sorted(disk.columns) == sorted(list(STAR_DATASETS) + crust) == sorted(memory.columns)
        for col in STAR_DATASETS:
            np.testing.assert_array_equal(disk[col], memory[col], err_msg=col)
        assert disk.stable.dtype == np.bool_
        assert disk.kind == memory.kind
        assert disk.parameters == json.loads(json.dumps(memory.parameters, default=str))
        assert disk.table_sha256 == memory.table_sha256
        assert disk.summary.keys() == memory.summary.keys()
        for k, v in memory.summary.items():
            assert disk.summary[k] == (pytest.approx(v, nan_ok=True) if isinstance(v, float) else v), k


def test_existing_file_is_not_overwritten_without_force(tmp_path):
    cfg = write_config(tmp_path, CONFIG_TEXT.replace(f"count = {N_STARS}", "count = 3"))
    out = tmp_path / "run.h5"
    out.write_bytes(b"precious")
    with pytest.raises(RunFileError) as info:
        sweep.run_config(cfg, out)
    assert str(out) in info.value.one_line() and "--force" in info.value.message
    assert out.read_bytes() == b"precious"
    assert not (tmp_path / "run.h5.partial").exists()
    sweep.run_config(cfg, out, force=True)
    assert read_run(out).eos["sly"]["mass"].size == 3
    assert not (tmp_path / "run.h5.partial").exists()


def test_interrupted_sweep_keeps_finished_chunks_and_resumes(tmp_path, monkeypatch):
    # Issue #6: a crash keeps every finished chunk as a part file, never a truncated run
    # file; --resume computes only the missing chunks and gives the uninterrupted result.
    from stellar_match import scheduling

    cfg = write_config(tmp_path, CONFIG_TEXT.replace("[[eos]]", "[solver]\nchunk_size = 5\n\n[[eos]]", 1))
    out = tmp_path / "run.h5"
    real = scheduling.run_task
    calls = []

    def fail_after_first_chunk(config, task):
        calls.append(task)
        if len(calls) > 1:
            raise RuntimeError("simulated crash")
        return real(config, task)

    monkeypatch.setattr(scheduling, "run_task", fail_after_first_chunk)
    with pytest.raises(RuntimeError, match="simulated crash"):
        sweep.run_config(cfg, out)
    assert not out.exists() and not (tmp_path / "run.h5.partial").exists()
    parts = sorted((tmp_path / "run.h5.parts").glob("*.npz"))
    assert len(parts) == 1
    with pytest.raises(RunFileError, match="--resume"):
        read_run(out)
    with pytest.raises(RunFileError, match="--resume"):  # no silent restart over the parts
        sweep.run_config(cfg, out)
    monkeypatch.setattr(scheduling, "run_task", real)
    calls.clear()
    resumed = read_run(sweep.run_config(cfg, out, resume=True))
    assert not (tmp_path / "run.h5.parts").exists()
    fresh = read_run(sweep.run_config(cfg, tmp_path / "fresh.h5"))
    for name, seq in fresh.eos.items():
        for col, values in seq.columns.items():
            np.testing.assert_array_equal(resumed.eos[name][col], values)


def test_read_run_rejects_a_non_hdf5_file(tmp_path):
    path = tmp_path / "notes.h5"
    path.write_text("not HDF5\n")
    with pytest.raises(RunFileError) as info:
        read_run(path)
    assert info.value.source == str(path)


def test_read_run_rejects_hdf5_without_format(tmp_path):
    path = tmp_path / "foreign.h5"
    with h5py.File(path, "w") as f:
        f.create_group("eos")
        f.attrs["software_version"] = "1.0"
    with pytest.raises(RunFileError) as info:
        read_run(path)
    assert info.value.source == str(path) and "format" in info.value.message


def test_read_run_rejects_a_newer_format_version(tiny_run, tmp_path):
    path = tmp_path / "future.h5"
    path.write_bytes(tiny_run[1].read_bytes())
    with h5py.File(path, "a") as f:
        f.attrs["format_version"] = 4
    with pytest.raises(RunFileError, match="format_version 4"):
        read_run(path)


def test_read_run_missing_file(tmp_path):
    with pytest.raises(RunFileError, match="not found"):
        read_run(tmp_path / "absent.h5")


def test_read_run_rejects_a_run_file_without_eos_group(tmp_path):
    path = tmp_path / "empty.h5"
    with h5py.File(path, "w") as f:
        f.attrs["format"] = "stellar_match.run"
        f.attrs["format_version"] = 1
    with pytest.raises(RunFileError, match="no /eos group"):
        read_run(path)


def test_output_path_that_is_a_folder_fails_before_solving(tmp_path, monkeypatch):
    cfg = write_config(tmp_path)
    (tmp_path / "out.h5").mkdir()

    def must_not_solve(*args, **kwargs):
        raise AssertionError("solved stars for an output that cannot be written")

    monkeypatch.setattr(sweep, "solve_interiors", must_not_solve)
    with pytest.raises(RunFileError, match="is a folder"):
        sweep.run_config(cfg, tmp_path / "out.h5", force=True)
    assert not (tmp_path / "out.h5.partial").exists()


# --- format 3: astropy unit spellings, dimension scales, compression (issue 13) -------------

ENSEMBLE_TEXT = """
[[ensemble]]
name = "prior"
kind = "piecewise_polytrope"
[ensemble.sample]
count = 3
seed = 7
log10_p1 = [34.3, 34.5]
gamma1 = [2.8, 3.2]
gamma2 = [2.8, 3.2]
gamma3 = [2.6, 3.0]
"""
MIXED_TEXT = f"""\
[sweep]
central_density = {{ min = 3e14, max = 3e15, count = 6 }}
target_masses = [1.4]
binaries = [[1.4, 1.4]]

{SLY_BLOCK}
[[eos]]
name = "poly"
kind = "polytrope"
K = 1.0e5
gamma = 2.0
""" + ENSEMBLE_TEXT


@pytest.fixture(scope="module")
def mixed_run(tmp_path_factory):
    """A run file with EOS (targets, binaries) and an ensemble, written with gzip."""
    folder = tmp_path_factory.mktemp("mixed")
    text = MIXED_TEXT + '\n[output]\ncompression = "gzip"\ncompression_level = 6\n'
    return sweep.run_config(write_config(folder, text, "gzip.toml"), folder / "gzip.h5"), text


def test_every_unit_attribute_parses_with_astropy(mixed_run):
    u = pytest.importorskip("astropy.units")
    seen = set()
    with h5py.File(mixed_run[0], "r") as f:
        def visit(name, obj):
            if isinstance(obj, h5py.Dataset) and "unit" in obj.attrs:
                seen.add(obj.attrs["unit"])
                u.Unit(obj.attrs["unit"])  # raises for a spelling astropy does not know
        f.visititems(visit)
    # the exports' spellings (issue 13): solMass, "g / cm3", "" for dimensionless ...
    assert {"solMass", "g / cm3", "dyn / cm2", "km", "cm / s2", "g cm2", ""} <= seen
    assert not seen & {"Msun", "g/cm3", "1"}


def test_dimension_scales_name_every_axis(mixed_run):
    with h5py.File(mixed_run[0], "r") as f:
        g = f["eos/sly"]
        assert g["star"].is_scale and list(g["star"][()]) == list(range(6))
        for name in ("mass", "stable", "star_status"):
            assert g[name].dims[0][0].name == "/eos/sly/star", name
        assert f["eos/sly/targets/radius"].dims[0][0].name == "/eos/sly/targets/target"
        assert f["eos/sly/binaries/lambda_tilde"].dims[0][0].name == "/eos/sly/binaries/binary"
        e = f["ensemble/prior"]
        assert [e["radius"].dims[i][0].name for i in (0, 1)] == ["/ensemble/prior/member", "/ensemble/prior/star"]
        assert e["max_mass"].dims[0][0].name == "/ensemble/prior/member"
        assert e["sweep_values"].dims[0][0].name == "/ensemble/prior/star"
        assert e["members/gamma1"].dims[0][0].name == "/ensemble/prior/member"


def test_xarray_sees_named_dimensions(mixed_run):
    xr = pytest.importorskip("xarray")
    pytest.importorskip("h5netcdf")
    with xr.open_dataset(mixed_run[0], engine="h5netcdf", group="eos/sly") as ds:
        assert ds["mass"].dims == ("star",) and ds.sizes["star"] == 6
        assert ds["mass"].attrs["unit"] == "solMass"
    with xr.open_dataset(mixed_run[0], engine="h5netcdf", group="ensemble/prior") as ds:
        assert ds["radius"].dims == ("member", "star") and ds["max_mass"].dims == ("member",)
    with xr.open_dataset(mixed_run[0], engine="h5netcdf", group="eos/sly/targets") as ds:
        assert ds["radius"].dims == ("target",)


def test_gzip_compresses_and_changes_no_value(mixed_run):
    packed, text = mixed_run
    with h5py.File(packed, "r") as f:
        assert f["eos/sly/mass"].compression == "gzip" and f["eos/sly/mass"].compression_opts == 6
        assert f["ensemble/prior/radius"].compression == "gzip" and f["eos/sly/mass"].shuffle
    # the same stars as an uncompressed in-memory sweep, bit for bit
    from stellar_match.config import parse_config

    config = parse_config(text)
    memory = sweep.sweep_eos(config.eos[0].build(), config.axis.quantity, config.axis.values)
    disk = read_run(packed).eos["sly"]
    for col in STAR_DATASETS:
        np.testing.assert_array_equal(disk[col], memory[col], err_msg=col)


def downgrade(path, version):
    """Rewrite a format-3 file as an older version wrote it: old unit spellings, no dimension scales
    (and, for version 1, no star_status / error_estimate), following schema.py's format history."""
    from stellar_match.schema import LEGACY_UNITS

    with h5py.File(path, "a") as f:
        f.attrs["format_version"] = version
        scales = []

        def visit(name, obj):
            if isinstance(obj, h5py.Dataset):
                if obj.is_scale:
                    scales.append(name)
                elif "unit" in obj.attrs:
                    obj.attrs["unit"] = LEGACY_UNITS.get(obj.attrs["unit"], obj.attrs["unit"])
        f.visititems(visit)
        for name in scales:  # detach first, so no dataset keeps a reference to a deleted scale
            scale = f[name]
            for obj in [o for o in (f[n] for n in _datasets(f)) if o.name != scale.name]:
                for dim in obj.dims:
                    if scale in dim.values():
                        dim.detach_scale(scale)
        for name in scales:
            del f[name]
        if version == 1:
            for group in ("eos/sly", "eos/poly", "ensemble/prior"):
                for name in ("star_status", "error_estimate"):
                    del f[f"{group}/{name}"]
                del f[group].attrs["star_status_meaning"]


def _datasets(f):
    out = []
    f.visititems(lambda n, o: out.append(n) if isinstance(o, h5py.Dataset) else None)
    return out


@pytest.mark.parametrize("version", [1, 2])
def test_older_format_versions_are_still_read(mixed_run, tmp_path, version, run_cli):
    path = tmp_path / f"v{version}.h5"
    path.write_bytes(mixed_run[0].read_bytes())
    downgrade(path, version)
    with h5py.File(path, "r") as f:
        assert f["eos/sly/mass"].attrs["unit"] == "Msun" and "star" not in f["eos/sly"]
    run = read_run(path)
    fresh = read_run(mixed_run[0])
    np.testing.assert_array_equal(run.eos["sly"]["mass"], fresh.eos["sly"]["mass"])
    assert ("star_status" in run.eos["sly"].columns) == (version >= 2)
    assert run.ensembles["prior"].to_table()["max_mass"].unit == "solMass"
    code, out, err = run_cli("redshift", path, "-o", tmp_path / "z.ecsv")
    assert code == 0, err
    # a version-3 file with an old spelling is refused (the check on open names the dataset)
    bad = tmp_path / "bad.h5"
    bad.write_bytes(path.read_bytes())
    with h5py.File(bad, "a") as f:
        f.attrs["format_version"] = 3
    with pytest.raises(RunFileError, match=None if version == 1 else "unit|dimension scale"):
        read_run(bad)
