"""EOS kinds: Read et al. crust coefficients, table interpolation, first law, causality."""

from __future__ import annotations

import numpy as np
import pytest

import stellar_match as sm
from stellar_match import units
from stellar_match.eos import SLY_CRUST, TableColumns, from_table, sly_crust_dividing_densities

SLY = dict(log10_p1=34.384, gammas=[3.005, 2.988, 2.851])  # Read et al. 2009, Table III
C2 = (units.SPEED_OF_LIGHT_SI * 1e2) ** 2


def test_sly_crust_coefficients_are_continuous():
    # Read et al. 2009, Table II (from memory, ../shared/REFERENCE_VALUES.md): the four
    # crust pieces are continuous in pressure at the listed densities to about 1e-4,
    # so the recomputed dividing densities agree with the printed ones to ~1e-3.
    printed = np.array([row[2] for row in SLY_CRUST[:3]])
    np.testing.assert_allclose(sly_crust_dividing_densities(), printed, rtol=1e-3)
    for (K0, g0, rho), (K1, g1, _) in zip(SLY_CRUST[:-1], SLY_CRUST[1:], strict=True):
        assert K0 * rho**g0 == pytest.approx(K1 * rho**g1, rel=3e-4)


def test_read_energy_density_formula():
    # Read et al. 2009, eq. 5: eps = (1 + a_i) rho c^2 + K_i rho^Gamma_i c^2/(Gamma_i - 1); in the
    # first crust piece a_0 = 0, so eps/c^2 = rho + p/((Gamma_0 - 1) c^2) exactly.
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    rho = np.array([1e4, 1e6])
    p, eps, rho_back = eos.state(eos.enthalpy_of_density(units.density_to_geometric(rho)))
    np.testing.assert_allclose(units.density_from_geometric(rho_back), rho, rtol=1e-12)
    K0, g0, _ = SLY_CRUST[0]
    np.testing.assert_allclose(units.pressure_from_geometric(p), K0 * C2 * rho**g0, rtol=1e-10)
    np.testing.assert_allclose(units.density_from_geometric(eps), rho + K0 * rho**g0 / (g0 - 1), rtol=1e-12)


def test_piecewise_polytrope_is_continuous_and_consistent():
    # First law d eps/d rho = (eps + p)/rho (zero-temperature thermodynamics) checked by
    # central differences; p and eps continuous at every piece boundary.
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    for hb in eos.breakpoints_h:
        lo = eos.state(np.array([hb * (1 - 1e-12)]))
        hi = eos.state(np.array([hb * (1 + 1e-12)]))
        for a, b in zip(lo, hi, strict=True):
            assert a[0] == pytest.approx(b[0], rel=1e-9)
    rho = units.density_to_geometric(np.geomspace(1e5, 3e15, 50))
    d = 1e-6
    _, e_lo, _ = eos.state(eos.enthalpy_of_density(rho * (1 - d)))
    _, e_hi, _ = eos.state(eos.enthalpy_of_density(rho * (1 + d)))
    p, e, _ = eos.state(eos.enthalpy_of_density(rho))
    np.testing.assert_allclose((e_hi - e_lo) / (2 * d * rho), (e + p) / rho, rtol=1e-6)


def _write_table_from(eos, path, rows, with_breaks=False):
    rho = units.density_to_geometric(np.geomspace(1e4, 5e15, rows))
    if with_breaks:  # rows also at the analytic piece boundaries
        rho = np.unique(np.concatenate([rho, eos.lower_densities[1:]]))
    p, e, r = eos.state(eos.enthalpy_of_density(rho))
    p_cgs = units.pressure_from_geometric(p)
    e_cgs = units.density_from_geometric(e)
    r_cgs = units.density_from_geometric(r)
    lines = ["# generated from an analytic piecewise polytrope", "nb,p,e"]
    mev = units.MEV_PER_FM3_IN_ERG_PER_CM3
    for a, b, c in zip(r_cgs / units.NEUTRON_MASS_G / 1e39, p_cgs / mev, e_cgs * C2 / mev, strict=True):
        lines.append(f"{a:.15e},{b:.15e},{c:.15e}")
    path.write_text("\n".join(lines) + "\n")
    return TableColumns(("p", "MeV/fm3"), ("e", "MeV/fm3"), ("nb", "fm-3"), "baryon_density")


def test_table_first_law_holds_on_the_interpolant(tmp_path):
    # The first law d eps/d n = (eps + p)/n (e.g. Glendenning 2000, eq. 2.34, zero temperature)
    # must hold on the interpolated table, not only at its rows: checked by central
    # differences at points between rows, tolerance 1e-6 (finite-difference error ~1e-9).
    analytic = sm.read_piecewise_polytrope("sly", **SLY)
    cols = _write_table_from(analytic, tmp_path / "t.csv", 300)
    table = from_table("t", tmp_path / "t.csv", cols)
    assert table.parameters["max_first_law_deviation"] < 1e-3
    rho = units.density_to_geometric(np.geomspace(2e4, 4e15, 997))  # mostly between rows
    d = 1e-6
    _, e_lo, _ = table.state(table.enthalpy_of_density(rho * (1 - d)))
    _, e_hi, _ = table.state(table.enthalpy_of_density(rho * (1 + d)))
    p, e, _ = table.state(table.enthalpy_of_density(rho))
    np.testing.assert_allclose((e_hi - e_lo) / (2 * d * rho), (e + p) / rho, rtol=1e-6)
    # Between rows inside one analytic piece the power law is exact, so p matches the analytic
    # EOS to the table's rounding; eps carries the first-law integration constant across the
    # few intervals that straddle a kink (measured drift 1e-5), hence its looser 3e-5.
    p_a, e_a, r_a = analytic.state(analytic.enthalpy_of_density(rho))
    inside = np.ones(rho.size, bool)
    for rb in analytic.lower_densities[1:]:
        inside &= np.abs(np.log(rho / rb)) > 0.12  # skip intervals straddling an analytic boundary
    np.testing.assert_allclose(p[inside], p_a[inside], rtol=1e-8)
    np.testing.assert_allclose(e[inside], e_a[inside], rtol=3e-5)


def test_table_sound_speed_has_no_overshoot(tmp_path):
    # Monotone interpolation: between two rows c_s^2 = Gamma_i p/(eps + p) lies between its values
    # at the rows (no spline wiggles), and on intervals inside one analytic piece it equals the
    # analytic c_s^2 (the power law is exact there).  Rule: common practice for table EOS.
    analytic = sm.read_piecewise_polytrope("sly", **SLY)
    cols = _write_table_from(analytic, tmp_path / "t.csv", 300)
    table = from_table("t", tmp_path / "t.csv", cols)
    knots = np.concatenate([[0.0], table.breakpoints_h, [table.h_max]])
    for a, b in zip(knots[1:-1], knots[2:], strict=True):
        h = np.linspace(a, b, 7)
        cs = table.sound_speed_squared(h[1:-1])
        i = table.piece_index(h[3:4])
        coeff = {k: v[np.repeat(i, 2)] for k, v in table.piece_arrays().items()}
        p_end, e_end, _ = table.state_from_coefficients(h[[0, -1]], coeff)
        ends = table.gamma[i] * p_end / (e_end + p_end)
        assert np.all(cs >= ends.min() * (1 - 1e-9)) and np.all(cs <= ends.max() * (1 + 1e-9))
    h = np.linspace(0.05, 0.9 * table.h_max, 200)
    rho_h = table.state(h)[2]
    inside = np.ones(h.size, bool)
    rho_breaks = analytic.lower_densities[1:]
    for rb in rho_breaks:  # skip table intervals that straddle an analytic boundary
        inside &= np.abs(np.log(rho_h / rb)) > 0.12
    cs_a = analytic.sound_speed_squared(analytic.enthalpy_of_density(rho_h[inside]))
    np.testing.assert_allclose(table.sound_speed_squared(h[inside]), cs_a, rtol=1e-3)


def test_table_path_against_analytic_path(tmp_path):
    # The same EOS given as a 500-row table (rows including the piece boundaries) and
    # analytically yields the same stars: the interpolant is then exact up to the
    # 15-digit table, so the tolerance is the solver's own, 1e-6 (issue #2).
    analytic = sm.read_piecewise_polytrope("sly", **SLY)
    cols = _write_table_from(analytic, tmp_path / "t.csv", 500, with_breaks=True)
    table = from_table("t", tmp_path / "t.csv", cols)
    rho_c = np.array([5e14, 1e15, 2e15])
    a = sm.solve_stars(analytic, central_density=rho_c)
    t = sm.solve_stars(table, central_density=rho_c)
    np.testing.assert_allclose(t["mass"], a["mass"], rtol=1e-6)
    np.testing.assert_allclose(t["radius"], a["radius"], rtol=1e-6)


def test_causality_flags():
    # c_s^2 = Gamma p / (eps + p) for a polytrope with eps = rho c^2 + p/(Gamma - 1) tends to
    # Gamma - 1 at high density: Gamma = 2 stays causal, Gamma = 3 becomes acausal once
    # p/(eps + p) > 1/3, i.e. p > eps/2.  An incompressible fluid is never causal.
    soft = sm.polytrope("soft", 1e5, 2.0)
    stiff = sm.polytrope("stiff", 1e-5, 3.0)
    assert soft.max_sound_speed_squared(5.0) < 1.0
    assert stiff.max_sound_speed_squared(5.0) > 1.0
    h = np.array([0.1, 0.5, 1.0])
    p, e, _ = stiff.state(h)
    np.testing.assert_allclose(stiff.sound_speed_squared(h), 3 * p / (e + p), rtol=1e-12)
    assert sm.incompressible("u", 1e15).max_sound_speed_squared(1.0) == np.inf
