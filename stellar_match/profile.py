"""One star's profile: the interior on the solver's nodes, the Schwarzschild exterior, and the match.

``stellar_match.profile(source, eos=NAME, mass=M | central_density=RHO |
central_pressure=P, outer_radius=10, branch=1)`` solves one star and returns
a :class:`StarProfile`: a table of columns (:data:`PROFILE_COLUMNS`, in
that order, with their units) from the centre to ``outer_radius`` times R,
and the attributes of the match.  The module itself is callable as that
function (``stellar_match.profile(...)``), so that the package attribute
stays this module (DEVELOPERS.md: never name a module like its function).

Interior
--------
The nodes are the solver's own (:func:`stellar_match.structure.solve_profiles`:
the steps the star was accepted on, so M, R and M_b are those of a sweep bit
for bit).  Between consecutive nodes ``refine`` more points are placed evenly
in h, where the state (u = r^2, v = m/r^3, w = m_b/r^3, omega-bar, psi) is
the cubic Hermite interpolant of its node values and its derivatives d/dh
from the structure equations (:func:`stellar_match.structure.response_rhs`,
evaluated at each end with the EOS piece of the interval itself, so kinks
and jumps of the EOS are honoured); p, eps, rho and c_s^2 there come from
the EOS at the point's h exactly.  The interval from the centre to the
hand-over of the central series (x_0 = 1e-4 h_c) is not refined.  The
metric is exact in h: e^nu = (1 - 2M/R) e^(-2h) (Lindblom 1992, ApJ 398,
569) and e^lambda = 1/(1 - 2m/r).  The proper radial distance
l = int e^(lambda/2) dr is the trapezoid sum over the refined points inside
and the closed form outside.

Exterior
--------
Schwarzschild: e^nu = 1 - 2M/r = 1/e^lambda, m = M, p = eps = rho = 0,
omega/Omega = 2 I / r^3, on points geometric in r from R to
``outer_radius`` R, with rows at the photon sphere 3M and the ISCO 6M when
they lie outside the star.

The match
---------
``match_g_tt``, ``match_g_rr`` and ``match_dnu_dr`` are the relative jumps
(exterior - interior) / interior at R of e^nu, e^lambda and
d nu/dr = 2 r (v + 4 pi p) / (1 - 2m/r) (p = 0 at the surface).
"""

from __future__ import annotations

import os
import sys
import tempfile
import types
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import units
from .eos import EquationOfState, central_enthalpy
from .errors import InputError
from .structure import DEFAULT_STEPS, FOUR_PI, StepControl, response_rhs, solve_profiles

__all__ = ["PROFILE_COLUMNS", "StarProfile", "profile", "load_source_eos", "write_profile", "profile_figure"]

#: The profile's columns in order: name -> (unit, meaning).  Units in astropy's spelling (see schema.py).
PROFILE_COLUMNS: dict[str, tuple[str, str]] = {
    "radius": ("km", "areal radius r"),
    "proper_distance": ("km", "proper radial distance from the centre, int e^(lambda/2) dr"),
    "enclosed_mass": ("solMass", "gravitational mass m(r) inside r"),
    "enclosed_baryon_mass": ("solMass", "baryon mass m_b(r) inside r"),
    "pressure": ("dyn / cm2", "pressure p"),
    "energy_density": ("g / cm3", "energy density eps / c^2"),
    "rest_mass_density": ("g / cm3", "rest-mass density rho"),
    "enthalpy": ("", "log-enthalpy h (NaN outside the star)"),
    "sound_speed_squared": ("", "c_s^2 / c^2 (NaN outside the star)"),
    "g_tt_magnitude": ("", "e^nu, g_tt = -e^nu"),
    "g_rr": ("", "e^lambda = (1 - 2Gm/(rc^2))^-1"),
    "frame_dragging_ratio": ("", "omega / Omega, the angular velocity of the local inertial frames over the star's"),
    "region": ("", "interior (core, crust, high-density phase) or exterior (photon sphere, ISCO); see region_meaning"),
}
#: The values of the ``region`` column.
REGIONS = {
    "interior": "inside the star (an EOS without crust or phase markers)",
    "interior core": "inside the crust-core boundary (rest-mass density above crust_core_density)",
    "interior crust": "the crust: between the crust-core boundary and the surface",
    "interior high-density phase": "inside the first interior density jump (the core of the new phase)",
    "exterior": "outside the star: the Schwarzschild metric",
    "exterior photon sphere": "the circular photon orbit r = 3GM/c^2",
    "exterior isco": "the innermost stable circular orbit r = 6GM/c^2",
}
#: Points per interval added between the solver's nodes, and exterior points.
DEFAULT_REFINE = 4
EXTERIOR_POINTS = 200


@dataclass
class StarProfile:
    """One matched star from the centre to the far field.

    Attributes
    ----------
    columns : dict of str -> ndarray
        The columns of :data:`PROFILE_COLUMNS`, in physical units, in order.
    attributes : dict
        ``mass`` (Msun), ``radius`` (km), ``baryon_mass`` (Msun), ``match_g_tt``,
        ``match_g_rr``, ``match_dnu_dr``, the EOS ``eos_name``, ``eos_kind``,
        ``eos_parameters`` (JSON), the central value chosen by and the others,
        ``photon_sphere_radius`` and ``isco_radius`` (km; NaN inside the
        star), boundary radii (``crust_core_radius``, ``transition_radius``),
        ``outer_radius`` (multiples of R), ``interpolation``.
    """

    columns: dict[str, np.ndarray]
    attributes: dict = field(default_factory=dict)

    def __repr__(self) -> str:
        a = self.attributes
        return (f"StarProfile({a.get('eos_name')!r}: M {a['mass']:.4g} Msun, R {a['radius']:.4g} km, "
                f"{len(self.columns['radius'])} rows)")

    def table(self):
        """The profile as an astropy Table with units and the attributes in ``meta``."""
        from astropy.table import Table

        t = Table()
        for name, (unit, meaning) in PROFILE_COLUMNS.items():
            t[name] = self.columns[name]
            if unit:
                t[name].unit = unit
            t[name].description = meaning
        t.meta.update(self.attributes)
        return t


# --- choosing the star ---------------------------------------------------------------------------

def load_source_eos(source, name: str | None):
    """(EOS, its sequence or None, step control, sweep axis or None) of EOS ``name`` in a config or run file.

    ``source`` may also be an EOS object (no sequence, the default control).  A config gives its
    ``[sweep]`` axis, along which :func:`profile` sweeps the EOS when it chooses a star by mass.
    """
    if isinstance(source, EquationOfState):
        return source, None, DEFAULT_STEPS, None
    path = Path(source)
    if not path.is_file():
        raise InputError("not found (give a TOML config or an HDF5 run file)", source=str(path))
    if path.suffix.lower() in (".h5", ".hdf5"):
        from .exports import control_of_run
        from .runfile import read_run
        from .sweep import eos_from_sequence

        run = read_run(path)
        names = list(run.eos)
        if name is None and len(names) == 1:
            name = names[0]
        if name not in run.eos:
            raise InputError(f"unknown EOS {name!r} (the run file has: {', '.join(names) or 'none'})", key="eos",
                             source=str(path))
        seq = run.eos[name]
        return eos_from_sequence(seq), seq, control_of_run(run), None
    from .config import load_config

    config = load_config(path)
    names = [s.name for s in config.eos]
    if name is None and len(names) == 1:
        name = names[0]
    if name not in names:
        raise InputError(f"unknown EOS {name!r} (the config has: {', '.join(names) or 'none'})", key="eos",
                         source=str(path))
    spec = config.eos[names.index(name)]
    return spec.build(), None, config.solver.control(), config.axis


def _sequence_for(eos, control, axis=None):
    """A sweep of ``eos`` along ``axis`` (a config's), else over its range: for the choice by mass."""
    from .sweep import sweep_eos

    if axis is not None:
        return sweep_eos(eos, axis.quantity, axis.values, control=control)
    if eos.density_axis:
        top = units.density_from_geometric(float(eos.state(np.array([min(eos.h_max, 2.0)]))[2][0]))
        values = np.geomspace(1e14 if top > 1e15 else top * 1e-3, min(top, 1e16), 96)
        return sweep_eos(eos, "central_density", values, control=control)
    top = units.pressure_from_geometric(float(eos.state(np.array([min(eos.h_max, 2.0)]))[0][0]))
    return sweep_eos(eos, "central_pressure", np.geomspace(top * 1e-6, top, 96), control=control)


def _rising_branches(seq) -> list[tuple[np.ndarray, np.ndarray]]:
    """(ln central value, mass) of every run of the sweep with dM/d(central value) > 0, in order."""
    axis = "central_density" if np.ptp(np.asarray(seq["central_density"], dtype=float)) > 0 else "central_pressure"
    x = np.asarray(seq[axis], dtype=float)
    m = np.asarray(seq["mass"], dtype=float)
    order = np.argsort(x)
    x, m = np.log(x[order]), m[order]
    ok = np.isfinite(m)
    x, m = x[ok], m[ok]
    rising = np.diff(m) > 0
    out, start = [], None
    for i, r in enumerate(np.append(rising, False)):
        if r and start is None:
            start = i
        elif not r and start is not None:
            out.append((x[start:i + 1], m[start:i + 1]))
            start = None
    return out, axis


def _central_enthalpy_at_mass(eos, seq, mass: float, branch: int, control) -> float:
    from .sweep import stars_at_masses

    m_max = float(seq.summary.get("max_mass", np.nan))
    if branch == 1:
        if np.isfinite(m_max) and mass > m_max:
            raise InputError(f"{mass:g} Msun is above the maximum mass {m_max:.4f} Msun of EOS {eos.name!r}",
                             key="mass")
        stars = stars_at_masses(eos, seq, [mass], control=control)
        if not np.isfinite(stars["mass"][0]):
            raise InputError(f"{mass:g} Msun is not on the stable branch of EOS {eos.name!r}", key="mass")
        axis = "central_density" if eos.density_axis else "central_pressure"
        return float(central_enthalpy(eos, axis, stars[axis])[0])
    branches, axis = _rising_branches(seq)
    if branch > len(branches):
        raise InputError(f"EOS {eos.name!r} has {len(branches)} rising branch(es) in its sweep, not {branch}",
                         key="branch")
    x, m = branches[branch - 1]
    k = np.flatnonzero((m[:-1] <= mass) & (mass <= m[1:]))
    if not k.size:
        raise InputError(f"{mass:g} Msun is not on branch {branch} of EOS {eos.name!r} "
                         f"({m.min():.4f}-{m.max():.4f} Msun)", key="mass")
    from .sweep import solve_stars

    a, b = x[k[0]], x[k[0] + 1]

    def miss(lx):
        return float(solve_stars(eos, control=control, **{axis: np.exp([lx])})["mass"][0]) - mass

    fa = miss(a)
    for _ in range(60):  # bisection in ln(central value): the branch is monotone here
        mid = 0.5 * (a + b)
        fm = miss(mid)
        if (fm < 0) == (fa < 0):
            a, fa = mid, fm
        else:
            b = mid
        if abs(b - a) < 1e-13:
            break
    return float(central_enthalpy(eos, axis, np.exp([0.5 * (a + b)]))[0])


# --- the profile -------------------------------------------------------------------------------

def _derivative(eos, h_end, h_mid, state):
    """d(u, v, w, y, omega, psi)/dh at ``h_end`` with the EOS piece that contains ``h_mid``."""
    coeff = {k: v[eos.piece_index(h_mid)] for k, v in eos.piece_arrays().items()}
    h_eval = np.maximum(h_end, 1e-300)
    p, eps, rho = eos.state_from_coefficients(h_eval, coeff)
    slope = eos.slope_from_coefficients(p, eps, coeff, h_eval)
    return response_rhs(h_eval, state, p, eps, rho, slope)


def _interior(eos, prof, refine: int):
    """Refined interior arrays (geometric) from the solver's nodes of star 0."""
    s = prof.star(0)
    h = s["enthalpy"]
    u = s["radius"] ** 2
    with np.errstate(all="ignore"):
        v = np.where(u > 0, s["mass"] / (u * s["radius"]), FOUR_PI * s["energy_density"] / 3.0)
        w = np.where(u > 0, s["baryon_mass"] / (u * s["radius"]), FOUR_PI * s["rest_mass_density"] / 3.0)
    state = np.stack([u, v, w, np.zeros_like(u), s["frame_dragging"], s["frame_dragging_flux"]])
    h0, h1 = h[1:-1], h[2:]  # intervals after the centre one
    mid = 0.5 * (h0 + h1)
    d0 = _derivative(eos, h0, mid, state[:, 1:-1])
    d1 = _derivative(eos, h1, mid, state[:, 2:])
    t = np.arange(1, refine + 1) / (refine + 1)
    dh = h1 - h0
    # cubic Hermite basis on each interval, t in (0, 1)
    b00 = 2 * t**3 - 3 * t**2 + 1
    b10 = t**3 - 2 * t**2 + t
    b01 = -2 * t**3 + 3 * t**2
    b11 = t**3 - t**2
    inner = (state[:, 1:-1, None] * b00 + d0[:, :, None] * dh[None, :, None] * b10
             + state[:, 2:, None] * b01 + d1[:, :, None] * dh[None, :, None] * b11)
    h_inner = h0[:, None] + dh[:, None] * t[None, :]
    # interleave: node k, its refined points, node k + 1, ...
    rows_h = [h[:2]]
    rows_y = [state[:, :2]]
    for k in range(h0.size):
        rows_h += [h_inner[k], h1[k:k + 1]]
        rows_y += [inner[:, k, :], state[:, 2 + k:3 + k]]
    hh = np.concatenate(rows_h)
    yy = np.concatenate(rows_y, axis=1)
    node = np.concatenate([[True, True]] + [[False] * refine + [True]] * h0.size)
    return hh, yy, node


def _region(eos, h, prefix="interior"):
    out = np.full(h.shape, prefix, dtype=object)
    crust = getattr(eos, "crust_core_enthalpy", None)
    if crust is not None:
        out[:] = "interior core"
        out[h <= crust] = "interior crust"
    jumps = getattr(eos, "interior_jumps", None)
    if jumps is not None:
        out[h > float(np.ravel(jumps.h)[0])] = "interior high-density phase"
    return out


def profile(source, *, eos: str | None = None, mass=None, central_density=None, central_pressure=None,
            outer_radius: float = 10.0, branch: int = 1, refine: int = DEFAULT_REFINE,
            control: StepControl | None = None) -> StarProfile:
    """Solve one star and return its profile from the centre to ``outer_radius`` R.

    Parameters
    ----------
    source : str, Path or EquationOfState
        A TOML config or an HDF5 run file (its EOS rebuilt from the run's
        parameters), or an EOS object.
    eos : str, optional
        The EOS's name in ``source`` (may be left out when there is one).
    mass, central_density, central_pressure : float or Quantity
        Exactly one: the gravitational mass (Msun; the star of that mass on
        branch ``branch``), the central rest-mass density (g/cm^3) or the
        central pressure (dyn/cm^2).
    outer_radius : float
        The exterior reaches this multiple of R (> 1; default 10).
    branch : int
        With ``mass``: 1 is the ordinary stable branch (up to M_max, the
        star of ``stars_at_masses``); 2, 3, ... the next branches on which
        the mass rises with the central value again (twin stars of a third
        family) in the sweep of the source.
    refine : int
        Points added between consecutive solver nodes (cubic Hermite in h).
    control : StepControl, optional
        Solver accuracy knobs; default the source's (a config's ``[solver]``,
        a run's), else the defaults.

    Raises
    ------
    InputError
        For an unknown EOS, not exactly one of the three choices, a mass
        above M_max or off the branch, a central value outside the EOS, a
        star that cannot be computed to tolerance.
    """
    given = [k for k, v in (("mass", mass), ("central_density", central_density),
                            ("central_pressure", central_pressure)) if v is not None]
    if len(given) != 1:
        raise InputError("give exactly one of mass, central_density or central_pressure", key="mass")
    outer = float(units.to_unit(outer_radius, units.DIMENSIONLESS, name="outer_radius"))
    if not (np.isfinite(outer) and outer > 1.0):
        raise InputError(f"needs a multiple of R above 1, got {outer_radius!r}", key="outer_radius")
    if isinstance(branch, bool) or not isinstance(branch, int | np.integer) or branch < 1:
        raise InputError(f"needs a whole number >= 1, got {branch!r}", key="branch")
    the_eos, seq, source_control, axis = load_source_eos(source, eos)
    control = control or source_control
    if mass is not None:
        m = float(units.to_unit(mass, units.MASS_UNIT, name="mass"))
        if not (np.isfinite(m) and m > 0):
            raise InputError(f"needs a positive mass (Msun), got {mass!r}", key="mass")
        if seq is None:
            seq = _sequence_for(the_eos, control, axis)
        h_c = _central_enthalpy_at_mass(the_eos, seq, m, int(branch), control)
    else:
        quantity = given[0]
        value = central_density if quantity == "central_density" else central_pressure
        try:
            h_c = float(central_enthalpy(the_eos, quantity, np.atleast_1d(value))[0])
        except InputError as exc:
            raise InputError(exc.message, key=quantity) from None
    return _profile_at(the_eos, h_c, outer, refine, control, chosen_by=given[0])


def _profile_at(eos, h_c: float, outer: float, refine: int, control, chosen_by: str) -> StarProfile:
    stars, prof = solve_profiles(eos, np.array([h_c]), control=control, response=True)
    if stars.status[0] != 0:
        from .schema import STAR_STATUS

        raise InputError(f"the star at h_c = {h_c:.6g} could not be computed: star_status {stars.status[0]} "
                         f"({STAR_STATUS.get(int(stars.status[0]), 'unknown')})", key=chosen_by)
    M, R, Mb = float(stars.mass[0]), float(stars.radius[0]), float(stars.baryon_mass[0])
    I = float(stars.moment_of_inertia[0])
    hh, yy, _ = _interior(eos, prof, max(int(refine), 0))
    u, v, w, omega, psi = yy[0], yy[1], yy[2], yy[4], yy[5]
    r = np.sqrt(u)
    r3 = u * r
    with np.errstate(all="ignore"):
        p, eps, rho = eos.state(hh)
        cs2 = eos.sound_speed_squared(np.maximum(hh, 1e-300))
    p[0], eps[0], rho[0] = stars.central_pressure[0], stars.central_energy_density[0], stars.central_density[0]
    lapse = 1.0 - 2.0 * M / R
    g_tt = lapse * np.exp(-2.0 * hh)
    g_rr = 1.0 / (1.0 - 2.0 * u * v)
    J = R**5 * psi[-1] / np.sqrt(lapse) / 6.0
    spin = omega[-1] + 2.0 * J / R**3
    drag = 1.0 - omega / spin
    # at an interior jump the node is both sides: repeat it, the inner side with the inner piece's values
    region = _region(eos, hh)
    jumps = getattr(eos, "interior_jumps", None)
    rows = np.arange(hh.size)
    if jumps is not None:
        at = np.flatnonzero(np.isin(hh, np.ravel(jumps.h)))
        rows = np.insert(rows, at, at)
    cols = {k: a[rows] for k, a in dict(r=r, m=v * r3, mb=w * r3, p=p, eps=eps, rho=rho, h=hh, cs2=cs2,
                                        g_tt=g_tt, g_rr=g_rr, drag=drag, region=region).items()}
    if jumps is not None:
        for k in np.flatnonzero(np.diff(rows) == 0):  # row k: inner side
            piece = eos.piece_index(np.array([hh[rows[k]] * (1 + 1e-12)]))
            coeff = {n: t[piece] for n, t in eos.piece_arrays().items()}
            pk, ek, rk = eos.state_from_coefficients(hh[rows[k]: rows[k] + 1], coeff)
            cols["p"][k], cols["eps"][k], cols["rho"][k] = pk[0], ek[0], rk[0]
            cols["region"][k] = "interior high-density phase"
            cols["region"][k + 1] = _region(eos, np.array([hh[rows[k]] * (1 - 1e-12)]))[0]
    # proper distance: trapezoid in r of e^(lambda/2) inside
    root = np.sqrt(cols["g_rr"])
    ell = np.concatenate([[0.0], np.cumsum(0.5 * (root[1:] + root[:-1]) * np.diff(cols["r"]))])
    # exterior
    r_ext = np.geomspace(R, outer * R, EXTERIOR_POINTS)[1:]
    marks = {"exterior photon sphere": 3.0 * M, "exterior isco": 6.0 * M}
    marked = {k: x for k, x in marks.items() if R < x <= outer * R}
    r_ext = np.concatenate([r_ext, list(marked.values())])
    reg_ext = np.array(["exterior"] * (EXTERIOR_POINTS - 1) + list(marked), dtype=object)
    order = np.argsort(r_ext, kind="stable")
    r_ext, reg_ext = r_ext[order], reg_ext[order]

    def schwarzschild_distance(x):
        return np.sqrt(x * (x - 2 * M)) + 2 * M * np.log(np.sqrt(x) + np.sqrt(x - 2 * M))

    f_ext = 1.0 - 2.0 * M / r_ext
    ext = dict(r=r_ext, m=np.full(r_ext.size, M), mb=np.full(r_ext.size, Mb), p=np.zeros(r_ext.size),
               eps=np.zeros(r_ext.size), rho=np.zeros(r_ext.size), h=np.full(r_ext.size, np.nan),
               cs2=np.full(r_ext.size, np.nan), g_tt=f_ext, g_rr=1.0 / f_ext, drag=2.0 * I / r_ext**3,
               region=reg_ext)
    ell_ext = ell[-1] + schwarzschild_distance(r_ext) - schwarzschild_distance(R)
    # the match at R: interior surface row against the exterior formulas at r = R
    f_R = 1.0 - 2.0 * M / R
    dnu_int = 2.0 * R * (v[-1] + FOUR_PI * p[-1]) / (1.0 - 2.0 * u[-1] * v[-1])
    dnu_ext = 2.0 * M / R**2 / f_R
    attrs = {
        "mass": units.mass_from_geometric(M), "radius": R, "baryon_mass": units.mass_from_geometric(Mb),
        "match_g_tt": float((f_R - g_tt[-1]) / g_tt[-1]),
        "match_g_rr": float((1.0 / f_R - g_rr[-1]) / g_rr[-1]),
        "match_dnu_dr": float((dnu_ext - dnu_int) / dnu_int),
        "eos_name": eos.name, "eos_kind": eos.kind, "eos_parameters": _json(eos.parameters),
        "chosen_by": chosen_by,
        "central_density": float(units.density_from_geometric(stars.central_density[0])),
        "central_pressure": float(units.pressure_from_geometric(stars.central_pressure[0])),
        "central_enthalpy": float(h_c),
        "moment_of_inertia": I * units.MOMENT_OF_INERTIA_GEOM_TO_CGS,
        "photon_sphere_radius": 3.0 * M if 3.0 * M > R else float("nan"),
        "isco_radius": 6.0 * M if 6.0 * M > R else float("nan"),
        "outer_radius": outer, "solver_nodes": int(prof.n_nodes[0]), "refine": int(refine),
        "interpolation": f"cubic Hermite in h between the solver's nodes ({refine} points per interval) using "
                         "the structure equations' d/dh; EOS values exact at every h",
        "region_meaning": _json(REGIONS),
    }
    if stars.crust_thickness is not None:
        attrs["crust_core_radius"] = R - float(stars.crust_thickness[0])
        attrs["crust_thickness"] = float(stars.crust_thickness[0])
        attrs["crust_mass"] = float(units.mass_from_geometric(stars.crust_mass[0]))
        attrs["crust_inertia_fraction"] = float(stars.crust_inertia_fraction[0])
    if stars.core_radius is not None:
        attrs["transition_radius"] = float(stars.core_radius[0])
    columns = {
        "radius": np.concatenate([cols["r"], ext["r"]]),
        "proper_distance": np.concatenate([ell, ell_ext]),
        "enclosed_mass": units.mass_from_geometric(np.concatenate([cols["m"], ext["m"]])),
        "enclosed_baryon_mass": units.mass_from_geometric(np.concatenate([cols["mb"], ext["mb"]])),
        "pressure": units.pressure_from_geometric(np.concatenate([cols["p"], ext["p"]])),
        "energy_density": units.density_from_geometric(np.concatenate([cols["eps"], ext["eps"]])),
        "rest_mass_density": units.density_from_geometric(np.concatenate([cols["rho"], ext["rho"]])),
        "enthalpy": np.concatenate([cols["h"], ext["h"]]),
        "sound_speed_squared": np.concatenate([cols["cs2"], ext["cs2"]]),
        "g_tt_magnitude": np.concatenate([cols["g_tt"], ext["g_tt"]]),
        "g_rr": np.concatenate([cols["g_rr"], ext["g_rr"]]),
        "frame_dragging_ratio": np.concatenate([cols["drag"], ext["drag"]]),
        "region": np.concatenate([cols["region"], ext["region"]]).astype(str),
    }
    return StarProfile(columns, attrs)


def _json(value) -> str:
    import json

    return json.dumps(value, default=str)


# --- files and figure ------------------------------------------------------------------------

def write_profile(prof: StarProfile, path: str | Path) -> Path:
    """Write a profile as HDF5 (``.h5``/``.hdf5``: one dataset per column, ``unit`` attributes) or ECSV.

    The file appears whole or not at all (a temporary file in the same folder, then renamed).
    """
    from .exports import check_output_path

    path = check_output_path(path, (".h5", ".hdf5", ".ecsv"))
    if not path.parent.is_dir():
        raise InputError("folder does not exist; create it first", source=str(path.parent))
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=path.suffix, dir=path.parent)
    os.close(fd)
    try:
        if path.suffix.lower() == ".ecsv":
            prof.table().write(tmp, format="ascii.ecsv", overwrite=True)
        else:
            _write_hdf5(prof, Path(tmp))
        os.replace(tmp, path)
    except OSError as exc:
        Path(tmp).unlink(missing_ok=True)
        raise InputError(f"cannot write here ({exc.strerror or exc})", source=str(path)) from None
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def _write_hdf5(prof: StarProfile, path: Path) -> None:
    import h5py

    with h5py.File(path, "w") as f:
        f.attrs["format"] = "stellar_match.profile"
        for k, v in prof.attributes.items():
            f.attrs[k] = v
        for name, (unit, meaning) in PROFILE_COLUMNS.items():
            data = prof.columns[name]
            if name == "region":
                d = f.create_dataset(name, data=np.asarray(data, dtype=object), dtype=h5py.string_dtype())
            else:
                d = f.create_dataset(name, data=np.asarray(data, dtype=float))
            d.attrs["unit"] = unit
            d.attrs["description"] = meaning


def read_profile(path: str | Path) -> StarProfile:
    """Read a profile written by :func:`write_profile` (HDF5 or ECSV)."""
    path = Path(path)
    if path.suffix.lower() == ".ecsv":
        from astropy.table import Table

        t = Table.read(path, format="ascii.ecsv")
        return StarProfile({k: np.asarray(t[k]) for k in PROFILE_COLUMNS}, dict(t.meta))
    import h5py

    with h5py.File(path, "r") as f:
        cols = {k: (f[k].asstr()[()] if k == "region" else f[k][()]) for k in PROFILE_COLUMNS}
        return StarProfile(cols, dict(f.attrs))


def profile_figure(prof: StarProfile, path: str | Path | None = None):
    """Density and pressure, and e^nu and e^lambda, against r/R across the surface; returns the Figure.

    Colours from :func:`stellar_match.plots.palette` (Okabe-Ito); written to ``path`` when given.
    """
    import matplotlib

    if path is not None:
        matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure

    from .plots import palette

    c = prof.columns
    R = prof.attributes["radius"]
    x = c["radius"] / R
    colours = palette(4)
    fig = Figure(figsize=(10, 4.2), layout="constrained")
    ax1, ax2 = fig.subplots(1, 2)
    (line_rho,) = ax1.plot(x, c["rest_mass_density"], color=colours[0], label="rest-mass density",
                           gid="rest_mass_density")
    ax1.set_xlabel("r / R")
    ax1.set_ylabel(r"$\rho$ [g cm$^{-3}$]")
    ax1b = ax1.twinx()
    (line_p,) = ax1b.plot(x, c["pressure"], color=colours[1], ls="--", label="pressure", gid="pressure")
    ax1b.set_ylabel(r"$p$ [dyn cm$^{-2}$]")
    for ax in (ax1, ax2):
        ax.axvline(1.0, color="0.5", lw=0.8)
    ax1.legend(handles=[line_rho, line_p], loc="upper right")
    ax2.plot(x, c["g_tt_magnitude"], color=colours[2], label=r"$e^{\nu} = -g_{tt}$", gid="g_tt_magnitude")
    ax2.plot(x, c["g_rr"], color=colours[3], ls="--", label=r"$e^{\lambda} = g_{rr}$", gid="g_rr")
    for key, label in (("photon_sphere_radius", "photon sphere"), ("isco_radius", "ISCO")):
        rr = prof.attributes.get(key, np.nan)
        if np.isfinite(rr):
            ax2.axvline(rr / R, color="0.3", ls=":", lw=0.8)
            ax2.annotate(label, (rr / R, 0.02), xycoords=("data", "axes fraction"), rotation=90, fontsize=8)
    ax2.set_xlabel("r / R")
    ax2.set_ylabel("metric function (dimensionless)")
    ax2.legend(loc="right")
    a = prof.attributes
    fig.suptitle(f"{a['eos_name']}: M = {a['mass']:.4f} M$_\\odot$, R = {R:.3f} km")
    if path is not None:
        fig.savefig(path)
    return fig


class _CallableModule(types.ModuleType):
    """This module, callable as :func:`profile` (``stellar_match.profile(...)``)."""

    def __call__(self, *args, **kwargs):
        return profile(*args, **kwargs)


sys.modules[__name__].__class__ = _CallableModule
