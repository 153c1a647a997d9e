"""Equations of state, one module per family, parametrised by the log-enthalpy.

* :mod:`.base` -- the interface the structure solver uses (:class:`EquationOfState`);
* :mod:`.pieces` -- polytropes, Read et al. piecewise polytropes and tables;
* :mod:`.uniform` -- constant energy density (Schwarzschild 1916);
* :mod:`.stack` -- many members of one family solved as one batch (ensembles);
* :mod:`.registry` -- the kinds by config name: their keys, builders,
  ensemble columns and how to rebuild them from a run file.

Every name of the former module ``stellar_match.eos`` is importable from here.
"""

from . import registry
from .base import EquationOfState, InteriorJumps, central_enthalpy
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
from .stack import BoundEOSStack, EOSStack
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
]
