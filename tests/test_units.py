"""astropy Quantities at every public entry point: other units give the documented floats' results.

The reference for every conversion is astropy itself (astropy.units, astropy.constants codata2018 and
iau2015): each Quantity is turned into the documented unit by astropy in the test, and the product's
result for the Quantity must equal its result for that float.
"""

from __future__ import annotations

import astropy.units as u
import numpy as np
import pytest
from astropy.constants import codata2018, iau2015

import stellar_match as sm
from stellar_match import exterior, units
from stellar_match.errors import InputError
from stellar_match.sequence import chirp_mass, lambda_tilde

SLY = (34.384, [3.005, 2.988, 2.851])  # Read et al. 2009, PRD 79, 124032, Table III
#: Conversions of float64 inputs through astropy may differ from the documented float in the last bit;
#: a solve amplifies that by at most a few (common practice), hence 1e-13 for solved quantities.
SOLVED_RTOL = 1e-13


@pytest.fixture(scope="module")
def sly():
    return sm.read_piecewise_polytrope("sly", *SLY)


def test_exterior_functions_take_masses_and_radii_in_any_unit():
    m_kg = 1.4 * iau2015.M_sun  # IAU 2015 nominal solar mass in kg
    assert exterior.schwarzschild_radius(m_kg) == pytest.approx(exterior.schwarzschild_radius(1.4), rel=1e-15)
    # the case: 12000 m is 12 km, not 12000 km
    assert exterior.redshift_at_radius(1.4 * u.solMass, 12000 * u.m) == pytest.approx(
        exterior.redshift_at_radius(1.4, 12.0), rel=1e-15)
    assert exterior.surface_gravity(m_kg.to(u.g), 1.2e6 * u.cm) == pytest.approx(
        exterior.surface_gravity(1.4, 12.0), rel=1e-14)
    # 2GM/c^2 with astropy's constants, in km
    rs = (2 * 1.4 * iau2015.GM_sun / codata2018.c**2).to(u.km).value
    assert exterior.schwarzschild_radius([1.4 * u.solMass]) == pytest.approx(rs, rel=1e-14)


@pytest.mark.parametrize("quantity", [1e18 * u.kg / u.m**3, 1e15 * u.g / u.cm**3])
def test_solve_stars_central_density_as_quantity(sly, quantity):
    plain = sm.solve_stars(sly, central_density=[quantity.to_value(u.g / u.cm**3)])
    q = sm.solve_stars(sly, central_density=np.atleast_1d(quantity))
    for k in ("mass", "radius", "tidal_deformability", "moment_of_inertia"):
        np.testing.assert_allclose(q[k], plain[k], rtol=SOLVED_RTOL, err_msg=k)


def test_number_density_stands_for_rest_mass_density(sly):
    # rho = m_n n with the CODATA 2018 neutron mass (astropy codata2018.m_n), as for tables
    n = 0.5 / u.fm**3
    rho = (n * codata2018.m_n).to_value(u.g / u.cm**3)
    # 1e-9: units.py takes m_n from CODATA's rest energy in MeV, astropy from m_n in kg; the two published
    # values agree to their last digits (~1e-10), as tests/test_exterior_and_units.py checks
    np.testing.assert_allclose(sm.solve_stars(sly, central_density=n)["mass"],
                               sm.solve_stars(sly, central_density=rho)["mass"], rtol=1e-9)


@pytest.mark.parametrize("unit", [u.Pa, u.MeV / u.fm**3, u.erg / u.cm**3])
def test_central_pressure_in_other_units(unit):
    eos = sm.incompressible("uniform", 1e15)
    p = (1e35 * u.dyn / u.cm**2).to(unit)
    np.testing.assert_allclose(sm.solve_stars(eos, central_pressure=p)["radius"],
                               sm.solve_stars(eos, central_pressure=[1e35])["radius"], rtol=SOLVED_RTOL)


def test_eos_factories_take_quantities():
    # an energy density in MeV/fm^3 stands for eps / c^2 (astropy: MeV/fm^3 -> erg/cm^3, / c^2)
    eps = 560 * u.MeV / u.fm**3
    grams = (eps / codata2018.c**2).to_value(u.g / u.cm**3)
    a, b = sm.incompressible("a", eps), sm.incompressible("b", grams)
    assert a.energy_density == pytest.approx(b.energy_density, rel=1e-15)
    # K in SI: Pa (m^3/kg)^2 for gamma = 2 -> dyn/cm^2 (g/cm^3)^-2
    K_si = 1e5 * u.dyn / u.cm**2 / (u.g / u.cm**3) ** 2
    p1, p2 = sm.polytrope("p", K_si.to(u.Pa * (u.m**3 / u.kg) ** 2), 2.0), sm.polytrope("q", 1e5, 2.0)
    np.testing.assert_allclose(p1.K, p2.K, rtol=1e-14)
    # log10 p1 as a logarithmic Quantity in other units, or as the pressure itself
    ref = sm.read_piecewise_polytrope("r", *SLY)
    for log10_p1 in ((SLY[0] * u.dex(u.dyn / u.cm**2)).to(u.dex(u.Pa)), 10**SLY[0] * u.dyn / u.cm**2 / 10 * u.Pa
                     / (u.dyn / u.cm**2)):
        pp = sm.read_piecewise_polytrope("s", log10_p1, SLY[1])
        np.testing.assert_allclose(pp.K, ref.K, rtol=1e-12)


def test_sweep_targets_and_binaries_as_quantities(sly):
    rho = np.geomspace(4e14, 2.5e15, 6)
    plain = sm.sweep_eos(sly, "central_density", rho)
    q = sm.sweep_eos(sly, "central_density", rho * u.g / u.cm**3, target_masses=[1.4] * u.solMass,
                     binaries=[[1.36, 1.36]] * iau2015.M_sun.to(u.kg))
    np.testing.assert_array_equal(q["mass"], plain["mass"])
    # astropy's kg -> Msun (IAU 2015 nominal mass) gives the documented floats back
    np.testing.assert_allclose(q.groups["targets"]["requested_mass"], [1.4], rtol=1e-15)
    np.testing.assert_allclose(q.groups["binaries"]["mass_1"], [1.36], rtol=1e-15)
    # issue 4: a target star reproduces its requested mass to 1e-6
    np.testing.assert_allclose(q.groups["targets"]["mass"], [1.4], rtol=1e-6)


def test_chirp_mass_and_lambda_tilde_with_quantities():
    m1, m2 = 1.36 * iau2015.M_sun, 1.2 * u.solMass
    assert chirp_mass(m1, m2) == pytest.approx(chirp_mass(1.36, 1.2), rel=1e-15)
    assert lambda_tilde(m1, m2, 400.0, 600.0) == pytest.approx(lambda_tilde(1.36, 1.2, 400.0, 600.0), rel=1e-14)


def test_results_as_qtables(sly):
    seq = sm.sweep_eos(sly, "central_density", np.geomspace(4e14, 2.5e15, 8), target_masses=[1.4])
    t = seq.to_table()
    assert t["mass"].unit == u.solMass and t["central_pressure"].unit == u.dyn / u.cm**2
    # astropy does the conversion: the maximum-mass star's radius in m, as km * 1000
    assert t.meta["summary"]["max_mass_radius"].to_value(u.m) == pytest.approx(
        1000 * seq.summary["max_mass_radius"], rel=1e-15)
    targets = seq.to_table("targets")
    assert targets["radius"].unit == u.km and list(targets["status"]) == ["found"]
    with pytest.raises(KeyError, match="binaries"):
        seq.to_table("binaries")


@pytest.mark.parametrize(("call", "needle"), [
    (lambda: exterior.schwarzschild_radius(1 * u.km), "mass_msun"),
    (lambda: exterior.redshift_at_radius(1.4, 12 * u.s), "radius_km"),
    (lambda: sm.polytrope("p", 1e5 * u.Pa, 2.0), "K"),
    (lambda: sm.read_piecewise_polytrope("r", 34 * u.km, SLY[1]), "log10_p1"),
    (lambda: sm.incompressible("i", 1e15 * u.m), "energy_density"),
    (lambda: sm.solve_stars(sm.incompressible("i", 1e15), central_pressure=1 * u.kg), "central_pressure"),
    (lambda: chirp_mass([1 * u.solMass, 2], 1.0), "m1"),
    (lambda: exterior.mass_radius_from_surface(0.3 * u.km, 14.0), "surface_redshift"),
])
def test_wrong_dimension_is_one_error_line(call, needle):
    with pytest.raises(InputError) as info:
        call()
    line = info.value.one_line()
    assert "\n" not in line and line.startswith(needle), line


def test_plain_numbers_never_import_astropy_in_a_fresh_process():
    # the units module only looks for Quantities once astropy.units is imported (speed, import time)
    import subprocess
    import sys

    code = ("import sys, stellar_match as sm; sm.exterior.schwarzschild_radius(1.0); "
            "print('astropy.units' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"
    assert units.to_unit(2.5, units.MASS_UNIT, name="m") == 2.5
