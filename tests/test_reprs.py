"""Results objects print as a short line, and help() signatures stay readable."""

from __future__ import annotations

import inspect
import pydoc

import numpy as np
import pytest
from conftest import SLY_BLOCK, SMALL_DENSITY_AXIS

import stellar_match as sm
from stellar_match.config import parse_config
from stellar_match.runfile import read_run
from stellar_match.structure import DEFAULT_STEPS, DORMAND_PRINCE_5, StepControl, solve_interiors

#: A repr is for a glance at a prompt: one line, well below a screen (common practice).
SHORT = 200

ENSEMBLE_BLOCK = """\
[[ensemble]]
name = "prior"
kind = "polytrope"
[ensemble.sample]
count = 3
seed = 1
K = [5e4, 2e5]
gamma = [1.9, 2.1]
"""


@pytest.fixture(scope="module")
def sly():
    return sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])


def assert_short(obj, *needles: str) -> str:
    text = repr(obj)
    assert "\n" not in text and len(text) <= SHORT, text
    assert "array(" not in text, text
    for needle in needles:
        assert needle in text, (needle, text)
    return text


def test_sequence_repr_names_what_it_is(sly):
    # 2000 stars and every column: the default dataclass repr printed all of them
    seq = sm.sweep_eos(sly, "central_density", np.geomspace(3e14, 3e15, 2000), target_masses=[1.4])
    text = assert_short(seq, "'sly'", "piecewise_polytrope", "2000 stars", "targets")
    assert f"{seq.summary['max_mass']:.4f}" in text


def test_solver_results_and_controls(sly):
    stars = solve_interiors(sly, sly.enthalpy_of_density(sm.units.density_to_geometric(np.geomspace(4e14, 2e15, 50))))
    assert_short(stars, "50 stars", "50 within tolerance")
    assert repr(DEFAULT_STEPS) == "StepControl()"
    assert_short(DEFAULT_STEPS.scaled(0.5), "step_scale=0.5", "startup_growth=0.3")
    assert_short(DORMAND_PRINCE_5, "dopri5", "order=5")


def test_signatures_in_help_are_readable():
    sig = str(inspect.signature(sm.sweep_eos))
    assert "control: 'StepControl' = StepControl()" in sig
    assert "array(" not in sig
    assert "array(" not in pydoc.render_doc(sm.solve_stars) + pydoc.render_doc(StepControl)


def test_run_file_config_and_ensemble_reprs(tmp_path):
    cfg = tmp_path / "c.toml"
    cfg.write_text(SMALL_DENSITY_AXIS + SLY_BLOCK + ENSEMBLE_BLOCK)
    config = parse_config(cfg.read_text(), source=str(cfg), base_dir=tmp_path)
    assert_short(config, "eos=['sly']", "ensembles=['prior']", "5 values")
    assert_short(config.ensembles[0], "'prior'", "3 members", "seed 1")
    run = read_run(sm.run_config(cfg, tmp_path / "c.h5", workers=1))
    assert_short(run, "'sly'", "'prior'")
    assert_short(run.eos["sly"], "5 stars")
    assert_short(run.ensembles["prior"], "3 members")
