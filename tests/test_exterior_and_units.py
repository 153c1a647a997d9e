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


# --- the inverse mapping for atmosphere fits (issue 13) ---------------------------

def forward_with_astropy(mass_msun, radius_km):
    """z, log10 g (cgs) and R_inf = R(1+z) from the exterior Schwarzschild metric, with astropy's constants.

    z = (1 - 2GM/(Rc^2))^(-1/2) - 1, g = GM/(R^2 sqrt(1 - 2GM/(Rc^2))) (e.g. Misner, Thorne & Wheeler 1973,
    sec. 31.2); GM_sun from IAU 2015 B3, c exact (astropy.constants).
    """
    gm = np.asarray(mass_msun) * iau2015.GM_sun
    r = np.asarray(radius_km) * au.km
    x = (2 * gm / (r * codata2018.c**2)).to_value(au.one)
    z = np.expm1(-0.5 * np.log1p(-x))  # = (1 - x)^(-1/2) - 1 without cancellation for white dwarfs (z ~ 1e-4)
    g = (gm / r**2).to_value(au.cm / au.s**2) * (1 + z)
    return z, np.log10(g), np.asarray(radius_km) * (1 + z)


#: Neutron stars and a white dwarf-like star: masses (Msun) and radii (km).
MASSES = np.array([0.2, 1.0, 1.4, 2.0, 2.3, 0.6])
RADII = np.array([15.0, 12.5, 11.8, 10.5, 9.0, 9000.0])


def test_inverse_from_redshift_and_gravity_round_trips():
    z, log_g, _ = forward_with_astropy(MASSES, RADII)
    m, r = exterior.mass_radius_from_surface(z, log_g)
    # issue 13: the closed form reproduces M and R to 1e-12
    np.testing.assert_allclose(m, MASSES, rtol=1e-12)
    np.testing.assert_allclose(r, RADII, rtol=1e-12)
    # and back: the product's own forward formulas give the inputs again (its z = (1 - x)^(-1/2) - 1 loses
    # 1e-16 / z to cancellation, so the white dwarf-like star is left out of this direction)
    np.testing.assert_allclose(exterior.redshift_at_radius(m, r)[:-1], z[:-1], rtol=1e-12)
    np.testing.assert_allclose(np.log10(exterior.surface_gravity(m, r)), log_g, rtol=1e-12)


def test_inverse_from_radiation_radius_round_trips():
    z, _, r_inf = forward_with_astropy(MASSES, RADII)
    m, r = exterior.mass_radius_from_radiation_radius(r_inf, z)
    np.testing.assert_allclose(m, MASSES, rtol=1e-12)
    np.testing.assert_allclose(r, RADII, rtol=1e-12)
    np.testing.assert_allclose(exterior.radiation_radius(MASSES, RADII), r_inf, rtol=1e-12)


def test_inverse_takes_quantities_and_broadcasts():
    z, log_g, r_inf = forward_with_astropy(1.4, 12.0)
    m, r = exterior.mass_radius_from_surface(z * au.one, (log_g * au.dex(au.cm / au.s**2)).to(au.dex(au.m / au.s**2)))
    assert float(m) == pytest.approx(1.4, rel=1e-12) and float(r) == pytest.approx(12.0, rel=1e-12)
    m, r = exterior.mass_radius_from_radiation_radius(r_inf * 1000 * au.m, z)
    assert float(r) == pytest.approx(12.0, rel=1e-12)
    mg, rg = exterior.mass_radius_grid([0.2, 0.3, 0.4], log10_surface_gravity=[14.0, 14.3])
    assert mg.shape == rg.shape == (3, 2)
    m1, r1 = exterior.mass_radius_from_surface(0.3, 14.3)
    assert mg[1, 1] == m1 and rg[1, 1] == r1
    mg, rg = exterior.mass_radius_grid([0.2, 0.3], radiation_radius=[12.0, 14.0, 16.0])
    assert mg.shape == (2, 3) and rg[0, 2] == pytest.approx(16.0 / 1.2, rel=1e-15)


@pytest.mark.parametrize(("call", "key"), [
    (lambda: exterior.mass_radius_from_surface(0.0, 14.0), "surface_redshift"),
    (lambda: exterior.mass_radius_from_surface(-0.1, 14.0), "surface_redshift"),
    (lambda: exterior.mass_radius_from_surface(2.5, 14.0), "surface_redshift"),  # beyond Buchdahl (1959): z < 2
    (lambda: exterior.mass_radius_from_surface(0.3, np.nan), "log10_surface_gravity"),
    (lambda: exterior.mass_radius_from_radiation_radius(-12.0, 0.3), "radiation_radius"),
    (lambda: exterior.mass_radius_from_radiation_radius(12.0, [0.3, np.inf]), "surface_redshift"),
    (lambda: exterior.mass_radius_grid([0.3]), "mass_radius_grid"),
])
def test_impossible_inputs_are_one_error_line(call, key):
    from stellar_match.errors import InputError

    with pytest.raises(InputError) as info:
        call()
    assert info.value.key == key and "\n" not in info.value.one_line()
