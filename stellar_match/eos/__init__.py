"""Equations of state, one module per family, parametrised by the log-enthalpy.

* :mod:`.base` -- the interface the structure solver uses (:class:`EquationOfState`);
* :mod:`.pieces` -- polytropes, Read et al. piecewise polytropes and tables;
* :mod:`.uniform` -- constant energy density (Schwarzschild 1916);
* :mod:`.smooth` -- pieces p = A + exp(polynomial in h): constant sound speed, smooth EOS;
* :mod:`.quark` -- self-bound bag-model quark matter (Witten 1984; Farhi & Jaffe 1984);
* :mod:`.joined` -- consecutive parts of different families (crust + core, base + new phase);
* :mod:`.transition` -- a first-order phase transition on any base (Alford, Han & Prakash 2013);
* :mod:`.electrons` -- cold white-dwarf matter (Chandrasekhar 1935; Salpeter 1961);
* :mod:`.sound_speed` -- squared sound speed at nodes in ln n on the SLy crust fit;
* :mod:`.spectral_index` -- Lindblom's (2010) spectral adiabatic index on the SLy crust fit;
* :mod:`.stack` -- many members of one family solved as one batch (ensembles);
* :mod:`.registry` -- the kinds by config name: their keys, builders,
  ensemble columns and how to rebuild them from a run file.

Every name of the former module ``stellar_match.eos`` is importable from here.
"""

from . import registry
from .base import EquationOfState, InteriorJumps, central_enthalpy
from .electrons import ElectronGas, electron_gas
from .joined import JoinedEOS
from .pieces import (
    FIRST_LAW_TOLERANCE,
    READ_CORE_DIVIDING_DENSITIES,
    SLY_CRUST,
    PiecewisePolytrope,
    TableColumns,
    from_table,
    polytrope,
    read_piecewise_polytrope,
    read_table_file,
    sly_crust_dividing_densities,
)
from .quark import QuarkMatter, quark_matter
from .smooth import ExpPolynomialPieces
from .sound_speed import sound_speed_nodes
from .spectral_index import spectral
from .stack import BoundEOSStack, EOSStack
from .transition import phase_transition, seidov_critical_jump
from .uniform import Incompressible, incompressible

__all__ = [
    "EquationOfState",
    "InteriorJumps",
    "PiecewisePolytrope",
    "Incompressible",
    "polytrope",
    "read_piecewise_polytrope",
    "from_table",
    "incompressible",
    "SLY_CRUST",
    "central_enthalpy",
    "READ_CORE_DIVIDING_DENSITIES",
    "FIRST_LAW_TOLERANCE",
    "TableColumns",
    "read_table_file",
    "sly_crust_dividing_densities",
    "EOSStack",
    "BoundEOSStack",
    "registry",
    "ExpPolynomialPieces",
    "QuarkMatter",
    "quark_matter",
    "JoinedEOS",
    "phase_transition",
    "seidov_critical_jump",
    "spectral",
    "sound_speed_nodes",
    "ElectronGas",
    "electron_gas",
]
