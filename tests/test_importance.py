"""Importance sampling from the Laplace approximation, checked by Pareto smoothing.

Oracles and tolerances
----------------------
* Proposal density: scipy.stats.multivariate_t (independent implementation).
* Systematic resampling: every index i is copied floor(n w_i) or ceil(n w_i) times
  (Douc, Cappé & Moulines 2005, "Comparison of resampling schemes for particle filtering").
* Gaussian posterior: Bayesian linear regression with known noise and a flat prior has
  the posterior N((X^T X)^-1 X^T y, sigma^2 (X^T X)^-1) (Gelman et al., Bayesian Data
  Analysis, 3rd ed., sec. 14.2). Monte-Carlo errors with ESS = importance-sampling ESS:
  a mean is off by sd/sqrt(ESS), a sd by sd/sqrt(2 ESS), a 5 %/95 % quantile by
  sqrt(p(1-p)/ESS)/density = 2.11 sd/sqrt(ESS) for a normal. For the resampled draws the
  ESS is replaced by (1/ESS + 1/n_draws)^-1 (resampling adds at most var/n_draws). We
  allow 5 Monte-Carlo standard errors, as in test_sampler.py.
* Pareto k of the weights (Vehtari et al., "Pareto smoothed importance sampling", JMLR
  25(72), 2024): a ratio posterior/proposal that is bounded has k <= 0; for a target with
  Student-t tails of nu_p dof and a proposal with nu_q > nu_p the ratio grows like r^(nu_q -
  nu_p) while the proposal's radial tail is r^-nu_q, so the ratios have a Pareto tail with
  k = 1 - nu_p/nu_q (0.8 for a Cauchy target and a t_5 proposal).
* MCMC comparison on probe sweeps: the MCMC driver (emcee, tested against analytic
  posteriors in test_sampler.py) from the same optimum. A quantile's Monte-Carlo sd is
  sqrt(p(1-p)/ESS)/f(q_p), which is 1.25 sd/sqrt(ESS) at the median and 2.11 sd/sqrt(ESS)
  at 5 %/95 % for a normal marginal; we use 2.5 sd/sqrt(ESS) as a conservative bound for
  each engine and combine the two in quadrature. With 48 compared numbers we allow 3.5 of
  these bounds: even at the tails the bound is 2.5/2.11 = 1.18 true sds, so 3.5 bounds are
  4.1 sds, a family-wise false-alarm rate near 0.2 %. Power: the raw, unweighted proposals
  (a distribution about 1.5 times too wide) must fail the same comparison.
* Coverage: on the simulated sets of the calibration test (tests/test_calibration.py), the
  number of 90 % intervals covering the truth must fall in the central 99 % band of
  Binomial(N, 0.9).
"""
import time

import numpy as np
import pytest
from scipy.stats import multivariate_t, norm

import bayesprobe as bp
from bayesprobe.fitting import _classical, _starts
from bayesprobe.inference.importance import (ImportanceSettings, StudentTProposal, importance_sample,
                                             systematic_resample)
from bayesprobe.inference.optimize import find_map, laplace_covariance
from bayesprobe.inference.parameters import Parameter, ParameterSet, Prior
from bayesprobe.inference.posterior import LogPosterior, default_parameters
from bayesprobe.inference.sampler import run_ensembles
from bayesprobe.model import floating_potential
from cases.calibration import band, random_case

PLASMA = ("T_e", "n_e", "n_i", "V_p")


# ---------------------------------------------------------------- building blocks

def test_proposal_logpdf_matches_scipy_and_draws_have_its_covariance():
    rng = np.random.default_rng(3)
    A = rng.standard_normal((4, 4))
    cov = A @ A.T + 0.5 * np.eye(4)
    center = rng.standard_normal(4)
    q = StudentTProposal(center, cov, 5.0)
    Z = q.sample(20000, rng)
    ref = multivariate_t(loc=center, shape=cov, df=5.0).logpdf(Z)
    np.testing.assert_allclose(q.logpdf(Z), ref, rtol=1e-10, atol=1e-10)
    # covariance of t_5 is 5/3 times the scale matrix; the sample variance of a t_5 marginal
    # has infinite fourth moment, so only compare the (robust) median absolute deviation:
    # MAD of a t_5 marginal = 0.7267 * scale (scipy.stats.t(5).ppf(0.75))
    from scipy.stats import t as student
    mad = np.median(np.abs(Z - center), axis=0)
    expected = student(5).ppf(0.75) * np.sqrt(np.diag(cov))
    # sd of a sample median of |x| ~ 1/(2 f(m) sqrt(n)), f(m) = 2 * t5.pdf(0.7267) / scale
    se = 1.0 / (2 * 2 * student(5).pdf(student(5).ppf(0.75)) * np.sqrt(Z.shape[0])) * np.sqrt(np.diag(cov))
    np.testing.assert_array_less(np.abs(mad - expected), 5 * se)


def test_systematic_resampling_copies_each_index_floor_or_ceil_times():
    rng = np.random.default_rng(11)
    w = rng.dirichlet(np.full(300, 0.3))
    w[::7] = 0.0
    w /= w.sum()
    lw = np.where(w > 0, np.log(np.where(w > 0, w, 1.0)), -np.inf)
    for n in (100, 1000, 2345):
        idx = systematic_resample(lw, n, rng)
        counts = np.bincount(idx, minlength=w.size)
        assert counts.sum() == n
        assert np.all(counts >= np.floor(n * w) - 1e-9) and np.all(counts <= np.ceil(n * w) + 1e-9)
        assert np.all(counts[w == 0] == 0)


def test_settings_are_validated():
    for bad in ({"n_proposals": 10}, {"df": 0.0}, {"scale": -1.0}, {"khat_max": 1.2}, {"max_rounds": 0},
                {"n_draws": 0}, {"chunk_rows": 0}, {"ess_min": -1.0}):
        with pytest.raises(ValueError):
            ImportanceSettings(**bad)


# ---------------------------------------------------------------- analytic oracles

class LinearGaussian:
    """log-posterior of y = a + b x + N(0, sigma^2), flat prior on a box (vectorised)."""

    def __init__(self, x, y, sigma):
        self.x, self.y, self.sigma = x, y, sigma
        self.parameters = ParameterSet([
            Parameter("a", "1", "a", Prior("uniform", -100, 100)),
            Parameter("b", "1", "b", Prior("uniform", -100, 100))])

    def __call__(self, Z):
        Z = np.atleast_2d(Z)
        mu = Z[:, :1] + Z[:, 1:2] * self.x
        lp = -0.5 * np.sum((self.y - mu) ** 2, axis=1) / self.sigma**2
        return np.where(np.isfinite(self.parameters.log_prior(Z)), lp, -np.inf)

    def exact(self):
        X = np.column_stack([np.ones_like(self.x), self.x])
        return np.linalg.solve(X.T @ X, X.T @ self.y), self.sigma**2 * np.linalg.inv(X.T @ X)


class StudentTarget:
    """log density of a bivariate Student-t with ``nu`` dof (location m, scale matrix S)."""

    def __init__(self, nu, m, S):
        self.dist = multivariate_t(loc=m, shape=S, df=nu)
        self.parameters = ParameterSet([
            Parameter("a", "1", "a", Prior("uniform", -1e6, 1e6)),
            Parameter("b", "1", "b", Prior("uniform", -1e6, 1e6))])

    def __call__(self, Z):
        Z = np.atleast_2d(Z)
        return np.where(np.isfinite(self.parameters.log_prior(Z)), self.dist.logpdf(Z), -np.inf)


@pytest.fixture(scope="module")
def linear():
    rng = np.random.default_rng(42)
    x = np.linspace(-1, 3, 50)
    y = 0.7 - 1.3 * x + 0.5 * rng.standard_normal(x.size)
    lp = LinearGaussian(x, y, 0.5)
    m = find_map(lp, np.array([[0.0, 0.0]]))
    return lp, m


def test_gaussian_posterior_is_reproduced(linear):
    lp, m = linear
    mean, cov = lp.exact()
    sd = np.sqrt(np.diag(cov))
    s = ImportanceSettings()
    run = importance_sample(lp, m.z, m.cov, settings=s, seed=5)
    assert run.accepted, run.reasons
    assert run.n_rounds == 1 and run.n_evaluations == s.n_proposals
    # bounded ratio -> true k <= 0; k-hat sd ~ 1/sqrt(190 tail draws) = 0.07
    assert run.khat < 0.3
    assert run.draws.shape == (s.n_draws, 2) and run.log_prob.shape == (s.n_draws,)
    np.testing.assert_allclose(run.log_prob, lp(run.draws))
    # weighted estimates straight from the smoothed weights: ESS = IS ESS
    w = np.exp(run.log_weights)
    wm = w @ run.proposals
    wsd = np.sqrt(w @ (run.proposals - wm) ** 2)
    np.testing.assert_array_less(np.abs(wm - mean), 5 * sd / np.sqrt(run.ess))
    np.testing.assert_array_less(np.abs(wsd / sd - 1), 5 / np.sqrt(2 * run.ess))
    # the equally weighted resampled draws
    ess = 1.0 / (1.0 / run.ess + 1.0 / s.n_draws)
    D = run.draws
    np.testing.assert_array_less(np.abs(D.mean(0) - mean), 5 * sd / np.sqrt(ess))
    np.testing.assert_array_less(np.abs(D.std(0) / sd - 1), 5 / np.sqrt(2 * ess))
    rho = cov[0, 1] / (sd[0] * sd[1])
    assert abs(np.corrcoef(D.T)[0, 1] - rho) < 5 * (1 - rho**2) / np.sqrt(ess)
    for j in range(2):
        q = np.quantile(D[:, j], [0.05, 0.5, 0.95])
        exact = mean[j] + sd[j] * norm.ppf([0.05, 0.5, 0.95])
        np.testing.assert_allclose(q, exact, atol=5 * 2.11 * sd[j] / np.sqrt(ess))


def test_negative_control_proposal_100x_too_narrow_is_flagged(linear):
    """Same target, proposal covariance 100x too small, one round: k-hat must exceed the threshold."""
    lp, m = linear
    s = ImportanceSettings(max_rounds=1)
    run = importance_sample(lp, m.z, m.cov / 100.0, settings=s, seed=5)
    assert run.khat > s.khat_max
    assert not run.accepted
    assert any("k-hat" in r for r in run.reasons)


def test_negative_control_heavier_tailed_target_is_flagged_lighter_is_not():
    """A Cauchy target (nu=1) under a t_5 proposal has Pareto k = 1 - 1/5 = 0.8 whatever the
    refit, so both rounds fail; a t_10 target (lighter tails than the proposal) is accepted."""
    S = np.array([[1.0, 0.6], [0.6, 2.0]])
    m0 = np.array([0.3, -1.0])
    heavy = StudentTarget(1.0, m0, S)
    cov, ok = laplace_covariance(heavy, m0)
    assert ok
    run = importance_sample(heavy, m0, cov, seed=2)
    print("Cauchy target: k-hat per round", [round(h["khat"], 3) for h in run.history])
    assert run.n_rounds == 2
    assert all(h["khat"] > 0.5 for h in run.history)
    assert not run.accepted
    light = StudentTarget(10.0, m0, S)
    cov, ok = laplace_covariance(light, m0)
    run = importance_sample(light, m0, cov, seed=2)
    print("t_10 target: k-hat", round(run.khat, 3))
    assert run.accepted, run.reasons


def test_same_seed_same_draws_bit_for_bit(linear):
    lp, m = linear
    a = importance_sample(lp, m.z, m.cov / 100.0, seed=7)      # two rounds: the refit path too
    b = importance_sample(lp, m.z, m.cov / 100.0, seed=7)
    c = importance_sample(lp, m.z, m.cov / 100.0, seed=8)
    d = importance_sample(lp, m.z, m.cov / 100.0, seed=np.random.SeedSequence(7))
    assert a.n_rounds == 2
    assert np.array_equal(a.draws, b.draws) and np.array_equal(a.log_weights, b.log_weights)
    assert a.khat == b.khat and a.ess == b.ess
    assert np.array_equal(a.draws, d.draws)
    assert not np.array_equal(a.draws, c.draws)


# ---------------------------------------------------------------- probe sweeps

def _posterior(cfg, sim):
    V, I = sim.sweep.voltage, sim.sweep.current
    params = default_parameters(cfg, V, I)
    lp = LogPosterior(V, I, cfg, params)
    mp = find_map(lp, _starts(params, _classical(V, I, cfg), V, I, cfg))
    return lp, mp


@pytest.fixture(scope="module")
def calibration_set():
    """Importance sampling on the 24 sweeps of the calibration test's fast set."""
    out = {}
    for i in range(24):
        cfg, sim = random_case(i)
        lp, mp = _posterior(cfg, sim)
        run = importance_sample(lp, mp.z, mp.cov, seed=i)
        out[i] = (cfg, sim, lp, mp, run)
    return out


def test_coverage_on_the_calibration_set(calibration_set):
    n = len(calibration_set)
    hits = {name: 0 for name in ("T_e", "n_i", "V_p", "V_f")}
    khat = []
    for cfg, sim, lp, mp, run in calibration_set.values():
        assert run.accepted, (cfg, run.reasons)
        khat.append(run.khat)
        phys = lp.parameters.to_physical(run.draws)
        phys["V_f"] = floating_potential(phys, cfg)
        for name in hits:
            lo, hi = np.quantile(phys[name], [0.05, 0.95])
            hits[name] += lo <= sim.truth[name] <= hi
    print("coverage", hits, "k-hat range", round(min(khat), 3), round(max(khat), 3))
    lo, hi = band(n)
    for name, h in hits.items():
        assert lo <= h <= hi, f"{name}: {h}/{n} intervals cover the truth, 99 % band [{lo}, {hi}]"


def _quantile_disagreement(Z_is, ess_is, Z_mc, ess_mc, names):
    """max over parameters and p in (0.05, 0.5, 0.95) of |q_IS - q_MCMC| / combined MC bound."""
    worst = 0.0
    for j, name in enumerate(names):
        if name not in PLASMA:
            continue
        a, b = Z_is[:, j], Z_mc[:, j]
        tol = np.hypot(2.5 * a.std() / np.sqrt(ess_is), 2.5 * b.std() / np.sqrt(ess_mc[j]))
        diff = np.abs(np.quantile(a, [0.05, 0.5, 0.95]) - np.quantile(b, [0.05, 0.5, 0.95])) / tol
        worst = max(worst, float(diff.max()))
    return worst


@pytest.mark.parametrize("case", [3, 12, 1])    # planar thin-sheath (534, 651 points), cylindrical OML (555)
def test_quantiles_agree_with_emcee_from_the_same_optimum(calibration_set, case):
    cfg, sim, lp, mp, run = calibration_set[case]
    assert sim.sweep.n_points >= 500
    assert run.accepted, run.reasons
    mc = run_ensembles(lp, mp.z, mp.cov, seed=100 + case, progress=False)
    assert mc.converged, mc.reasons
    ess_is = 1.0 / (1.0 / run.ess + 1.0 / run.draws.shape[0])
    # compared in sampler coordinates (log n, log T, V_p): quantiles are invariant under the
    # monotone transforms, and the marginals are closer to normal there
    worst = _quantile_disagreement(run.draws, ess_is, mc.flat, mc.ess, lp.parameters.names)
    print(f"case {case}: k-hat {run.khat:.3f}, IS ESS {run.ess:.0f}, worst disagreement {worst:.2f} bounds")
    assert worst < 3.5
    # power: the raw proposals, unweighted, are a ~1.5x too wide distribution and must fail
    raw = run.proposals[: run.draws.shape[0]]
    assert _quantile_disagreement(raw, ess_is, mc.flat, mc.ess, lp.parameters.names) > 3.5


def _beyond_the_knee(cfg):
    T, Vp = 3.0, 12.0
    return bp.simulate({"n_e": 1e16, "T_e": T, "V_p": Vp}, config=cfg, n_points=600, v_min=Vp - 12 * T - 20,
                       v_max=Vp - 2 * T, noise_rel=0.01, seed=5)


@pytest.mark.parametrize("geometry", ["planar", "cylindrical"])
def test_negative_control_plasma_potential_beyond_the_sweep(geometry):
    """The sweep ends 2 T_e below V_p, so the knee is missing and V_p is only bounded through the
    ion current and the prior: a curved, one-sided posterior. k-hat flags the Laplace proposal
    (round 1) and the refitted mixture (round 2); the result is not accepted, so a caller falls
    back to MCMC."""
    if geometry == "planar":
        cfg = bp.ModelConfig(probe=bp.Probe("planar", radius=2e-3), ion="Ar", ion_collection="thin-sheath")
    else:
        cfg = bp.ModelConfig(probe=bp.Probe("cylindrical", radius=50e-6, length=5e-3), ion="Ar",
                             ion_collection="oml")
    sim = _beyond_the_knee(cfg)
    lp, mp = _posterior(cfg, sim)
    run = importance_sample(lp, mp.z, mp.cov, seed=1)
    print(geometry, "k-hat / ESS per round", [(round(h["khat"], 3), round(h["ess"])) for h in run.history])
    assert run.history[0]["khat"] > ImportanceSettings().khat_max
    assert not run.accepted
    assert run.khat > ImportanceSettings().khat_max


def test_negative_control_barely_resolved_hot_tail():
    """Two temperatures with a hot fraction of 0.2 %: the hot group is hardly in the data and the
    posterior of (T_e_hot, hot_fraction) is a long ridge against the prior; not accepted."""
    cfg = bp.ModelConfig(probe=bp.Probe("planar", radius=2e-3), ion="Ar", ion_collection="thin-sheath",
                         electrons="bi-maxwellian")
    sim = bp.simulate({"n_e": 1e16, "T_e_cold": 2.0, "T_e_hot": 8.0, "hot_fraction": 0.002, "V_p": 12.0},
                      config=cfg, n_points=800, noise_rel=0.01, seed=3)
    lp, mp = _posterior(cfg, sim)
    run = importance_sample(lp, mp.z, mp.cov, seed=1)
    print("hot tail: k-hat / ESS per round", [(round(h["khat"], 3), round(h["ess"])) for h in run.history])
    assert run.history[0]["khat"] > ImportanceSettings().khat_max
    assert not run.accepted


def test_cost_is_a_few_thousand_model_rows():
    """Bookkeeping: one accepted round evaluates exactly n_proposals rows, in chunks."""
    cfg, sim = random_case(0)
    lp, mp = _posterior(cfg, sim)
    calls = []

    def counted(Z):
        calls.append(Z.shape[0])
        return lp(Z)

    t = time.process_time()
    run = importance_sample(counted, mp.z, mp.cov, seed=0)
    cpu = time.process_time() - t
    assert run.accepted
    assert sum(calls) == run.n_evaluations == ImportanceSettings().n_proposals
    assert max(calls) <= ImportanceSettings().chunk_rows
    print(f"{sim.sweep.n_points} points: {cpu:.3f} s CPU for {run.n_evaluations} proposals")


def test_fit_falls_back_to_emcee_when_k_hat_flags_the_proposal():
    """End to end through fit(engine="fast") on the sweep that ends below V_p: the importance
    result is rejected, emcee runs from the same optimum, and the record says which engine made
    the result and why (short emcee budget: only the bookkeeping is tested here)."""
    cfg = bp.ModelConfig(probe=bp.Probe("planar", radius=2e-3), ion="Ar", ion_collection="thin-sheath")
    with pytest.warns(bp.ConvergenceWarning, match="did not converge"):          # the short emcee budget
        res = bp.fit(_beyond_the_knee(cfg).sweep, config=cfg, seed=1, progress=False, engine="fast",
                     sampler=bp.SamplerSettings(max_steps=600))
    d = res.diagnostics
    assert d["engine"] == "mcmc" and d["engine_requested"] == "fast"
    assert d["khat"] > ImportanceSettings().khat_max
    assert "k-hat" in d["fallback_reason"]
    assert d["n_steps"] > 0
    s = res.summary()["diagnostics"]
    assert s["engine"] == "mcmc" and "k-hat" in s["fallback_reason"]
