"""Cold white-dwarf matter (kind electron_gas): Chandrasekhar's limits and white dwarfs against solve_ivp."""

from __future__ import annotations

import numpy as np
import pytest
from reference_solutions import assert_star_matches_references, tov_in_enthalpy
from scipy.integrate import quad

import stellar_match as sm
from stellar_match import units
from stellar_match.eos.electrons import pressure_integral
from stellar_match.errors import InputError

G_CGS = units.GRAVITATIONAL_CONSTANT_SI * 1e3
HBAR_C_CGS = units.HBAR_C_MEV_FM * 1e-13 * units.ELEMENTARY_CHARGE_SI * 1e13  # erg cm
M_E_G = units.ELECTRON_REST_ENERGY_MEV * 1e6 * units.ELEMENTARY_CHARGE_SI * 1e7 / (units.SPEED_OF_LIGHT_SI * 1e2) ** 2


def _h(eos, rho):
    return eos.enthalpy_of_density(units.density_to_geometric(np.asarray(rho, dtype=float)))


def test_pressure_integral_series_and_closed_form():
    # f(x) = (1/(3 pi^2)) int_0^x t^4/sqrt(1 + t^2) dt (Chandrasekhar 1939, ch. X), by QUADPACK: 1e-12
    # on both sides of the switch from the series to the closed form.
    for x in (1e-3, 0.05, 0.199, 0.201, 1.0, 30.0):
        ref = quad(lambda t: t**4 / np.sqrt(1 + t * t), 0, x, epsabs=0, epsrel=1e-13)[0] / (3 * np.pi**2)
        assert pressure_integral(np.array([x]))[0] == pytest.approx(ref, rel=1e-12), x


def test_the_two_polytropic_limits():
    # Non-relativistic electrons: p = K rho^(5/3), K = (3 pi^2)^(2/3) hbar^2 / (5 m_e (mu_e m_u)^(5/3));
    # ultra-relativistic: p = K' rho^(4/3), K' = (3 pi^2)^(1/3) hbar c / (4 (mu_e m_u)^(4/3)) (Chandrasekhar
    # 1939; ../shared/REFERENCE_VALUES.md), CODATA 2018 constants.  Corrections are O(x^2) and O(1/x^2):
    # 2e-6 at x = 1e-3 and at x = 1e3.
    mu_e = 2.0
    eos = sm.electron_gas("wd", mu_e)
    mass = mu_e * units.ATOMIC_MASS_UNIT_G
    hbar = HBAR_C_CGS / (units.SPEED_OF_LIGHT_SI * 1e2)
    k_nr = (3 * np.pi**2) ** (2 / 3) * hbar**2 / (5 * M_E_G * mass ** (5 / 3))
    k_ur = (3 * np.pi**2) ** (1 / 3) * HBAR_C_CGS / (4 * mass ** (4 / 3))
    x_to_rho = mass / (3 * np.pi**2) * (M_E_G * units.SPEED_OF_LIGHT_SI * 1e2 / hbar) ** 3 / 1e0
    for x, k, g in ((1e-3, k_nr, 5 / 3), (1e3, k_ur, 4 / 3)):
        rho = x_to_rho * x**3 / (units.SPEED_OF_LIGHT_SI * 1e2) ** 3 * (units.SPEED_OF_LIGHT_SI * 1e2) ** 3
        p, _, rho_back = eos.state(_h(eos, [rho]))
        assert units.density_from_geometric(rho_back[0]) == pytest.approx(rho, rel=1e-12)
        assert units.pressure_from_geometric(p[0]) == pytest.approx(k * rho**g, rel=2e-6), x


def test_low_density_white_dwarf_is_the_newtonian_n_3_2_lane_emden_star():
    # Chandrasekhar (1939, Table 4; from memory, ../shared/REFERENCE_VALUES.md): n = 3/2, xi_1 = 3.65375,
    # -xi^2 theta'(xi_1) = 2.71406; R = xi_1 a, M = 4 pi a^3 rho_c (-xi^2 theta'), a^2 = (5/2) K rho_c^(-1/3)/(4 pi G).
    # At rho_c = 1 g/cm^3 the relativistic (x_c^2) and GR (GM/(Rc^2) = 7e-9) corrections are below 3e-5: 1e-4.
    mu_e, rho_c = 2.0, 1.0
    mass = mu_e * units.ATOMIC_MASS_UNIT_G
    hbar = HBAR_C_CGS / (units.SPEED_OF_LIGHT_SI * 1e2)
    k_nr = (3 * np.pi**2) ** (2 / 3) * hbar**2 / (5 * M_E_G * mass ** (5 / 3))
    a = np.sqrt(2.5 * k_nr * rho_c ** (-1 / 3) / (4 * np.pi * G_CGS))
    star = sm.solve_stars(sm.electron_gas("wd", mu_e), central_density=[rho_c])
    assert star["star_status"][0] == 0
    assert star["radius"][0] == pytest.approx(3.65375 * a / 1e5, rel=1e-4)
    assert star["mass"][0] == pytest.approx(4 * np.pi * a**3 * rho_c * 2.71406 / units.SOLAR_MASS_G, rel=1e-4)


def test_chandrasekhar_mass_and_the_general_relativistic_maximum():
    # The ultra-relativistic n = 3 polytrope gives the Newtonian limiting mass M_Ch = 4 pi (K'/(pi G))^(3/2) w_3,
    # w_3 = 2.01824 (Chandrasekhar 1939; from memory): 5.825/mu_e^2 Msun with CODATA 2018, against the quoted
    # 5.836/mu_e^2 (Chandrasekhar 1935, older constants; from memory): 0.5 %.  General relativity ends the
    # sequence at a maximum a little below it (about 3 % for mu_e = 2, from memory; 2-5 % here).  The
    # maximum is checked against the independent solve_ivp reference: its mass is the reference's at the
    # same central density (1e-6), and the reference is lower 5 % to either side.
    mu_e = 2.0
    k_ur = (3 * np.pi**2) ** (1 / 3) * HBAR_C_CGS / (4 * (mu_e * units.ATOMIC_MASS_UNIT_G) ** (4 / 3))
    m_ch = 4 * np.pi * (k_ur / (np.pi * G_CGS)) ** 1.5 * 2.01824 / units.SOLAR_MASS_G
    assert m_ch * mu_e**2 == pytest.approx(5.836, rel=5e-3)
    eos = sm.electron_gas("wd", mu_e)
    summary = sm.sweep_eos(eos, "central_density", np.geomspace(5e9, 1e11, 9)).summary
    assert summary["max_mass_status"] == "found"
    assert 0.95 < summary["max_mass"] / m_ch < 0.98
    rho_max = summary["max_mass_central_density"]
    reference = {f: units.mass_from_geometric(tov_in_enthalpy(eos, float(_h(eos, [f * rho_max])[0]))[1])
                 for f in (0.95, 1.0, 1.05)}
    assert summary["max_mass"] == pytest.approx(reference[1.0], rel=1e-6)
    assert reference[0.95] < reference[1.0] > reference[1.05]


@pytest.mark.parametrize("coulomb", [False, True], ids=["ideal", "Salpeter"])
def test_white_dwarfs_against_solve_ivp(coulomb):
    # Independent solve_ivp DOP853 reference in Lindblom's h-form (tests/reference_solutions.py): M, R, M_b
    # to 1e-6 for a white dwarf of 1e8 g/cm^3, with and without the lattice term.  (The r-form tidal
    # reference needs Hinderer's closed form for k2, unusable at GM/(Rc^2) = 4e-4.)
    eos = sm.electron_gas("wd", 2.0, coulomb)
    h = float(_h(eos, [1e8])[0])
    assert_star_matches_references(eos, h, response=False)


def test_salpeter_lattice_term_gives_a_bare_surface_and_lighter_stars():
    # Salpeter (1961): eps_C = 3 p_C = -(9/10)(4 pi/3)^(1/3) Z^(2/3) alpha hbar c n_e^(4/3).  p vanishes where
    # x^5/(15 pi^2) = a_C x^4 to leading order, x_0 = 15 pi^2 a_C (relativistic correction O(x_0^2) ~ 4e-4:
    # 1e-3), the surface density jumps from 0 to rho(x_0), and the (negative) lattice energy makes every
    # star lighter.
    plain, lattice = sm.electron_gas("wd", 2.0), sm.electron_gas("wdc", 2.0, True, 6.0)
    p, eps, rho = lattice.state(np.array([0.0]))
    assert abs(p[0]) < 1e-12 * eps[0] and rho[0] > 0 and lattice.surface_energy_density == pytest.approx(eps[0])
    # The zero-pressure density, independently: astropy's CODATA 2018 constants in cgs, the electron
    # pressure from Chandrasekhar's (1939) integral by QUADPACK, Salpeter's p_C = eps_C / 3 with
    # e^2 = alpha hbar c, and the root of p_e + p_C = 0 by brentq; rho = mu_e m_u n_e (about 13.0 g/cm^3).
    from astropy.constants import codata2018 as cc
    from scipy.optimize import brentq

    m_e, c, hbar = cc.m_e.cgs.value, cc.c.cgs.value, cc.hbar.cgs.value
    alpha, m_u, z = cc.alpha.value, cc.u.cgs.value, 6.0

    def pressure(n_e):
        x = hbar * (3 * np.pi**2 * n_e) ** (1 / 3) / (m_e * c)
        electrons = m_e * c**2 * (m_e * c / hbar) ** 3 / (3 * np.pi**2) * quad(
            lambda t: t**4 / np.sqrt(1 + t * t), 0, x, epsabs=0, epsrel=1e-13)[0]
        lattice_energy = -0.9 * (4 * np.pi / 3) ** (1 / 3) * z ** (2 / 3) * alpha * hbar * c * n_e ** (4 / 3)
        return electrons + lattice_energy / 3

    n_surface = brentq(pressure, 1e23, 1e26, xtol=1e10, rtol=1e-14)
    assert units.density_from_geometric(rho[0]) == pytest.approx(2.0 * m_u * n_surface, rel=1e-8)
    assert plain.surface_energy_density == 0.0
    rho_c = [1e6, 1e8, 1e10]
    assert np.all(sm.solve_stars(lattice, central_density=rho_c)["mass"]
                  < sm.solve_stars(plain, central_density=rho_c)["mass"])


@pytest.mark.parametrize("kwargs, key", [
    ({"mu_e": 0.5}, "mu_e"), ({"mu_e": 5.0}, "mu_e"),
    ({"mu_e": 2.0, "coulomb_correction": True, "nuclear_charge": 0.0}, "nuclear_charge"),
])
def test_bad_parameters_name_their_key(kwargs, key):
    with pytest.raises(InputError) as info:
        sm.electron_gas("wd", **kwargs)
    assert info.value.key == key


def test_white_dwarfs_and_puffed_up_neutron_stars_meet_the_tolerance_within_a_modest_budget():
    # Both are little compact and keep much of their radius near the surface, where the adaptive
    # steps must follow the envelope.  Against the solve_ivp reference (DOP853, rtol 1e-11,
    # tests/reference_solutions.py).
    wd = sm.electron_gas("wd", 2.0)
    h = _h(wd, np.geomspace(1e4, 1e11, 5))
    stars = sm.solve_interiors(wd, h, response=False)
    sly = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    h_ns = _h(sly, np.array([8e13, 1.4e14]))
    puffed = sm.solve_interiors(sly, h_ns, response=False)
    assert np.all(puffed.mass / puffed.radius < 0.006)  # puffed up: GM/(Rc^2) well below a neutron star's
    for eos, hh, got in ((wd, h, stars), (sly, h_ns, puffed)):
        assert np.all(got.steps < sm.structure.MAX_STEPS / 4)
        for i in range(hh.size):
            R, M, _ = tov_in_enthalpy(eos, float(hh[i]))
            assert got.status[i] == 0
            tol = sm.structure.DEFAULT_TOLERANCE  # the promise of status 0
            assert got.mass[i] == pytest.approx(M, rel=tol) and got.radius[i] == pytest.approx(R, rel=tol)
