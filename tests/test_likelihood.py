"""Likelihoods, Bayes factors, ensemble weights and bands against independent references.

References used here:
- scipy.integrate.quad (QUADPACK; Piessens et al. 1983) integrating each
  likelihood's defining integral along analytic mass-radius curves and along
  a scipy CubicSpline through a real sweep;
- scipy.stats (norm, multivariate_normal, halfnorm, gaussian_kde) for the
  densities themselves;
- the closed form of the Gaussian mass likelihood,
  [Phi((M_max - mu)/sigma) - Phi((M_floor - mu)/sigma)] / (M_max - M_floor);
- Kish (1965, "Survey Sampling") for the effective sample size;
- numpy.quantile(method="hazen") (Hazen 1914 plotting positions) for the
  weighted quantiles with equal weights.
"""

from __future__ import annotations

import math
import shutil

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.interpolate import CubicSpline
from scipy.stats import gaussian_kde, halfnorm, multivariate_normal, norm

import stellar_match as sm
from stellar_match import units
from stellar_match.constraints import parse_constraints
from stellar_match.likelihood import density_of, log_likelihoods, stable_branches, values_at_masses
from stellar_match.scoring import (
    bayes_factors,
    effective_sample_size,
    read_scores,
    score_runs,
    weighted_quantile,
    write_scores,
)

RTOL = 1e-6  # the accuracy goal for every likelihood against direct quadrature
KM = units.SOLAR_MASS_KM

# --- an analytic "sequence": M(x) = M_max sin(pi x / 2), maximum at x = 1 -------------------------
M_MAX, R_TOP = 2.1, 11.0


def curve_m(x):
    return M_MAX * np.sin(0.5 * np.pi * x)


def curve_dm(x):
    return M_MAX * 0.5 * np.pi * np.cos(0.5 * np.pi * x)


def curve_r(x):
    return R_TOP + 2.5 * (1.0 - x) + 1.5 * (1.0 - x) ** 3


def curve_lambda(x):
    return 400.0 * (1.4 / curve_m(x)) ** 6


def analytic_branches(floor=1.0, n=400, lam=True):
    x = np.linspace(0.05, 1.25, n)
    stable = x < 1.0
    return stable_branches(np.exp(x), curve_m(x), curve_r(x), stable,
                           tidal_deformability=curve_lambda(x) if lam else None,
                           max_mass=[M_MAX], max_mass_radius=[curve_r(1.0)], mass_floor=floor)


def x_at_mass(m):
    return 2.0 / np.pi * np.arcsin(m / M_MAX)


def along_curve(density, floor=1.0):
    """quad of density(M(x), R(x)) dM/dx from the floor to the maximum, / (M_max - floor)."""
    value = quad(lambda x: density(curve_m(x), curve_r(x)) * curve_dm(x), x_at_mass(floor), 1.0,
                 epsabs=0.0, epsrel=1e-12, limit=400)[0]
    return math.log(value / (M_MAX - floor))


CONSTRAINTS = """
[[mass]]
label = "mass"
mass = 1.95
sigma = 0.06
[[ellipse]]
label = "mr"
mass = 1.45
radius = 12.1
sigma_mass = 0.12
sigma_radius = 0.7
correlation = 0.45
[[redshift]]
label = "z"
z = 0.24
sigma = 0.03
[[binary]]
label = "gw"
chirp_mass = 1.19
q_min = 0.7
lambda_tilde = 350
sigma = 120
"""


@pytest.fixture(scope="module")
def constraints():
    return parse_constraints(CONSTRAINTS)


def test_gaussian_mass_against_closed_form(constraints):
    ll, status = log_likelihoods(analytic_branches(), constraints)
    closed = (norm.cdf(M_MAX, 1.95, 0.06) - norm.cdf(1.0, 1.95, 0.06)) / (M_MAX - 1.0)
    assert status[0] == 0
    assert ll[0, 0] == pytest.approx(math.log(closed), rel=RTOL, abs=RTOL)


def test_mass_radius_gaussian_against_quad(constraints):
    mv = multivariate_normal([1.45, 12.1], [[0.12**2, 0.45 * 0.12 * 0.7], [0.45 * 0.12 * 0.7, 0.7**2]])
    ll, _ = log_likelihoods(analytic_branches(), constraints)
    assert ll[0, 1] == pytest.approx(along_curve(lambda m, r: mv.pdf([m, r])), abs=RTOL)


def test_redshift_against_quad(constraints):
    def z_density(m, r):
        return norm.pdf(1.0 / math.sqrt(1.0 - 2.0 * KM * m / r) - 1.0, 0.24, 0.03)

    ll, _ = log_likelihoods(analytic_branches(), constraints)
    assert ll[0, 2] == pytest.approx(along_curve(z_density), abs=RTOL)


def lambda_of_mass(m):
    return 400.0 * (1.4 / m) ** 6


def binary_reference(mc, q_min, density, m_max=M_MAX):
    def integrand(q):
        m1 = mc * (1 + q) ** 0.2 / q**0.6
        m2 = q * m1
        if m1 > m_max:
            return 0.0  # the heavier star is not on the stable branch
        lt = float(sm.sequence.lambda_tilde(m1, m2, lambda_of_mass(m1), lambda_of_mass(m2)))
        return density(q, lt)

    # the integrand drops to 0 where m1 passes M_max: split there (m1 falls with q)
    from scipy.optimize import brentq

    def m1_minus_max(q):
        return mc * (1 + q) ** 0.2 / q**0.6 - m_max

    points = [q_min, 1.0]
    if m1_minus_max(q_min) > 0 > m1_minus_max(1.0):
        points.insert(1, brentq(m1_minus_max, q_min, 1.0, xtol=1e-15))
    return sum(quad(integrand, a, b, epsabs=0.0, epsrel=1e-12, limit=400)[0]
               for a, b in zip(points[:-1], points[1:], strict=True)) / (1.0 - q_min)


def test_binary_gaussian_against_quad(constraints):
    ll, _ = log_likelihoods(analytic_branches(), constraints)
    ref = binary_reference(1.19, 0.7, lambda q, lt: norm.pdf(lt, 350.0, 120.0))
    assert ll[0, 3] == pytest.approx(math.log(ref), abs=RTOL)


def test_binary_upper_limit_is_a_half_normal_and_integrates():
    c = parse_constraints('[[binary]]\nlabel = "b"\nchirp_mass = 1.19\nq_min = 0.8\n'
                          'lambda_tilde_upper = 600\ncredibility = 0.9\n')
    dist = density_of(c.binary[0])
    scale = dist.sigma
    assert halfnorm.cdf(600.0, scale=scale) == pytest.approx(0.9, rel=1e-12)  # the stated credibility
    lt = np.array([0.0, 150.0, 800.0])
    assert np.allclose(np.exp(dist.logpdf(lt)), halfnorm.pdf(lt, scale=scale), rtol=1e-12)
    ll, _ = log_likelihoods(analytic_branches(), c)
    ref = binary_reference(1.19, 0.8, lambda q, t: halfnorm.pdf(t, scale=scale))
    assert ll[0, 0] == pytest.approx(math.log(ref), abs=RTOL)


def test_binary_component_off_the_branch_contributes_nothing():
    # chirp mass 1.75: at q = 0.7, m1 = 2.3 lies above M_max = 2.1
    c = parse_constraints('[[binary]]\nlabel = "b"\nchirp_mass = 1.75\nq_min = 0.7\nlambda_tilde = 30\nsigma = 40\n')
    ll, _ = log_likelihoods(analytic_branches(), c)
    ref = binary_reference(1.75, 0.7, lambda q, lt: norm.pdf(lt, 30.0, 40.0))
    assert ll[0, 0] == pytest.approx(math.log(ref), abs=RTOL)


def samples_constraints(tmp_path, n=400, seed=3):
    rng = np.random.default_rng(seed)
    mr = rng.multivariate_normal([1.5, 12.0], [[0.01, 0.03], [0.03, 0.36]], size=n)
    (tmp_path / "mr.csv").write_text("# invented samples\nM,R\n" + "".join(f"{a:.17g},{b:.17g}\n" for a, b in mr))
    m = rng.normal(1.9, 0.08, size=n)
    (tmp_path / "m.csv").write_text("mass\n" + "".join(f"{a:.17g}\n" for a in m))
    text = ('[[mass_radius_samples]]\nlabel = "mr"\npath = "mr.csv"\nmass_column = "M"\nradius_column = "R"\n'
            '[[mass]]\nlabel = "m"\nsamples = "m.csv"\ncolumn = "mass"\nbandwidth = "silverman"\n')
    (tmp_path / "c.toml").write_text(text)
    return sm.constraints.load_constraints(tmp_path / "c.toml"), mr, m


def test_kde_likelihoods_against_scipy_gaussian_kde(tmp_path):
    c, mr, m = samples_constraints(tmp_path)
    kde2 = gaussian_kde(mr.T)  # Scott's rule, scipy's default (the file's default too)
    kde1 = gaussian_kde(m, bw_method="silverman")
    ll, status = log_likelihoods(analytic_branches(), c)
    assert status[0] == 0
    assert ll[0, 0] == pytest.approx(along_curve(lambda a, b: kde2([[a], [b]])[0]), abs=RTOL)
    assert ll[0, 1] == pytest.approx(math.log(kde1.integrate_box_1d(1.0, M_MAX) / (M_MAX - 1.0)), abs=RTOL)
    # the tabulated densities themselves, where they matter
    dist = density_of(c.mass_radius_samples[0])
    pts = mr[:50].T
    # pointwise, the bicubic tabulation of ln rho is good to about 1e-6 (the integral to better)
    assert np.allclose(dist.logpdf(pts[0], pts[1]), kde2.logpdf(pts), rtol=0, atol=1e-5)


def test_real_sweep_against_quad_along_a_spline():
    # SLy (Read et al. 2009, Table III); the reference curve is scipy's CubicSpline through the
    # same stars in ln p_c, integrated by quad from the floor crossing to the spline's maximum
    eos = sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851])
    seq = sm.sweep_eos(eos, "central_density", np.geomspace(2.5e14, 3e15, 120))
    c = parse_constraints(CONSTRAINTS)
    ll, status = log_likelihoods(sm.likelihood.branches_of_sequence(seq), c)
    assert status[0] == 0
    p = seq["central_pressure"]
    order = np.argsort(p)
    x = np.log(p[order])
    sm_, sr = CubicSpline(x, seq["mass"][order]), CubicSpline(x, seq["radius"][order])
    dm = sm_.derivative()
    x_max = min(r for r in dm.roots() if r > x[0])
    x_floor = min(r for r in sm_.solve(1.0) if x[0] <= r <= x_max)
    length = float(sm_(x_max)) - 1.0
    mv = multivariate_normal([1.45, 12.1], [[0.12**2, 0.45 * 0.12 * 0.7], [0.45 * 0.12 * 0.7, 0.7**2]])
    ref = quad(lambda t: mv.pdf([sm_(t), sr(t)]) * dm(t), x_floor, x_max, epsabs=0, epsrel=1e-12, limit=400)[0]
    assert ll[0, 1] == pytest.approx(math.log(ref / length), abs=RTOL)
    # the maximum: the refined one of the sweep vs the spline's
    assert sm_(x_max) == pytest.approx(seq.summary["max_mass"], rel=1e-6)


def test_maximum_below_the_floor_is_zero_not_nan(constraints):
    ll, status = log_likelihoods(analytic_branches(floor=2.2), constraints)
    assert status[0] == 2
    assert np.all(ll == -np.inf)


def test_sweep_starting_above_the_floor_is_flagged(constraints):
    x = np.linspace(0.6, 1.2, 100)  # M(0.6) = 1.7 Msun > floor
    br = stable_branches(np.exp(x), curve_m(x), curve_r(x), x < 1.0, max_mass=[M_MAX], max_mass_radius=[R_TOP])
    ll, status = log_likelihoods(br, constraints)
    assert status[0] == 3 and np.all(np.isnan(ll))


def test_values_at_masses_on_the_curve():
    br = analytic_branches()
    masses = np.array([1.0, 1.4, 2.0])
    owner, query, r = values_at_masses(br, masses, "radius")
    assert list(query) == [0, 1, 2]
    assert np.allclose(r, curve_r(x_at_mass(masses)), rtol=1e-7)


def test_twin_branch_doubles_the_prior_length():
    # two stable segments: 0.5 -> 2.0 and, after an unstable dip, 1.6 -> 1.9 (a third family)
    x = np.linspace(0.0, 3.0, 601)
    m = np.where(x < 1.0, 0.5 + 1.5 * np.sin(0.5 * np.pi * x), 2.0 - 0.4 * np.sin(0.5 * np.pi * (x - 1.0)))
    m = np.where(x < 2.0, m, 1.6 + 0.3 * np.sin(0.5 * np.pi * (x - 2.0)))
    r = 13.0 - 1.2 * x
    stable = (x < 1.0) | ((x > 2.0) & (x < 3.0))
    br = stable_branches(np.exp(x), m, r, stable, max_mass=[2.0], max_mass_radius=[r[200]], mass_floor=1.0)
    # 1.0 -> 2.0 on the first branch, plus 1.6 -> 1.9 on the twin branch, from its minimum to its
    # maximum (both between samples: a parabola through the samples around each, hence 1e-4)
    assert br.prior_length[0] == pytest.approx(1.0 + 0.3, rel=1e-4)
    _, query, _ = values_at_masses(br, np.array([1.7]), "radius")
    assert query.size == 2  # two stable stars of 1.7 Msun


# --- weights, quantiles, Bayes factors ------------------------------------------------------------------

def test_weighted_quantile_equal_weights_is_numpy_hazen():
    v = np.random.default_rng(1).normal(size=257)
    levels = [0.05, 0.16, 0.5, 0.84, 0.95]
    assert np.allclose(weighted_quantile(v, np.ones_like(v), levels), np.quantile(v, levels, method="hazen"),
                       rtol=0, atol=1e-12)


def test_effective_sample_size_by_definition():
    w = np.random.default_rng(2).random(100)
    assert effective_sample_size(w) == pytest.approx(w.sum() ** 2 / (w**2).sum(), rel=1e-14)
    assert effective_sample_size(np.ones(50)) == pytest.approx(50.0)
    assert effective_sample_size(np.r_[1.0, np.zeros(9)]) == pytest.approx(1.0)


def test_bayes_factors_unchanged_by_a_constant():
    ll = np.array([-3.2, -1.1, -np.inf, np.nan, -7.5])
    b, lb = bayes_factors(ll)
    b2, _ = bayes_factors(ll + 123.4)
    assert np.allclose(b[[0, 1, 4]], b2[[0, 1, 4]], rtol=1e-12)
    assert b[1] == 1.0 and b[2] == 0.0 and np.isnan(b[3])
    assert lb[0] == pytest.approx(-2.1)


# --- scoring run files --------------------------------------------------------------------------------

RUN_CONFIG = """
[sweep]
central_density = { min = 2.5e14, max = 3.5e15, count = 30 }
[solver]
tolerance = 1e-4
[[eos]]
name = "sly"
kind = "piecewise_polytrope"
log10_p1 = 34.384
gammas = [3.005, 2.988, 2.851]
[[eos]]
name = "apr4"
kind = "piecewise_polytrope"
log10_p1 = 34.269
gammas = [2.830, 3.445, 3.348]
[[ensemble]]
name = "prior"
kind = "piecewise_polytrope"
[ensemble.sample]
count = 24
seed = 11
log10_p1 = [34.3, 34.5]
gamma1 = [2.6, 3.4]
gamma2 = [2.4, 3.4]
gamma3 = [2.0, 3.0]
"""


@pytest.fixture(scope="module")
def scored_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("scoring")
    (folder / "run.toml").write_text(RUN_CONFIG)
    path = sm.run_config(folder / "run.toml", folder / "run.h5", workers=1)
    return folder, path


def test_scores_of_a_run_file(scored_run, constraints):
    folder, path = scored_run
    s = score_runs([path], constraints)
    assert set(s.candidates) == {"sly", "apr4"}
    best = max(s.candidates.values(), key=lambda c: c.log_likelihood)
    assert best.bayes_factor == 1.0
    for c in s.candidates.values():  # total = sum of the parts; B from the totals
        assert c.log_likelihood == pytest.approx(c.log_likelihood_by_measurement.sum(), rel=1e-14)
        assert c.bayes_factor == pytest.approx(math.exp(c.log_likelihood - best.log_likelihood), rel=1e-12)
    e = s.ensembles["prior"]
    assert e.weight.sum() == pytest.approx(1.0, rel=1e-12)
    assert np.all(e.weight[e.member_status != 0] == 0)  # failed members weigh nothing, and are counted
    assert e.counts["members"] == 24
    assert e.counts["scored"] + sum(e.counts["excluded_by_member_status"].values()) \
        + sum(e.counts["excluded_by_likelihood_status"].values()) == 24
    assert e.effective_sample_size == pytest.approx(1.0 / np.sum(e.weight**2), rel=1e-12)
    run = sm.read_run(path)
    mmax = run.ensembles["prior"]["max_mass"]
    assert np.allclose(e.quantiles["max_mass"], weighted_quantile(mmax, e.weight, [0.05, 0.5, 0.95]))
    # the prior quantiles with uniform weights: numpy's Hazen quantiles of the scored members
    counted = e.prior_weight > 0
    assert np.allclose(e.prior_quantiles["max_mass"], np.quantile(mmax[counted], [0.05, 0.5, 0.95], method="hazen"))


def test_band_matches_exact_weighted_quantiles(scored_run, constraints):
    _, path = scored_run
    s = score_runs([path], constraints, band_masses=[1.2, 1.4, 1.6])
    e = s.ensembles["prior"]
    run = sm.read_run(path)
    radii = []
    for i in range(24):  # R at 1.4 Msun member by member, from the same branch interpolation
        with sm.runfile._open_run(path) as f:
            g = f["ensemble/prior"]
            br = stable_branches(g["central_pressure"][i], np.where(g["star_status"][i] == 0, g["mass"][i], np.nan),
                                 g["radius"][i], g["stable"][i], max_mass=[run.ensembles["prior"]["max_mass"][i]],
                                 max_mass_radius=[run.ensembles["prior"]["max_mass_radius"][i]])
        _, q, r = values_at_masses(br, np.array([1.4]), "radius")
        radii.append(r[0] if r.size and e.weight[i] > 0 else np.nan)
    exact = weighted_quantile(np.array(radii), e.weight, [0.16, 0.5, 0.84])
    # the bands come from histograms with 2 m bins: within a bin of the exact quantiles
    assert np.allclose(e.band_radius[[1, 2, 3], 1], exact, atol=0.002)


def test_order_of_run_files_does_not_matter(scored_run, constraints, tmp_path):
    _, path = scored_run
    other = tmp_path / "copy.h5"
    shutil.copyfile(path, other)
    a = score_runs([path, other], constraints)
    b = score_runs([other, path], constraints)
    assert set(a.candidates) == set(b.candidates)
    for name, c in a.candidates.items():
        assert c.log_likelihood == b.candidates[name].log_likelihood
        assert c.bayes_factor == b.candidates[name].bayes_factor
    for name, e in a.ensembles.items():
        assert np.array_equal(e.weight, b.ensembles[name].weight)


def test_member_chunks_do_not_change_results(scored_run, constraints):
    _, path = scored_run
    a = score_runs([path], constraints).ensembles["prior"]
    b = score_runs([path], constraints, member_chunk=5).ensembles["prior"]
    assert np.array_equal(a.log_likelihood_by_measurement, b.log_likelihood_by_measurement, equal_nan=True)
    assert np.array_equal(a.weight, b.weight)


def test_results_file_layout(scored_run, constraints, tmp_path):
    _, path = scored_run
    s = score_runs([path], constraints)
    out = write_scores(s, tmp_path / "res.h5")
    r = read_scores(out)
    assert r["attrs"]["format"] == "stellar_match.likelihood"
    for name, c in s.candidates.items():
        g = r["eos"][name]
        assert g["log_likelihood"] == c.log_likelihood and g["bayes_factor"] == c.bayes_factor
        assert np.array_equal(g["log_likelihood_by_measurement"], c.log_likelihood_by_measurement)
    g = r["ensemble"]["prior"]
    assert g["weight"].shape == (24,) and g["log_likelihood_by_measurement"].shape == (24, 4)
    assert g["band_radius"].shape == (5, g["band_mass"].size)
    assert np.allclose(g["levels"], [0.05, 0.16, 0.5, 0.84, 0.95])
    assert g["effective_sample_size"] == s.ensembles["prior"].effective_sample_size


def test_likelihood_command_and_table(scored_run, tmp_path, run_cli):
    from astropy.table import Table

    _, path = scored_run
    (tmp_path / "c.toml").write_text(CONSTRAINTS)
    code, out, err = run_cli("likelihood", path, "--constraints", tmp_path / "c.toml", "-o", tmp_path / "r.h5",
                             "--table", tmp_path / "r.ecsv")
    assert code == 0, err
    assert "Bayes factor" in out and "effective sample size" in out
    t = Table.read(tmp_path / "r.ecsv", format="ascii.ecsv")  # astropy reads the table back
    assert list(t["name"]) == ["sly", "apr4", "prior"]
    assert t["max_mass"].unit == "solMass"
    r = read_scores(tmp_path / "r.h5")
    assert t["log_likelihood"][0] == r["eos"]["sly"]["log_likelihood"]


def test_overlay_draws_bands(scored_run, tmp_path, run_cli):
    _, path = scored_run
    (tmp_path / "c.toml").write_text(CONSTRAINTS)
    assert run_cli("likelihood", path, "--constraints", tmp_path / "c.toml", "-o", tmp_path / "r.h5")[0] == 0
    bands = sm.plots.bands_from_results(tmp_path / "r.h5")
    fig = sm.plots.overlay_figure([], sm.constraints.load_constraints(tmp_path / "c.toml"), bands=bands)
    gids = {a.get_gid() for a in fig.axes[0].get_children()}
    assert {"band:prior, posterior:90", "band:prior, posterior:median", "band:prior, prior:0"} <= gids
    code, _, err = run_cli("overlay", path, "-o", tmp_path / "f.png", "--likelihood", tmp_path / "r.h5")
    assert code == 0, err


# --- the sampler API ---------------------------------------------------------------------------------

def test_sampler_call_matches_scoring_and_never_raises(constraints):
    like = sm.EOSLikelihood("piecewise_polytrope", constraints)
    sly = [34.384, 3.005, 2.988, 2.851]
    value = like(sly)
    eos = sm.read_piecewise_polytrope("sly", *sly[:1], sly[1:])
    seq = sm.sweep_eos(eos, "central_density", sm.inference.DEFAULT_CENTRAL_DENSITIES)
    ll, _ = log_likelihoods(sm.likelihood.branches_of_sequence(seq), constraints)
    # the sampler's coarser steps and sample-vertex maximum against the sweep defaults (README: ~1e-5)
    assert value == pytest.approx(ll[0].sum(), abs=1e-3)
    for bad in ([34.4, 0.5, 3.0, 3.0], [np.nan] * 4, [1e3, 3.0, 3.0, 3.0], [34.4, 9.0, 9.0, 9.0]):
        assert like(bad) == -np.inf
    for mistake in ([34.4, 3.0, 3.0], "abc", None):  # a caller's mistake raises: a sampler must not sit still
        with pytest.raises(sm.InputError):
            like(mistake)
    d = like.details([34.4, 0.5, 3.0, 3.0])
    assert d["member_status"] != 0 and d["log_likelihood"] == -np.inf


def test_short_emcee_chain(constraints):
    emcee = pytest.importorskip("emcee")
    like = sm.EOSLikelihood("piecewise_polytrope", parse_constraints(CONSTRAINTS.split("[[binary]]")[0]),
                            central_densities=np.geomspace(2.5e14, 3.5e15, 24))
    lo, hi = np.array([34.2, 2.5, 2.5, 2.0]), np.array([34.6, 3.5, 3.5, 3.0])

    def log_prob(t):
        return like(t) if np.all((t > lo) & (t < hi)) else -np.inf

    rng = np.random.default_rng(5)
    start = np.array([34.38, 3.0, 2.9, 2.6]) + 1e-3 * rng.standard_normal((8, 4))  # causal up to M_max
    sampler = emcee.EnsembleSampler(8, 4, log_prob)
    sampler.random_state = np.random.RandomState(7).get_state()  # emcee draws from its own generator
    sampler.run_mcmc(start, 6, progress=False)
    lp = sampler.get_log_prob()
    assert lp.shape == (6, 8)
    assert np.all(np.isfinite(lp[0])), lp[0]  # every walker starts inside the prior on a valid EOS
    assert np.all(np.isfinite(lp[-1]))  # a move to -inf is never accepted
    assert sampler.acceptance_fraction.mean() > 0  # the chain moved


def test_example_and_demo_constraints_load():
    # the README points at these files for every key: they must load and score
    from conftest import EOS_TABLES

    example = sm.load_constraints(EOS_TABLES.parent / "runs" / "example_constraints.toml")
    assert len(example.scored()) == 4 and example.mass_radius_samples[0].samples.shape == (800, 2)
    assert not example.box[0].likelihood and not example.ellipse[0].likelihood
    demo = sm.load_constraints(EOS_TABLES / "demo_constraints.toml")
    assert {m.kind for m in demo.scored()} == {"mass", "ellipse", "redshift", "binary"}
    assert all("invented" in m.label for m in demo.all_measurements())


def test_sweep_ending_on_a_rising_twin_branch_is_flagged(constraints):
    # a maximum at x = 1, then a twin branch still rising where the sweep ends: the prior's top is unknown
    x = np.linspace(0.05, 2.6, 400)
    m = np.where(x < 1.0, 2.0 * np.sin(0.5 * np.pi * x), 2.0 - 0.4 * np.sin(0.5 * np.pi * (x - 1.0)))
    m = np.where(x < 2.0, m, 1.6 + 0.5 * np.sin(0.5 * np.pi * (x - 2.0)))
    stable = (x < 1.0) | (x > 2.0)
    br = stable_branches(np.exp(x), m, 13.0 - x, stable, max_mass=[2.0], max_mass_radius=[12.0])
    ll, status = log_likelihoods(br, constraints)
    assert status[0] == 4 and np.all(np.isnan(ll))
    assert br.max_mass[0] >= m[-1]  # never below a stable star


def test_narrow_measurements_are_resolved():
    # sigma_M = 0.001 and sigma_z = 6e-5 (far narrower than the spacing of 60 stars) against quad
    c = parse_constraints('[[ellipse]]\nlabel = "e"\nmass = 1.45\nradius = 12.6\nsigma_mass = 0.001\n'
                          'sigma_radius = 0.02\n[[redshift]]\nlabel = "z"\nz = 0.24\nsigma = 6e-5\n')
    x = np.linspace(0.05, 1.25, 60)
    br = stable_branches(np.exp(x), curve_m(x), curve_r(x), x < 1.0, max_mass=[M_MAX],
                         max_mass_radius=[curve_r(1.0)])
    ll, _ = log_likelihoods(br, c)
    # the reference: quad along the same pieces (their M(s), R(s)), split at every piece
    from stellar_match.likelihood import _dpoly, _poly

    mv = multivariate_normal([1.45, 12.6], [[1e-6, 0.0], [0.0, 4e-4]])

    def along(density):
        total = 0.0
        for p in range(br.owner.size):
            lo = br.floor_s[p]
            if lo >= 1.0:
                continue
            total += quad(lambda t, p=p: density(_poly(br.mass[p], t), _poly(br.radius[p], t))
                          * abs(_dpoly(br.mass[p], t)), lo, 1.0, epsabs=0.0, epsrel=1e-11, limit=200,
                          points=None)[0]
        return math.log(total / br.prior_length[0])

    assert ll[0, 0] == pytest.approx(along(lambda m, r: mv.pdf([m, r])), abs=1e-5)
    assert ll[0, 1] == pytest.approx(along(
        lambda m, r: norm.pdf(1.0 / math.sqrt(1.0 - 2.0 * KM * m / r) - 1.0, 0.24, 6e-5)), abs=1e-5)


def test_binary_below_the_sweep_is_flagged():
    # the sweep starts at 1.3 Msun on the stable branch; q_min = 0.6 puts m2 near 1.0 Msun
    c = parse_constraints("mass_floor = 1.35\n" + BINARY_ONLY)
    x = np.linspace(x_at_mass(1.3), 1.25, 200)
    br = stable_branches(np.exp(x), curve_m(x), curve_r(x), x < 1.0, tidal_deformability=curve_lambda(x),
                         max_mass=[M_MAX], max_mass_radius=[curve_r(1.0)], mass_floor=1.35)
    ll, status = log_likelihoods(br, c)
    assert status[0] == 6 and np.isnan(ll[0, 0])


BINARY_ONLY = '[[binary]]\nlabel = "b"\nchirp_mass = 1.19\nq_min = 0.6\nlambda_tilde = 350\nsigma = 120\n'


@pytest.mark.parametrize("rho", [-0.99, 0.0, 0.95])
def test_kde_tabulation_for_correlated_samples(rho):
    rng = np.random.default_rng(8)
    x = rng.multivariate_normal([1.5, 12.0], [[0.01, rho * 0.06], [rho * 0.06, 0.36]], size=300)
    dist = sm.likelihood._Tabulated2D(x, "scott")
    kde = gaussian_kde(x.T)
    pts = x[:100].T
    assert np.allclose(dist.logpdf(pts[0], pts[1]), kde.logpdf(pts), rtol=0, atol=1e-5)


def test_binary_samples_reflected_at_q_equal_one():
    rng = np.random.default_rng(9)
    q = np.clip(1.0 - np.abs(rng.normal(0.0, 0.08, 400)), 0.7, 1.0)
    lt = rng.normal(400.0, 60.0, 400)
    dist = sm.likelihood._Tabulated2D(np.column_stack([q, lt]), "scott", reflect_first=1.0)
    kde = gaussian_kde(np.vstack([q, lt]))
    a, b = np.array([0.95, 0.99, 1.0]), np.array([400.0, 380.0, 420.0])
    # the reflection estimate (Silverman 1986, sec. 2.10): the same kernels on the samples and on their
    # mirror images q -> 2 - q, kept on q <= 1
    from scipy.special import logsumexp as lse

    mirrored = np.column_stack([2.0 - q, lt])
    kernel = multivariate_normal(mean=[0.0, 0.0], cov=kde.covariance)
    pts = np.column_stack([a, b])
    mirror = np.array([lse(kernel.logpdf(p - mirrored)) - math.log(q.size) for p in pts])
    expected = np.logaddexp(kde.logpdf(pts.T), mirror)
    assert np.allclose(dist.logpdf(a, b), expected, atol=1e-5)
    assert dist.logpdf(np.array([1.01]), np.array([400.0]))[0] == -np.inf


def test_sampler_over_a_kind_with_fixed_keys(constraints):
    # Every ensemble kind samples (issue 11): a phase transition on a fixed base, its three parameters in the
    # member-column order; the call equals scoring the same EOS built directly and swept (definition).
    base = {"kind": "piecewise_polytrope", "log10_p1": 34.384, "gammas": [3.005, 2.988, 2.851]}
    like = sm.EOSLikelihood("phase_transition", constraints, fixed={"base": base})
    assert like.parameter_names == ("transition_pressure", "energy_density_jump", "sound_speed_squared")
    theta = [2.0e35, 2.0e14, 1.0]
    eos = sm.phase_transition("pt", sm.read_piecewise_polytrope("sly", 34.384, [3.005, 2.988, 2.851]), *theta)
    seq = sm.sweep_eos(eos, "central_density", sm.inference.DEFAULT_CENTRAL_DENSITIES)
    ll, _ = log_likelihoods(sm.likelihood.branches_of_sequence(seq), constraints)
    assert like(theta) == pytest.approx(ll[0].sum(), abs=1e-3)
    spectral = sm.EOSLikelihood("spectral", constraints, parameter_names=["gamma0", "gamma1", "gamma2"])
    assert len(spectral.parameter_names) == 3
    for kwargs in ({"fixed": {"base": {"kind": "nonsense"}}}, {"parameter_names": ["gamma1", "gamma0"]},
                   {"fixed": "base"}):
        with pytest.raises(sm.InputError):
            sm.EOSLikelihood("spectral" if "parameter_names" in kwargs else "phase_transition", constraints,
                             **kwargs)
