"""Residual diagnostics: the lag-1 autocorrelation of standardised residuals and the warning
that correlated residuals make every interval too narrow.

Oracles:
* an AR(1) series x_k = rho x_(k-1) + sqrt(1 - rho^2) e_k has lag-1 autocorrelation rho
  (Box & Jenkins, *Time Series Analysis*, ch. 3; from memory), and numpy's corrcoef of the
  lagged pairs is an independent computation of the same statistic;
* for independent noise z = rho_hat sqrt(n) is approximately standard normal (Bartlett 1946,
  from memory): the share of |z| > 2 over many series lies in the binomial band of
  P(|N(0,1)| > 2) = 0.0455 (scipy.stats);
* on fitted sweeps, AR(1) noise with rho = 0.9 is flagged and white noise (negative control) is not.
"""
from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy.stats import binom, norm

import bayesprobe as bp
from bayesprobe.checks import RESIDUAL_Z_LIMIT
from bayesprobe.inference.residuals import lag1_autocorrelation, residual_diagnostics


def ar1(rho, n, rng):
    e = np.empty(n)
    e[0] = rng.standard_normal()
    for k in range(1, n):
        e[k] = rho * e[k - 1] + np.sqrt(1 - rho**2) * rng.standard_normal()
    return e


def test_ar1_series_gives_its_coefficient():
    rng = np.random.default_rng(11)
    x = ar1(0.6, 20000, rng)
    rho, pairs = lag1_autocorrelation(x)
    assert pairs == x.size - 1
    assert rho == pytest.approx(0.6, abs=4 / np.sqrt(x.size))
    assert rho == pytest.approx(np.corrcoef(x[:-1], x[1:])[0, 1], abs=2e-3)


def test_independent_noise_z_is_standard_normal():
    rng = np.random.default_rng(12)
    n_series, n = 400, 300
    z = np.array([residual_diagnostics(rng.standard_normal(n), 0.0, 1.0)["lag1_z"] for _ in range(n_series)])
    p = 2 * norm.sf(2.0)
    lo, hi = binom.ppf(0.005, n_series, p), binom.ppf(0.995, n_series, p)
    assert lo <= np.sum(np.abs(z) > 2) <= hi
    assert abs(np.mean(z)) < 4 / np.sqrt(n_series)


def test_directions_are_taken_one_at_a_time():
    rng = np.random.default_rng(13)
    r = rng.standard_normal(200)
    d = np.repeat([1, -1], 100)
    out = residual_diagnostics(r, 0.0, 1.0, d)
    a, b = r[:100] - r[:100].mean(), r[100:] - r[100:].mean()
    expected = (a[:-1] @ a[1:] + b[:-1] @ b[1:]) / (a @ a + b @ b)
    assert out["lag1_autocorrelation"] == pytest.approx(expected, rel=1e-12)
    assert out["n_pairs"] == 198


def _fit(rho, seed):
    sim = bp.simulate({"n_e": 1e16, "T_e": 3.0, "V_p": 5.0}, n_points=400, noise_floor=0.0, noise_rel=0.0,
                      seed=seed)
    clean = sim.sweep.current
    sd = 0.01 * np.abs(clean) + 5e-5 * np.max(np.abs(clean))
    sweep = bp.Sweep(sim.sweep.voltage, clean + sd * ar1(rho, clean.size, np.random.default_rng(seed)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", bp.ConvergenceWarning)
        return bp.fit(sweep, config=sim.config, seed=1, engine="fast", progress=False)


@pytest.mark.parametrize("seed", [1, 2])
def test_correlated_noise_is_flagged_and_white_noise_is_not(seed):
    correlated, white = _fit(0.9, seed).summary(), _fit(0.0, seed).summary()
    assert correlated["residuals"]["lag1_z"] > RESIDUAL_Z_LIMIT
    assert "residuals-correlated" in [w["code"] for w in correlated["warnings"]]
    assert white["residuals"]["lag1_z"] < RESIDUAL_Z_LIMIT
    assert "residuals-correlated" not in [w["code"] for w in white["warnings"]]
