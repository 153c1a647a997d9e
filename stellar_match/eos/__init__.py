"""Equations of state, parametrised by the log-enthalpy (see :mod:`.pieces`).

Every name of the former module ``stellar_match.eos`` is importable from
here.
"""

from .pieces import (
    FIRST_LAW_TOLERANCE,
    READ_CORE_DIVIDING_DENSITIES,
    SLY_CRUST,
    BoundEOSStack,
    EOSStack,
    EquationOfState,
    Incompressible,
    PiecewisePolytrope,
    TableColumns,
    central_enthalpy,
    from_table,
    incompressible,
    polytrope,
    read_piecewise_polytrope,
    read_table_file,
    sly_crust_dividing_densities,
)

__all__ = [
    "EquationOfState",
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
]
