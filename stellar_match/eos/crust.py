"""The crust-core boundary of an EOS with a crust: where the crust datasets of a sweep are measured.

An EOS with a crust carries ``crust_core_enthalpy``, the log-enthalpy h_cc
of its crust-core density rho_cc; the structure solver puts a step edge
there and records the state (r, m, frame dragging) as it passes, from which
the sweeps write ``crust_thickness`` R - r_cc, ``crust_mass`` M - m(r_cc)
and ``crust_inertia_fraction`` Delta I_crust / I
(:func:`stellar_match.structure.solve_interiors`).

The kinds on the SLy crust fit of Read et al. (2009) -- ``piecewise_polytrope``,
``spectral`` and ``sound_speed_nodes`` -- have a crust by default, at the
SLy crust-core density below; a ``table`` has one only when its block
declares ``crust_core_density``; a ``phase_transition`` has its base's.
"""

from __future__ import annotations

import numpy as np

from .. import units
from ..errors import InputError
from .base import EquationOfState

__all__ = ["SLY_CRUST_CORE_BARYON_DENSITY_FM3", "SLY_CRUST_CORE_DENSITY", "CRUST_CORE_KEY", "set_crust_core"]

#: Baryon number density at the crust-core transition of the SLy EOS, n_cc = 0.076 fm^-3
#: (Douchin & Haensel 2001, A&A 380, 151; from memory).
SLY_CRUST_CORE_BARYON_DENSITY_FM3 = 0.076
#: ... as a rest-mass density m_n n_cc (g/cm^3), the convention of this package's densities: about 1.27e14.
SLY_CRUST_CORE_DENSITY = SLY_CRUST_CORE_BARYON_DENSITY_FM3 * 1e39 * units.NEUTRON_MASS_G
#: The config key (in an ``[[eos]]`` block, or the ``base`` block of a phase transition) and run-file parameter.
CRUST_CORE_KEY = "crust_core_density"


def set_crust_core(eos: EquationOfState, density) -> EquationOfState:
    """Give ``eos`` a crust ending at rest-mass density ``density`` (g/cm^3 or a Quantity); returns ``eos``.

    Sets ``eos.crust_core_enthalpy`` and records the density in
    ``eos.parameters`` under :data:`CRUST_CORE_KEY` (so a run file's EOS is
    rebuilt with the same boundary).

    Raises
    ------
    InputError
        Naming ``crust_core_density`` for a density that is not positive or
        lies beyond the EOS's range.
    """
    rho = float(units.to_unit(density, units.DENSITY_UNIT, name=CRUST_CORE_KEY))
    if not (np.isfinite(rho) and rho > 0):
        raise InputError(f"needs a positive rest-mass density (g/cm3), got {density!r}", key=CRUST_CORE_KEY)
    with np.errstate(all="ignore"):
        h = float(eos.enthalpy_of_density(np.array([units.density_to_geometric(rho)]))[0])
    if not (np.isfinite(h) and 0 < h < eos.h_max):
        raise InputError(f"{rho:.4g} g/cm3 lies outside the range of EOS {eos.name!r}", key=CRUST_CORE_KEY)
    eos.crust_core_enthalpy = h
    eos.parameters = {**eos.parameters, CRUST_CORE_KEY: rho}
    return eos
