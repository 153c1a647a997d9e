"""Every bad input is one line on stderr, exit status 2, and nothing touched.

README ("Everyday use") promises that each user mistake -- a config, a
constraints file, a table, a run file or a command-line argument -- ends
with exit status 2 and one line on stderr naming the file and the key,
dataset or option, without a traceback, and that no file is created or
changed.  This module is one table of such mistakes.  Each case gets its own
folder; the command runs there in-process, and the folder's names, sizes
and modification times must be the same afterwards.

No case may solve a star: every mistake must be found before the expensive
part starts (the solver is replaced by one that fails the test).
"""

from __future__ import annotations

import json
import os
import pathlib
import shutil
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import h5py
import numpy as np
import pytest
from conftest import EOS_TABLES, SLY_BLOCK, assert_one_error_line

from stellar_match import cli, sweep

MEDIUM_TABLE = EOS_TABLES / "hdm_medium.csv"
AXIS5 = "[sweep]\ncentral_density = { min = 3e14, max = 3e15, count = 5 }\n"
POLY = '[[eos]]\nname = "{name}"\nkind = "polytrope"\nK = 1.0e5\ngamma = 2.0\n'
ENSEMBLE = ('[[ensemble]]\nname = "{name}"\nkind = "polytrope"\n[ensemble.sample]\ncount = {count}\nseed = 1\n'
            'K = [8e4, 1.2e5]\ngamma = [1.9, 2.1]\n')
TABLE_BLOCK = """\
[[eos]]
name = "tab"
kind = "table"
path = "{path}"
[eos.columns]
pressure = {{ column = "p", unit = "MeV/fm3" }}
energy_density = {{ column = "e", unit = "MeV/fm3" }}
baryon_density = {{ column = "nb", unit = "fm-3" }}
"""
#: The valid run file all run-file cases corrupt: one EOS with targets and binaries, one ensemble.
VALID_CONFIG = (AXIS5 + "target_masses = [1.4]\nbinaries = [[1.36, 1.36]]\n\n" + SLY_BLOCK
                + ENSEMBLE.format(name="prior", count=3))


@dataclass
class Case:
    """One bad input.

    ``setup(folder, valid_run)`` writes the case's files into its own folder
    and returns the command-line arguments; the error line must contain every
    string of ``expect`` (``{folder}`` is replaced by the case folder).
    """

    id: str
    setup: Callable[[Path, Path], list[str]]
    expect: tuple[str, ...]
    patch: dict[tuple[str, str], object] = field(default_factory=dict)


def sweep_case(id_: str, config: str, *expect: str, files: dict[str, bytes | str] | None = None,
               patch: dict | None = None, names_config: bool = True) -> Case:
    """A sweep of ``config`` (written as bad.toml, with extra ``files``) that must fail.

    The line names bad.toml, except for mistakes in one row of a table
    (``names_config=False``), which name the table and the line.
    """

    def setup(folder: Path, _run: Path) -> list[str]:
        (folder / "bad.toml").write_text(config.replace("{folder}", str(folder)), encoding="utf-8")
        for name, content in (files or {}).items():  # may replace bad.toml itself
            target = folder / name
            target.write_bytes(content if isinstance(content, bytes) else content.encode())
        return ["sweep", "bad.toml", "-o", "out.h5", "--workers", "1"]

    return Case(id_, setup, ("bad.toml", *expect) if names_config else expect, patch or {})


def corrupt(id_: str, change: Callable[[h5py.File], None], where: str, *, command: str = "summary",
            message: str = "") -> Case:
    """A copy of the valid run file changed by ``change``, then given to ``command``."""

    def setup(folder: Path, run: Path) -> list[str]:
        path = folder / "bad.h5"
        shutil.copyfile(run, path)
        with h5py.File(path, "a") as f:
            change(f)
        return {
            "summary": ["summary", "bad.h5"],
            "overlay": ["overlay", "good.h5", "bad.h5", "-o", "fig.png"],
            "redshift": ["redshift", "bad.h5", "-o", "z.csv"],
            "masses": ["redshift", "bad.h5", "-o", "z.csv", "--masses", "1.2:1.6:0.2"],
            "window": ["redshift", "bad.h5", "--observed-z", "0.3", "--sigma", "0.02"],
        }[command]

    return Case(id_, setup, ("bad.h5", where, message))


def args_case(id_: str, argv: list[str], *expect: str) -> Case:
    """Command-line arguments that must fail (``good.h5`` is a valid run file in the folder)."""
    return Case(id_, lambda folder, run: list(argv), expect)


# -- run-file changes ---------------------------------------------------------------

def delete(name: str) -> Callable[[h5py.File], None]:
    return lambda f: f.__delitem__(name)


def replace(name: str, data) -> Callable[[h5py.File], None]:
    def change(f: h5py.File) -> None:
        attrs = dict(f[name].attrs)
        del f[name]
        d = f.create_dataset(name, data=data)
        d.attrs.update(attrs)
    return change


def set_attr(obj: str, attr: str, value) -> Callable[[h5py.File], None]:
    return lambda f: f[obj].attrs.__setitem__(attr, value)


def del_attr(obj: str, attr: str) -> Callable[[h5py.File], None]:
    return lambda f: f[obj].attrs.__delitem__(attr)


def truncate(folder: Path, run: Path) -> list[str]:
    data = run.read_bytes()
    (folder / "cut.h5").write_bytes(data[: len(data) // 2])
    return ["summary", "cut.h5"]


def beyond_table(folder: Path, _run: Path) -> list[str]:
    shutil.copyfile(MEDIUM_TABLE, folder / "t.csv")
    columns = ('pressure = { column = "p", unit = "MeV/fm3" }\nenergy_density = { column = "e", unit = "MeV/fm3" }\n'
               'baryon_density = { column = "nb", unit = "fm-3" }\n')
    text = TABLE_BLOCK.format(path="t.csv").split("[eos.columns]")[0] + "[eos.columns]\n" + columns
    (folder / "bad.toml").write_text(AXIS5.replace("max = 3e15", "max = 1e18") + text)
    return ["sweep", "bad.toml", "-o", "out.h5", "--workers", "1"]


def unreadable_table(folder: Path, _run: Path) -> list[str]:
    (folder / "bad.toml").write_text(AXIS5 + TABLE_BLOCK.format(path="locked.csv"))
    shutil.copyfile(MEDIUM_TABLE, folder / "locked.csv")
    return ["sweep", "bad.toml", "-o", "out.h5", "--workers", "1"]


def fifo_table(folder: Path, _run: Path) -> list[str]:
    (folder / "bad.toml").write_text(AXIS5 + TABLE_BLOCK.format(path="pipe.csv"))
    os.mkfifo(folder / "pipe.csv")  # reading it would block forever
    return ["sweep", "bad.toml", "-o", "out.h5", "--workers", "1"]


def existing_output(folder: Path, _run: Path) -> list[str]:
    (folder / "ok.toml").write_text(AXIS5 + SLY_BLOCK)
    (folder / "out.h5").write_bytes(b"precious")
    return ["sweep", "ok.toml", "-o", "out.h5", "--workers", "1"]


def output_folder(folder: Path, _run: Path) -> list[str]:
    (folder / "ok.toml").write_text(AXIS5 + SLY_BLOCK)
    (folder / "out.h5").mkdir()
    return ["sweep", "ok.toml", "-o", "out.h5", "--workers", "1"]


def constraints(id_: str, text: str, key: str) -> Case:
    def setup(folder: Path, _run: Path) -> list[str]:
        (folder / "c.toml").write_text(text)
        return ["overlay", "good.h5", "-o", "fig.png", "--constraints", "c.toml"]
    return Case(id_, setup, ("c.toml", key))


def scored(id_: str, text: str, *expect: str, files: dict | None = None, argv: tuple = ()) -> Case:
    """A bad constraints file (or sample file, or option) given to the likelihood command."""
    def setup(folder: Path, _run: Path) -> list[str]:
        (folder / "c.toml").write_text(text)
        for name, content in (files or {}).items():
            (folder / name).write_text(content)
        return ["likelihood", "good.h5", "--constraints", "c.toml", "-o", "res.h5", *argv]
    return Case(id_, setup, expect)


#: A valid likelihood-bearing measurement, to pair with a bad one.
GOOD_MASS = '[[mass]]\nlabel = "m"\nmass = 1.9\nsigma = 0.1\n'
BINARY = '[[binary]]\nlabel = "b"\nchirp_mass = 1.2\nq_min = {q}\nlambda_tilde = 400\nsigma = 100\n'
MASS_SAMPLES = '[[mass]]\nlabel = "s"\nsamples = "s.csv"\ncolumn = "m"\n'
ELLIPSE = ('[[ellipse]]\nlabel = "x"\nmass = 1.4\nradius = 12.0\nsigma_mass = 0.1\nsigma_radius = 0.5\n'
           'correlation = {rho}\n')
QUARK = '[[eos]]\nname = "q"\nkind = "quark_matter"\n{extra}\n'
SPECTRAL = '[[eos]]\nname = "s"\nkind = "spectral"\n{extra}\n'
ELECTRONS = '[[eos]]\nname = "wd"\nkind = "electron_gas"\n{extra}\n'
NODES = '[[eos]]\nname = "n"\nkind = "sound_speed_nodes"\ndensities = {rho}\nsound_speed_squared = {cs2}\n'
SLY_INLINE = '{ kind = "piecewise_polytrope", log10_p1 = 34.384, gammas = [3.005, 2.988, 2.851] }'
TABLE_INLINE = ('{ kind = "table", path = "t.csv", columns = { pressure = { column = "p", unit = "MeV/fm3" }, '
                'energy_density = { column = "e", unit = "MeV/fm3" }, '
                'baryon_density = { column = "nb", unit = "fm-3" } } }')
TRANSITION = ('[[eos]]\nname = "pt"\nkind = "phase_transition"\nbase = '
              + SLY_INLINE.replace("{", "{{").replace("}", "}}")
              + '\ntransition_pressure = {p_t}\nenergy_density_jump = {jump}\nsound_speed_squared = {cs2}\n')
LONG_NAME = "n" * 201
SLY = SLY_BLOCK

CASES = [
    # -- config: sizes that would exhaust memory --------------------------------------
    sweep_case("count_1e12", AXIS5.replace("count = 5", "count = 1000000000000") + SLY,
               "sweep.central_density.count", "10000000"),
    sweep_case("count_just_over_limit", AXIS5.replace("count = 5", "count = 10000001") + SLY,
               "sweep.central_density.count"),
    sweep_case("pressure_count_1e12",
               "[sweep]\ncentral_pressure = { min = 1e33, max = 1e36, count = 1000000000000 }\n" + SLY,
               "sweep.central_pressure.count"),
    sweep_case("values_list_too_long", "[sweep]\ncentral_density = { values = [1e15, 2e15, 3e15, 4e15] }\n" + SLY,
               "sweep.central_density.values", "at most 3", patch={("stellar_match.config", "MAX_SWEEP_VALUES"): 3}),
    sweep_case("integer_with_400_digits", AXIS5.replace("min = 3e14", "min = 1" + "0" * 400) + SLY,
               "sweep.central_density.min"),
    sweep_case("too_many_target_masses", AXIS5 + "target_masses = [1.0, 1.2, 1.4, 1.6]\n" + SLY,
               "sweep.target_masses", "at most 3", patch={("stellar_match.config", "MAX_TARGETS"): 3}),
    sweep_case("too_many_binaries", AXIS5 + "binaries = [[1, 1], [1, 1.2], [1.2, 1.2], [1.3, 1.3]]\n" + SLY,
               "sweep.binaries", "at most 3", patch={("stellar_match.config", "MAX_TARGETS"): 3}),
    sweep_case("ensemble_members_x_values", AXIS5.replace("count = 5", "count = 101")
               + ENSEMBLE.format(name="e", count=1000000), "ensemble[0].sample.count", "100000000"),
    sweep_case("member_batch_too_large", AXIS5.replace("count = 5", "count = 100")
               + "[solver]\nmember_chunk_size = 10000\n" + ENSEMBLE.format(name="e", count=10000),
               "solver.member_chunk_size", "500000"),
    sweep_case("eos_batch_too_large", AXIS5.replace("count = 5", "count = 1000000")
               + "[solver]\nchunk_size = 1000000\n" + SLY, "solver.chunk_size", "500000"),
    sweep_case("ensemble_sample_count_over_1e6", AXIS5 + ENSEMBLE.format(name="e", count=1000001),
               "ensemble[0].sample.count"),
    sweep_case("ensemble_range_overflows", AXIS5 + ENSEMBLE.format(name="e", count=3).replace(
        "gamma = [1.9, 2.1]", "gamma = [1.9, 1" + "0" * 400 + "]"), "ensemble[0].sample.gamma"),
    # -- config: step scale ----------------------------------------------------------
    sweep_case("step_scale_0.001", AXIS5 + SLY + "[solver]\nstep_scale = 0.001\n", "solver.step_scale", "0.05"),
    sweep_case("step_scale_just_below", AXIS5 + SLY + "[solver]\nstep_scale = 0.049\n", "solver.step_scale"),
    sweep_case("step_scale_zero", AXIS5 + SLY + "[solver]\nstep_scale = 0\n", "solver.step_scale"),
    sweep_case("step_scale_string", AXIS5 + SLY + '[solver]\nstep_scale = "fine"\n', "solver.step_scale"),
    sweep_case("output_compression_unknown", AXIS5 + SLY + '[output]\ncompression = "lzf"\n', "output.compression"),
    sweep_case("output_compression_level_10", AXIS5 + SLY + '[output]\ncompression = "gzip"\ncompression_level = 10\n',
               "output.compression_level"),
    sweep_case("output_level_without_gzip", AXIS5 + SLY + "[output]\ncompression_level = 3\n",
               "output.compression_level"),
    sweep_case("output_unknown_key", AXIS5 + SLY + "[output]\nshuffle = true\n", "output.shuffle"),
    # -- config: names ----------------------------------------------------------------
    *[sweep_case(f"eos_name_{label}", AXIS5 + POLY.format(name=name), "eos[0].name") for label, name in [
        ("empty", ""), ("blank", "   "), ("dot", "."), ("dotdot", ".."), ("slash", "a/b"),
        ("leading_dot", ".hidden"), ("nul", "a\\u0000b"), ("tab", "a\\tb"), ("newline", "a\\nb"),
        ("escape_char", "a\\u001bb"), ("leading_blank", " poly"), ("too_long", LONG_NAME)]],
    sweep_case("eos_name_integer", AXIS5 + POLY.replace('"{name}"', "3"), "eos[0].name"),
    sweep_case("eos_duplicate_names", AXIS5 + SLY + POLY.format(name="sly"), "eos[1].name", "eos[0]"),
    sweep_case("eos_names_equal_up_to_nul", AXIS5 + SLY + POLY.format(name="sly\\u0000x"), "eos[1].name"),
    *[sweep_case(f"ensemble_name_{label}", AXIS5 + ENSEMBLE.format(name=name, count=3), "ensemble[0].name")
      for label, name in [("dot", "."), ("empty", ""), ("slash", "p/q"), ("nul", "p\\u0000"),
                          ("leading_dot", ".p"), ("line_separator", "p\\u2028q")]],
    sweep_case("ensemble_duplicate_names", AXIS5 + ENSEMBLE.format(name="p", count=3)
               + ENSEMBLE.format(name="p", count=4), "ensemble[1].name", "ensemble[0]"),
    sweep_case("ensemble_names_equal_up_to_nul", AXIS5 + ENSEMBLE.format(name="p", count=3)
               + ENSEMBLE.format(name="p\\u0000z", count=4), "ensemble[1].name"),
    # -- config: the file itself and other keys -----------------------------------------
    Case("config_missing", lambda folder, run: ["sweep", "absent.toml", "-o", "out.h5"],
         ("absent.toml", "not found")),
    Case("config_is_a_folder", lambda folder, run: (folder / "c.toml").mkdir() or ["sweep", "c.toml"],
         ("c.toml", "cannot read")),
    sweep_case("config_not_toml", "[sweep\n", "not valid TOML"),
    sweep_case("config_not_utf8", "", "cannot read", files={"bad.toml": b"\xff\xfe[sweep]\n"}),
    sweep_case("incompressible_with_density_axis", AXIS5 + '[[eos]]\nname = "u"\nkind = "incompressible"\n'
               'energy_density = 1e15\n', "sweep.central_density"),
    sweep_case("ensemble_members_is_folder", AXIS5 + '[[ensemble]]\nname = "m"\nkind = "polytrope"\n'
               'members = "{folder}"\n', "ensemble[0].members"),
    # -- config: the EOS kinds of issue 11 (one line naming the key, found before any star) ----------------
    sweep_case("quark_bag_negative", AXIS5 + QUARK.format(extra="bag_constant = -5.0"), "eos[0].bag_constant"),
    sweep_case("quark_bag_text", AXIS5 + QUARK.format(extra='bag_constant = "sixty"'), "eos[0].bag_constant"),
    sweep_case("quark_bag_missing", AXIS5 + QUARK.format(extra=""), "eos[0].bag_constant", "missing"),
    sweep_case("quark_cs2_above_1", AXIS5 + QUARK.format(extra="bag_constant = 60.0\nsound_speed_squared = 1.5"),
               "eos[0].sound_speed_squared", "causality"),
    sweep_case("quark_below_its_surface", AXIS5 + QUARK.format(extra="bag_constant = 60.0"),
               "sweep.central_density", "surface"),
    sweep_case("transition_jump_negative", AXIS5 + TRANSITION.format(p_t="1e35", jump="-1e14", cs2="1.0"),
               "eos[0].energy_density_jump"),
    sweep_case("transition_cs2_zero", AXIS5 + TRANSITION.format(p_t="1e35", jump="1e14", cs2="0.0"),
               "eos[0].sound_speed_squared"),
    sweep_case("transition_pressure_negative", AXIS5 + TRANSITION.format(p_t="-1e35", jump="1e14", cs2="1.0"),
               "eos[0].transition_pressure"),
    sweep_case("transition_pressure_missing", AXIS5 + TRANSITION.format(p_t="1e35", jump="1e14", cs2="1.0")
               .replace("transition_pressure = 1e35\n", ""), "eos[0].transition_pressure", "missing"),
    sweep_case("transition_beyond_the_base_table",
               AXIS5 + TRANSITION.format(p_t="1e38", jump="1e14", cs2="1.0").replace(SLY_INLINE, TABLE_INLINE),
               "eos[0].transition_pressure", "beyond", files={"t.csv": MEDIUM_TABLE.read_bytes()}),
    sweep_case("transition_base_missing", AXIS5 + TRANSITION.format(p_t="1e35", jump="1e14", cs2="1.0")
               .replace(f"base = {SLY_INLINE}\n", ""), "eos[0].base", "missing"),
    sweep_case("transition_base_kind_unknown", AXIS5 + TRANSITION.format(p_t="1e35", jump="1e14", cs2="1.0")
               .replace(SLY_INLINE, '{ kind = "quark_bag" }'), "eos[0].base.kind"),
    sweep_case("transition_base_nested", AXIS5 + TRANSITION.format(p_t="1e35", jump="1e14", cs2="1.0")
               .replace(SLY_INLINE, '{ kind = "phase_transition" }'), "eos[0].base.kind"),
    sweep_case("transition_base_key_missing", AXIS5 + TRANSITION.format(p_t="1e35", jump="1e14", cs2="1.0")
               .replace(SLY_INLINE, '{ kind = "polytrope", K = 1e5 }'), "eos[0].base.gamma", "missing"),
    sweep_case("transition_base_bad_value", AXIS5 + TRANSITION.format(p_t="1e35", jump="1e14", cs2="1.0")
               .replace("log10_p1 = 34.384", "log10_p1 = 20.0"), "eos[0].base.log10_p1"),
    sweep_case("transition_base_table_missing", AXIS5 + TRANSITION.format(p_t="1e35", jump="1e14", cs2="1.0")
               .replace(SLY_INLINE, TABLE_INLINE), "eos[0].base.path", "t.csv"),
    sweep_case("transition_ensemble_without_base", AXIS5 + '[[ensemble]]\nname = "e"\nkind = "phase_transition"\n'
               'sound_speed_squared = 1.0\n[ensemble.sample]\ncount = 2\nseed = 1\n'
               'transition_pressure = [5e34, 1e35]\nenergy_density_jump = [1e14, 2e14]\n', "ensemble[0].base"),
    sweep_case("quark_ensemble_column_missing", AXIS5 + '[[ensemble]]\nname = "e"\nkind = "quark_matter"\n'
               'members = "m.csv"\n', "ensemble[0].members", "bag_constant",
               files={"m.csv": "sound_speed_squared\n0.3\n"}),
    sweep_case("spectral_one_gamma", AXIS5 + SPECTRAL.format(extra="gammas = [1.0]"), "eos[0].gammas", "2 to 4"),
    sweep_case("spectral_five_gammas", AXIS5 + SPECTRAL.format(extra="gammas = [1, 0, 0, 0, 0]"), "eos[0].gammas"),
    sweep_case("spectral_gamma_vanishes", AXIS5 + SPECTRAL.format(extra="gammas = [1.0, -1.5]"), "eos[0].gammas",
               "vanish"),
    sweep_case("spectral_reference_pressure_in_the_core", AXIS5 + SPECTRAL.format(
        extra="gammas = [1.0, 0.1]\nreference_pressure = 1e36"), "eos[0].reference_pressure"),
    sweep_case("spectral_ensemble_gamma1_missing", AXIS5 + '[[ensemble]]\nname = "e"\nkind = "spectral"\n'
               '[ensemble.sample]\ncount = 2\nseed = 1\ngamma0 = [0.9, 1.0]\n', "ensemble[0].sample.gamma1"),
    sweep_case("nodes_not_increasing", AXIS5 + NODES.format(rho="[3e14, 2e14]", cs2="[0.3, 0.4]"),
               "eos[0].densities", "increase"),
    sweep_case("nodes_lengths_differ", AXIS5 + NODES.format(rho="[2e14, 4e14]", cs2="[0.3]"),
               "eos[0].sound_speed_squared", "one value per node"),
    sweep_case("nodes_acausal", AXIS5 + NODES.format(rho="[2e14, 4e14]", cs2="[0.3, 1.01]"),
               "eos[0].sound_speed_squared", "causality"),
    sweep_case("nodes_join_in_the_outer_crust", AXIS5 + NODES.format(rho="[1e10, 4e14]", cs2="[0.3, 0.5]"),
               "eos[0].densities"),
    sweep_case("nodes_ensemble_without_densities", AXIS5 + '[[ensemble]]\nname = "e"\nkind = "sound_speed_nodes"\n'
               'members = "m.csv"\n', "ensemble[0].densities", "missing", files={"m.csv": "cs2_0\n0.3\n"}),
    sweep_case("nodes_ensemble_nothing_varies", AXIS5 + '[[ensemble]]\nname = "e"\nkind = "sound_speed_nodes"\n'
               'densities = [2e14, 4e14]\nsound_speed_squared = [0.3, 0.5]\nmembers = "m.csv"\n', "ensemble[0]",
               "nothing varies", files={"m.csv": "x\n1\n"}),
    sweep_case("electrons_mu_e_below_1", AXIS5 + ELECTRONS.format(extra="mu_e = 0.5"), "eos[0].mu_e"),
    sweep_case("electrons_coulomb_text", AXIS5 + ELECTRONS.format(extra='mu_e = 2.0\ncoulomb_correction = "yes"'),
               "eos[0].coulomb_correction", "true or false"),
    sweep_case("electrons_charge_zero", AXIS5 + ELECTRONS.format(
        extra="mu_e = 2.0\ncoulomb_correction = true\nnuclear_charge = 0"), "eos[0].nuclear_charge"),
    sweep_case("electrons_mu_e_missing", AXIS5 + ELECTRONS.format(extra=""), "eos[0].mu_e", "missing"),
    # -- config: radial modes (issue 12, section 3) ------------------------------------------------
    sweep_case("radial_modes_negative", AXIS5 + "radial_modes = -1\n" + SLY, "sweep.radial_modes"),
    sweep_case("radial_modes_too_many", AXIS5 + "radial_modes = 11\n" + SLY, "sweep.radial_modes", "10"),
    sweep_case("radial_modes_not_integer", AXIS5 + "radial_modes = 2.5\n" + SLY, "sweep.radial_modes"),
    sweep_case("radial_modes_boolean", AXIS5 + "radial_modes = true\n" + SLY, "sweep.radial_modes"),
    sweep_case("radial_adiabatic_index_word", AXIS5 + 'radial_adiabatic_index = "frozen"\n' + SLY,
               "sweep.radial_adiabatic_index"),
    sweep_case("radial_adiabatic_index_negative", AXIS5 + "radial_adiabatic_index = -1.0\n" + SLY,
               "sweep.radial_adiabatic_index"),
    sweep_case("radial_junction_unknown", AXIS5 + 'radial_junction = "fast"\n' + SLY, "sweep.radial_junction"),
    sweep_case("radial_modes_with_ensemble", AXIS5 + "radial_modes = 2\n" + ENSEMBLE.format(name="e", count=4),
               "sweep.radial_modes", "ensemble"),
    # -- table files ------------------------------------------------------------------
    sweep_case("table_is_a_folder", AXIS5 + TABLE_BLOCK.format(path="{folder}"), "eos[0].path", "is a folder"),
    sweep_case("table_is_dev_null", AXIS5 + TABLE_BLOCK.format(path="/dev/null"), "eos[0].path", "/dev/null"),
    sweep_case("table_is_empty", AXIS5 + TABLE_BLOCK.format(path="t.csv"), "eos[0].path", "t.csv", "empty",
               files={"t.csv": b""}),
    sweep_case("table_is_binary", AXIS5 + TABLE_BLOCK.format(path="t.csv"), "eos[0].path", "t.csv", "binary",
               files={"t.csv": b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" + bytes(range(256))}),
    sweep_case("table_not_utf8", AXIS5 + TABLE_BLOCK.format(path="t.csv"), "eos[0].path", "t.csv", "UTF-8",
               files={"t.csv": b"p,e,nb\n1,2,\xe93\n2,3,4\n"}),
    sweep_case("table_missing", AXIS5 + TABLE_BLOCK.format(path="absent.csv"), "eos[0].path", "absent.csv"),
    sweep_case("table_only_comments", AXIS5 + TABLE_BLOCK.format(path="t.csv"), "eos[0].path", "t.csv",
               files={"t.csv": "# nothing here\n"}),
    sweep_case("table_only_header", AXIS5 + TABLE_BLOCK.format(path="t.csv"), "eos[0].path", "t.csv",
               files={"t.csv": "p,e,nb\n"}),
    sweep_case("table_bad_number", AXIS5 + TABLE_BLOCK.format(path="t.csv"), "t.csv", "line 3",
               files={"t.csv": "p,e,nb\n1e-3,1.0,0.01\nx,2.0,0.02\n"}, names_config=False),
    sweep_case("table_missing_column", AXIS5 + TABLE_BLOCK.format(path="t.csv").replace('"p"', '"P"'),
               "eos[0].columns.pressure.column", files={"t.csv": "p,e,nb\n1,2,3\n2,3,4\n"}),
    Case("table_unreadable", unreadable_table, ("bad.toml", "eos[0].path", "locked.csv", "cannot be read")),
    Case("table_is_a_fifo", fifo_table, ("bad.toml", "eos[0].path", "pipe.csv", "not a regular file")),
    # -- constraints files ------------------------------------------------------------------
    constraints("constraints_correlation_1.5", ELLIPSE.format(rho=1.5), "ellipse[0].correlation"),
    constraints("constraints_unknown_key", 'colour = "red"\n', "colour"),
    constraints("constraints_negative_sigma", '[[mass]]\nlabel = "m"\nmass = 2.0\nsigma = -0.1\n', "mass[0].sigma"),
    constraints("constraints_not_toml", "[[mass]\n", "c.toml"),
    Case("constraints_missing", lambda folder, run: ["overlay", "good.h5", "-o", "fig.png", "--constraints",
                                                      "absent.toml"], ("absent.toml",)),
    sweep_case("solver_ensemble_maxima", AXIS5 + '[solver]\nensemble_maxima = "guess"\n' + SLY_BLOCK,
               "solver.ensemble_maxima"),
    # -- constraints scored by the likelihood command ------------------------------------------
    scored("likelihood_negative_sigma", '[[redshift]]\nlabel = "z"\nz = 0.3\nsigma = -0.02\n', "c.toml",
           "redshift[0].sigma"),
    scored("likelihood_correlation_1", ELLIPSE.format(rho=1.0), "c.toml", "ellipse[0].correlation"),
    scored("likelihood_q_min_0", BINARY.format(q=0.0), "c.toml", "binary[0].q_min"),
    scored("likelihood_q_min_above_1", BINARY.format(q=1.5), "c.toml", "binary[0].q_min"),
    scored("likelihood_credibility_1", '[[binary]]\nlabel = "b"\nchirp_mass = 1.2\nq_min = 0.8\n'
           'lambda_tilde_upper = 700\ncredibility = 1.0\n', "binary[0].credibility"),
    scored("likelihood_two_forms", '[[binary]]\nlabel = "b"\nchirp_mass = 1.2\nq_min = 0.8\nlambda_tilde = 4\n'
           'sigma = 1\nlambda_tilde_upper = 700\ncredibility = 0.9\n', "binary[0]", "only one"),
    scored("likelihood_mass_floor_negative", "mass_floor = -1.0\n" + GOOD_MASS, "c.toml", "mass_floor"),
    scored("likelihood_samples_empty", MASS_SAMPLES, "c.toml", "mass[0].samples", "s.csv", "empty",
           files={"s.csv": ""}),
    scored("likelihood_samples_not_numbers", MASS_SAMPLES, "mass[0].samples", "s.csv", "line 3",
           files={"s.csv": "m\n1.4\nheavy\n" + "1.5\n" * 20}),
    scored("likelihood_samples_too_few", MASS_SAMPLES, "mass[0].samples", "at least",
           files={"s.csv": "m\n1.4\n1.5\n"}),
    scored("likelihood_samples_missing", MASS_SAMPLES, "mass[0].samples", "s.csv", "not found"),
    scored("likelihood_samples_column", '[[mass_radius_samples]]\nlabel = "x"\npath = "s.csv"\n'
           'mass_column = "M"\nradius_column = "R"\n', "mass_radius_samples[0].path", "lacks column(s) R",
           files={"s.csv": "M,radius\n" + "1.4,12\n" * 20}),
    scored("likelihood_samples_degenerate", MASS_SAMPLES, "mass[0].samples", "degenerate",
           files={"s.csv": "m\n" + "1.4\n" * 20}),
    scored("likelihood_binary_samples_q", '[[binary]]\nlabel = "b"\nchirp_mass = 1.2\nq_min = 0.8\n'
           'samples = "s.csv"\nq_column = "q"\nlambda_tilde_column = "lt"\n', "binary[0].samples", "(0, 1]",
           files={"s.csv": "q,lt\n" + "".join(f"{1.2 + 0.01 * i},{300 + i}\n" for i in range(20))}),
    scored("likelihood_only_drawn", '[[box]]\nlabel = "b"\nmass_min = 1.0\nmass_max = 2.0\nradius_min = 10\n'
           'radius_max = 12\n', "c.toml", "no measurement with a likelihood"),
    scored("likelihood_label_twice", GOOD_MASS + GOOD_MASS, "c.toml", "mass[1].label"),
    scored("likelihood_output_is_a_run_file", GOOD_MASS, "good.h5", "is a run file", argv=("-o", "good.h5")),
    scored("likelihood_band_masses", GOOD_MASS, "--band-masses", argv=("--band-masses", "2:1:0.1")),
    # -- run files --------------------------------------------------------------------------
    corrupt("mass_missing", delete("eos/sly/mass"), "/eos/sly/mass", message="missing"),
    corrupt("crust_fraction_above_1", replace("eos/sly/crust_inertia_fraction", np.full(5, 1.5)),
            "/eos/sly/crust_inertia_fraction", message="outside"),
    corrupt("crust_thickness_negative", replace("eos/sly/crust_thickness", np.full(5, -1.0)),
            "/eos/sly/crust_thickness", message="outside", command="redshift"),
    corrupt("mass_2d", replace("eos/sly/mass", np.ones((5, 2))), "/eos/sly/mass", command="overlay"),
    corrupt("mass_too_short", replace("eos/sly/mass", np.ones(4)), "/eos/sly/mass", command="redshift"),
    corrupt("mass_is_a_group", lambda f: (f.__delitem__("eos/sly/mass"), f.create_group("eos/sly/mass")),
            "/eos/sly/mass"),
    corrupt("radius_strings", replace("eos/sly/radius", np.array([b"a"] * 5)), "/eos/sly/radius",
            command="window"),
    corrupt("radius_unit_changed", set_attr("eos/sly/radius", "unit", "m"), "/eos/sly/radius attribute unit"),
    corrupt("stable_missing", delete("eos/sly/stable"), "/eos/sly/stable"),
    corrupt("stable_float", replace("eos/sly/stable", np.ones(5)), "/eos/sly/stable", command="overlay"),
    corrupt("star_status_missing_v2", delete("eos/sly/star_status"), "/eos/sly/star_status"),
    corrupt("no_stars", lambda f: [replace(f"eos/sly/{k}", np.zeros(0, dtype=f[f"eos/sly/{k}"].dtype))(f)
                                   for k in list(f["eos/sly"]) if isinstance(f[f"eos/sly/{k}"], h5py.Dataset)],
            "/eos/sly/central_density"),
    corrupt("max_mass_missing", del_attr("eos/sly", "max_mass"), "/eos/sly attribute max_mass"),
    corrupt("max_mass_array", set_attr("eos/sly", "max_mass", np.ones(3)), "/eos/sly attribute max_mass"),
    corrupt("max_mass_string", set_attr("eos/sly", "max_mass", "2.0"), "/eos/sly attribute max_mass",
            command="overlay"),
    corrupt("causal_string", set_attr("eos/sly", "causal", "yes"), "/eos/sly attribute causal"),
    corrupt("max_mass_status_number", set_attr("eos/sly", "max_mass_status", 1), "attribute max_mass_status"),
    corrupt("parameters_not_json", set_attr("eos/sly", "parameters", "{log10_p1: 34"),
            "/eos/sly attribute parameters", command="masses"),
    corrupt("parameters_a_list", set_attr("eos/sly", "parameters", "[1, 2]"), "/eos/sly attribute parameters"),
    corrupt("parameters_missing", del_attr("eos/sly", "parameters"), "/eos/sly attribute parameters"),
    corrupt("kind_missing", del_attr("eos/sly", "kind"), "/eos/sly attribute kind"),
    corrupt("eos_member_is_a_dataset", lambda f: f.create_dataset("eos/stray", data=[1.0]), "/eos/stray"),
    corrupt("eos_unknown_subgroup", lambda f: f.create_group("eos/sly/extras"), "/eos/sly/extras"),
    corrupt("targets_dataset_missing", delete("eos/sly/targets/radius"), "/eos/sly/targets/radius"),
    corrupt("binaries_wrong_length", replace("eos/sly/binaries/lambda_tilde", np.ones(2)),
            "/eos/sly/binaries/lambda_tilde"),
    corrupt("format_version_string", set_attr("/", "format_version", "2"), "format_version"),
    corrupt("format_version_zero", set_attr("/", "format_version", 0), "format_version", message="(1, 2, 3)"),
    corrupt("format_version_newer", set_attr("/", "format_version", 4), "format_version", message="newer"),
    corrupt("star_scale_missing_v3", delete("eos/sly/star"), "/eos/sly/star", message="dimension scale"),
    corrupt("member_scale_not_a_scale_v3", lambda f: (f.__delitem__("ensemble/prior/member"),
                                                      f.create_dataset("ensemble/prior/member", data=np.arange(3))),
            "/ensemble/prior/member", message="dimension scale"),
    corrupt("mass_unit_old_spelling_v3", set_attr("eos/sly/mass", "unit", "Msun"), "/eos/sly/mass attribute unit",
            message="solMass"),
    corrupt("format_version_float", set_attr("/", "format_version", 2.0), "format_version"),
    corrupt("format_foreign", set_attr("/", "format", "someone.else"), "format"),
    corrupt("config_toml_not_toml", set_attr("/", "config_toml", "[solver"), "config_toml", command="masses"),
    corrupt("config_toml_step_scale_text", set_attr("/", "config_toml", '[solver]\nstep_scale = "x"\n'),
            "config_toml", command="masses"),
    corrupt("eos_group_missing", delete("eos"), "/eos"),
    corrupt("ensemble_without_members", delete("ensemble/prior/members"), "/ensemble/prior/members"),
    corrupt("ensemble_members_empty", lambda f: [f.__delitem__(f"ensemble/prior/members/{k}")
                                                 for k in list(f["ensemble/prior/members"])],
            "/ensemble/prior/members"),
    corrupt("ensemble_radius_transposed", replace("ensemble/prior/radius", np.ones((5, 3))),
            "/ensemble/prior/radius", command="overlay"),
    corrupt("ensemble_status_2d", replace("ensemble/prior/status", np.zeros((3, 5), dtype=np.int8)),
            "/ensemble/prior/status"),
    corrupt("ensemble_status_float", replace("ensemble/prior/status", np.zeros(3)), "/ensemble/prior/status"),
    corrupt("ensemble_sweep_values_short", replace("ensemble/prior/sweep_values", np.ones(4)),
            "/ensemble/prior/"),
    corrupt("ensemble_status_meaning_not_json", set_attr("ensemble/prior", "status_meaning", "ok"),
            "/ensemble/prior attribute status_meaning"),
    corrupt("ensemble_sweep_quantity_unknown", set_attr("ensemble/prior", "sweep_quantity", "mass"),
            "/ensemble/prior attribute sweep_quantity"),
    corrupt("ensemble_is_a_dataset", lambda f: (f.__delitem__("ensemble"), f.create_dataset("ensemble", data=[1])),
            "/ensemble"),
    Case("run_file_truncated", truncate, ("cut.h5", "HDF5")),
    Case("run_file_is_text", lambda folder, run: (folder / "t.h5").write_text("hello\n") and ["summary", "t.h5"],
         ("t.h5", "HDF5")),
    Case("run_file_is_a_folder", lambda folder, run: (folder / "d.h5").mkdir() or ["summary", "d.h5"],
         ("d.h5", "folder")),
    Case("run_file_missing", lambda folder, run: ["summary", "absent.h5"], ("absent.h5", "not found")),
    # -- command-line arguments ----------------------------------------------------------------
    args_case("grid_1e5_by_1e5", ["redshift", "--grid-mass", "1:1.99999:0.00001", "--grid-radius",
                                  "8:8.99999:0.00001",
                                  "-o", "g.csv"], "--grid-mass x --grid-radius", "10000000"),
    args_case("grid_range_overflows", ["redshift", "--grid-mass", "1:1e308:1e-308", "--grid-radius", "8:16:1",
                                       "-o", "g.csv"], "--grid-mass", "100000"),
    args_case("grid_range_words", ["redshift", "--grid-mass", "a:b:c", "--grid-radius", "8:16:1", "-o", "g.csv"],
              "--grid-mass"),
    args_case("grid_without_radius", ["redshift", "--grid-mass", "1:2:0.1", "-o", "g.csv"], "--grid-radius"),
    args_case("masses_max_below_min", ["redshift", "good.h5", "-o", "z.csv", "--masses", "2:1:0.1"], "--masses"),
    args_case("masses_too_many", ["redshift", "good.h5", "-o", "z.csv", "--masses", "1:2:1e-9"], "--masses"),
    args_case("observed_z_negative", ["redshift", "good.h5", "--observed-z", "-1", "--sigma", "0.1"],
              "--observed-z"),
    args_case("sigma_zero", ["redshift", "good.h5", "--observed-z", "0.3", "--sigma", "0"], "--sigma"),
    args_case("observed_z_without_sigma", ["redshift", "good.h5", "--observed-z", "0.3"], "--sigma"),
    args_case("redshift_output_format", ["redshift", "good.h5", "-o", "z.txt"], "z.txt"),
    args_case("overlay_output_format", ["overlay", "good.h5", "-o", "fig.jpg"], "fig.jpg"),
    args_case("unknown_eos_name", ["redshift", "good.h5", "-o", "z.csv", "--eos", "nope"], "--eos", "nope"),
    args_case("workers_zero", ["sweep", "x.toml", "--workers", "0"], "--workers"),
    args_case("workers_word", ["sweep", "x.toml", "--workers", "two"], "--workers"),
    args_case("unknown_command", ["frobnicate"], "frobnicate"),
    Case("sweep_output_exists", existing_output, ("out.h5", "--force")),
    Case("sweep_output_is_a_folder", output_folder, ("out.h5", "folder")),
    Case("density_above_the_table", beyond_table, ("bad.toml", "sweep.central_density")),
    # -- profile (issue 12): one line, exit 2, no file --------------------------------------
    args_case("profile_mass_above_m_max", ["profile", "good.h5", "--eos", "sly", "--mass", "3.0", "-o", "p.h5"],
              "mass", "above the maximum mass"),
    args_case("profile_unknown_eos", ["profile", "good.h5", "--eos", "nope", "--mass", "1.4", "-o", "p.h5"],
              "eos", "nope"),
    args_case("profile_density_negative", ["profile", "good.h5", "--eos", "sly", "--central-density=-1e15",
                                           "-o", "p.h5"], "central_density"),
    args_case("profile_output_format", ["profile", "good.h5", "--eos", "sly", "--mass", "1.4", "-o", "p.txt"],
              "p.txt"),
    args_case("profile_two_choices", ["profile", "good.h5", "--mass", "1.4", "--central-density", "1e15",
                                      "-o", "p.h5"], "--central-density"),
    args_case("profile_outer_radius_below_1", ["profile", "good.h5", "--eos", "sly", "--central-density", "1e15",
                                               "--outer-radius", "0.5", "-o", "p.h5"], "outer_radius"),
]


@pytest.fixture(scope="module")
def valid_run(tmp_path_factory) -> Path:
    """A small valid run file (one EOS with targets and binaries, one ensemble), made once."""
    folder = tmp_path_factory.mktemp("valid")
    (folder / "valid.toml").write_text(VALID_CONFIG)
    return sweep.run_config(folder / "valid.toml", folder / "valid.h5")


def snapshot(folder: Path) -> dict[str, tuple[int, int]]:
    """Every name below ``folder`` with its size and modification time."""
    out = {}
    for root, dirs, files in os.walk(folder):
        for name in dirs + files:
            st = os.lstat(os.path.join(root, name))
            out[os.path.relpath(os.path.join(root, name), folder)] = (st.st_size, st.st_mtime_ns)
    return out


def never_solve(*args, **kwargs):
    raise AssertionError("a star was solved for a bad input: the mistake must be found first")


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_bad_input(case: Case, valid_run, tmp_path, monkeypatch, capsys):
    folder = tmp_path / "case"
    folder.mkdir()
    shutil.copyfile(valid_run, folder / "good.h5")
    argv = case.setup(folder, valid_run)
    for (module, name), value in case.patch.items():
        monkeypatch.setattr(f"{module}.{name}", value)
    for module in ("stellar_match.structure", "stellar_match.sweep", "stellar_match.ensemble",
                   "stellar_match.scheduling"):
        if hasattr(__import__(module, fromlist=["_"]), "solve_interiors"):
            monkeypatch.setattr(f"{module}.solve_interiors", never_solve)
    if case.id == "table_unreadable":
        # We run as root, for whom chmod 000 does not stop reads: refuse the open instead,
        # as the kernel would for an ordinary user.
        locked = folder / "locked.csv"
        real_open = pathlib.Path.open

        def refuse(self, *args, **kwargs):
            if Path(self).resolve() == locked.resolve():
                raise PermissionError(13, "Permission denied", str(self))
            return real_open(self, *args, **kwargs)

        monkeypatch.setattr(pathlib.Path, "open", refuse)
    monkeypatch.chdir(folder)
    before = snapshot(folder)

    code = cli.main(argv)
    captured = capsys.readouterr()

    assert code == 2, captured
    assert captured.out == ""
    line = assert_one_error_line(captured.err)
    for text in case.expect:
        assert text.replace("{folder}", str(folder)) in line, (text, line)
    assert snapshot(folder) == before


def test_enough_cases():
    assert len(CASES) >= 60
    assert len({c.id for c in CASES}) == len(CASES)


def test_version_1_file_without_star_status_is_read(valid_run, tmp_path, run_cli):
    # format 1 predates star_status and error_estimate; such files must still be read
    path = tmp_path / "v1.h5"
    shutil.copyfile(valid_run, path)
    with h5py.File(path, "a") as f:
        f.attrs["format_version"] = 1
        for group in ("eos/sly", "ensemble/prior"):
            for name in ("star_status", "error_estimate"):
                del f[f"{group}/{name}"]
            del f[group].attrs["star_status_meaning"]
    code, out, err = run_cli("summary", path)
    assert code == 0, err
    assert "sly" in out and "ensemble prior" in out


def test_warnings_shown_only_on_request(valid_run, monkeypatch, capsys):
    import warnings

    def noisy_summary(args):
        warnings.warn("overflow encountered", RuntimeWarning, stacklevel=1)
        return 0

    monkeypatch.setattr(cli, "cmd_summary", noisy_summary)
    monkeypatch.setattr(cli.sys, "warnoptions", [])  # as if started without -W
    with warnings.catch_warnings(record=True) as shown:
        warnings.simplefilter("always")
        assert cli.main(["summary", str(valid_run)]) == 0
    assert shown == [] and capsys.readouterr().err == ""
    with pytest.warns(RuntimeWarning, match="overflow"):
        assert cli.main(["--show-warnings", "summary", str(valid_run)]) == 0


def test_valid_run_file_passes_the_checks(valid_run, run_cli):
    code, out, err = run_cli("summary", valid_run)
    assert code == 0 and err == ""
    with h5py.File(valid_run, "r") as f:
        assert json.loads(f["eos/sly"].attrs["parameters"])["log10_p1"] == 34.384
