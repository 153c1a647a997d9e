"""Config validation: every user mistake is one stderr line naming file and key, exit 2."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import EOS_TABLES, SLY_BLOCK, SMALL_DENSITY_AXIS, assert_one_error_line

from stellar_match.config import load_config
from stellar_match.eos.crust import SLY_CRUST_CORE_DENSITY

SOFT_TABLE = EOS_TABLES / "hdm_soft.csv"  # rest-mass density 1e3 .. 4e15 g/cm^3


def soft_table_block(path) -> str:
    return f"""\
[[eos]]
name = "soft"
kind = "table"
path = "{path}"
[eos.columns]
pressure = {{ column = "P", unit = "dyn/cm2" }}
energy_density = {{ column = "eps", unit = "erg/cm3" }}
rest_mass_density = {{ column = "rho", unit = "g/cm3" }}
"""


POLY = '[[eos]]\nname = "poly"\nkind = "polytrope"\nK = 1.0e5\ngamma = 2.0\n'
INCOMPRESSIBLE = '[[eos]]\nname = "uniform"\nkind = "incompressible"\nenergy_density = 1e15\n'
PRESSURE_AXIS = "[sweep]\ncentral_pressure = { min = 1e33, max = 1e35, count = 5 }\n"

# (id, config text, dotted key expected right after the file name; None: no key)
BAD_CONFIGS = [
    ("unknown_top_level_key", "bogus = 1\n" + SMALL_DENSITY_AXIS + SLY_BLOCK, "bogus"),
    ("unknown_sweep_key", SMALL_DENSITY_AXIS + "bogus = 1\n" + SLY_BLOCK, "sweep.bogus"),
    ("unknown_axis_key", "[sweep]\ncentral_density = { min = 3e14, max = 3e15, count = 5, step = 2 }\n"
     + SLY_BLOCK, "sweep.central_density.step"),
    ("unknown_eos_key", SMALL_DENSITY_AXIS + SLY_BLOCK + 'colour = "red"\n', "eos[0].colour"),
    ("key_of_another_kind", SMALL_DENSITY_AXIS + POLY + "log10_p1 = 34.0\n", "eos[0].log10_p1"),
    ("unknown_solver_key", SMALL_DENSITY_AXIS + SLY_BLOCK + "[solver]\nrtol = 1e-6\n", "solver.rtol"),
    ("string_for_number", SMALL_DENSITY_AXIS + SLY_BLOCK.replace("34.384", '"34.384"'), "eos[0].log10_p1"),
    ("string_in_gammas", SMALL_DENSITY_AXIS + SLY_BLOCK.replace("2.988", '"2.988"'), "eos[0].gammas"),
    ("string_for_count", SMALL_DENSITY_AXIS.replace("count = 5", 'count = "5"') + SLY_BLOCK,
     "sweep.central_density.count"),
    ("float_count", SMALL_DENSITY_AXIS.replace("count = 5", "count = 5.0") + SLY_BLOCK,
     "sweep.central_density.count"),
    ("bool_for_number", SMALL_DENSITY_AXIS + POLY.replace("K = 1.0e5", "K = true"), "eos[0].K"),
    ("string_in_values", '[sweep]\ncentral_density = { values = [3e14, "x"] }\n' + SLY_BLOCK,
     "sweep.central_density.values"),
    ("empty_values", "[sweep]\ncentral_density = { values = [] }\n" + SLY_BLOCK, "sweep.central_density.values"),
    ("missing_kind", SMALL_DENSITY_AXIS + SLY_BLOCK.replace('kind = "piecewise_polytrope"\n', ""), "eos[0].kind"),
    ("unknown_kind", SMALL_DENSITY_AXIS + SLY_BLOCK.replace("piecewise_polytrope", "quark_bag"), "eos[0].kind"),
    ("missing_name", SMALL_DENSITY_AXIS + SLY_BLOCK.replace('name = "sly"\n', ""), "eos[0].name"),
    ("name_with_slash", SMALL_DENSITY_AXIS + SLY_BLOCK.replace('"sly"', '"a/b"'), "eos[0].name"),
    ("missing_kind_parameter", SMALL_DENSITY_AXIS + POLY.replace("gamma = 2.0\n", ""), "eos[0].gamma"),
    ("duplicate_names", SMALL_DENSITY_AXIS + SLY_BLOCK + POLY.replace('"poly"', '"sly"'), "eos[1].name"),
    ("two_gammas", SMALL_DENSITY_AXIS + SLY_BLOCK.replace("[3.005, 2.988, 2.851]", "[3.005, 2.988]"),
     "eos[0].gammas"),
    ("count_zero", SMALL_DENSITY_AXIS.replace("count = 5", "count = 0") + SLY_BLOCK, "sweep.central_density.count"),
    ("missing_count", SMALL_DENSITY_AXIS.replace(", count = 5", "") + SLY_BLOCK, "sweep.central_density.count"),
    ("max_below_min", SMALL_DENSITY_AXIS.replace("max = 3e15", "max = 1e14") + SLY_BLOCK,
     "sweep.central_density.max"),
    ("negative_min", SMALL_DENSITY_AXIS.replace("min = 3e14", "min = -3e14") + SLY_BLOCK,
     "sweep.central_density.min"),
    ("both_axes", SMALL_DENSITY_AXIS + "central_pressure = { min = 1e34, max = 1e35, count = 3 }\n" + SLY_BLOCK,
     "sweep"),
    ("neither_axis", "[sweep]\ntarget_masses = [1.4]\n" + SLY_BLOCK, "sweep"),
    ("missing_sweep", SLY_BLOCK, "sweep"),
    ("no_eos", SMALL_DENSITY_AXIS, "eos"),
    ("incompressible_on_density_axis", SMALL_DENSITY_AXIS + INCOMPRESSIBLE, "sweep.central_density"),
    ("bad_binary", SMALL_DENSITY_AXIS + "binaries = [[1.4]]\n" + SLY_BLOCK, "sweep.binaries"),
    ("negative_target_mass", SMALL_DENSITY_AXIS + "target_masses = [-1.4]\n" + SLY_BLOCK, "sweep.target_masses"),
    ("invalid_toml", SMALL_DENSITY_AXIS + "[[eos]\nname = 'x'\n", None),
    ("duplicate_toml_table", SMALL_DENSITY_AXIS + "[sweep]\n" + SLY_BLOCK, None),
    # Read et al. (2009) join the core to the SLy crust where the pressures agree;
    # a core this soft meets the crust above the first dividing density.
    ("core_misses_crust", SMALL_DENSITY_AXIS + SLY_BLOCK.replace("34.384", "32.0"), "eos[0].log10_p1"),
    ("negative_K", SMALL_DENSITY_AXIS + POLY.replace("K = 1.0e5", "K = -1.0e5"), "eos[0].K"),
    ("gamma_one", SMALL_DENSITY_AXIS + POLY.replace("gamma = 2.0", "gamma = 1.0"), "eos[0].gamma"),
    ("negative_step_scale", SMALL_DENSITY_AXIS + SLY_BLOCK + "[solver]\nstep_scale = -0.5\n", "solver.step_scale"),
    ("huge_step_scale", SMALL_DENSITY_AXIS + SLY_BLOCK + "[solver]\nstep_scale = 10\n", "solver.step_scale"),
    ("zero_chunk_size", SMALL_DENSITY_AXIS + SLY_BLOCK + "[solver]\nchunk_size = 0\n", "solver.chunk_size"),
    ("table_columns_missing", SMALL_DENSITY_AXIS + '[[eos]]\nname = "t"\nkind = "table"\npath = "x.csv"\n',
     "eos[0].columns"),
    ("table_without_density_column", SMALL_DENSITY_AXIS + soft_table_block(SOFT_TABLE).split("rest_mass")[0],
     "eos[0].columns"),
    ("table_unknown_unit", SMALL_DENSITY_AXIS + soft_table_block(SOFT_TABLE).replace('"dyn/cm2"', '"bar"'),
     "eos[0].columns.pressure.unit"),
    ("table_unknown_column", SMALL_DENSITY_AXIS + soft_table_block(SOFT_TABLE).replace('"P"', '"pressure"'),
     "eos[0].columns.pressure.column"),
    # hdm_soft.csv ends at 4e15 g/cm^3
    ("density_beyond_table", SMALL_DENSITY_AXIS.replace("3e15", "5e15") + soft_table_block(SOFT_TABLE),
     "sweep.central_density"),
    # a TOML quoted key may hold a newline; the error must still be one line
    ("newline_in_key", '"bo\\ngus" = 1\n' + SMALL_DENSITY_AXIS + SLY_BLOCK, None),
]


@pytest.mark.parametrize(("text", "key"), [c[1:] for c in BAD_CONFIGS], ids=[c[0] for c in BAD_CONFIGS])
def test_bad_config_is_one_line_naming_file_and_key(tmp_path, run_cli, text, key):
    cfg = tmp_path / "bad.toml"
    cfg.write_text(text)
    code, out, err = run_cli("sweep", cfg)
    assert code == 2
    line = assert_one_error_line(err)
    if key is None:
        assert f"{cfg}: " in line
    else:
        assert f"{cfg}: {key}: " in line
    assert not (tmp_path / "bad.h5").exists()
    assert not (tmp_path / "bad.h5.partial").exists()


def test_incompressible_on_density_axis_names_the_eos(tmp_path, run_cli):
    cfg = tmp_path / "bad.toml"
    cfg.write_text(SMALL_DENSITY_AXIS + SLY_BLOCK + INCOMPRESSIBLE)
    _, _, err = run_cli("sweep", cfg)
    assert "eos[1]" in assert_one_error_line(err)


def test_density_beyond_table_names_the_eos(tmp_path, run_cli):
    cfg = tmp_path / "bad.toml"
    cfg.write_text(SMALL_DENSITY_AXIS.replace("3e15", "5e15") + SLY_BLOCK + soft_table_block(SOFT_TABLE))
    _, _, err = run_cli("sweep", cfg)
    line = assert_one_error_line(err)
    assert "eos[1] (soft)" in line
    assert "5e+15" in line


def test_missing_config_file(tmp_path, run_cli):
    cfg = tmp_path / "nowhere.toml"
    code, _, err = run_cli("sweep", cfg)
    assert code == 2
    assert f"{cfg}: config file not found" in assert_one_error_line(err)


def test_missing_table_file_names_the_table(tmp_path, run_cli):
    cfg = tmp_path / "bad.toml"
    cfg.write_text(SMALL_DENSITY_AXIS + soft_table_block("no_such_table.csv"))
    code, _, err = run_cli("sweep", cfg)
    assert code == 2
    # relative table paths are resolved against the config file's folder; the line names
    # the config and its key as well as the table it looked for
    line = assert_one_error_line(err)
    assert f"{cfg}: eos[0].path: table file {tmp_path / 'no_such_table.csv'} not found" in line


def test_overflowing_log10_p1(tmp_path, run_cli):
    cfg = tmp_path / "bad.toml"
    cfg.write_text(SMALL_DENSITY_AXIS + SLY_BLOCK.replace("34.384", "400.0"))
    code, _, err = run_cli("sweep", cfg)
    assert code == 2
    assert f"{cfg}: eos[0].log10_p1: " in assert_one_error_line(err)


# --- good configs ------------------------------------------------------------

def test_values_list_is_kept_in_order(tmp_path):
    cfg = tmp_path / "good.toml"
    cfg.write_text("[sweep]\ncentral_density = { values = [1e15, 5e14, 2e15] }\n" + SLY_BLOCK)
    config = load_config(cfg)
    assert config.axis.quantity == "central_density"
    assert config.axis.unit == "g/cm3"
    np.testing.assert_array_equal(config.axis.values, [1e15, 5e14, 2e15])
    assert config.text == cfg.read_text()
    assert [s.name for s in config.eos] == ["sly"]
    assert config.eos[0].options == {"log10_p1": 34.384, "gammas": [3.005, 2.988, 2.851],
                                     "crust_core_density": SLY_CRUST_CORE_DENSITY}  # the default (issue 12)


def test_min_max_count_is_log_spaced(tmp_path):
    cfg = tmp_path / "good.toml"
    cfg.write_text("[sweep]\ncentral_density = { min = 1e14, max = 1e16, count = 3 }\n" + SLY_BLOCK)
    np.testing.assert_allclose(load_config(cfg).axis.values, [1e14, 1e15, 1e16], rtol=1e-14)


def test_central_pressure_axis_with_incompressible(tmp_path):
    cfg = tmp_path / "good.toml"
    cfg.write_text(PRESSURE_AXIS + "target_masses = [1.0]\n" + INCOMPRESSIBLE
                   + "[solver]\nstep_scale = 0.5\nchunk_size = 2\n")
    config = load_config(cfg)
    assert config.axis.quantity == "central_pressure"
    assert config.axis.unit == "dyn/cm2"
    assert config.axis.values.size == 5
    assert config.target_masses == [1.0]
    assert (config.solver.step_scale, config.solver.chunk_size) == (0.5, 2)
    eos = config.eos[0].build()
    assert eos.kind == "incompressible"


def test_relative_table_path_resolves_against_config_folder(tmp_path, monkeypatch):
    (tmp_path / "inputs").mkdir()
    (tmp_path / "inputs" / "soft.csv").write_bytes(SOFT_TABLE.read_bytes())
    cfg = tmp_path / "inputs" / "good.toml"
    cfg.write_text(SMALL_DENSITY_AXIS + soft_table_block("soft.csv"))
    monkeypatch.chdir(tmp_path)
    config = load_config("inputs/good.toml")
    assert config.eos[0].options["path"] == tmp_path / "inputs" / "soft.csv" or (
        config.eos[0].options["path"].resolve() == (tmp_path / "inputs" / "soft.csv").resolve()
    )
    assert config.eos[0].build().kind == "table"
