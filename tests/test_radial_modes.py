"""Radial oscillation modes (stellar_match.radial_modes)."""

import numpy as np
import pytest
from scipy.optimize import brentq

import stellar_match as sm
from stellar_match import radial_modes as rmod
from stellar_match import units


def test_newtonian_homogeneous_sphere_fundamental():
    # Homogeneous sphere, constant Gamma_1, Newtonian: omega_0^2 = (3 Gamma_1 - 4)(4 pi G rho / 3)
    # (classical result, from memory; /work/shared/REFERENCE_VALUES.md); compactness ~1e-6 here,
    # so the relativistic correction is far below the 1e-4 tolerance.
    rho = 1e12
    eos = sm.incompressible("u", rho)
    for gamma1 in (5.0 / 3.0, 2.0, 3.0):
        res = rmod.radial_modes_of_eos(eos, np.array([1e-6]), modes=2, gamma1=gamma1)
        expected = (3 * gamma1 - 4) * 4 * np.pi * units.GRAVITATIONAL_CONSTANT_SI * 1e3 * rho / 3
        assert res.status[0] == 0
        assert res.omega_squared[0, 0] == pytest.approx(expected, rel=1e-4)
        assert res.stable[0]


def test_fundamental_changes_sign_at_maximum_mass():
    # Equilibrium Gamma_1 (the EOS's own): omega_0^2 = 0 at the turning point dM/drho_c = 0
    # (Harrison, Thorne, Wakano & Wheeler 1965, "Gravitation Theory and Gravitational Collapse",
    # from memory); SLy parameters of Read et al. 2009, PRD 79, 124032, Table III.
    eos = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    seq = sm.sweep_eos(eos, "central_density", np.geomspace(1.2e15, 3e15, 12))
    ln_max = np.log(seq.summary["max_mass_central_density"])

    def omega0(ln_rho):
        return rmod.radial_modes(eos, central_density=np.exp(ln_rho), modes=1).omega_squared[0, 0]

    assert omega0(ln_max - 0.05) > 0 > omega0(ln_max + 0.05)
    root = brentq(omega0, ln_max - 0.05, ln_max + 0.05, xtol=1e-7)
    assert abs(root - ln_max) < 1e-4


def test_overtones_increase_with_order_and_units():
    # Sturm-Liouville ordering: omega_0^2 < omega_1^2 < ... (Chandrasekhar 1964, ApJ 140, 417)
    eos = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    res = rmod.radial_modes(eos, central_density=np.geomspace(4e14, 1.8e15, 6), modes=4)
    assert np.all(res.status == 0) and np.all(res.stable)
    assert np.all(np.diff(res.omega_squared, axis=1) > 0)
    assert np.all(np.diff(res.frequency, axis=1) > 0)
    np.testing.assert_allclose(res.frequency, np.sqrt(res.omega_squared) / (2 * np.pi) / 1e3)
    table = res.to_table()
    assert str(table["radial_frequency"].unit) == "kHz"


def test_unstable_star_has_nan_frequency():
    eos = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    res = rmod.radial_modes(eos, central_density=[3.5e15], modes=2)
    assert res.omega_squared[0, 0] < 0 and np.isnan(res.frequency[0, 0]) and not res.stable[0]
    assert np.isfinite(res.frequency[0, 1])


@pytest.mark.parametrize("junction", ["rapid", "slow"])
def test_phase_transition_junction_against_shooting_reference(junction):
    # Junction conditions of Pereira, Flores & Lugones (2018, ApJ 860, 12; from memory) against an
    # independent shooting of the Gondek et al. (1997) system with solve_ivp (tests/reference_solutions.py).
    # Tolerance 3e-4: measured 4e-5 (rapid) and 4e-5 (slow) for the fundamental, the reference stops
    # at p = 1e-8 p_c and runs at rtol 1e-8 to stay fast.
    import warnings

    from reference_solutions import radial_mode_reference

    base = sm.polytrope("p", 1e5, 2.0)
    hybrid = sm.phase_transition("hybrid", base, 1.0e35, 3.0e14, 1.0)
    h = sm.eos.central_enthalpy(hybrid, "central_pressure", [3e35])
    res = rmod.radial_modes_of_eos(hybrid, h, modes=1, junction=junction)
    assert res.status[0] == 0
    w = res.omega_squared[0, 0] / units.SPEED_OF_LIGHT_KM_S**2
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # the reference's last steps divide by Gamma_1 p -> 0
        ref = radial_mode_reference(hybrid, float(h[0]), (0.97 * w, 1.03 * w), junction=junction,
                                    rtol=1e-8, surface_fraction=1e-8)
    assert w == pytest.approx(ref, rel=3e-4)


def test_rapid_conversion_is_less_stable_than_slow():
    # Pereira et al. (2018; from memory): with slow conversion omega_0^2 is larger (the stable branch
    # extends past the maximum mass); with rapid conversion the zero stays at the maximum.
    base = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    hybrid = sm.phase_transition("hybrid", base, 1.0e35, 3.0e14, 1.0)
    rapid = rmod.radial_modes(hybrid, central_pressure=[3e35, 6e35], modes=2, junction="rapid")
    slow = rmod.radial_modes(hybrid, central_pressure=[3e35, 6e35], modes=2, junction="slow")
    assert np.all(rapid.status == 0) and np.all(slow.status == 0)
    assert np.all(rapid.omega_squared[:, 0] < slow.omega_squared[:, 0])


def test_sweep_writes_radial_datasets_and_summary_reports_disagreement(tmp_path):
    # the config path end to end; with a constant Gamma_1 = 1.3 < 4/3 every star is radially unstable
    # (Newtonian limit omega_0^2 proportional to 3 Gamma_1 - 4; from memory) while the turning-point
    # rule calls the stars below the maximum stable: summary must say so.
    import h5py
    from astropy import units as u

    from stellar_match.cli import summary_table
    from stellar_match.runfile import read_run

    for gamma, expect in (("\"equilibrium\"", False), ("1.3", True)):
        cfg = tmp_path / "modes.toml"
        cfg.write_text("[sweep]\ncentral_density = { min = 1.5e15, max = 3.0e15, count = 8 }\nradial_modes = 3\n"
                       f"radial_adiabatic_index = {gamma}\n"
                       '[[eos]]\nname = "sly"\nkind = "piecewise_polytrope"\nlog10_p1 = 34.384\n'
                       "gammas = [3.005, 2.988, 2.851]\n")
        out = sm.run_config(cfg, tmp_path / "m.h5", force=True)
        with h5py.File(out) as f:
            g = f["eos/sly"]
            assert g["radial_omega_squared"].shape == (8, 3) and g["radial_frequency"].shape == (8, 3)
            for name in ("radial_omega_squared", "radial_frequency"):
                u.Unit(g[name].attrs["unit"])  # astropy parses the unit
            assert g["radial_frequency"].attrs["unit"] == "kHz"
            assert g["radial_stable"].shape == (8,) and g["mode"].shape == (3,)
            assert g["radial_frequency"].dims[1][0].name.endswith("/mode")
        text = summary_table(read_run(out))
        assert ("disagree" in text) is expect, text
        if not expect:
            run = read_run(out)
            np.testing.assert_array_equal(run.eos["sly"]["radial_stable"], run.eos["sly"].stable)
