"""Exterior Schwarzschild formulas and the units module, against outside references."""

from __future__ import annotations

import astropy.units as au
import numpy as np
import pytest
from astropy.constants import codata2018, iau2015

from stellar_match import exterior, units


def test_constants_match_astropy_codata2018_and_iau2015():
    # astropy.constants ships CODATA 2018 and IAU 2015 Resolution B3 (astropy >= 4.0).
    assert units.GRAVITATIONAL_CONSTANT_SI == pytest.approx(codata2018.G.value, rel=1e-15)
    assert units.SPEED_OF_LIGHT_SI == codata2018.c.value
    assert units.SOLAR_MASS_PARAMETER_SI == pytest.approx(iau2015.GM_sun.value, rel=1e-15)
    assert units.EARTH_MASS_PARAMETER_SI == pytest.approx(iau2015.GM_earth.value, rel=1e-15)
    assert units.SOLAR_MASS_G == pytest.approx(iau2015.M_sun.cgs.value, rel=1e-12)
    assert units.NEUTRON_MASS_G == pytest.approx(codata2018.m_n.cgs.value, rel=1e-9)


def test_particle_constants_match_astropy_codata2018():
    # hbar c, m_e c^2, m_u c^2 and alpha of the quark-matter and electron-gas kinds (issue 11)
    mev_fm = au.MeV * au.fm
    assert units.HBAR_C_MEV_FM == pytest.approx((codata2018.hbar * codata2018.c).to(mev_fm).value, rel=1e-9)
    assert units.ELECTRON_REST_ENERGY_MEV == pytest.approx((codata2018.m_e * codata2018.c**2).to(au.MeV).value,
                                                           rel=1e-9)
    assert units.ATOMIC_MASS_UNIT_G == pytest.approx(codata2018.u.cgs.value, rel=1e-9)
    assert units.FINE_STRUCTURE_CONSTANT == pytest.approx(codata2018.alpha.value, rel=1e-12)


def test_conversions_match_astropy_units():
    # MeV/fm^3 -> erg/cm^3 (exact from the SI value of e); geometric factors G/c^2, G/c^4.
    assert units.MEV_PER_FM3_IN_ERG_PER_CM3 == pytest.approx((1 * au.MeV / au.fm**3).to(au.erg / au.cm**3).value,
                                                              rel=1e-14)
    G, c = codata2018.G, codata2018.c
    assert units.DENSITY_CGS_TO_GEOM == pytest.approx((G / c**2 * au.g / au.cm**3).to(au.km**-2).value, rel=1e-14)
    assert units.PRESSURE_CGS_TO_GEOM == pytest.approx(
        (G / c**4 * au.dyn / au.cm**2).to(au.km**-2).value, rel=1e-14)
    assert units.SOLAR_MASS_KM == pytest.approx((iau2015.GM_sun / c**2).to(au.km).value, rel=1e-14)


def test_schwarzschild_radii_of_sun_and_earth():
    # Common values: 2GM/c^2 is about 2.95 km for the Sun and 8.87 mm for the Earth.
    assert exterior.schwarzschild_radius(1.0) == pytest.approx(2.95, abs=0.005)
    earth_msun = units.EARTH_MASS_PARAMETER_SI / units.SOLAR_MASS_PARAMETER_SI
    assert exterior.schwarzschild_radius(earth_msun) * 1e6 == pytest.approx(8.87, abs=0.005)  # km -> mm


def test_orbit_radii_and_redshift():
    # Schwarzschild geodesics (e.g. Misner, Thorne & Wheeler 1973, sec. 25.5):
    # photon sphere 3GM/c^2, ISCO 6GM/c^2; z(r) = (1 - 2GM/(rc^2))^(-1/2) - 1.
    m = 1.4
    rs = exterior.schwarzschild_radius(m)
    assert exterior.photon_sphere_radius(m) == pytest.approx(1.5 * rs, rel=1e-15)
    assert exterior.isco_radius(m) == pytest.approx(3.0 * rs, rel=1e-15)
    assert exterior.redshift_at_radius(m, 2 * rs) == pytest.approx(np.sqrt(2) - 1, rel=1e-14)
    assert np.isnan(exterior.redshift_at_radius(m, 0.5 * rs))


def test_surface_gravity_against_astropy_formula():
    # g = GM / (R^2 sqrt(1 - 2GM/(Rc^2))) evaluated with astropy's IAU 2015 GM_sun.
    M, R = 1.4, 12.0
    GM = 1.4 * iau2015.GM_sun
    Rq = R * au.km
    g = (GM / Rq**2 / np.sqrt(1 - 2 * GM / (Rq * codata2018.c**2))).to(au.cm / au.s**2).value
    assert exterior.surface_gravity(M, R) == pytest.approx(g, rel=1e-12)


def test_match_surface_flags():
    # Buchdahl (1959): 2GM/(Rc^2) < 8/9; photon sphere outside the star when R < 3GM/c^2.
    m = np.array([1.0, 1.0, 1.0])
    r = np.array([10.0, 2.9, 2.2]) * units.SOLAR_MASS_KM  # R/M = 10, 2.9, 2.2
    match = exterior.match_surface(m * units.SOLAR_MASS_KM, r, np.zeros(3))
    assert list(match.photon_sphere_outside) == [False, True, True]
    assert list(match.below_buchdahl) == [True, True, False]
    np.testing.assert_allclose(match.surface_lapse_squared, 1 - 2 / (r / units.SOLAR_MASS_KM))
    np.testing.assert_allclose(match.surface_redshift, match.surface_lapse_squared**-0.5 - 1)
