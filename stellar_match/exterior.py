"""The exterior Schwarzschild vacuum solution and the surface match.

Outside a static spherical star the metric is the Schwarzschild metric
(Birkhoff's theorem makes it the unique vacuum exterior),

    ds^2 = -(1 - 2GM/(r c^2)) c^2 dt^2 + dr^2 / (1 - 2GM/(r c^2)) + r^2 dOmega^2.

The interior solution fixes M and R; the interior metric function nu is
defined up to a constant, which the match fixes by continuity,
e^nu(R) = 1 - 2GM/(R c^2).  With the log-enthalpy h, hydrostatic equilibrium
gives nu(r) = nu(R) - 2 h(r), so the whole interior lapse follows
(Lindblom 1992, ApJ 398, 569).

Functions here take masses in solar masses and radii in km unless their
name says otherwise (``_geometric`` variants take km for both); astropy
Quantities in any unit of the same dimension are converted (see
:func:`stellar_match.units.to_unit`).

The inverse mapping for atmosphere fits, from the surface redshift and
gravity (or from the radiation radius and redshift) back to (M, R), is exact
and closed-form: with x = 2GM/(Rc^2), 1 + z = (1 - x)^(-1/2) gives
x = 1 - (1 + z)^(-2), and g = GM/(R^2 sqrt(1 - x)) = x c^2 (1 + z) / (2R).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import units
from .errors import InputError

__all__ = [
    "schwarzschild_radius",
    "redshift_at_radius",
    "photon_sphere_radius",
    "isco_radius",
    "surface_gravity",
    "SurfaceMatch",
    "match_surface",
    "BUCHDAHL_COMPACTNESS",
    "BUCHDAHL_REDSHIFT",
    "star_columns",
    "radiation_radius",
    "redshift_velocity",
    "mass_radius_from_surface",
    "mass_radius_from_radiation_radius",
    "mass_radius_grid",
]

#: Largest 2GM/(Rc^2) of any static perfect-fluid star, 8/9 (Buchdahl 1959,
#: Phys. Rev. 116, 1027), i.e. compactness GM/(Rc^2) < 4/9.
BUCHDAHL_COMPACTNESS = 4.0 / 9.0
#: The surface redshift at the Buchdahl bound, (1 - 8/9)^(-1/2) - 1 = 2: no
#: static fluid star has z >= 2.
BUCHDAHL_REDSHIFT = 2.0


def _mass(value, name: str = "mass_msun"):
    return np.asarray(units.to_unit(value, units.MASS_UNIT, name=name), dtype=float)


def _radius(value, name: str = "radius_km"):
    return np.asarray(units.to_unit(value, units.LENGTH_UNIT, name=name), dtype=float)


def schwarzschild_radius(mass_msun):
    """Schwarzschild radius 2GM/c^2 in km for a mass in solar masses (or a mass Quantity)."""
    return 2.0 * units.mass_to_geometric(_mass(mass_msun))


def photon_sphere_radius(mass_msun):
    """Radius of the circular photon orbit, 3GM/c^2, in km."""
    return 3.0 * units.mass_to_geometric(_mass(mass_msun))


def isco_radius(mass_msun):
    """Innermost stable circular orbit of test particles, 6GM/c^2, in km."""
    return 6.0 * units.mass_to_geometric(_mass(mass_msun))


def redshift_at_radius(mass_msun, radius_km):
    """Gravitational redshift z = (1 - 2GM/(rc^2))^(-1/2) - 1 seen from infinity.

    Returns NaN inside the horizon.
    """
    m = units.mass_to_geometric(_mass(mass_msun))
    r = _radius(radius_km)
    with np.errstate(invalid="ignore", divide="ignore"):
        return 1.0 / np.sqrt(1.0 - 2.0 * m / r) - 1.0


def surface_gravity(mass_msun, radius_km):
    """Surface gravity g = GM / (R^2 sqrt(1 - 2GM/(Rc^2))) in cm/s^2."""
    m = units.mass_to_geometric(_mass(mass_msun))
    r = _radius(radius_km)
    with np.errstate(invalid="ignore", divide="ignore"):
        g_geom = m / (r * r * np.sqrt(1.0 - 2.0 * m / r))  # km^-1
    return g_geom * units.ACCELERATION_GEOM_TO_CGS


@dataclass
class SurfaceMatch:
    """Quantities of the exterior metric at the stellar surface.

    Attributes
    ----------
    compactness : ndarray
        GM / (R c^2).
    surface_redshift : ndarray
        z = (1 - 2GM/(Rc^2))^(-1/2) - 1.
    surface_gravity : ndarray
        g in cm/s^2.
    surface_lapse_squared : ndarray
        e^nu(R) = 1 - 2GM/(Rc^2), the matched metric constant.
    central_lapse : ndarray
        e^(nu_c / 2) = e^(nu(R)/2 - h_c): redshift factor of the centre.
    below_buchdahl : ndarray of bool
        True where 2GM/(Rc^2) < 8/9, as every static fluid star must be.
    photon_sphere_outside : ndarray of bool
        True where R < 3GM/c^2: the photon sphere lies outside the star.
    """

    compactness: np.ndarray
    surface_redshift: np.ndarray
    surface_gravity: np.ndarray
    surface_lapse_squared: np.ndarray
    central_lapse: np.ndarray
    below_buchdahl: np.ndarray
    photon_sphere_outside: np.ndarray

    def __repr__(self) -> str:
        c = np.asarray(self.compactness, dtype=float)
        c = c[np.isfinite(c)]
        span = f", compactness {c.min():.4g}-{c.max():.4g}" if c.size else ""
        return f"SurfaceMatch({np.size(self.compactness)} stars{span})"


def match_surface(mass_km, radius_km, central_enthalpy) -> SurfaceMatch:
    """Match interior solutions to the exterior at p = 0 (geometric inputs).

    Parameters
    ----------
    mass_km, radius_km : array_like
        G M / c^2 and R, both in km.
    central_enthalpy : array_like
        Central log-enthalpy h_c of each star.
    """
    m = _radius(mass_km, "mass_km")  # G M / c^2, a length
    r = _radius(radius_km)
    compactness = m / r
    lapse2 = 1.0 - 2.0 * compactness
    with np.errstate(invalid="ignore", divide="ignore"):
        g = m / (r * r * np.sqrt(lapse2)) * units.ACCELERATION_GEOM_TO_CGS
        z = 1.0 / np.sqrt(lapse2) - 1.0
        central = np.sqrt(lapse2) * np.exp(-np.asarray(central_enthalpy, dtype=float))
    return SurfaceMatch(
        compactness=compactness,
        surface_redshift=z,
        surface_gravity=g,
        surface_lapse_squared=lapse2,
        central_lapse=central,
        below_buchdahl=compactness < BUCHDAHL_COMPACTNESS,
        photon_sphere_outside=r < 3.0 * m,
    )


def star_columns(interiors) -> dict[str, np.ndarray]:
    """Match solved interiors (``structure.StarInteriors``) and give the run-file columns.

    Returns the per-star datasets of ``schema.STAR_DATASETS`` (all but
    ``stable``) in their physical units: Msun, km, g/cm^3, dyn/cm^2, cm/s^2, g cm^2;
    with ``schema.OPTIONAL_STAR_DATASETS`` too when the interiors carry a core.
    """
    match = match_surface(interiors.mass, interiors.radius, interiors.central_enthalpy)
    nan = np.full(np.shape(interiors.mass), np.nan)

    def response(values):  # None when the response equations were not solved
        return nan if values is None else np.asarray(values, dtype=float)

    return {
        "central_density": units.density_from_geometric(interiors.central_density),
        "central_energy_density": units.density_from_geometric(interiors.central_energy_density),
        "central_pressure": units.pressure_from_geometric(interiors.central_pressure),
        "mass": units.mass_from_geometric(interiors.mass),
        "radius": np.asarray(interiors.radius, dtype=float),
        "baryon_mass": units.mass_from_geometric(interiors.baryon_mass),
        "compactness": match.compactness,
        "surface_redshift": match.surface_redshift,
        "surface_gravity": match.surface_gravity,
        "love_number_k2": response(interiors.love_number_k2),
        "tidal_deformability": response(interiors.tidal_deformability),
        "moment_of_inertia": response(interiors.moment_of_inertia) * units.MOMENT_OF_INERTIA_GEOM_TO_CGS,
        "binding_energy": units.mass_from_geometric(interiors.baryon_mass - interiors.mass),
        "error_estimate": np.asarray(interiors.error_estimate, dtype=float),
        "star_status": np.asarray(interiors.status, dtype=np.int8),
    } | _core_columns(interiors) | _crust_columns(interiors)


def _core_columns(interiors) -> dict[str, np.ndarray]:
    """``core_radius`` (km) and ``core_mass`` (Msun) of stars of an EOS with a phase transition, else nothing."""
    if getattr(interiors, "core_radius", None) is None:
        return {}
    return {"core_radius": np.asarray(interiors.core_radius, dtype=float),
            "core_mass": units.mass_from_geometric(np.asarray(interiors.core_mass, dtype=float))}


def _crust_columns(interiors) -> dict[str, np.ndarray]:
    """``crust_thickness`` (km), ``crust_mass`` (Msun), ``crust_inertia_fraction`` of an EOS with a crust."""
    if getattr(interiors, "crust_thickness", None) is None:
        return {}
    return {"crust_thickness": np.asarray(interiors.crust_thickness, dtype=float),
            "crust_mass": units.mass_from_geometric(np.asarray(interiors.crust_mass, dtype=float)),
            "crust_inertia_fraction": np.asarray(interiors.crust_inertia_fraction, dtype=float)}


# --- radiation radius, redshift velocity and the inverse mapping ------------------

def radiation_radius(mass_msun, radius_km):
    """The radiation radius R_infinity = R (1 + z) = R / sqrt(1 - 2GM/(Rc^2)), in km.

    The radius a distant observer infers from the flux and temperature of a
    thermal surface (e.g. Lattimer & Prakash 2007, Phys. Rep. 442, 109).
    NaN inside the horizon.
    """
    r = _radius(radius_km)
    return r * (1.0 + redshift_at_radius(mass_msun, r))


def redshift_velocity(surface_redshift):
    """The gravitational redshift as a velocity, c z in km/s (as white-dwarf spectroscopy quotes it)."""
    z = np.asarray(units.to_unit(surface_redshift, units.DIMENSIONLESS, name="surface_redshift"), dtype=float)
    return units.SPEED_OF_LIGHT_KM_S * z


def _redshift(value, name: str = "surface_redshift") -> np.ndarray:
    """z as an array, checked: a static star has 0 < z < 2 (Buchdahl 1959)."""
    z = np.asarray(units.to_unit(value, units.DIMENSIONLESS, name=name), dtype=float)
    bad = ~np.isfinite(z) | (z <= 0) | (z >= BUCHDAHL_REDSHIFT)
    if np.any(bad):
        first = float(z[bad].flat[0])
        raise InputError(f"needs 0 < z < {BUCHDAHL_REDSHIFT:g} (a static star; Buchdahl 1959), got {first!r}",
                         key=name)
    return z


def _compactness_term(z: np.ndarray) -> np.ndarray:
    """x = 2GM/(Rc^2) = 1 - (1 + z)^-2, without cancellation at small z."""
    return -np.expm1(-2.0 * np.log1p(z))


def mass_radius_from_surface(surface_redshift, log10_surface_gravity) -> tuple[np.ndarray, np.ndarray]:
    """(M, R) of the star with surface redshift z and surface gravity log10 g, in closed form.

    The inverse of :func:`redshift_at_radius` and :func:`surface_gravity`:
    x = 2GM/(Rc^2) = 1 - (1 + z)^(-2), R = x c^2 (1 + z) / (2 g), M = x R c^2 / (2G).

    Parameters
    ----------
    surface_redshift : array_like or Quantity
        z, with 0 < z < 2 (beyond 2 no static star exists: Buchdahl 1959).
    log10_surface_gravity : array_like or Quantity
        log10 of g in cm/s^2, or a Quantity in dex(cm/s2) or in an acceleration unit.
        Broadcast against ``surface_redshift``.

    Returns
    -------
    mass : ndarray
        Gravitational mass in Msun.
    radius : ndarray
        Areal radius in km.

    Raises
    ------
    InputError
        One line naming the argument: z outside (0, 2), or a non-finite log10 g.
    """
    z = _redshift(surface_redshift)
    log_g = np.asarray(units.to_unit(log10_surface_gravity, units.LOG_ACCELERATION_UNIT,
                                     name="log10_surface_gravity"), dtype=float)
    if not np.all(np.isfinite(log_g)):
        raise InputError("needs finite values of log10 g (g in cm/s2)", key="log10_surface_gravity")
    z, log_g = np.broadcast_arrays(z, log_g)
    x = _compactness_term(z)
    g_geom = 10.0**log_g / units.ACCELERATION_GEOM_TO_CGS  # km^-1
    radius = x * (1.0 + z) / (2.0 * g_geom)
    return units.mass_from_geometric(0.5 * x * radius), radius


def mass_radius_from_radiation_radius(radiation_radius_km, surface_redshift) -> tuple[np.ndarray, np.ndarray]:
    """(M, R) of the star with radiation radius R_infinity = R (1 + z) and surface redshift z.

    R = R_infinity / (1 + z) and M = x R c^2 / (2G) with x = 1 - (1 + z)^(-2).

    Parameters
    ----------
    radiation_radius_km : array_like or Quantity
        R_infinity in km (> 0).
    surface_redshift : array_like or Quantity
        z, 0 < z < 2; broadcast against ``radiation_radius_km``.

    Returns
    -------
    mass : ndarray
        Msun.
    radius : ndarray
        km.

    Raises
    ------
    InputError
        One line naming the argument: R_infinity not positive and finite, or z outside (0, 2).
    """
    r_inf = _radius(radiation_radius_km, "radiation_radius")
    if not np.all(np.isfinite(r_inf) & (r_inf > 0)):
        raise InputError("needs positive, finite radii (km)", key="radiation_radius")
    z = _redshift(surface_redshift)
    r_inf, z = np.broadcast_arrays(r_inf, z)
    radius = r_inf / (1.0 + z)
    return units.mass_from_geometric(0.5 * _compactness_term(z) * radius), radius


def mass_radius_grid(surface_redshift, *, log10_surface_gravity=None,
                     radiation_radius=None) -> tuple[np.ndarray, np.ndarray]:
    """(M, R) over a whole table: every z against every log10 g (or every R_infinity).

    Parameters
    ----------
    surface_redshift : 1-D array_like or Quantity
        The z axis (rows).
    log10_surface_gravity, radiation_radius : 1-D array_like or Quantity
        The other axis (columns); give exactly one.

    Returns
    -------
    mass, radius : ndarray, shape (len(z), len(other))
        Msun and km; ``mass[i, j]`` belongs to ``z[i]`` and the j-th value of the other axis.

    Raises
    ------
    InputError
        For none or both of the second axes, or an impossible value on either axis.
    """
    if (log10_surface_gravity is None) == (radiation_radius is None):
        raise InputError("give exactly one of log10_surface_gravity or radiation_radius", key="mass_radius_grid")
    z = np.ravel(_redshift(surface_redshift))
    if log10_surface_gravity is not None:
        other = units.to_unit(log10_surface_gravity, units.LOG_ACCELERATION_UNIT, name="log10_surface_gravity")
        zz, oo = np.meshgrid(z, np.ravel(np.asarray(other, dtype=float)), indexing="ij")
        return mass_radius_from_surface(zz, oo)
    other = units.to_unit(radiation_radius, units.LENGTH_UNIT, name="radiation_radius")
    zz, oo = np.meshgrid(z, np.ravel(np.asarray(other, dtype=float)), indexing="ij")
    return mass_radius_from_radiation_radius(oo, zz)
