"""Calibration: 90 % credible intervals contain the truth 90 % of the time.

Oracle: if the intervals are calibrated, the number of sweeps whose interval covers
the truth is Binomial(N, 0.90). We accept a count inside the central 99 % band of
that distribution (scipy.stats.binom), the band the issue prescribes. With a fixed
seed list the test is deterministic; a miscalibrated sampler (e.g. intervals 20 %
too narrow give ~80 % coverage) falls outside the band for N >= 100 with high
probability, and for the fast N = 24 set when the error is gross.

The sweeps span planar (thin-sheath) and cylindrical (OML and auto) probes,
several gases, T_e 1–8 eV, n 1e15–2e17 m^-3 and noise of 0.3–3 % plus a floor.
"""
import numpy as np
import pytest

from cases.calibration import CHECKED, band, coverage, engines_disagree

def test_binomial_band_is_what_we_think():
    """Sanity of the oracle itself: for N = 100 the 99 % band is about [82, 96] (normal approx 90 ± 2.58·3)."""
    lo, hi = band(100)
    assert 80 <= lo <= 83 and 96 <= hi <= 98


@pytest.fixture(scope="module")
def fast_set():
    """The 24-sweep set through both engines (emcee, and importance sampling with emcee fallback)."""
    return {engine: coverage(range(24), engine=engine) for engine in ("mcmc", "fast")}


def test_coverage_fast_set(fast_set):
    """Also: the posterior median's RMS error is at least 2x smaller than the classical method's
    for T_e, n_e and V_p on the same sweeps (the issue's requirement; the numbers are printed)."""
    n = 24
    hits, converged, rms, _ = fast_set["mcmc"]
    print("coverage", hits, "rms", rms)
    lo, hi = band(n)
    assert converged == n
    for name, h in hits.items():
        assert lo <= h <= hi, f"{name}: {h}/{n} intervals cover the truth, 99 % band [{lo}, {hi}]"
    for name in ("T_e", "n_e", "V_p"):
        assert rms["classical"][name] >= 2 * rms["bayes"][name], (name, rms)


def test_fast_engine_coverage_and_agreement_with_emcee_fast_set(fast_set):
    """fit(engine="fast") on the same 24 sweeps: every fit converged, intervals cover the truth
    inside the 99 % binomial band, and medians and interval ends agree with emcee's within
    Monte-Carlo error (exceedances of 3 combined MC sds no more than chance allows)."""
    n = 24
    hits, converged, rms, recs = fast_set["fast"]
    engines = [r["engine"] for r in recs]
    print("fast engine coverage", hits, "engines", {e: engines.count(e) for e in set(engines)}, "rms", rms)
    lo, hi = band(n)
    assert converged == n
    for name, h in hits.items():
        assert lo <= h <= hi, f"{name}: {h}/{n} intervals cover the truth, 99 % band [{lo}, {hi}]"
    assert not engines_disagree(recs, fast_set["mcmc"][3])


def test_engine_comparison_has_power():
    """Negative control for the agreement oracle: intervals 10 % too wide in one engine over 24
    sweeps (a shift of about 1.7 MC sd at the ends, so rarely beyond 3 sd singly) are caught as
    systematic; random MC-sized differences are not flagged."""
    rng = np.random.default_rng(0)

    def rec(scale, jitter):
        e = {"sd": scale, "median": jitter[0], "ci_low": -1.645 * scale + jitter[1], "ci_high": 1.645 * scale + jitter[2]}
        return {"summary": {n: dict(e) for n in CHECKED}, "ess": {n: 1000.0 for n in CHECKED}}

    mc = np.array([1.2533, 2.11, 2.11]) / np.sqrt(1000.0)          # MC sd of median, 5 %, 95 % points
    base = [rec(1.0, mc * rng.standard_normal(3)) for _ in range(24)]
    same = [rec(1.0, mc * rng.standard_normal(3)) for _ in range(24)]
    wide = [rec(1.1, mc * rng.standard_normal(3)) for _ in range(24)]
    assert not engines_disagree(base, same)
    assert engines_disagree(base, wide)


@pytest.mark.slow
def test_coverage_full_set():
    """120 sweeps through emcee and through the fast engine (importance sampling, emcee fallback)."""
    n = 120
    hits, converged, rms, recs = coverage(range(100, 100 + n))
    print("coverage", hits, "rms", rms)
    lo, hi = band(n)
    assert converged >= n - 2
    for name, h in hits.items():
        assert lo <= h <= hi, f"{name}: {h}/{n} intervals cover the truth, 99 % band [{lo}, {hi}]"
    f_hits, f_conv, f_rms, f_recs = coverage(range(100, 100 + n), engine="fast")
    engines = [r["engine"] for r in f_recs]
    print("fast engine coverage", f_hits, "fallbacks to emcee", engines.count("mcmc"), "of", n, "rms", f_rms)
    assert f_conv >= n - 2
    for name, h in f_hits.items():
        assert lo <= h <= hi, f"fast engine {name}: {h}/{n} intervals cover the truth, 99 % band [{lo}, {hi}]"
    assert not engines_disagree(f_recs, recs)
