"""Lindblom's spectral EOS (kind spectral): its integrals, the polytropic limit, stars against solve_ivp."""

from __future__ import annotations

import numpy as np
import pytest
from reference_solutions import tov_in_enthalpy
from scipy.integrate import quad

from stellar_match import units
from stellar_match.eos import PiecewisePolytrope, spectral
from stellar_match.eos.pieces import sly_crust
from stellar_match.errors import InputError
from stellar_match.structure import DEFAULT_STEPS, solve_interiors

#: A four-coefficient example of the size of Lindblom's (2010, PRD 82, 103011) fits (from memory).
GAMMAS = [0.9865, 0.1110, -0.0301, 0.0022]


def _join(eos):
    h0 = eos.joins[0]
    return h0, *(float(v[0]) for v in eos.state(np.array([h0])))


def test_energy_density_and_enthalpy_against_lindblom_integrals():
    # Lindblom (2010, eqs. 7-8): with mu(x) = exp(-int_0^x dx'/Gamma),
    #   eps(x) = eps_0 / mu(x) + (p_0 / mu(x)) int_0^x e^x' mu(x') / Gamma(x') dx',
    # and h(p) = h_0 + int_p0^p dp'/(eps + p'), both by scipy's adaptive quad (QUADPACK) here,
    # independently of the product's ODE solve and its Hermite pieces: 1e-8 (the representation's
    # measured error is 2e-9 in eps between knots).
    eos = spectral("s", GAMMAS)
    h0, p0, eps0, _ = _join(eos)

    def gamma(x):
        return np.exp(np.polyval(GAMMAS[::-1], x))

    def mu(x):
        return np.exp(-quad(lambda t: 1 / gamma(t), 0, x, epsabs=0, epsrel=1e-13)[0])

    def eps_of(x):
        inner = quad(lambda t: np.exp(t) * mu(t) / gamma(t), 0, x, epsabs=0, epsrel=1e-12)[0]
        return (eps0 + p0 * inner) / mu(x)

    for x in (0.37, 1.93, 4.41, 7.07):
        p = p0 * np.exp(x)
        h = float(eos.enthalpy_of_pressure(np.array([p]))[0])
        _, eps, _ = eos.state(np.array([h]))
        assert eps[0] == pytest.approx(eps_of(x), rel=1e-8), x
        h_ref = h0 + quad(lambda t: p0 * np.exp(t) / (eps_of(t) + p0 * np.exp(t)), 0, x, epsabs=0, epsrel=1e-11)[0]
        assert h == pytest.approx(h_ref, rel=1e-8), x
        # c_s^2 = Gamma p / (eps + p) by definition of the adiabatic index; it holds the second derivative
        # of the Hermite pieces (measured error 1e-7): 1e-6
        assert eos.sound_speed_squared(np.array([h]))[0] == pytest.approx(gamma(x) * p / (eps[0] + p), rel=1e-6)


def test_a_constant_adiabatic_index_is_a_polytrope_above_the_join():
    # gammas = [ln Gamma, 0]: Gamma(x) = Gamma, i.e. p = K n^Gamma above p_0 (Lindblom 2010), which is a
    # polytropic piece joined to the crust at p_0 with p and eps continuous (Read et al. 2009, eqs. 3-7):
    # the same EOS (1e-8, the representation's error) and the same stars (M, R, M_b to 1e-8 on steps
    # scaled by 1/2; Lambda, which sees d eps/dh, to 1e-7).
    gamma_core = 2.6
    eos = spectral("s", [np.log(gamma_core), 0.0])
    crust = sly_crust("c", "x")
    h0, p0, _, rho0 = _join(eos)
    K = crust.K
    reference = PiecewisePolytrope(
        name="pp", kind="polytrope", lower_densities=np.append(crust.lower_densities, rho0),
        K=np.append(K, p0 / rho0**gamma_core), gamma=np.append(crust.gamma, gamma_core))
    h = np.linspace(1e-4, 0.9 * min(eos.h_max, 1.0), 400)
    for a, b in zip(eos.state(h), reference.state(h), strict=True):
        np.testing.assert_allclose(a, b, rtol=1e-8)
    h_c = reference.enthalpy_of_density(units.density_to_geometric(np.array([6e14, 1.5e15])))
    fine = DEFAULT_STEPS.scaled(0.5)
    a, b = solve_interiors(eos, h_c, control=fine), solve_interiors(reference, h_c, control=fine)
    for k in ("mass", "radius", "baryon_mass"):
        np.testing.assert_allclose(getattr(a, k), getattr(b, k), rtol=1e-8, err_msg=k)
    np.testing.assert_allclose(a.tidal_deformability, b.tidal_deformability, rtol=1e-7)


def test_spectral_stars_against_solve_ivp():
    # Independent solve_ivp DOP853 reference in Lindblom's h-form (tests/reference_solutions.py),
    # piece by piece between the EOS's knots: M, R, M_b to 1e-6.
    eos = spectral("s", GAMMAS)
    h = eos.enthalpy_of_density(units.density_to_geometric(np.array([1.2e15])))
    star = solve_interiors(eos, h)
    R, M, Mb = tov_in_enthalpy(eos, float(h[0]))
    assert star.status[0] == 0
    assert star.mass[0] == pytest.approx(M, rel=1e-6)
    assert star.radius[0] == pytest.approx(R, rel=1e-6)
    assert star.baryon_mass[0] == pytest.approx(Mb, rel=1e-6)


@pytest.mark.parametrize("kwargs, key", [
    ({"gammas": [1.0]}, "gammas"), ({"gammas": [1.0, 0.1, 0.0, 0.0, 0.0]}, "gammas"),
    ({"gammas": [1.0, -1.5]}, "gammas"),  # Gamma -> 0 within two decades: eps runs away
    ({"gammas": [1.0, 0.1], "reference_pressure": 1e36}, "reference_pressure"),
    ({"gammas": [1.0, 0.1], "reference_pressure": 1e29}, "reference_pressure"),
])
def test_bad_parameters_name_their_key(kwargs, key):
    with pytest.raises(InputError) as info:
        spectral("s", **kwargs)
    assert info.value.key == key
