"""Maximum mass and turning-point stability of sequences."""

from __future__ import annotations

import numpy as np
import pytest
from reference_solutions import tov_in_enthalpy
from scipy.optimize import minimize_scalar

import stellar_match as sm
from stellar_match import units

# Read, Lackey, Owen & Friedman 2009, PRD 79, 124032, Table III (from memory, as listed in
# ../shared/REFERENCE_VALUES.md): log10 p1, Gamma1-3, M_max [Msun].  The paper's fits
# reproduce the tabulated-EOS maximum masses to about a percent, so a correct TOV solve
# of these parameters lands within ~1.5 % of the M_max column.
READ_TABLE_III = {
    "SLy": (34.384, 3.005, 2.988, 2.851, 2.049),
    "APR4": (34.269, 2.830, 3.445, 3.348, 2.213),
    "FPS": (34.283, 2.985, 2.863, 2.600, 1.799),
    "MS1": (34.858, 3.224, 3.033, 1.325, 2.767),
    "H4": (34.669, 2.909, 2.246, 2.144, 2.032),
    "MPA1": (34.495, 3.446, 3.572, 2.887, 2.461),
    "ENG": (34.437, 3.514, 3.130, 3.168, 2.240),
    "WFF1": (34.031, 2.519, 3.791, 3.660, 2.133),
    "ALF2": (34.616, 4.070, 2.411, 1.890, 1.989),
}


@pytest.mark.parametrize("name", list(READ_TABLE_III))
def test_read_2009_maximum_masses(name):
    lp, g1, g2, g3, m_max = READ_TABLE_III[name]
    eos = sm.read_piecewise_polytrope(name, lp, [g1, g2, g3])
    seq = sm.sweep_eos(eos, "central_density", np.geomspace(5e14, 5e15, 30))
    assert seq.summary["max_mass_status"] == "found"
    assert seq.summary["max_mass"] == pytest.approx(m_max, rel=0.015)


def test_maximum_mass_against_independent_maximisation():
    # Independent: scipy's bounded Brent minimiser on -M(h_c), each M from the solve_ivp
    # reference (tests/reference_solutions.py).  Required: 1e-6 relative (issue #2).
    eos = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    seq = sm.sweep_eos(eos, "central_density", np.geomspace(4e14, 4e15, 12))  # coarse on purpose
    h_seq = eos.enthalpy_of_density(units.density_to_geometric(seq["central_density"]))
    i = int(np.argmax(seq["mass"]))
    res = minimize_scalar(lambda h: -tov_in_enthalpy(eos, h, rtol=1e-10)[1],
                          bounds=(h_seq[i - 1], h_seq[i + 1]), method="bounded",
                          options={"xatol": 1e-7})
    m_ref = -res.fun / units.SOLAR_MASS_KM
    assert seq.summary["max_mass"] == pytest.approx(m_ref, rel=1e-6)
    # and it is a refinement, not the largest sample (which is off by more than 1e-6)
    assert seq.summary["max_mass"] > seq["mass"].max() * (1 + 1e-6)
    R_ref = tov_in_enthalpy(eos, res.x, rtol=1e-10)[0]
    # R is not stationary at the maximum, so it carries the location error of both
    # maximisations (bounded Brent's xatol and our refinement): 1e-4 (common practice).
    assert seq.summary["max_mass_radius"] == pytest.approx(R_ref, rel=1e-4)


def test_stable_flags_follow_the_turning_point():
    # Turning-point criterion (Harrison, Thorne, Wakano & Wheeler 1965; Friedman, Ipser &
    # Sorkin 1988): stable iff dM/d rho_c > 0, i.e. below the first maximum for a sequence
    # that rises and then falls.
    eos = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    rho = np.geomspace(3e14, 5e15, 60)
    seq = sm.sweep_eos(eos, "central_density", rho[::-1])  # sweep order must not matter
    rho_max = seq.summary["max_mass_central_density"]
    np.testing.assert_array_equal(seq.stable, seq["central_density"] < rho_max)
    assert 0 < seq.stable.sum() < rho.size


def test_no_maximum_in_range_is_reported_not_invented():
    # A uniform-density sequence approaches the Buchdahl limit with M rising monotonically in
    # p_c (Schwarzschild 1916 exact solution), so no maximum exists: NaN plus a reason.
    eos = sm.incompressible("u", 1e15)
    seq = sm.sweep_eos(eos, "central_pressure", np.geomspace(1e33, 1e37, 20))
    assert np.isnan(seq.summary["max_mass"])
    assert seq.summary["max_mass_status"].startswith("not reached")
    assert seq.stable.all()
    assert not seq.summary["causal"]
    assert np.all(seq["compactness"] < 4 / 9)  # Buchdahl (1959)


def test_single_star_gets_a_stability_flag():
    eos = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    low = sm.sweep_eos(eos, "central_density", [1e15])
    high = sm.sweep_eos(eos, "central_density", [4e15])
    assert low.stable[0] and not high.stable[0]


def test_sweep_through_the_white_dwarf_branch():
    # Bardeen, Thorne & Meltzer 1966 (ApJ 145, 505): stability is lost at the white-dwarf
    # maximum (counter-clockwise bend), regained at the minimum mass (clockwise) and lost
    # again at the neutron-star maximum; M_max is the neutron-star one (Read et al. 2009, SLy).
    eos = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    seq = sm.sweep_eos(eos, "central_density", np.geomspace(1e6, 3e15, 80))
    rho, st = seq["central_density"], seq.stable
    assert seq.summary["max_mass"] == pytest.approx(2.049, rel=0.015)
    assert st[rho < 1e8].all()                      # white-dwarf-like branch, rising
    assert not st[(rho > 3e8) & (rho < 1.5e14)].any()  # between the two extrema
    assert st[(rho > 3e14) & (rho < 1.9e15)].all()  # the neutron-star branch
    assert not st[rho > 2.1e15].any()


def test_two_star_sweeps_use_local_slopes():
    # With two stars the slope between them says nothing about each star: each gets
    # its own dM/d rho_c from fresh solves (turning-point criterion as above).
    eos = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    seq = sm.sweep_eos(eos, "central_density", [1e15, 4e15])
    assert list(seq.stable) == [True, False]
    assert seq.summary["max_mass_status"] == "found"
    assert seq.summary["causal"]  # judged up to the maximum at 2.0e15, not up to 4e15


def test_third_family_twin_branch_is_stable():
    # A very soft middle piece (Gamma_2 = 0.5, a phase-transition-like softening; invented
    # parameters) produces a second stable branch (twin stars).  Bardeen, Thorne & Meltzer
    # 1966: the mode lost at the first maximum (counter-clockwise bend of M(R)) is regained
    # at the following minimum (clockwise bend), so the third family is stable; M_max is
    # the larger of the two maxima.
    eos = sm.read_piecewise_polytrope("twin", 34.6, [3.5, 0.5, 6.0])
    seq = sm.sweep_eos(eos, "central_density", np.geomspace(3e14, 8e15, 200))
    rho, m, st = seq["central_density"], seq["mass"], seq.stable
    turns = np.flatnonzero(np.diff(np.sign(np.diff(m))) != 0) + 1
    first_max, first_min, second_max = rho[turns[:3]]
    assert m[turns[0]] > m[turns[1]] < m[turns[2]]
    assert st[rho < first_max * 0.99].all()
    assert not st[(rho > first_max * 1.01) & (rho < first_min * 0.99)].any()
    assert st[(rho > first_min * 1.01) & (rho < second_max * 0.99)].all()
    assert not st[rho > second_max * 1.01].any()
    assert seq.summary["max_mass"] == pytest.approx(m[turns[2]], rel=1e-3)


def test_values_on_the_stable_branch_follow_scipys_not_a_knot_spline():
    # Reference: scipy.interpolate.CubicSpline (not-a-knot ends, its default; de Boor 1978, ch. IV)
    # against the compiled spline of stellar_match.kernels.branch_values, on random branches.
    from scipy.interpolate import CubicSpline

    from stellar_match.sequence import value_on_stable_branch

    rng = np.random.default_rng(7)
    for n in (4, 5, 9, 30):
        for _ in range(10):
            m = np.sort(rng.uniform(1.0, 2.2, n))
            v = rng.normal(size=n)
            t = rng.uniform(m[0], m[-1])
            got = value_on_stable_branch(m[::-1], v[::-1], np.ones(n, bool), t, cubic=True)  # any order
            assert got == pytest.approx(float(CubicSpline(m, v)(t)), rel=1e-12, abs=1e-12)
    m, v = np.array([1.0, 1.5, 2.0]), np.array([3.0, 2.0, 0.0])
    assert value_on_stable_branch(m, v, np.ones(3, bool), 1.75, cubic=True) == pytest.approx(1.0)  # linear below 4
    assert np.isnan(value_on_stable_branch(m, v, np.ones(3, bool), 2.1, cubic=True))  # not reached


def test_slopes_along_a_sweep_equal_numpys_gradient():
    # Reference: numpy.gradient on uneven spacing (second-order interior, first-order ends;
    # Fornberg 1988, Math. Comp. 51, 699), against the written-out formula of the sequence analysis.
    from stellar_match.sequence import _gradient

    rng = np.random.default_rng(3)
    for n in (2, 3, 7, 50):
        x = np.sort(rng.uniform(0.0, 3.0, n))
        y = rng.normal(size=n)
        np.testing.assert_allclose(_gradient(y, x), np.gradient(y, x), rtol=1e-12, atol=1e-12)
