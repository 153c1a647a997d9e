"""Physical constants and unit conversions: the only place units change.

Inside the solver everything is in geometric units with G = c = 1 and the
kilometre as the unit of length: masses are in km (G M / c^2), pressures and
energy densities in km^-2 (G p / c^4, G eps / c^4), rest-mass densities in
km^-2 (G rho / c^2).  Every other module converts at its edges through the
functions and factors defined here.

Each constant names its source, following the habit of ``astropy.constants``.
"""

from __future__ import annotations

import numpy as np

from .errors import InputError

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
    """Convert a rest-mass density (or energy density / c^2) from g/cm^3 to km^-2.

    A Quantity (e.g. kg/m^3, or an energy density in MeV/fm^3) is converted first, see :func:`to_unit`.
    """
    return to_unit(rho_g_cm3, DENSITY_UNIT, name="density") * DENSITY_CGS_TO_GEOM


def density_from_geometric(rho_geom):
    """Convert a density from km^-2 to g/cm^3."""
    return rho_geom / DENSITY_CGS_TO_GEOM


def pressure_to_geometric(p_dyn_cm2):
    """Convert a pressure (or energy density in erg/cm^3) from dyn/cm^2 to km^-2 (Quantities: any pressure unit)."""
    return to_unit(p_dyn_cm2, PRESSURE_UNIT, name="pressure") * PRESSURE_CGS_TO_GEOM


def pressure_from_geometric(p_geom):
    """Convert a pressure from km^-2 to dyn/cm^2."""
    return p_geom / PRESSURE_CGS_TO_GEOM


def mass_to_geometric(mass_msun):
    """Convert a mass from solar masses to km (G M / c^2) (Quantities: any mass unit)."""
    return to_unit(mass_msun, MASS_UNIT, name="mass") * SOLAR_MASS_KM


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



# --- astropy Quantities at the edges -----------------------------------------
# Public functions take plain numbers in their documented units, or astropy
# Quantities in any unit of the same dimension.  Quantities are converted here
# and only here, once, at the entry of a public function: the solver itself
# only ever sees plain float arrays and the factors above.

#: Documented units of the API and the run files, in astropy's spelling
#: (``astropy.units.Unit`` parses each; "" is dimensionless).
MASS_UNIT = "solMass"
LENGTH_UNIT = "km"
DENSITY_UNIT = "g / cm3"
PRESSURE_UNIT = "dyn / cm2"
ACCELERATION_UNIT = "cm / s2"
LOG_ACCELERATION_UNIT = "dex(cm / s2)"
LOG_PRESSURE_UNIT = "dex(dyn / cm2)"
MOMENT_OF_INERTIA_UNIT = "g cm2"
VELOCITY_UNIT = "km / s"
DIMENSIONLESS = ""

#: Speed of light in km/s (exact), for redshifts given as velocities c z.
SPEED_OF_LIGHT_KM_S = SPEED_OF_LIGHT_SI / 1e3


def _astropy_units():
    """astropy.units if a Quantity can exist at all (it is imported), else None.

    A Quantity cannot exist before ``astropy.units`` is imported, so plain
    numbers never pay for the import or for an isinstance check against it.
    """
    import sys

    return sys.modules.get("astropy.units")


def is_quantity(value) -> bool:
    """True for an astropy Quantity or a list/tuple holding one."""
    au = _astropy_units()
    if au is None:
        return False
    if isinstance(value, au.Quantity):
        return True
    return isinstance(value, list | tuple) and any(isinstance(v, au.Quantity) for v in value)


def _equivalencies(unit: str, au) -> list:
    """Conversions between dimensions that the documented units imply.

    * An energy density (erg/cm^3, MeV/fm^3) stands for a density eps/c^2
      wherever the documented unit is g/cm^3 (energy densities, and the
      incompressible EOS), with the exact c of this module.
    * A baryon number density (1/cm^3, 1/fm^3) stands for a rest-mass density
      rho = m_n n, with the CODATA 2018 neutron mass, as for tables.
    """
    if unit != DENSITY_UNIT:
        return []
    c2 = _C_CGS**2
    return [
        (au.g / au.cm**3, au.erg / au.cm**3, lambda x: x * c2, lambda x: x / c2),
        (au.g / au.cm**3, au.cm**-3, lambda x: x / NEUTRON_MASS_G, lambda x: x * NEUTRON_MASS_G),
    ]


def to_unit(value, unit, *, name: str):
    """A number or an astropy Quantity as plain number(s) in the documented ``unit``.

    Parameters
    ----------
    value : float, array_like or astropy.units.Quantity
        Plain numbers are returned unchanged: they are taken to be in
        ``unit`` already, as every public function documents.  A Quantity
        (or a list of Quantities) is converted to ``unit``.
    unit : str or astropy unit
        The documented unit in astropy's spelling, e.g. ``"solMass"``,
        ``"g / cm3"`` or ``"dex(cm / s2)"``; ``""`` for dimensionless.
        Densities in g/cm^3 also take energy densities (divided by c^2) and
        baryon number densities (times the neutron mass).
    name : str
        The argument's name, for the error message.

    Returns
    -------
    float or ndarray
        The value in ``unit`` (a scalar Quantity gives a float).

    Raises
    ------
    InputError
        One line naming ``name``, when the Quantity's dimension does not fit
        ``unit`` (or a list mixes Quantities with plain numbers).
    """
    if not is_quantity(value):
        return value
    au = _astropy_units()
    target = au.Unit(unit) if isinstance(unit, str) else unit
    spelled = unit if isinstance(unit, str) else target.to_string()
    try:
        q = value if isinstance(value, au.Quantity) else au.Quantity(value)
    except (TypeError, ValueError, au.UnitsError):
        raise InputError(f"needs numbers in {spelled or 'dimensionless units'} or Quantities of one "
                         f"dimension, not a list mixing them", key=name) from None
    try:
        out = q.to_value(target, equivalencies=_equivalencies(spelled, au))
    except au.UnitsError:
        want = f"{spelled!r} ({target.physical_type})" if spelled else "a dimensionless number"
        got = q.unit.to_string() or "dimensionless"
        raise InputError(f"needs a Quantity convertible to {want}, got one in {got!r}", key=name) from None
    return float(out) if np.ndim(out) == 0 else np.asarray(out, dtype=float)


def polytropic_constant_to_cgs(K, gamma: float):
    """K of p = K rho^Gamma in cgs (p in dyn/cm^2, rho in g/cm^3); a Quantity is converted.

    The unit of K depends on Gamma, dyn cm^-2 (g cm^-3)^-Gamma, so it is
    built for the given (plain) ``gamma``.
    """
    if not is_quantity(K):
        return K
    au = _astropy_units()
    return to_unit(K, au.dyn / au.cm**2 / (au.g / au.cm**3) ** float(gamma), name="K")


def quantity_table(columns: dict, unit_of: dict, *, descriptions: dict | None = None, meta: dict | None = None):
    """An ``astropy.table.QTable`` of equal-length columns, with their documented units attached.

    Parameters
    ----------
    columns : dict of str -> array_like
        Columns in order.
    unit_of : dict of str -> str
        Unit (astropy spelling) of each column; "" or absent: dimensionless,
        text, flag or code, kept as a plain column.
    descriptions : dict of str -> str, optional
        One line per column.
    meta : dict, optional
        Table metadata.
    """
    import astropy.units as au
    from astropy.table import Column, QTable

    table = QTable(meta=dict(meta or {}))
    for name, values in columns.items():
        values = np.asarray(values)
        unit = unit_of.get(name, "")
        text = (descriptions or {}).get(name)
        if unit and values.dtype.kind in "fiu":
            table[name] = values.astype(float) * au.Unit(unit)  # a product: dex units give a Dex quantity
            if text:
                table[name].info.description = text
        else:
            table[name] = Column(values, description=text)
    return table


# --- radial oscillation modes ---
#: Unit of radial_omega_squared in run files (astropy parses "rad2 / s2").
ANGULAR_FREQUENCY_SQUARED_UNIT = "rad2 / s2"
#: Unit of radial_frequency (nu = omega / 2 pi).
FREQUENCY_UNIT = "kHz"


def angular_frequency_squared_from_geometric(omega2_geom):
    """omega^2 in (rad/s)^2 from geometric units (km^-2, c = 1): times c^2 in (km/s)^2."""
    return np.asarray(omega2_geom, dtype=float) * SPEED_OF_LIGHT_KM_S**2


def frequency_khz_from_angular_squared(omega2_s2):
    """nu = sqrt(omega^2) / (2 pi) in kHz from omega^2 in (rad/s)^2; NaN where omega^2 < 0."""
    w2 = np.asarray(omega2_s2, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.where(w2 >= 0, np.sqrt(np.where(w2 >= 0, w2, np.nan)), np.nan) / (2.0 * np.pi) / 1e3
