"""The sampling engines behind one interface (bayesprobe.inference.engines).

Oracle: a Gaussian target in z with known mean and covariance (the analytic posterior of a
linear-Gaussian model, e.g. Gelman et al., *Bayesian Data Analysis*, 3rd ed., sec. 14.2). A
posterior mean estimated from draws with effective sample size ESS has Monte-Carlo sd
sd / sqrt(ESS) (central limit theorem); we allow 4 of them per component (two-sided
probability of exceeding by chance 6e-5 per component). Negative control: the same check
against a mean shifted by half a posterior sd must fail.
"""
import numpy as np
import pytest

from bayesprobe.inference.engines import (ENGINES, AutoEngine, Diagnostics, EmceeEngine, EngineSettings,
                                          ImportanceEngine, SeedStreams, get_engine)
from bayesprobe.inference.importance import ImportanceSettings
from bayesprobe.inference.sampler import SamplerSettings

MEAN = np.array([0.5, -1.0, 2.0])
COV = np.array([[1.0, 0.6, 0.0], [0.6, 2.0, -0.3], [0.0, -0.3, 0.5]])
PREC = np.linalg.inv(COV)
NAMES = ("a", "b", "c")


def gaussian(Z):
    R = np.atleast_2d(Z) - MEAN
    return -0.5 * np.einsum("ij,jk,ik->i", R, PREC, R)


def mean_within(draws, mean, ess, k=4.0):
    sd = np.sqrt(np.diag(COV))
    return bool(np.all(np.abs(draws.mean(axis=0) - mean) <= k * sd / np.sqrt(ess)))


def quantities(result):
    return {n: result.per_chain(result.draws[:, j]) for j, n in enumerate(NAMES)}


@pytest.fixture(scope="module")
def emcee_run():
    return EmceeEngine().run(gaussian, MEAN, COV, 3, EngineSettings(progress=False))


def test_emcee_engine_reproduces_a_gaussian_and_fails_a_shifted_one(emcee_run):
    res = emcee_run
    diag = res.quantity_diagnostics(quantities(res), NAMES)
    assert res.accepted and diag.converged and diag.engine == "mcmc"
    assert res.draws.shape == (diag.n_draws, 3) and res.n_chains == diag.n_ensembles == 2
    assert res.log_prob == pytest.approx(gaussian(res.draws), rel=1e-12, abs=1e-12)
    assert mean_within(res.draws, MEAN, diag.ess_bulk_min)
    assert not mean_within(res.draws, MEAN + 0.5 * np.sqrt(np.diag(COV)), diag.ess_bulk_min)   # negative control
    assert set(diag.tau) == set(NAMES) and set(diag.r_hat) == set(NAMES)


def test_importance_engine_reproduces_a_gaussian_and_fails_a_shifted_one():
    res = ImportanceEngine().run(gaussian, MEAN, COV, 3, EngineSettings())
    diag = res.quantity_diagnostics(quantities(res), NAMES)
    assert res.accepted and diag.converged and diag.engine == "importance" and res.n_chains == 1
    assert diag.importance.khat <= ImportanceSettings().khat_max and diag.importance.ess >= ImportanceSettings().ess_min
    assert diag.ess_bulk == {n: diag.importance.ess for n in NAMES} and diag.r_hat_max is None
    assert mean_within(res.draws, MEAN, diag.ess_bulk_min)
    assert not mean_within(res.draws, MEAN + 0.5 * np.sqrt(np.diag(COV)), diag.ess_bulk_min)


def test_auto_engine_keeps_accepted_importance_draws():
    """The rule: importance draws are used when k-hat <= 0.5 and ESS >= 1000 (Vehtari et al. 2024)."""
    auto = AutoEngine(ImportanceEngine(), EmceeEngine())
    res = auto.run(gaussian, MEAN, COV, 5, EngineSettings(progress=False))
    alone = ImportanceEngine().run(gaussian, MEAN, COV, 5, EngineSettings())
    assert res.diagnostics.engine == "importance"
    assert np.array_equal(res.draws, alone.draws)
    assert res.diagnostics.to_dict()["fallback_reason"] is None


def test_auto_engine_falls_back_to_emcee_from_the_same_optimum_and_seed(emcee_run):
    """Negative control of the acceptance rule: a proposal 100x too narrow in variance with one
    round has heavy-tailed weights (k-hat > 0.5), so emcee runs; its draws are those emcee gives
    alone with the same seed, and the record says why."""
    settings = EngineSettings(importance=ImportanceSettings(max_rounds=1), progress=False)
    auto = AutoEngine(ImportanceEngine(), EmceeEngine())
    res = auto.run(gaussian, MEAN, COV / 100.0, 3, settings)
    alone = EmceeEngine().run(gaussian, MEAN, COV / 100.0, 3, settings)
    d = res.quantity_diagnostics(quantities(res), NAMES).to_dict()
    assert d["engine"] == "mcmc" and "k-hat" in d["fallback_reason"] and d["khat"] > 0.5
    assert np.array_equal(res.draws, alone.draws)
    assert d["criteria"]["khat_max"] == 0.5 and d["criteria"]["is_ess_min"] == 1000.0


def test_same_seed_same_draws_other_seed_other_draws():
    for engine in (EmceeEngine(), ImportanceEngine()):
        s = EngineSettings(sampler=SamplerSettings(initial_steps=60, max_steps=60), progress=False)
        a = engine.run(gaussian, MEAN, COV, 7, s)
        b = engine.run(gaussian, MEAN, COV, SeedStreams.from_seed(7), s)
        c = engine.run(gaussian, MEAN, COV, 8, s)
        assert np.array_equal(a.draws, b.draws) and np.array_equal(a.log_prob, b.log_prob)
        assert not np.array_equal(a.draws, c.draws)


def test_registry_names_and_errors():
    assert list(ENGINES) == ["mcmc", "fast", "auto"]
    assert isinstance(get_engine("mcmc"), EmceeEngine)
    for name in ("fast", "auto"):
        e = get_engine(name)
        assert isinstance(e, AutoEngine)
        assert isinstance(e.primary, ImportanceEngine) and isinstance(e.fallback, EmceeEngine)
    for bad in ("nuts", None, 3):
        with pytest.raises(ValueError, match=r"^engine must be one of mcmc, fast, auto, got ") as info:
            get_engine(bad)
        assert "\n" not in str(info.value)


def test_diagnostics_timings_and_criteria_layout():
    d = Diagnostics(engine="mcmc", converged=True, unmet=[], n_draws=10,
                    criteria={"tau_multiple_min": 50.0, "r_hat_max": 1.01, "ess_bulk_min": 1000.0},
                    history=[], engine_timings={"sampling_s": 2.0}, map_s=1.0, posterior_s=3.0).to_dict()
    assert list(d["timings_s"]) == ["map", "sampling_s", "posterior_processing"]
    assert "khat" not in d and "khat_max" not in d["criteria"]
