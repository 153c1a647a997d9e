"""Squared sound speed given at nodes in ln n, linear between them, on the SLy crust fit.

Above the joining density rho_0 (the first node; rho = m_n n, g/cm^3) the
squared sound speed c_s^2 = dp/d eps is linear in ln n between the nodes
(n_k, c_k) and constant above the last one; below rho_0 the EOS is the SLy
crust fit of Read et al. (2009, Table II).  One integration gives p, eps and
n consistently (zero-temperature first law, d eps = mu dn, dp = n dmu, so
c_s^2 = d ln mu / d ln n): with l = ln n,

    h(l)   = h_0 + int_l0^l c_s^2 dl'                  (quadratic in l on each interval),
    eps + p = (eps_0 + p_0) exp((l - l_0) + (h - h_0)),
    p(l)   = p_0 + int_l0^l c_s^2 (eps + p) dl'        (Gauss-Legendre, 24 points per knot interval),

p and eps continuous at rho_0 (c_s^2 may jump there).  Between knots placed
at every node and at least every KNOT_SPACING in ln p and DENSITY_KNOT_SPACING
in ln n, the EOS is
represented by quintic Hermite pieces of ln p (:class:`.smooth.SmoothPieces`),
exact at the knots; above the last node by an exact constant-sound-speed piece.
"""

from __future__ import annotations

import numpy as np

from .. import units
from ..errors import InputError
from . import registry
from .crust import CRUST_CORE_KEY, SLY_CRUST_CORE_DENSITY, set_crust_core
from .joined import JoinedEOS
from .pieces import sly_crust
from .smooth import ExpPolynomialPieces, SmoothPieces, constant_sound_speed_coefficients
from .spectral_index import JOIN_DENSITY_RANGE

__all__ = ["sound_speed_nodes", "MAX_NODES"]

#: Most nodes an EOS of this kind may have.
MAX_NODES = 16
#: Knot spacing of the Hermite representation: KNOT_SPACING in ln p plus DENSITY_KNOT_SPACING in ln n make
#: one unit (so each is an upper bound).  Measured deviation from an independent integration: 1e-9 in p,
#: 1e-8 in eps and 5e-7 in c_s^2 (tests/test_sound_speed_nodes.py).
KNOT_SPACING = 0.2
DENSITY_KNOT_SPACING = 0.2
_GL_X, _GL_W = np.polynomial.legendre.leggauss(24)


def sound_speed_nodes(name: str, densities, sound_speed_squared,
                      crust_core_density: float = SLY_CRUST_CORE_DENSITY) -> JoinedEOS:
    """EOS with c_s^2 linear in ln n between nodes above ``densities[0]`` on the SLy crust fit.

    Parameters
    ----------
    name : str
        Label.
    densities : sequence of float, or Quantity
        Rest-mass densities rho_k = m_n n_k of the nodes (g/cm^3), strictly increasing, 1 to 16 of
        them; the first is where the EOS leaves the crust fit.
    sound_speed_squared : sequence of float
        c_s^2 / c^2 at the nodes, each in (0, 1].
    crust_core_density : float or Quantity, optional
        Rest-mass density (g/cm^3) of the crust-core boundary, where the
        crust datasets are measured (:mod:`.crust`); default SLy's.

    Raises
    ------
    InputError
        Naming ``densities`` or ``sound_speed_squared``.
    """
    rho = np.atleast_1d(np.asarray(units.to_unit(densities, units.DENSITY_UNIT, name="densities"), dtype=float))
    cs2 = np.atleast_1d(np.asarray(units.to_unit(sound_speed_squared, units.DIMENSIONLESS,
                                                 name="sound_speed_squared"), dtype=float))
    if not 1 <= rho.size <= MAX_NODES or not np.all(np.isfinite(rho)) or np.any(rho <= 0):
        raise InputError(f"needs 1 to {MAX_NODES} positive densities (g/cm3), got {list(densities)!r}",
                         key="densities")
    if np.any(np.diff(rho) <= 0):
        raise InputError("densities must increase strictly from node to node", key="densities")
    if not JOIN_DENSITY_RANGE[0] <= rho[0] <= JOIN_DENSITY_RANGE[1]:
        raise InputError(f"the first node, {rho[0]:.4g} g/cm3, is off the crust fit's last piece "
                         f"({JOIN_DENSITY_RANGE[0]:.4g} to {JOIN_DENSITY_RANGE[1]:.3g} g/cm3)", key="densities")
    if cs2.size != rho.size:
        raise InputError(f"needs one value per node ({rho.size}), got {cs2.size}", key="sound_speed_squared")
    if not np.all(np.isfinite(cs2) & (cs2 > 0) & (cs2 <= 1)):
        raise InputError(f"needs 0 < c_s^2 <= 1 at every node (causality), got {list(sound_speed_squared)!r}",
                         key="sound_speed_squared")
    crust = sly_crust(name, "sound_speed_nodes")
    rho_geo = units.density_to_geometric(rho)
    h0 = float(crust.enthalpy_of_density(rho_geo[:1])[0])
    p0, eps0, _ = (float(v[0]) for v in crust.state(np.array([h0])))
    w0 = eps0 + p0
    l_nodes = np.log(rho_geo)  # ln n up to the constant ln m_n
    knots_l, knots_h, knots_p, knots_cs2 = [l_nodes[0]], [h0], [p0], [cs2[0]]
    for j in range(rho.size - 1):
        la, lb = l_nodes[j], l_nodes[j + 1]
        ca, slope = cs2[j], (cs2[j + 1] - cs2[j]) / (lb - la)
        ha = knots_h[-1]

        def h_of(l, la=la, ca=ca, slope=slope, ha=ha):
            return ha + ca * (l - la) + 0.5 * slope * (l - la) ** 2

        def integrand(l, h_of=h_of, ca=ca, slope=slope, la=la):
            return (ca + slope * (l - la)) * w0 * np.exp((l - l_nodes[0]) + (h_of(l) - h0))

        # d ln p / d l = c_s^2 (eps + p)/p: bounded by its values at the ends of a fine sampling
        fine = np.linspace(la, lb, 65)
        p_fine = knots_p[-1] + np.concatenate([[0.0], np.cumsum(_gauss(integrand, fine[:-1], fine[1:]))])
        # knots uniform in a blend of ln p and ln n: at most KNOT_SPACING in ln p and DENSITY_KNOT_SPACING in
        # ln n apart (where c_s^2 is small, ln p moves slowly but c_s^2 still changes along l)
        blend = np.log(p_fine) / KNOT_SPACING + (fine - la) / DENSITY_KNOT_SPACING
        count = max(int(np.ceil(blend[-1] - blend[0])), 1)
        inner = np.interp(np.linspace(blend[0], blend[-1], count + 1)[1:-1], blend, fine)
        ls = np.concatenate([[la], inner, [lb]])
        ps = knots_p[-1] + np.concatenate([[0.0], np.cumsum(_gauss(integrand, ls[:-1], ls[1:]))])[1:]
        knots_l.extend(ls[1:])
        knots_h.extend(h_of(ls[1:]))
        knots_p.extend(ps)
        knots_cs2.extend(ca + slope * (ls[1:] - la))
    lk, hk, pk, ck = (np.array(v) for v in (knots_l, knots_h, knots_p, knots_cs2))
    wk = w0 * np.exp((lk - l_nodes[0]) + (hk - h0))
    A, c = constant_sound_speed_coefficients(pk[-1], wk[-1], ck[-1])
    top = ExpPolynomialPieces(name=name, kind="sound_speed_nodes", lower_h=hk[-1:], offset=np.array([A]),
                              coefficients=c[None, :], surface_enthalpy_per_mass=crust.surface_enthalpy_per_mass)
    parts, joins = [crust, top], [h0]
    if lk.size > 1:
        core = SmoothPieces.from_knots(name, "sound_speed_nodes", hk, pk, wk - pk, ck,
                                       crust.surface_enthalpy_per_mass, h_max=float(hk[-1]))
        parts, joins = [crust, core, top], [h0, float(hk[-1])]
    return set_crust_core(JoinedEOS(name=name, kind="sound_speed_nodes", parts=parts, joins=joins, parameters={
        "densities": [float(v) for v in rho], "sound_speed_squared": [float(v) for v in cs2],
        "densities_unit": "g/cm3 (rest-mass density m_n n)", "crust": "SLy (Read et al. 2009)",
        "interpolation": "c_s^2 linear in ln n between nodes, constant above the last",
        "representation": f"quintic Hermite pieces of ln p, knots at the nodes and every {KNOT_SPACING} in ln p",
    }), crust_core_density)


def _gauss(f, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Integrals of f over [a_i, b_i] by 24-point Gauss-Legendre quadrature (f smooth on each)."""
    half, mid = 0.5 * (b - a), 0.5 * (b + a)
    x = mid[:, None] + half[:, None] * _GL_X[None, :]
    return half * (f(x) * _GL_W[None, :]).sum(axis=1)


registry.register(registry.EOSKind(
    name="sound_speed_nodes",
    keys=("densities", "sound_speed_squared", CRUST_CORE_KEY),
    required=("densities", "sound_speed_squared"),
    parse=lambda r: {"densities": r.numbers("densities", min_count=1, max_count=MAX_NODES),
                     "sound_speed_squared": r.numbers("sound_speed_squared", min_count=1, max_count=MAX_NODES),
                     CRUST_CORE_KEY: r.number(CRUST_CORE_KEY, default=SLY_CRUST_CORE_DENSITY, positive=True)},
    build=lambda name, o: sound_speed_nodes(name, o["densities"], o["sound_speed_squared"],
                                            o.get(CRUST_CORE_KEY, SLY_CRUST_CORE_DENSITY)),
    columns=(registry.Column("sound_speed_squared", element=lambda k: f"cs2_{k}", length_key="densities"),),
    summary="c_s^2 linear in ln n between nodes above a join on the SLy crust fit",
    extra_datasets=("crust_thickness", "crust_mass", "crust_inertia_fraction"),
))
