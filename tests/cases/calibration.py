"""The calibration set: random simulated sweeps with known truth, coverage counts, and the
comparison of two ways of getting a posterior (engines, warm vs cold starts).

Used by tests/test_calibration.py, tests/test_importance.py, tests/test_sampler.py and
tests/test_batch.py. Oracles: binomial bands (scipy.stats.binom) and Monte-Carlo standard
errors from the effective sample size (see tests/test_calibration.py).
"""
import warnings

import numpy as np
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
        with warnings.catch_warnings():      # converged is recorded (and checked by the tests)
            warnings.simplefilter("ignore", bp.ConvergenceWarning)
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
