"""Self-bound quark stars of the bag model (kind quark_matter), against independent references."""

from __future__ import annotations

import numpy as np
import pytest
from reference_solutions import assert_star_matches_references

import stellar_match as sm
from stellar_match import units
from stellar_match.eos import quark_matter
from stellar_match.eos.quark import bag_surface_chemical_potential
from stellar_match.errors import InputError
from stellar_match.structure import solve_interiors


def _h(eos, rho):
    return eos.enthalpy_of_density(units.density_to_geometric(np.asarray(rho, dtype=float)))


def test_bag_model_equation_of_state():
    # p = c_s^2 (eps - 4B) (Farhi & Jaffe 1984, PRD 30, 2379; massless quarks: c_s^2 = 1/3), a bare
    # surface at eps = 4B, and the first law d eps/d n = (eps + p)/n, by central differences
    # (finite-difference error ~1e-10, tolerance 1e-8).  The surface baryon chemical potential of
    # massless three-flavour matter, mu = 3 (4 pi^2 B (hbar c)^3 / 3)^(1/4), is 826.6 MeV for
    # B = 57 MeV/fm^3 (recomputed by hand from the formula, CODATA 2018 hbar c).
    B = 57.0
    for s in (1 / 3, 0.6):
        eos = quark_matter("q", B, s)
        four_b = 4 * units.pressure_to_geometric(B * units.MEV_PER_FM3_IN_ERG_PER_CM3)
        h = np.array([1e-3, 0.05, 0.3, 0.8])
        p, eps, rho = eos.state(h)
        np.testing.assert_allclose(p, s * (eps - four_b), rtol=1e-12)
        assert eos.surface_energy_density == pytest.approx(four_b, rel=1e-14)
        np.testing.assert_allclose(eos.sound_speed_squared(h), s, rtol=1e-14)
        d = 1e-6
        _, e_lo, _ = eos.state(eos.enthalpy_of_density(rho * (1 - d)))
        _, e_hi, _ = eos.state(eos.enthalpy_of_density(rho * (1 + d)))
        np.testing.assert_allclose((e_hi - e_lo) / (2 * d * rho), (eps + p) / rho, rtol=1e-8)
    assert bag_surface_chemical_potential(57.0) == pytest.approx(826.6, abs=0.1)


@pytest.mark.parametrize("rho_c", [6e14, 2e15])
def test_quark_stars_against_solve_ivp(rho_c):
    # Independent solve_ivp DOP853 references (tests/reference_solutions.py): Lindblom's h-form
    # for M, R, M_b (1e-6) and the r-form with Hinderer's y-equation, its surface jump
    # -4 pi R^3 eps(R-)/M (Damour & Nagar 2009) and Hartle's frame dragging for k2, Lambda, I (1e-5).
    eos = quark_matter("q", 57.0)
    h = float(_h(eos, [rho_c])[0])
    assert_star_matches_references(eos, h)


def test_a_small_quark_star_is_a_uniform_newtonian_sphere():
    # Just above the surface density the star is nearly uniform (eps varies by 3 p_c/eps ~ 1e-8) and
    # Newtonian (GM/(Rc^2) = 2e-8; k2 moves by about -5 C): k2 -> 3/4 with the surface jump of y and
    # I -> (2/5) M R^2 (Hinderer 2008; ../shared/REFERENCE_VALUES.md), M = (4 pi/3) 4B R^3; 1e-5.
    eos = quark_matter("q", 57.0)
    four_b = eos.surface_energy_density
    star = solve_interiors(eos, eos.enthalpy_of_pressure(np.array([1e-8 * four_b])))
    assert star.mass[0] / star.radius[0] < 1e-7
    assert star.love_number_k2[0] == pytest.approx(0.75, rel=1e-5)
    assert star.moment_of_inertia[0] / (star.mass[0] * star.radius[0] ** 2) == pytest.approx(0.4, rel=1e-5)
    assert star.mass[0] == pytest.approx(4 * np.pi / 3 * four_b * star.radius[0] ** 3, rel=1e-5)


def test_maximum_mass_scales_as_the_inverse_root_of_the_bag_constant():
    # With c_s^2 fixed, B is the only scale: M and R scale exactly as B^(-1/2) (Witten 1984,
    # PRD 30, 272).  Each M_max is refined to 1e-6, so the ratio holds to 3e-6; R at the maximum
    # moves to first order with the located central density (about 1e-5 here): 1e-4.  The published
    # value for B = 56 MeV/fm^3 is M_max = 2.033 Msun (from memory; Witten 1984 and the later
    # bag-model literature): 0.5 %.
    sweeps = {}
    for B in (56.0, 4 * 56.0):
        eos = quark_matter(f"q{B:g}", B)
        rho_s = units.density_from_geometric(eos.surface_density)
        sweeps[B] = sm.sweep_eos(eos, "central_density", rho_s * np.geomspace(1.2, 12.0, 30)).summary
    low, high = sweeps[56.0], sweeps[224.0]
    assert low["max_mass_status"] == high["max_mass_status"] == "found"
    assert low["max_mass"] / high["max_mass"] == pytest.approx(2.0, rel=3e-6)
    assert low["max_mass_radius"] / high["max_mass_radius"] == pytest.approx(2.0, rel=1e-4)
    assert low["max_mass"] == pytest.approx(2.033, rel=5e-3)


def test_bad_parameters_name_their_key():
    for kwargs, key in [({"bag_constant": -1.0}, "bag_constant"), ({"bag_constant": 0.0}, "bag_constant"),
                        ({"bag_constant": 60.0, "sound_speed_squared": 1.2}, "sound_speed_squared"),
                        ({"bag_constant": 60.0, "sound_speed_squared": 0.0}, "sound_speed_squared")]:
        with pytest.raises(InputError) as info:
            quark_matter("q", **kwargs)
        assert info.value.key == key
    eos = quark_matter("q", 60.0)
    with pytest.raises(InputError, match="not above the surface") as info:
        sm.solve_stars(eos, central_density=[1e14])
    assert info.value.key == "sweep.central_density"
