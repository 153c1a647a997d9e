"""Validation of the batched TOV solver against exact and independent solutions."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from reference_solutions import tov_in_enthalpy, tov_in_radius

import stellar_match as sm
from stellar_match import units
from stellar_match.structure import DEFAULT_STEPS, central_series, solve_interiors

SLY = dict(log10_p1=34.384, gammas=[3.005, 2.988, 2.851])  # Read et al. 2009, Table III


def _h(eos, rho_cgs):
    return eos.enthalpy_of_density(units.density_to_geometric(np.asarray(rho_cgs, dtype=float)))


@pytest.mark.parametrize("compactness", [0.01, 0.1, 0.2, 0.3, 0.4, 0.44])
def test_uniform_density_exact_interior(compactness):
    # Schwarzschild (1916) exact interior: with C = GM/(Rc^2),
    # p_c/eps = (1 - sqrt(1-2C)) / (3 sqrt(1-2C) - 1) and M = (4 pi/3) eps R^3
    # (../shared/REFERENCE_VALUES.md).  Required: 1e-6 in M and R (issue #2).
    eos = sm.incompressible("u", 1.0e15)
    eps = eos.energy_density
    s = np.sqrt(1 - 2 * compactness)
    p_c = eps * (1 - s) / (3 * s - 1)
    star = solve_interiors(eos, eos.enthalpy_of_pressure(np.array([p_c])))
    R = np.sqrt(3 * compactness / (4 * np.pi * eps))
    assert star.radius[0] == pytest.approx(R, rel=1e-6)
    assert star.mass[0] == pytest.approx(compactness * R, rel=1e-6)


def test_uniform_density_baryon_mass_is_proper_volume_integral():
    # M_b = eps * proper volume = 4 pi eps int_0^R r^2 (1 - 2 m(r)/r)^(-1/2) dr with
    # m(r) = (4 pi / 3) eps r^3 (Schwarzschild 1916); closed form of the integral:
    # (2 pi eps / a^3)(asin(a R) - a R sqrt(1 - a^2 R^2)), a^2 = 8 pi eps / 3.
    eos = sm.incompressible("u", 1.0e15)
    eps = eos.energy_density
    C = 0.3
    s = np.sqrt(1 - 2 * C)
    star = solve_interiors(eos, eos.enthalpy_of_pressure(np.array([eps * (1 - s) / (3 * s - 1)])))
    R = star.radius[0]
    a = np.sqrt(8 * np.pi * eps / 3)
    exact = 2 * np.pi * eps / a**3 * (np.arcsin(a * R) - a * R * np.sqrt(1 - (a * R) ** 2))
    assert star.baryon_mass[0] == pytest.approx(exact, rel=1e-6)


def test_newtonian_n1_polytrope_radius_at_low_density():
    # Newtonian n = 1 polytrope (Chandrasekhar 1939; ../shared/REFERENCE_VALUES.md):
    # R = pi sqrt(K / (2 pi G)) independent of rho_c; M = 4 pi^2 alpha^3 rho_c.
    # At rho_c = 1e11 g/cm^3 with this K the compactness is ~3e-5, so relativistic
    # corrections are of that order: tolerance 3e-4 (common practice: ~10 x GM/Rc^2).
    K = 1.0e5  # cgs, p [dyn/cm^2] = K rho^2
    eos = sm.polytrope("n1", K, 2.0)
    G = units.GRAVITATIONAL_CONSTANT_SI * 1e3
    alpha = np.sqrt(K / (2 * np.pi * G))  # cm
    for rho_c in (1e10, 1e11):
        cols = sm.solve_stars(eos, central_density=[rho_c])
        assert cols["compactness"][0] < 1e-4
        assert cols["radius"][0] == pytest.approx(np.pi * alpha / 1e5, rel=3e-4)
        M = 4 * np.pi**2 * alpha**3 * rho_c / units.SOLAR_MASS_G
        assert cols["mass"][0] == pytest.approx(M, rel=3e-4)


@pytest.mark.parametrize("rho_c", [4e14, 7e14, 1.2e15, 2.0e15, 3.2e15])
def test_sly_against_independent_solve_ivp(rho_c):
    # Independent references: scipy solve_ivp DOP853 at rtol 1e-11 in the r-form
    # (Tolman 1939; Oppenheimer & Volkoff 1939) and in Lindblom's (1992) h-form with
    # r, m themselves.  Required: 1e-6 relative in M and R (issue #2).
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    h_c = float(_h(eos, [rho_c])[0])
    ref_h = np.array(tov_in_enthalpy(eos, h_c))
    ref_r = np.array(tov_in_radius(eos, h_c))
    np.testing.assert_allclose(ref_h, ref_r, rtol=1e-8)  # the references agree with each other
    star = solve_interiors(eos, [h_c])
    got = np.array([star.radius[0], star.mass[0], star.baryon_mass[0]])
    np.testing.assert_allclose(got, ref_h, rtol=1e-6)


def test_polytrope_and_table_against_solve_ivp():
    # Same independent reference (solve_ivp DOP853, rtol 1e-11, Lindblom 1992 h-form),
    # for a single polytrope and for a tabulated EOS (the bundled hdm-soft table).
    poly = sm.polytrope("p", 3.5e4, 2.0)
    table = sm.from_table(
        "t", Path(__file__).parents[1] / "eos_tables" / "hdm_soft.csv",
        sm.TableColumns(("P", "dyn/cm2"), ("eps", "erg/cm3"), ("rho", "g/cm3"), "rest_mass_density"),
    )
    for eos, rhos in ((poly, [3e14, 1e15, 4e15]), (table, [6e14, 1.5e15, 2.5e15])):
        h_c = _h(eos, rhos)
        star = solve_interiors(eos, h_c)
        for i, h in enumerate(h_c):
            R, M, Mb = tov_in_enthalpy(eos, float(h))
            assert star.radius[i] == pytest.approx(R, rel=1e-6)
            assert star.mass[i] == pytest.approx(M, rel=1e-6)
            assert star.baryon_mass[i] == pytest.approx(Mb, rel=1e-6)


def test_batch_independence():
    # A star's result must not depend on which other stars share its batch
    # (design rule of the solver; checked to rounding, 1e-13).
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    h = _h(eos, np.geomspace(3e14, 3e15, 17))
    together = solve_interiors(eos, h)
    alone = solve_interiors(eos, h[[5]])
    reversed_ = solve_interiors(eos, h[::-1])
    assert alone.mass[0] == pytest.approx(together.mass[5], rel=1e-13)
    np.testing.assert_allclose(reversed_.radius[::-1], together.radius, rtol=1e-13)


def test_step_refinement_converges():
    # Self-convergence (common practice): halving every step changes M and R by
    # much less than the 1e-6 goal, and the change shrinks with the step.
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    h = _h(eos, [5e14, 1e15, 2e15])
    a = solve_interiors(eos, h, control=DEFAULT_STEPS)
    b = solve_interiors(eos, h, control=DEFAULT_STEPS.scaled(0.5))
    c = solve_interiors(eos, h, control=DEFAULT_STEPS.scaled(0.25))
    d1 = np.max(np.abs(a.mass / c.mass - 1))
    d2 = np.max(np.abs(b.mass / c.mass - 1))
    assert d1 < 1e-6 and d2 < d1 / 4


def test_central_series_leading_terms():
    # Lindblom (1992), eqs. 7-8: r^2 = 3 x / (2 pi (eps_c + 3 p_c)) and
    # m = (4 pi / 3) eps_c r^3 at leading order in x = h_c - h.
    u, v, w = central_series(0.1, 1.0, 0.9, 2.0, 1e-12)
    assert u == pytest.approx(3e-12 / (2 * np.pi * 1.3), rel=1e-9)
    assert v == pytest.approx(4 * np.pi / 3, rel=1e-9)
    assert w == pytest.approx(4 * np.pi / 3 * 0.9, rel=1e-9)


@pytest.mark.parametrize("rho_c", [1e11, 1e14, 1.7e14, 2e14, 3e14])
def test_low_density_and_puffed_up_stars(rho_c):
    # Below the minimum mass (rho_c ~ 2e14 g/cm^3 for SLy) the stars are puffed up, with
    # radii of hundreds to thousands of km mostly in the low-density envelope.  Same
    # independent reference as above (solve_ivp DOP853, rtol 1e-11); same 1e-6.
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    h_c = float(_h(eos, [rho_c])[0])
    R, M, Mb = tov_in_enthalpy(eos, h_c)
    star = solve_interiors(eos, [h_c])
    assert star.mass[0] == pytest.approx(M, rel=1e-6)
    assert star.radius[0] == pytest.approx(R, rel=1e-6)
    assert star.baryon_mass[0] == pytest.approx(Mb, rel=1e-6)
