"""A first-order phase transition on any base EOS, in the constant-sound-speed form.

Alford, Han & Prakash (2013, PRD 88, 083013, eq. 2): below the transition
pressure p_t the base EOS; at p_t the energy density jumps by delta_eps at
constant pressure; above it a phase of constant squared sound speed s,

    eps(p) = eps_base(p)                              for p <= p_t,
    eps(p) = eps_t + delta_eps + (p - p_t) / s        for p > p_t,

with eps_t = eps_base(p_t).  The two phases coexist at p_t with equal
pressure and baryon chemical potential (a Maxwell construction), so in the
log-enthalpy h = ln(mu / mu_s) the jump sits at the single value
h_t = h_base(p_t): the new phase is an exact constant-sound-speed piece
(:mod:`.smooth`) starting at h_t, and the baryon density jumps there by
delta_eps / mu_t.  The structure solver puts a step edge at h_t, applies the
jump condition of the tidal equation there (:mod:`stellar_match.kernels.tov_stepping`
states its exact form) and reports the radius and mass of the core of the
new phase.

A jump larger than Seidov's (1971, Sov. Astron. 15, 347) critical value
delta_eps_crit = eps_t / 2 + 3 p_t / 2 makes a star unstable as soon as a
core of the new phase appears (checked in tests/test_phase_transition.py).
"""

from __future__ import annotations

import numpy as np

from .. import units
from ..errors import InputError, TableError
from . import registry
from .base import EquationOfState, InteriorJumps
from .joined import JoinedEOS
from .smooth import ExpPolynomialPieces, constant_sound_speed_coefficients

__all__ = ["phase_transition", "seidov_critical_jump"]


def seidov_critical_jump(transition_energy_density: float, transition_pressure: float) -> float:
    """delta_eps_crit = eps_t / 2 + 3 p_t / 2 (Seidov 1971); any consistent units (eps and p alike)."""
    return 0.5 * transition_energy_density + 1.5 * transition_pressure


def phase_transition(name: str, base: EquationOfState, transition_pressure: float, energy_density_jump: float,
                     sound_speed_squared: float) -> JoinedEOS:
    """The base EOS up to ``transition_pressure``, then a jump and a constant-sound-speed phase.

    Parameters
    ----------
    name : str
        Label.
    base : EquationOfState
        Any other kind (not itself a phase transition).
    transition_pressure : float or Quantity
        p_t in dyn/cm^2, inside the base's range.
    energy_density_jump : float or Quantity
        delta_eps >= 0 in g/cm^3 (as eps / c^2; a Quantity may be an energy density).
    sound_speed_squared : float
        c_s^2 / c^2 of the new phase, 0 < c_s^2 <= 1.

    Raises
    ------
    InputError
        Naming ``transition_pressure``, ``energy_density_jump`` or
        ``sound_speed_squared``.
    """
    if base.kind == "phase_transition" or base.interior_jumps is not None:
        raise InputError("the base may not itself have a phase transition", key="base.kind")
    p_t, jump, s = (float(units.to_unit(x, unit, name=key)) for x, unit, key in (
        (transition_pressure, units.PRESSURE_UNIT, "transition_pressure"),
        (energy_density_jump, units.DENSITY_UNIT, "energy_density_jump"),
        (sound_speed_squared, units.DIMENSIONLESS, "sound_speed_squared")))
    if not (np.isfinite(p_t) and p_t > 0):
        raise InputError(f"needs a positive pressure (dyn/cm2), got {transition_pressure!r}",
                         key="transition_pressure")
    if not (np.isfinite(jump) and jump >= 0):
        raise InputError(f"needs delta_eps >= 0 (g/cm3), got {energy_density_jump!r}", key="energy_density_jump")
    if not (np.isfinite(s) and 0 < s <= 1):
        raise InputError(f"needs 0 < c_s^2 <= 1 (causality), got {sound_speed_squared!r}",
                         key="sound_speed_squared")
    with np.errstate(all="ignore"):
        h_t = float(base.enthalpy_of_pressure(np.array([units.pressure_to_geometric(p_t)]))[0])
    if not (np.isfinite(h_t) and 0 < h_t < base.h_max):
        top = ""
        if np.isfinite(base.h_max):
            top = f" (it reaches {units.pressure_from_geometric(base.state(np.array([base.h_max]))[0][0]):.4g} dyn/cm2)"
        raise InputError(f"{p_t:.4g} dyn/cm2 lies beyond the base EOS's pressure range{top}",
                         key="transition_pressure")
    p_geo, eps_t, _ = (float(x[0]) for x in base.state(np.array([h_t])))  # the base's own p at h_t: continuity
    delta = units.density_to_geometric(jump)
    A, c = constant_sound_speed_coefficients(p_geo, eps_t + delta + p_geo, s)
    mu_s = base.surface_enthalpy_per_mass
    upper = ExpPolynomialPieces(name=name, kind="phase_transition", lower_h=np.array([h_t]), offset=np.array([A]),
                                coefficients=c[None, :], surface_enthalpy_per_mass=mu_s)
    if isinstance(base, JoinedEOS):
        keep = [i for i, (lo, _) in enumerate(base._ranges) if lo < h_t]
        parts = [base.parts[i] for i in keep] + [upper]
        joins = [j for j in base.joins if j < h_t] + [h_t]
    else:
        parts, joins = [base, upper], [h_t]
    eps_t_cgs = units.density_from_geometric(eps_t)
    p_t_cgs = units.pressure_from_geometric(p_geo)
    c2 = (units.SPEED_OF_LIGHT_SI * 1e2) ** 2
    joined = JoinedEOS(
        name=name, kind="phase_transition", parts=parts, joins=joins,
        interior_jumps=InteriorJumps(np.array([h_t]), np.array([delta]), np.array([p_geo])),
        table_sha256=base.table_sha256,
        parameters={
            "base": {"kind": base.kind, **base.parameters},
            "transition_pressure": p_t, "energy_density_jump": jump, "sound_speed_squared": s,
            "transition_pressure_unit": "dyn/cm2", "energy_density_jump_unit": "g/cm3 (eps/c^2)",
            "transition_enthalpy": h_t,
            "transition_energy_density": eps_t_cgs,
            "seidov_critical_jump": seidov_critical_jump(eps_t_cgs, p_t_cgs / c2),
        },
    )
    # the base's crust, ending at the transition at the latest
    if base.crust_core_enthalpy is not None:
        joined.crust_core_enthalpy = min(float(base.crust_core_enthalpy), h_t)
    return joined


def _parse(reader: registry.KeyReader) -> dict:
    block = reader.table("base")
    base = registry.NOT_GIVEN
    if block is not registry.NOT_GIVEN:
        if block.get("kind") == "phase_transition":
            raise reader.fail("base.kind", "the base may not itself be a phase_transition")
        base = registry.parse_options(block, reader.source, reader.where("base"), reader.base_dir)
    return {
        "base": base,
        "transition_pressure": reader.number("transition_pressure"),
        "energy_density_jump": reader.number("energy_density_jump"),
        "sound_speed_squared": reader.number("sound_speed_squared"),
    }


def _build_base(name: str, kind: str, options: dict) -> EquationOfState:
    """The base EOS, its errors naming ``base.<key>``."""
    try:
        return registry.build_eos(kind, name, options)
    except TableError as exc:
        if exc.row is not None or exc.key:  # a table row or a columns key: it names its own place
            if exc.key and not exc.key.startswith("base."):
                exc.key = f"base.{exc.key}"
            raise
        raise InputError(f"{exc.message} (table {exc.source})", key="base.path") from None
    except InputError as exc:
        raise InputError(exc.message, key=f"base.{exc.key}" if exc.key else "base") from None


def _build(name: str, o: dict) -> JoinedEOS:
    kind, options = o["base"]
    base = _build_base(name, kind, options)
    return phase_transition(name, base, o["transition_pressure"], o["energy_density_jump"],
                            o["sound_speed_squared"])


def _rebuild(name: str, p: dict) -> JoinedEOS:
    base_parameters = dict(p["base"])
    base = registry.rebuild_eos(base_parameters.pop("kind"), name, base_parameters)
    return phase_transition(name, base, p["transition_pressure"], p["energy_density_jump"],
                            p["sound_speed_squared"])


def _density_axis(options: dict) -> bool:
    kind, base_options = options["base"]
    return registry.get_kind(kind).density_axis(base_options)


registry.register(registry.EOSKind(
    name="phase_transition",
    keys=("base", "transition_pressure", "energy_density_jump", "sound_speed_squared"),
    required=("base", "transition_pressure", "energy_density_jump", "sound_speed_squared"),
    parse=_parse,
    build=_build,
    rebuild=_rebuild,
    columns=(registry.Column("transition_pressure"), registry.Column("energy_density_jump"),
             registry.Column("sound_speed_squared")),
    density_axis=_density_axis,
    summary="first-order transition on a base EOS: jump delta_eps at p_t, then constant c_s^2",
    extra_datasets=("core_radius", "core_mass"),
))
