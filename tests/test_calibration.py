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


def coverage(indices):
    """Interval hits per parameter, number converged, and squared errors of both methods.

    Errors: relative for T_e, n_e, n_i; in units of the true T_e for the potentials.
    """
    hits = {name: 0 for name in CHECKED}
    converged = 0
    sq = {"bayes": {n: [] for n in ERRORS}, "classical": {n: [] for n in ERRORS}}
    for i in indices:
        cfg, sim = random_case(i)
        res = bp.fit(sim.sweep, config=cfg, seed=i, progress=False)
        converged += res.converged
        summ = res.parameter_summary()
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
    return hits, converged, rms


ERRORS = ("T_e", "n_e", "n_i", "V_p", "V_f")


def band(n, p=0.9, mass=0.99):
    lo = binom.ppf((1 - mass) / 2, n, p)
    hi = binom.ppf(1 - (1 - mass) / 2, n, p)
    return int(lo), int(hi)


def test_binomial_band_is_what_we_think():
    """Sanity of the oracle itself: for N = 100 the 99 % band is about [82, 96] (normal approx 90 ± 2.58·3)."""
    lo, hi = band(100)
    assert 80 <= lo <= 83 and 96 <= hi <= 98


def test_coverage_fast_set():
    """Also: the posterior median's RMS error is at least 2x smaller than the classical method's
    for T_e, n_e and V_p on the same sweeps (the issue's requirement; the numbers are printed)."""
    n = 24
    hits, converged, rms = coverage(range(n))
    print("coverage", hits, "rms", rms)
    lo, hi = band(n)
    assert converged == n
    for name, h in hits.items():
        assert lo <= h <= hi, f"{name}: {h}/{n} intervals cover the truth, 99 % band [{lo}, {hi}]"
    for name in ("T_e", "n_e", "V_p"):
        assert rms["classical"][name] >= 2 * rms["bayes"][name], (name, rms)


@pytest.mark.slow
def test_coverage_full_set():
    n = 120
    hits, converged, rms = coverage(range(100, 100 + n))
    print("coverage", hits, "rms", rms)
    lo, hi = band(n)
    assert converged >= n - 2
    for name, h in hits.items():
        assert lo <= h <= hi, f"{name}: {h}/{n} intervals cover the truth, 99 % band [{lo}, {hi}]"
