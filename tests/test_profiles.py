"""The solver's node states (structure.solve_profiles): the same solve as solve_interiors, recorded."""

from __future__ import annotations

import numpy as np

import stellar_match as sm
from stellar_match.eos import central_enthalpy
from stellar_match.structure import PROFILE_STEPS, solve_interiors, solve_profiles

SLY = dict(log10_p1=34.384, gammas=[3.005, 2.988, 2.851])  # Read et al. 2009, Table III


def _check_same(a, b):
    for name in ("mass", "radius", "baryon_mass", "moment_of_inertia", "love_number_k2", "status", "steps"):
        x, y = getattr(a, name), getattr(b, name)
        if x is None:
            assert y is None
            continue
        assert np.array_equal(x, y, equal_nan=True), name


def test_surface_nodes_are_the_surface_values_bit_for_bit():
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    h = central_enthalpy(eos, "central_density", np.array([3e14, 8e14, 2e15]))
    for response in (False, True):
        stars, prof = solve_profiles(eos, h, response=response)
        _check_same(solve_interiors(eos, h, response=response, control=PROFILE_STEPS), stars)
        for j in range(h.size):
            s = prof.star(j)
            assert s["radius"][-1] == stars.radius[j] and s["mass"][-1] == stars.mass[j]
            assert s["baryon_mass"][-1] == stars.baryon_mass[j]
            assert s["enthalpy"][0] == h[j] and s["radius"][0] == 0.0 and s["enthalpy"][-1] == 0.0
            assert np.all(np.diff(s["enthalpy"]) < 0) and np.all(np.diff(s["radius"]) > 0)
            assert np.all(np.isnan(prof.radius[j, prof.n_nodes[j]:]))
            # nu = ln(1 - 2M/R) - 2h: e^nu equals 1 - 2M/R at the surface
            assert s["g_tt_magnitude"][-1] == 1.0 - 2.0 * stars.mass[j] / stars.radius[j]
        assert (prof.frame_dragging is not None) == response


def test_nodes_are_the_accepted_steps_alone_or_in_a_batch():
    # a stiff-soft-stiff EOS whose soft piece makes the steps reject and shrink
    eos = sm.read_piecewise_polytrope("x", 34.4, [6.0, 0.6, 6.0])
    h = central_enthalpy(eos, "central_density", np.array([4e14, 1.9389e14]))
    stars, prof = solve_profiles(eos, h)
    _check_same(solve_interiors(eos, h, response=False, control=PROFILE_STEPS), stars)
    # the centre, the hand-over of the central series and one node per accepted step: rejected
    # steps leave none, so the nodes never outnumber the attempts
    assert np.all(prof.n_nodes - 2 <= stars.steps)
    alone_stars, alone = solve_profiles(eos, h[[1]])
    assert np.array_equal(alone.star(0)["radius"], prof.star(1)["radius"])


def test_frame_dragging_ratio_joins_the_exterior():
    # outside the star omega/Omega = 2 J / (Omega r^3) = 2 I / r^3 (Hartle 1967, ApJ 150, 1005, eq. 46 ff.)
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    h = central_enthalpy(eos, "central_density", np.array([8e14]))
    stars, prof = solve_profiles(eos, h, response=True)
    s = prof.star(0)
    exterior = 2.0 * stars.moment_of_inertia[0] / stars.radius[0] ** 3
    assert abs(s["frame_dragging_ratio"][-1] / exterior - 1.0) < 1e-12
    assert np.all(np.diff(s["frame_dragging_ratio"]) < 0)  # inertial frames dragged most at the centre


def test_bad_star_has_no_nodes():
    eos = sm.read_piecewise_polytrope("sly", **SLY)
    h = central_enthalpy(eos, "central_density", np.array([8e14]))
    from dataclasses import replace

    from stellar_match.structure import DEFAULT_STEPS

    stars, prof = solve_profiles(eos, h, control=replace(DEFAULT_STEPS, max_steps=20))
    assert stars.status[0] != 0 and prof.n_nodes[0] == 0
