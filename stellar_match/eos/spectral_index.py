"""Lindblom's (2010, PRD 82, 103011) spectral parametrisation on the SLy crust fit.

Above a reference pressure p_0 the adiabatic index is

    Gamma(x) = (eps + p)/p  dp/d eps = exp(sum_k gamma_k x^k),    x = ln(p / p_0),

with 2 to 4 coefficients gamma_k; below p_0 the EOS is the SLy crust fit of
Read et al. (2009, Table II; :func:`.pieces.sly_crust`), which the spectral
part continues with p and eps continuous at p_0 (Lindblom 2010, eqs. 5-8).
With p = p_0 e^x the first law gives the ordinary differential equations

    d eps/dx = (eps + p) / Gamma(x),    d h/dx = p / (eps + p),

integrated here once, when the EOS is built, by solve_ivp (DOP853, rtol
1e-13) from x = 0 to p = SPECTRAL_MAX_PRESSURE (or to where Gamma -> 0 lets
eps run away: the EOS ends there, ``h_max``).  The result is represented by
quintic Hermite pieces of ln p (:class:`.smooth.SmoothPieces`) on knots every
KNOT_SPACING in x, exact in p, eps and c_s^2 = Gamma p/(eps + p) at the knots
and thermodynamically consistent in between; between knots they deviate
from the ODE solution by about 4e-11 in p, 2e-9 in eps and 1e-7 in c_s^2
(tests/test_spectral.py), at about the cost of a piecewise polytrope (each
knot is a step edge; the pieces replace the solver's density nodes).
"""

from __future__ import annotations

import math

import numpy as np

from .. import units
from ..errors import InputError
from . import registry
from .crust import CRUST_CORE_KEY, SLY_CRUST_CORE_DENSITY, set_crust_core
from .joined import JoinedEOS
from .pieces import sly_crust
from .smooth import SmoothPieces

__all__ = ["spectral", "DEFAULT_REFERENCE_PRESSURE", "spectral_solution"]

#: Default p_0 (dyn/cm^2): on the SLy crust fit at 1.35e14 g/cm^3, about half the nuclear saturation density
#: (this project's choice; the join must sit on the crust fit's last piece).
DEFAULT_REFERENCE_PRESSURE = 5.0e32
#: The join must lie on the last piece of the crust fit, above 2.6278e12 g/cm^3 (Read et al. 2009, Table II)
#: and below 5e14 g/cm^3 (twice saturation density: the crust fit is not meant for the core).
JOIN_DENSITY_RANGE = (2.6278e12, 5.0e14)
#: The spectral part is built up to this pressure (dyn/cm^2), far above the centre of any stable star.
SPECTRAL_MAX_PRESSURE = 1.0e38
#: Knot spacing in x = ln(p / p_0) of the Hermite representation.
KNOT_SPACING = 0.2


def _adiabatic_index(gammas: np.ndarray, x):
    return np.exp(np.polyval(gammas[::-1], x))


def spectral_solution(gammas, p0: float, eps0: float, x_top: float, *, rtol: float = 1e-13):
    """Dense solve_ivp solution of (eps, h - h_0) in x from x = 0 (geometric p0, eps0); None if it fails."""
    from scipy.integrate import solve_ivp

    coefficients = [float(c) for c in gammas][::-1]

    def rhs(x, y):  # plain floats: the right-hand side is called some 600 times per build
        ln_gamma = 0.0
        for c in coefficients:
            ln_gamma = ln_gamma * x + c
        p = p0 * math.exp(x)
        eps = float(y[0])
        try:
            return [(eps + p) * math.exp(-ln_gamma), p / (eps + p)]
        except OverflowError:
            return [math.inf, p / (eps + p)]

    eps_stop = 10.0 * units.pressure_to_geometric(SPECTRAL_MAX_PRESSURE)

    def runaway(x, y):  # Gamma -> 0: eps grows without bound at nearly constant p
        return y[0] - eps_stop

    runaway.terminal = True
    with np.errstate(all="ignore"):
        sol = solve_ivp(rhs, (0.0, x_top), [eps0, 0.0], method="DOP853", rtol=rtol, atol=[eps0 * 1e-16, 1e-16],
                        dense_output=True, events=runaway)
    return sol


def spectral(name: str, gammas, reference_pressure: float = DEFAULT_REFERENCE_PRESSURE,
             crust_core_density: float = SLY_CRUST_CORE_DENSITY) -> JoinedEOS:
    """Spectral EOS Gamma(x) = exp(sum gamma_k x^k) above ``reference_pressure`` on the SLy crust fit.

    Parameters
    ----------
    name : str
        Label.
    gammas : sequence of 2 to 4 floats
        gamma_0 .. gamma_3 (Lindblom 2010).
    reference_pressure : float or Quantity
        p_0 in dyn/cm^2, where x = 0 and the spectral part joins the crust.
    crust_core_density : float or Quantity, optional
        Rest-mass density (g/cm^3) of the crust-core boundary, where the
        crust datasets are measured (:mod:`.crust`); default SLy's.

    Raises
    ------
    InputError
        Naming ``gammas`` or ``reference_pressure``.
    """
    g = np.atleast_1d(np.asarray(units.to_unit(gammas, units.DIMENSIONLESS, name="gammas"), dtype=float))
    if not 2 <= g.size <= 4 or not np.all(np.isfinite(g)):
        raise InputError(f"needs 2 to 4 finite coefficients [gamma0, gamma1, ...], got {list(gammas)!r}",
                         key="gammas")
    p0_cgs = float(units.to_unit(reference_pressure, units.PRESSURE_UNIT, name="reference_pressure"))
    crust = sly_crust(name, "spectral")
    lo, hi = (units.pressure_from_geometric(float(crust.state(crust.enthalpy_of_density(np.array(
        [units.density_to_geometric(rho)])))[0][0])) for rho in JOIN_DENSITY_RANGE)
    if not (np.isfinite(p0_cgs) and lo <= p0_cgs <= hi):
        raise InputError(f"{reference_pressure!r} dyn/cm2 is off the crust fit's last piece ({lo:.3g} to {hi:.3g} "
                         f"dyn/cm2, {JOIN_DENSITY_RANGE[0]:.4g} to {JOIN_DENSITY_RANGE[1]:.3g} g/cm3)",
                         key="reference_pressure")
    h0 = float(crust.enthalpy_of_pressure(np.array([units.pressure_to_geometric(p0_cgs)]))[0])
    p0, eps0, _ = (float(v[0]) for v in crust.state(np.array([h0])))
    x_top = float(np.log(units.pressure_to_geometric(SPECTRAL_MAX_PRESSURE) / p0))
    sol = spectral_solution(g, p0, eps0, x_top)
    x_end = float(sol.t[-1]) if sol.t.size else 0.0
    n_knots = max(int(np.ceil(x_end / KNOT_SPACING)), 1) + 1
    x = np.linspace(0.0, x_end, n_knots)
    with np.errstate(all="ignore"):
        eps, dh = sol.sol(x)
    p = p0 * np.exp(x)
    # valid up to the first knot where eps is no longer finite, exceeds SPECTRAL_MAX_PRESSURE / c^2
    # (Gamma -> 0 makes eps run away at nearly constant p) or h stops increasing
    ok = np.isfinite(eps) & np.isfinite(dh) & (eps > 0) & (eps <= units.pressure_to_geometric(SPECTRAL_MAX_PRESSURE))
    ok[1:] &= np.diff(dh) > 0
    last = int(np.argmin(ok)) if not ok.all() else x.size
    if last < 2 or x[last - 1] < np.log(100.0):
        where = p0_cgs * np.exp(x[max(last - 1, 0)])
        raise InputError(f"gammas {[float(v) for v in g]} make Gamma(x) vanish or overflow at p = {where:.3g} dyn/cm2, "
                         "within two decades above reference_pressure", key="gammas")
    x, eps, dh, p = x[:last], eps[:last], dh[:last], p[:last]
    with np.errstate(all="ignore"):
        cs2 = _adiabatic_index(g, x) * p / (eps + p)
        h = h0 + dh
        core = SmoothPieces.from_knots(name, "spectral", h, p, eps, cs2, crust.surface_enthalpy_per_mass,
                                       h_max=float(h[-1]))
    if not np.all(np.isfinite(core.coefficients)):
        raise InputError(f"gammas {[float(v) for v in g]} make Gamma(x) overflow below "
                         f"{SPECTRAL_MAX_PRESSURE:.0e} dyn/cm2", key="gammas")
    eos = JoinedEOS(name=name, kind="spectral", parts=[crust, core], joins=[h0], parameters={
        "gammas": [float(v) for v in g], "reference_pressure": p0_cgs, "reference_pressure_unit": "dyn/cm2",
        "crust": "SLy (Read et al. 2009)", "maximum_pressure": float(units.pressure_from_geometric(p[-1])),
        "representation": f"quintic Hermite pieces of ln p, knots every {KNOT_SPACING} in ln p",
    })
    eos.density_range = (0.0, float(units.density_from_geometric(eos.state(np.array([eos.h_max]))[2][0])))
    return set_crust_core(eos, crust_core_density)


registry.register(registry.EOSKind(
    name="spectral",
    keys=("gammas", "reference_pressure", CRUST_CORE_KEY),
    required=("gammas",),
    parse=lambda r: {"gammas": r.numbers("gammas", min_count=2, max_count=4, usage="[gamma0, gamma1, ...]"),
                     "reference_pressure": r.number("reference_pressure", default=DEFAULT_REFERENCE_PRESSURE),
                     CRUST_CORE_KEY: r.number(CRUST_CORE_KEY, default=SLY_CRUST_CORE_DENSITY, positive=True)},
    build=lambda name, o: spectral(name, o["gammas"], o["reference_pressure"],
                                   o.get(CRUST_CORE_KEY, SLY_CRUST_CORE_DENSITY)),
    columns=(registry.Column("gammas", element=lambda k: f"gamma{k}", min_count=2, max_count=4),
             registry.Column("reference_pressure", default=DEFAULT_REFERENCE_PRESSURE)),
    summary="Lindblom (2010) spectral Gamma(x) = exp(sum gamma_k x^k) above p_0 on the SLy crust fit",
    extra_datasets=("crust_thickness", "crust_mass", "crust_inertia_fraction"),
))
