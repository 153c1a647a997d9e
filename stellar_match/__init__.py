"""stellar_match: interior TOV solutions matched to the exterior Schwarzschild metric.

The Python API mirrors the command line::

    import stellar_match as sm
    eos = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    seq = sm.sweep_eos(eos, "central_density", np.geomspace(3e14, 3e15, 100))
    seq.summary["max_mass"], seq["radius"]
    path = sm.run_config("runs/example_sweep.toml", "runs/example.h5")
    run = sm.read_run(path)
    scores = sm.score_runs([path], sm.load_constraints("runs/example_constraints.toml"))
    like = sm.EOSLikelihood("piecewise_polytrope", scores.constraints)   # ln L(parameters) for samplers

Data flow: config -> eos -> structure -> exterior -> sequence -> runfile
(-> plots / exports); beside it, constraints -> likelihood -> scoring (run
files in, results files out) and inference (parameters in, ln L out);
:mod:`stellar_match.cli` is the only module that prints.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("stellar_match")
except PackageNotFoundError:  # running from a source tree without install
    __version__ = "0+unknown"

from . import exterior, units
from .config import load_config, parse_config
from .constraints import Constraints, load_constraints, parse_constraints
from .eos import (
    EquationOfState,
    Incompressible,
    PiecewisePolytrope,
    TableColumns,
    electron_gas,
    from_table,
    incompressible,
    phase_transition,
    polytrope,
    quark_matter,
    read_piecewise_polytrope,
    sound_speed_nodes,
    spectral,
)
from .errors import ConfigError, InputError, RunFileError, TableError
from .inference import EOSLikelihood
from .radial_modes import RadialModes  # radial oscillation modes
from .radial_modes import radial_modes as solve_radial_modes  # the module keeps the name radial_modes
from .runfile import RunFile, read_run
from .schema import STAR_DATASETS
from .scoring import Scores, read_scores, score_runs, write_scores
from .sequence import EOSSequence, analyse_sequence
from .structure import DEFAULT_STEPS, InteriorProfiles, StepControl, solve_interiors, solve_profiles
from .sweep import run_config, solve_stars, sweep_eos

_LAZY = ("plots", "exports", "scheduling", "ensemble", "likelihood", "scoring", "inference", "constraints",
         "profile")  # profile: the module is callable, stellar_match.profile(...)


def __getattr__(name: str):
    # plots (matplotlib) and the rest load on first use: `import stellar_match` stays fast
    if name in _LAZY:
        import importlib

        return importlib.import_module(f".{name}", __name__)
    raise AttributeError(f"module 'stellar_match' has no attribute {name!r}")


__all__ = [
    "__version__",
    "exterior",
    "units",
    "load_config",
    "parse_config",
    "Constraints",
    "load_constraints",
    "parse_constraints",
    "EOSLikelihood",
    "Scores",
    "score_runs",
    "write_scores",
    "read_scores",
    "EquationOfState",
    "Incompressible",
    "PiecewisePolytrope",
    "TableColumns",
    "from_table",
    "incompressible",
    "polytrope",
    "read_piecewise_polytrope",
    "quark_matter",
    "phase_transition",
    "spectral",
    "sound_speed_nodes",
    "electron_gas",
    "ConfigError",
    "InputError",
    "RunFileError",
    "TableError",
    "STAR_DATASETS",
    "RunFile",
    "read_run",
    "EOSSequence",
    "analyse_sequence",
    "DEFAULT_STEPS",
    "StepControl",
    "solve_interiors",
    "solve_profiles",
    "InteriorProfiles",
    "run_config",
    "solve_stars",
    "solve_radial_modes",
    "RadialModes",
    "sweep_eos",
]
