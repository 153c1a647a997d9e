"""Sound speed at nodes in ln n (kind sound_speed_nodes): one integration, exact limits, stars."""

from __future__ import annotations

import numpy as np
import pytest
from reference_solutions import assert_star_matches_references
from scipy.integrate import solve_ivp

from stellar_match import units
from stellar_match.eos import phase_transition, sound_speed_nodes
from stellar_match.errors import InputError
from stellar_match.structure import DEFAULT_STEPS, solve_interiors

DENSITIES = [1.5e14, 3e14, 6e14, 1.2e15, 2.4e15]  # g/cm^3
CS2 = [0.05, 0.3, 0.6, 0.4, 0.5]


def _join(eos):
    h0 = eos.joins[0]
    return h0, *(float(v[0]) for v in eos.state(np.array([h0])))


def test_against_an_independent_integration_of_the_first_law():
    # The first law at zero temperature with c_s^2 = d ln mu/d ln n (e.g. Glendenning 2000, ch. 2):
    # dh/dl = c_s^2, d(eps + p)/dl = (1 + c_s^2)(eps + p), dp/dl = c_s^2 (eps + p), l = ln n, integrated
    # node interval by node interval by solve_ivp (DOP853, rtol 1e-13) from the join.  The product's
    # Hermite pieces must follow it to 1e-8 in p, eps, rho (measured 1e-9, 1e-8), and c_s^2 must be
    # linear in ln n between the nodes to 2e-6 (measured 5e-7).
    eos = sound_speed_nodes("c", DENSITIES, CS2)
    h0, p0, eps0, rho0 = _join(eos)
    nodes = np.log(units.density_to_geometric(np.array(DENSITIES)))

    def rhs(l, y):
        c = np.interp(l, nodes, CS2)
        return [c, y[1] * (1 + c), c * y[1]]

    edges = [*nodes, np.log(units.density_to_geometric(5e15))]
    samples = np.log(units.density_to_geometric(np.geomspace(1.55e14, 4.9e15, 300)))
    y, rows = [h0, eps0 + p0, p0], []
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        inside = samples[(samples >= a) & (samples < b)]
        sol = solve_ivp(rhs, (a, b), y, method="DOP853", rtol=1e-13, atol=1e-40, dense_output=True)
        rows.append(sol.sol(inside))
        y = sol.sol(b)
    h, w, p = np.concatenate(rows, axis=1)
    P, E, R = eos.state(h)
    np.testing.assert_allclose(P, p, rtol=1e-8)
    np.testing.assert_allclose(E, w - p, rtol=1e-8)
    np.testing.assert_allclose(R, np.exp(samples), rtol=1e-8)
    np.testing.assert_allclose(eos.sound_speed_squared(h), np.interp(samples, nodes, CS2), rtol=2e-6)


def test_one_node_is_an_exact_constant_sound_speed_above_the_join():
    # c_s^2 = s constant: eps + p = w_0 (n/n_0)^(1 + s) and p = p_0 + s (eps + p - w_0)/(1 + s) (integrate the
    # first law by hand); the single node gives that piece exactly (1e-12).
    s = 0.45
    eos = sound_speed_nodes("c", [2e14], [s])
    h0, p0, eps0, rho0 = _join(eos)
    rho = units.density_to_geometric(np.geomspace(2.1e14, 5e15, 50))
    p, eps, rho_back = eos.state(eos.enthalpy_of_density(rho))
    w = (eps0 + p0) * (rho / rho0) ** (1 + s)
    np.testing.assert_allclose(rho_back, rho, rtol=1e-12)
    np.testing.assert_allclose(eps + p, w, rtol=1e-12)
    np.testing.assert_allclose(p, p0 + s * (w - eps0 - p0) / (1 + s), rtol=1e-12)


def test_a_transition_without_jump_on_a_constant_sound_speed_base_is_the_base():
    # Issue 11: delta_eps = 0 with the base's c_s^2, on a base whose c_s^2 is constant above p_t (here 0.5
    # above its last node, 4e14 g/cm^3), gives the base's stars: 1e-9 on steps scaled by 1/4 (the two
    # grids differ only by the transition's edges).
    base = sound_speed_nodes("b", [1.5e14, 4e14], [0.2, 0.5])
    p_t = units.pressure_from_geometric(float(base.state(base.enthalpy_of_density(
        units.density_to_geometric(np.array([6e14]))))[0][0]))
    eos = phase_transition("pt", base, p_t, 0.0, 0.5)
    h_c = base.enthalpy_of_density(units.density_to_geometric(np.array([5e14, 9e14, 2e15])))
    fine = DEFAULT_STEPS.scaled(0.25)
    a, b = solve_interiors(base, h_c, control=fine), solve_interiors(eos, h_c, control=fine)
    for k in ("mass", "radius", "baryon_mass", "tidal_deformability", "moment_of_inertia"):
        np.testing.assert_allclose(getattr(b, k), getattr(a, k), rtol=1e-9, err_msg=k)


def test_stars_against_solve_ivp():
    # Independent solve_ivp DOP853 references (tests/reference_solutions.py): M, R, M_b in the h-form to
    # 1e-6; k2, Lambda, I in the r-form (Postnikov et al. 2010; Hartle 1967) to 1e-5.
    eos = sound_speed_nodes("c", DENSITIES, CS2)
    h = float(eos.enthalpy_of_density(units.density_to_geometric(np.array([1.1e15])))[0])
    assert_star_matches_references(eos, h, k2=False)


@pytest.mark.parametrize("densities, cs2, key", [
    ([3e14, 2e14], [0.3, 0.4], "densities"),  # not increasing
    ([1e11, 2e14], [0.3, 0.4], "densities"),  # first node below the crust fit's last piece
    ([2e14, 4e14], [0.3], "sound_speed_squared"),  # one value per node
    ([2e14, 4e14], [0.3, 1.2], "sound_speed_squared"),  # acausal
    ([2e14, 4e14], [0.0, 0.4], "sound_speed_squared"),
])
def test_bad_parameters_name_their_key(densities, cs2, key):
    with pytest.raises(InputError) as info:
        sound_speed_nodes("c", densities, cs2)
    assert info.value.key == key
