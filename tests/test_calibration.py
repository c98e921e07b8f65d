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
from scipy.stats import binom

import bayesprobe as bp

GASES = ("Ar", "He", "Xe", "N2", "Ne", "Kr")
CHECKED = ("T_e", "n_i", "V_p", "V_f")
ERRORS = ("T_e", "n_e", "n_i", "V_p", "V_f")


def random_case(i: int):
    rng = np.random.default_rng(1000 + i)
    gas = GASES[i % len(GASES)]
    kind = ("planar", "cylindrical-oml", "cylindrical-auto")[i % 3]
    if kind == "planar":
        probe = bp.Probe("planar", radius=float(rng.uniform(1e-3, 4e-3)))
        theory = "thin-sheath"
    else:
        probe = bp.Probe("cylindrical", radius=float(rng.uniform(25e-6, 125e-6)), length=float(rng.uniform(2e-3, 1e-2)))
        theory = "oml" if kind == "cylindrical-oml" else "auto"
    cfg = bp.ModelConfig(probe=probe, ion=gas, ion_collection=theory)
    T_e = float(np.exp(rng.uniform(np.log(1.0), np.log(8.0))))
    n = float(np.exp(rng.uniform(np.log(1e15), np.log(2e17))))
    V_p = float(rng.uniform(2.0, 20.0))
    truth = {"n_e": n, "T_e": T_e, "V_p": V_p}
    v_min = V_p - float(rng.uniform(8, 15)) * T_e - float(rng.uniform(5, 25))
    v_max = V_p + float(rng.uniform(1.5, 4.0)) * T_e
    sim = bp.simulate(truth, config=cfg, v_min=v_min, v_max=v_max, n_points=int(rng.integers(250, 700)),
                      noise_rel=float(rng.uniform(0.003, 0.03)), seed=int(rng.integers(2**31)))
    return cfg, sim


def coverage(indices, engine="mcmc"):
    """Interval hits per parameter, number converged, squared errors of both methods, and a
    compact record of every fit (for comparing engines on the same sweeps).

    Errors: relative for T_e, n_e, n_i; in units of the true T_e for the potentials.
    """
    hits = {name: 0 for name in CHECKED}
    converged = 0
    sq = {"bayes": {n: [] for n in ERRORS}, "classical": {n: [] for n in ERRORS}}
    records = []
    for i in indices:
        cfg, sim = random_case(i)
        res = bp.fit(sim.sweep, config=cfg, seed=i, progress=False, engine=engine)
        converged += res.converged
        summ = res.parameter_summary()
        records.append(fit_record(res))
        for name in CHECKED:
            e = summ[name]
            hits[name] += e["ci_low"] <= sim.truth[name] <= e["ci_high"]
        for name in ERRORS:
            t = sim.truth[name]
            scale = t if name in ("T_e", "n_e", "n_i") else sim.truth["T_e"]
            sq["bayes"][name].append(((summ[name]["median"] - t) / scale) ** 2)
            c = res.classical.get(name)
            sq["classical"][name].append(((c - t) / scale) ** 2 if c is not None else np.inf)
    rms = {m: {n: float(np.sqrt(np.mean(v))) for n, v in d.items()} for m, d in sq.items()}
    return hits, converged, rms, records


def fit_record(res):
    """What the engine comparison needs of a fit: summaries of the checked quantities, engine, MC sizes."""
    summ = res.parameter_summary()
    d = res.diagnostics
    return {"summary": {n: summ[n] for n in CHECKED}, "engine": d["engine"],
            "ess": {n: _mc_ess(d, n) for n in CHECKED}}


def _mc_ess(diagnostics, name):
    """Effective size behind a reported quantile: the bulk ESS for emcee; for importance sampling
    the IS ESS combined with the resampling to n_draws equally weighted draws, whose variance adds
    at most var / n_draws (systematic resampling), hence 1 / (1/ESS + 1/n_draws)."""
    if diagnostics["engine"] == "importance":
        return 1.0 / (1.0 / diagnostics["is_ess"] + 1.0 / diagnostics["n_draws"])
    return diagnostics["ess_bulk"][name]


def engine_z(recs_a, recs_b):
    """Signed standardised differences between two engines, shape (sweeps, quantities x statistics).

    MC sd of the p-quantile of a normal posterior with sd s from ESS draws:
    s sqrt(p (1 - p)) / (phi(Phi^-1(p)) sqrt(ESS)) (asymptotic variance of a sample quantile,
    e.g. van der Vaart, Asymptotic Statistics, 1998, sec. 21.2): 1.2533 s for the median and
    2.11 s for the 5 % / 95 % ends, per sqrt(ESS); the two engines' errors add in quadrature.
    """
    from scipy.stats import norm
    k = {stat: np.sqrt(q * (1 - q)) / norm.pdf(norm.ppf(q))
         for stat, q in (("median", 0.5), ("ci_low", 0.05), ("ci_high", 0.95))}
    rows = []
    for a, b in zip(recs_a, recs_b):
        row = []
        for name in CHECKED:
            sa, sb = a["summary"][name], b["summary"][name]
            s = 0.5 * (sa["sd"] + sb["sd"])
            for stat, kq in k.items():
                row.append((sa[stat] - sb[stat]) / (kq * s * np.sqrt(1 / a["ess"][name] + 1 / b["ess"][name])))
        rows.append(row)
    return np.array(rows)


def engines_disagree(recs_a, recs_b, z=3.0, mass=0.999):
    """Two checks of 'the engines agree within Monte-Carlo error', returning the reasons they fail.

    * scattered: the number of |z| > 3 cases exceeds the upper 99.9 % point of
      Binomial(total, P(|N(0,1)| > 3)) (comparisons treated as independent);
    * systematic: for one quantity and statistic, the mean of z over the sweeps (independent
      sweeps, so sd 1/sqrt(n)) is beyond the two-sided 99.9 % point, Bonferroni-corrected over
      the 12 quantity-statistic pairs.
    """
    from scipy.stats import norm
    Z = engine_z(recs_a, recs_b)
    n, m = Z.shape
    out = []
    count = int(np.sum(np.abs(Z) > z))
    limit = int(binom.ppf(mass, Z.size, 2 * norm.sf(z)))
    if count > limit:
        out.append(f"{count}/{Z.size} differences beyond {z} MC sd (chance allows {limit})")
    mean_z = Z.mean(axis=0) * np.sqrt(n)
    crit = norm.isf((1 - mass) / (2 * m))
    if np.max(np.abs(mean_z)) > crit:
        out.append(f"systematic difference: mean z x sqrt(n) = {np.max(np.abs(mean_z)):.2f} > {crit:.2f}")
    print(f"engine comparison: {count}/{Z.size} beyond {z} MC sd, worst |z| {np.max(np.abs(Z)):.2f}, "
          f"largest systematic {np.max(np.abs(mean_z)):.2f} (limit {crit:.2f})")
    return out


def band(n, p=0.9, mass=0.99):
    lo = binom.ppf((1 - mass) / 2, n, p)
    hi = binom.ppf(1 - (1 - mass) / 2, n, p)
    return int(lo), int(hi)


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
