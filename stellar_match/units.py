"""Physical constants and unit conversions: the only place units change.

Inside the solver everything is in geometric units with G = c = 1 and the
kilometre as the unit of length: masses are in km (G M / c^2), pressures and
energy densities in km^-2 (G p / c^4, G eps / c^4), rest-mass densities in
km^-2 (G rho / c^2).  Every other module converts at its edges through the
functions and factors defined here.

Each constant names its source, following the habit of ``astropy.constants``.
"""

from __future__ import annotations

# --- Fundamental constants -------------------------------------------------
#: Speed of light in vacuum, m/s.  Exact (SI 2019 definition).
SPEED_OF_LIGHT_SI = 299_792_458.0
#: Newtonian constant of gravitation, m^3 kg^-1 s^-2.  CODATA 2018.
GRAVITATIONAL_CONSTANT_SI = 6.674_30e-11
#: Elementary charge, C.  Exact (SI 2019); fixes 1 MeV = 1.602 176 634e-13 J.
ELEMENTARY_CHARGE_SI = 1.602_176_634e-19
#: Neutron rest energy, MeV.  CODATA 2018.
NEUTRON_REST_ENERGY_MEV = 939.565_420_52
#: Reduced Planck constant times c, MeV fm.  CODATA 2018 (exact h and c, exact e).
HBAR_C_MEV_FM = 197.326_980_4
#: Electron rest energy, MeV.  CODATA 2018.
ELECTRON_REST_ENERGY_MEV = 0.510_998_950_00
#: Atomic mass constant m_u (1/12 of the mass of a 12C atom) times c^2, MeV.  CODATA 2018.
ATOMIC_MASS_UNIT_REST_ENERGY_MEV = 931.494_102_42
#: Fine-structure constant.  CODATA 2018.
FINE_STRUCTURE_CONSTANT = 7.297_352_5693e-3

# --- Astronomical constants ------------------------------------------------
#: Nominal solar mass parameter G M_sun, m^3/s^2.  IAU 2015 Resolution B3.
SOLAR_MASS_PARAMETER_SI = 1.327_124_4e20
#: Nominal terrestrial mass parameter G M_E, m^3/s^2.  IAU 2015 Resolution B3.
EARTH_MASS_PARAMETER_SI = 3.986_004e14

# --- Derived factors (cgs at the edges, geometric km inside) ---------------
_C_CGS = SPEED_OF_LIGHT_SI * 1e2  # cm/s
_G_CGS = GRAVITATIONAL_CONSTANT_SI * 1e3  # cm^3 g^-1 s^-2
_CM2_TO_KM2 = 1e10  # 1 cm^-2 = 1e10 km^-2

#: Solar mass in grams, G M_sun / G.  Derived from IAU 2015 B3 and CODATA 2018.
SOLAR_MASS_G = SOLAR_MASS_PARAMETER_SI / GRAVITATIONAL_CONSTANT_SI * 1e3
#: G M_sun / c^2 in km: one solar mass as a geometric length.
SOLAR_MASS_KM = SOLAR_MASS_PARAMETER_SI / SPEED_OF_LIGHT_SI**2 / 1e3
#: Neutron rest mass in grams (CODATA 2018 rest energy / c^2).
NEUTRON_MASS_G = NEUTRON_REST_ENERGY_MEV * 1e6 * ELEMENTARY_CHARGE_SI * 1e7 / _C_CGS**2
#: Atomic mass constant in grams (CODATA 2018 rest energy / c^2).
ATOMIC_MASS_UNIT_G = ATOMIC_MASS_UNIT_REST_ENERGY_MEV * 1e6 * ELEMENTARY_CHARGE_SI * 1e7 / _C_CGS**2

#: 1 MeV/fm^3 in erg/cm^3 (exact: 1 MeV = 1.602 176 634e-6 erg, 1 fm^3 = 1e-39 cm^3).
MEV_PER_FM3_IN_ERG_PER_CM3 = ELEMENTARY_CHARGE_SI * 1e13 * 1e39
#: 1 Pa in dyn/cm^2 (exact).
PASCAL_IN_DYN_PER_CM2 = 10.0

#: rest-mass density g/cm^3 -> geometric km^-2 (multiply by G/c^2).
DENSITY_CGS_TO_GEOM = _G_CGS / _C_CGS**2 * _CM2_TO_KM2
#: pressure or energy density in dyn/cm^2 = erg/cm^3 -> geometric km^-2 (G/c^4).
PRESSURE_CGS_TO_GEOM = _G_CGS / _C_CGS**4 * _CM2_TO_KM2
#: surface gravity: geometric km^-1 -> cm/s^2 (multiply by c^2, km -> cm).
ACCELERATION_GEOM_TO_CGS = _C_CGS**2 / 1e5
#: moment of inertia: geometric km^3 -> g cm^2.
MOMENT_OF_INERTIA_GEOM_TO_CGS = (SOLAR_MASS_G / SOLAR_MASS_KM) * 1e10


def density_to_geometric(rho_g_cm3):
    """Convert a rest-mass density (or energy density / c^2) from g/cm^3 to km^-2."""
    return rho_g_cm3 * DENSITY_CGS_TO_GEOM


def density_from_geometric(rho_geom):
    """Convert a density from km^-2 to g/cm^3."""
    return rho_geom / DENSITY_CGS_TO_GEOM


def pressure_to_geometric(p_dyn_cm2):
    """Convert a pressure (or energy density in erg/cm^3) from dyn/cm^2 to km^-2."""
    return p_dyn_cm2 * PRESSURE_CGS_TO_GEOM


def pressure_from_geometric(p_geom):
    """Convert a pressure from km^-2 to dyn/cm^2."""
    return p_geom / PRESSURE_CGS_TO_GEOM


def mass_to_geometric(mass_msun):
    """Convert a mass from solar masses to km (G M / c^2)."""
    return mass_msun * SOLAR_MASS_KM


def mass_from_geometric(mass_km):
    """Convert a mass from km (G M / c^2) to solar masses."""
    return mass_km / SOLAR_MASS_KM


#: Units accepted for tabulated pressure, as factors to dyn/cm^2.
PRESSURE_UNITS = {
    "dyn/cm2": 1.0,
    "MeV/fm3": MEV_PER_FM3_IN_ERG_PER_CM3,
    "Pa": PASCAL_IN_DYN_PER_CM2,
}
#: Units accepted for tabulated energy density, as factors to g/cm^3 (eps / c^2).
ENERGY_DENSITY_UNITS = {
    "g/cm3": 1.0,
    "erg/cm3": 1.0 / _C_CGS**2,
    "MeV/fm3": MEV_PER_FM3_IN_ERG_PER_CM3 / _C_CGS**2,
}
#: Units accepted for baryon number density, as factors to cm^-3.
BARYON_DENSITY_UNITS = {"fm-3": 1e39, "cm-3": 1.0}
#: Units accepted for rest-mass density, as factors to g/cm^3.
REST_MASS_DENSITY_UNITS = {"g/cm3": 1.0}

