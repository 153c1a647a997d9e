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
name says otherwise (``_geometric`` variants take km for both).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import units

__all__ = [
    "schwarzschild_radius",
    "redshift_at_radius",
    "photon_sphere_radius",
    "isco_radius",
    "surface_gravity",
    "SurfaceMatch",
    "match_surface",
    "BUCHDAHL_COMPACTNESS",
    "star_columns",
]

#: Largest 2GM/(Rc^2) of any static perfect-fluid star, 8/9 (Buchdahl 1959,
#: Phys. Rev. 116, 1027), i.e. compactness GM/(Rc^2) < 4/9.
BUCHDAHL_COMPACTNESS = 4.0 / 9.0


def schwarzschild_radius(mass_msun):
    """Schwarzschild radius 2GM/c^2 in km for a mass in solar masses."""
    return 2.0 * units.mass_to_geometric(np.asarray(mass_msun, dtype=float))


def photon_sphere_radius(mass_msun):
    """Radius of the circular photon orbit, 3GM/c^2, in km."""
    return 3.0 * units.mass_to_geometric(np.asarray(mass_msun, dtype=float))


def isco_radius(mass_msun):
    """Innermost stable circular orbit of test particles, 6GM/c^2, in km."""
    return 6.0 * units.mass_to_geometric(np.asarray(mass_msun, dtype=float))


def redshift_at_radius(mass_msun, radius_km):
    """Gravitational redshift z = (1 - 2GM/(rc^2))^(-1/2) - 1 seen from infinity.

    Returns NaN inside the horizon.
    """
    m = units.mass_to_geometric(np.asarray(mass_msun, dtype=float))
    r = np.asarray(radius_km, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        return 1.0 / np.sqrt(1.0 - 2.0 * m / r) - 1.0


def surface_gravity(mass_msun, radius_km):
    """Surface gravity g = GM / (R^2 sqrt(1 - 2GM/(Rc^2))) in cm/s^2."""
    m = units.mass_to_geometric(np.asarray(mass_msun, dtype=float))
    r = np.asarray(radius_km, dtype=float)
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


def match_surface(mass_km, radius_km, central_enthalpy) -> SurfaceMatch:
    """Match interior solutions to the exterior at p = 0 (geometric inputs).

    Parameters
    ----------
    mass_km, radius_km : array_like
        G M / c^2 and R, both in km.
    central_enthalpy : array_like
        Central log-enthalpy h_c of each star.
    """
    m = np.asarray(mass_km, dtype=float)
    r = np.asarray(radius_km, dtype=float)
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
        "love_number_k2": interiors.love_number_k2,
        "tidal_deformability": interiors.tidal_deformability,
        "moment_of_inertia": interiors.moment_of_inertia * units.MOMENT_OF_INERTIA_GEOM_TO_CGS,
        "binding_energy": units.mass_from_geometric(interiors.baryon_mass - interiors.mass),
        "error_estimate": np.asarray(interiors.error_estimate, dtype=float),
        "star_status": np.asarray(interiors.status, dtype=np.int8),
    } | _core_columns(interiors)


def _core_columns(interiors) -> dict[str, np.ndarray]:
    """``core_radius`` (km) and ``core_mass`` (Msun) of stars of an EOS with a phase transition, else nothing."""
    if getattr(interiors, "core_radius", None) is None:
        return {}
    return {"core_radius": np.asarray(interiors.core_radius, dtype=float),
            "core_mass": units.mass_from_geometric(np.asarray(interiors.core_mass, dtype=float))}
