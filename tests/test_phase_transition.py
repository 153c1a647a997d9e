"""First-order phase transitions (kind phase_transition): hybrid stars, the interior tidal jump, Seidov."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import EOS_TABLES
from reference_solutions import hybrid_star_in_radius

import stellar_match as sm
from stellar_match import units
from stellar_match.eos import phase_transition, quark_matter
from stellar_match.errors import InputError
from stellar_match.structure import DEFAULT_STEPS, solve_interiors

#: SLy in the Read et al. (2009, PRD 79, 124032, Table III) parametrisation.
SLY = dict(log10_p1=34.384, gammas=[3.005, 2.988, 2.851])
P_T = 1.0e35  # dyn/cm^2: on SLy at about 2.6 times nuclear saturation density


def _sly():
    return sm.read_piecewise_polytrope("sly", **SLY)


def test_no_jump_with_the_base_sound_speed_is_the_base_itself():
    # delta_eps = 0 and c_s^2 equal to the base's: the same EOS (to round-off), so the same stars.
    # The base is bag-model quark matter, whose c_s^2 = 1/3 holds on both sides of p_t.  The two
    # solves differ only in their step grids (the transition adds edges), so both run on steps
    # scaled by 1/4, where the solver's own error is ~1e-11 in M and R: identical to 1e-9
    # (issue 11).
    base = quark_matter("q", 57.0)
    p_t = units.pressure_from_geometric(base.state(np.array([0.15]))[0][0])
    eos = phase_transition("pt", base, p_t, 0.0, 1.0 / 3.0)
    h = np.linspace(0.01, 1.0, 300)
    for a, b in zip(base.state(h), eos.state(h), strict=True):
        np.testing.assert_allclose(b, a, rtol=1e-13)
    h_c = np.array([0.12, 0.2, 0.4, 0.7])  # the first without a core
    fine = DEFAULT_STEPS.scaled(0.25)
    plain, hybrid = solve_interiors(base, h_c, control=fine), solve_interiors(eos, h_c, control=fine)
    for k in ("mass", "radius", "baryon_mass", "love_number_k2", "tidal_deformability", "moment_of_inertia"):
        np.testing.assert_allclose(getattr(hybrid, k), getattr(plain, k), rtol=1e-9, err_msg=k)
    assert np.isnan(hybrid.core_radius[0]) and np.all(hybrid.core_radius[1:] > 0)


@pytest.mark.parametrize("h_c", [0.25, 0.5], ids=["small core", "large core"])
def test_hybrid_stars_against_solve_ivp_across_the_jump(h_c):
    # Independent reference (tests/reference_solutions.py: hybrid_star_in_radius): solve_ivp DOP853
    # at rtol 1e-11 in the r-form, across a jump smoothed over 1e-8 p_t with the pressure as the
    # variable, so the tidal equation integrates the spike of d eps/dp itself and no jump condition
    # is assumed.  Required (issue 11): M, R (and M_b) to 1e-6, Lambda to 1e-5; I and the core to 1e-5.
    eos = phase_transition("hybrid", _sly(), P_T, 3.0e14, 1.0)
    star = solve_interiors(eos, np.array([h_c]))
    assert star.status[0] == 0
    R, M, Mb, k2, lam, inertia, r_core, m_core = hybrid_star_in_radius(eos, h_c)
    assert star.mass[0] == pytest.approx(M, rel=1e-6)
    assert star.radius[0] == pytest.approx(R, rel=1e-6)
    assert star.baryon_mass[0] == pytest.approx(Mb, rel=1e-6)
    assert star.tidal_deformability[0] == pytest.approx(lam, rel=1e-5)
    assert star.love_number_k2[0] == pytest.approx(k2, rel=1e-5)
    assert star.moment_of_inertia[0] == pytest.approx(inertia, rel=1e-5)
    assert star.core_radius[0] == pytest.approx(r_core, rel=1e-5)
    assert star.core_mass[0] == pytest.approx(m_core, rel=1e-5)


def _critical_jump():
    # delta_eps_crit = eps_t/2 + 3 p_t/2 (Seidov 1971, Sov. Astron. 15, 347), as eps/c^2 in g/cm^3
    return phase_transition("probe", _sly(), P_T, 0.0, 1.0).parameters["seidov_critical_jump"]


@pytest.mark.parametrize("factor", [0.75, 1.25])
def test_seidov_criterion_in_the_stability_flags(factor):
    # Seidov (1971): a jump above delta_eps_crit = eps_t/2 + 3 p_t/2 makes the sequence unstable as soon
    # as a core of the new phase appears; below it the hybrid stars just past p_t stay stable.  The
    # turning-point flags of a sweep of central pressures 1 % around p_t, on both sides of the critical
    # jump (25 % away: the sign change itself is checked by the slopes below).
    crit = _critical_jump()
    eos = phase_transition("pt", _sly(), P_T, factor * crit, 1.0)
    p_c = P_T * np.concatenate([np.linspace(0.99, 0.9999, 12), np.linspace(1.0005, 1.01, 12)])
    seq = sm.sweep_eos(eos, "central_pressure", p_c)
    core = np.isfinite(seq["core_radius"])
    np.testing.assert_array_equal(core, p_c > P_T)
    below, above = seq.stable[~core], seq.stable[core]
    assert below[:-1].all()  # the last one may meet the turning point between samples
    assert above.all() if factor < 1 else not above.any()


@pytest.mark.parametrize("factor", [0.9, 1.1])
def test_seidov_criterion_in_the_slope_at_the_onset(factor):
    # The same criterion 10 % from the critical jump, as the sign of dM/dp_c just past p_t: the core's
    # own (p_c - p_t)^(3/2) term is ~1 % of the slope at 1e-4 above p_t.  Fresh solves on steps scaled
    # by 1/2 (errors ~1e-9, far below the mass differences of ~4e-6).
    eos = phase_transition("pt", _sly(), P_T, factor * _critical_jump(), 1.0)
    p_c = P_T * np.array([1 + 1e-4, 1 + 2e-4])
    h = eos.enthalpy_of_pressure(units.pressure_to_geometric(p_c))
    mass = solve_interiors(eos, h, control=DEFAULT_STEPS.scaled(0.5), response=False).mass
    assert (mass[1] > mass[0]) == (factor < 1)


def test_core_datasets_and_rebuild_from_the_run_file(tmp_path):
    # Stars with a core report its radius and mass (NaN without one), the run file records the
    # parameters with the base, and --masses rebuilds the same EOS from them.
    config = tmp_path / "pt.toml"
    config.write_text(f"""\
[sweep]
central_density = {{ min = 6e14, max = 2.5e15, count = 8 }}
[[eos]]
name = "hybrid"
kind = "phase_transition"
base = {{ kind = "piecewise_polytrope", log10_p1 = {SLY['log10_p1']}, gammas = {SLY['gammas']} }}
transition_pressure = {P_T}
energy_density_jump = 3.0e14
sound_speed_squared = 1.0
""")
    run = sm.read_run(sm.run_config(config, tmp_path / "pt.h5"))
    seq = run.eos["hybrid"]
    core = np.isfinite(seq["core_radius"])
    assert core.any() and not core.all()
    assert np.all(seq["core_radius"][core] < seq["radius"][core])
    assert np.all(seq["core_mass"][core] < seq["mass"][core])
    assert seq.parameters["base"]["kind"] == "piecewise_polytrope"
    from stellar_match.sweep import eos_from_sequence, stars_at_masses

    again = eos_from_sequence(seq)
    h = np.linspace(0.01, 0.6, 50)
    for a, b in zip(again.state(h), phase_transition("x", _sly(), P_T, 3.0e14, 1.0).state(h), strict=True):
        np.testing.assert_array_equal(a, b)
    found = stars_at_masses(again, seq, [1.8])
    assert found["mass"][0] == pytest.approx(1.8, rel=1e-6) and np.isfinite(found["core_radius"][0])


def test_bad_parameters_name_their_key():
    base = _sly()
    for args, key in [((-1.0, 1e14, 1.0), "transition_pressure"), ((P_T, -1.0, 1.0), "energy_density_jump"),
                      ((P_T, 1e14, 0.0), "sound_speed_squared"), ((P_T, 1e14, 1.5), "sound_speed_squared")]:
        with pytest.raises(InputError) as info:
            phase_transition("pt", base, *args)
        assert info.value.key == key
    # a table ends at its last row: p_t beyond it is outside the base's range
    table = sm.from_table("t", EOS_TABLES / "hdm_medium.csv", sm.TableColumns(
        ("p", "MeV/fm3"), ("e", "MeV/fm3"), ("nb", "fm-3"), "baryon_density"))
    with pytest.raises(InputError, match="beyond the base") as info:
        phase_transition("pt", table, 1e38, 1e14, 1.0)
    assert info.value.key == "transition_pressure"
    with pytest.raises(InputError) as info:
        phase_transition("pt2", phase_transition("pt", base, P_T, 1e14, 1.0), 2 * P_T, 1e14, 1.0)
    assert info.value.key == "base.kind"


def test_twin_stars_form_a_third_family():
    # A large jump (1.2 eps_t, above Seidov's 0.5 eps_t + 1.5 p_t) into a stiff phase (c_s^2 = 1) at
    # 1.5e35 dyn/cm^2: the hybrid branch turns unstable at once and then stable again, a third family
    # whose stars have the masses of first-family stars at smaller radii ("twins"; Glendenning &
    # Kettner 2000, A&A 353, L9; Alford, Han & Prakash 2013).  The turning-point flags must show two
    # stable branches (Bardeen, Thorne & Meltzer 1966), the second one with cores.
    p_t = 1.5e35
    eps_t = phase_transition("probe", _sly(), p_t, 0.0, 1.0).parameters["transition_energy_density"]
    eos = phase_transition("twins", _sly(), p_t, 1.2 * eps_t, 1.0)
    seq = sm.sweep_eos(eos, "central_pressure", np.geomspace(2e34, 1e37, 40))
    stable, core = seq.stable, np.isfinite(seq["core_radius"])
    edges = np.flatnonzero(np.diff(stable.astype(int)))
    assert stable[0] and len(edges) == 3, stable  # stable, unstable, stable, unstable
    first, third = np.arange(edges[0] + 1), np.arange(edges[1] + 1, edges[2] + 1)
    assert not core[first].any() and core[third].all()
    m1, r1 = seq["mass"][first], seq["radius"][first]
    m3, r3 = seq["mass"][third], seq["radius"][third]
    assert m3.min() < m1.max()  # a mass range with two stable stars ...
    twin = m3 < m1.max()
    assert np.all(np.interp(m3[twin], m1, r1) - r3[twin] > 1.0)  # ... more than 1 km apart in radius
    assert seq.summary["max_mass"] == pytest.approx(m3.max(), rel=1e-3)  # the largest stable maximum
