"""Distortions: the plain model is biased, the distortion-aware model is calibrated, clean sweeps lose little.

Oracles:
* Coverage: if the 90 % intervals are calibrated, the number of sweeps whose interval covers the truth
  is Binomial(N, 0.9); we accept a count inside its central 99 % band (scipy.stats.binom), as the
  calibration tests of the plain model do.
* Bias of the plain model (the negative control): its 90 % T_e interval misses the truth in most
  sweeps (more than half) for RF fluctuation, series resistance and leakage. Symmetric heavy-tailed
  outliers do not bias the plain fit (its fitted noise level grows instead), so for ``outliers`` the
  control is efficiency: the Student-t fit gives the narrower T_e interval in most sweeps.
* Clean sweeps: switching a distortion on when the data have none widens the 90 % T_e interval by
  at most 25 % (the issue's requirement) on every sweep. With the default (vague) priors this is met
  for rf and outliers and NOT met for resistance and leakage (strict xfail below, with the measured
  ratios); it is met for both when the circuit is calibrated (a measured circuit resistance, a
  plasma-off sweep for the leakage line: bayesprobe.inference.instrument_priors).
* Information loss, not sampler noise: on a clean sweep the leakage widening equals the Cramer-Rao
  ratio (tests/cases/distortion_information.py) within the Monte-Carlo error of two interval widths.

The always-run tests use a handful of sweeps (the binomial band is then loose: a smoke test); the
``slow`` tests use 40 sweeps per distortion (10 for the clean-sweep widths). Sweeps:
tests/cases/distortions.py.
"""
import numpy as np
import pytest
from scipy.stats import binom

from cases.distortions import KINDS, covers, run_case

#: the quantity each distortion biases in the plain fit
BIASED = {"rf": "T_e", "resistance": "T_e", "leakage": "T_e"}
COVERED = ("T_e", "n_e")


def band(n, p=0.9, mass=0.99):
    return int(binom.ppf((1 - mass) / 2, n, p)), int(binom.ppf(1 - (1 - mass) / 2, n, p))


def width(entry, name="T_e"):
    lo, _, hi = entry[name]
    return hi - lo


def check_kind(kind, indices, calibrated=False):
    results = [run_case(kind, i, calibrated=calibrated) for i in indices]
    n = len(results)
    cover = {q: sum(covers(r["aware"], q, r["truth"]) for r in results) for q in COVERED}
    converged = sum(r["aware"]["converged"] for r in results)
    print(kind, "aware coverage", cover, "of", n, "converged", converged)
    lo, hi = band(n)
    assert converged == n
    for q, h in cover.items():
        assert lo <= h <= hi, f"{kind}: {q} covered in {h}/{n} sweeps, 99 % band [{lo}, {hi}]"
    if kind in BIASED:
        q = BIASED[kind]
        missed = sum(not covers(r["plain"], q, r["truth"]) for r in results)
        print(kind, f"plain model misses the true {q} in {missed}/{n}")
        assert missed > n / 2, f"{kind}: the plain model missed the true {q} in only {missed}/{n} sweeps"
    else:
        narrower = sum(width(r["aware"]) < width(r["plain"]) for r in results)
        print(kind, f"Student-t interval narrower in {narrower}/{n}")
        assert narrower > n / 2
    return results


def check_clean(kind, indices, calibrated=False):
    ratios = []
    for i in indices:
        r = run_case(kind, i, clean=True, calibrated=calibrated)
        ratios.append(width(r["aware"]) / width(r["plain"]))
    print(kind, "calibrated" if calibrated else "default priors",
          "clean-sweep T_e interval width ratio aware/plain", np.round(ratios, 3))
    assert max(ratios) <= 1.25, (kind, ratios)
    return ratios


def test_binomial_band_for_forty():
    """The band used for N = 40: central 99 % of Binomial(40, 0.9) (normal approx 36 +- 2.58 * 1.9)."""
    lo, hi = band(40)
    assert 30 <= lo <= 32 and hi == 40


@pytest.mark.parametrize("kind,n", [("rf", 5), ("resistance", 3), ("leakage", 3), ("outliers", 4)])
def test_distortion_small_set(kind, n):
    check_kind(kind, range(n))


def test_clean_sweeps_rf_small_set():
    check_clean("rf", range(3))


@pytest.mark.slow
@pytest.mark.parametrize("kind", KINDS)
def test_distortion_forty_sweeps(kind):
    check_kind(kind, range(100, 140))


#: measured on sweeps 200-209 with the default priors: the T_e interval widens by 4-69 % with a series
#: resistance and 24-38 % with leakage + offset. Diagnosis (tests/cases/distortion_information.py and the
#: report of this change): T_e information sits in the transition region V_f..V_p (dropping it
#: inflates the T_e sd 2-50x; dropping the ion branch 1.0-2.2x). Resistance: R makes the local
#: log-slope 1/(T_e + I R), Cramer-Rao correlation of ln T_e with R -0.91; the data bound R only from
#: above (posterior 95 % quantile 0.7-2.2 % of T_e/I_es), so the widening is set by the prior mass just
#: below that bound (seed-to-seed spread of the ratio ~4 %: not sampler noise). Leakage: the posterior
#: sd of G and I_0 is 0.2-0.5 % of the prior sd, and the widening matches the Cramer-Rao ratio
#: (1.20-1.33); a default prior as tight as 0.1 I_is would still leave 1.20-1.32. Both are information
#: the sweep does not hold; the calibrated route below meets the requirement. Strict xfail keeps the
#: default-prior result visible and fails if it silently changes.
_WIDENS = pytest.mark.xfail(strict=True, reason="vague priors: interval widens by more than 25 % (information "
                                                "loss; see the calibrated tests)")


@pytest.mark.slow
@pytest.mark.parametrize("kind", [pytest.param(k, marks=_WIDENS) if k in ("resistance", "leakage") else k
                                  for k in KINDS])
def test_clean_sweeps_ten(kind):
    check_clean(kind, range(200, 210))


def test_leakage_widening_is_cramer_rao():
    """On clean sweep 200 the default-prior leakage widening is the Cramer-Rao ratio (information the sweep
    does not hold), not sampling noise. Tolerance: a 90 % width from ESS >= 1000 draws has relative sd
    about 0.91/sqrt(ESS) (asymptotic sd of a sample quantile, sqrt(q(1-q)/n)/f(x_q), for a normal
    posterior, both ends); a ratio of two such widths 4.1 %; we allow 3 of those, plus the sampled ratio
    must exceed 1 by more than 3 of those (negative control: no widening at all)."""
    from cases.distortion_information import cramer_rao
    r = run_case("leakage", 200, clean=True)
    sampled = width(r["aware"]) / width(r["plain"])
    predicted = cramer_rao("leakage", 200)["ratio_free"]
    tol = 3 * np.sqrt(2) * 0.91 / np.sqrt(1000)
    print("leakage 200: sampled ratio", round(sampled, 3), "Cramer-Rao", round(predicted, 3))
    assert abs(sampled / predicted - 1) <= tol
    assert sampled > 1 + tol


def test_clean_sweep_calibrated_leakage_small_set():
    check_clean("leakage", range(1), calibrated=True)


@pytest.mark.slow
@pytest.mark.parametrize("kind", ["resistance", "leakage"])
def test_clean_sweeps_ten_calibrated(kind):
    """The requirement, met with calibration: a measured circuit resistance (0 +- 0.5 % of T_e/I_es on a
    clean sweep) or the leakage line of a plasma-off sweep (tests/cases/distortions.py). Measured: ratios
    1.04-1.15 (resistance) and 1.00-1.10 (leakage)."""
    check_clean(kind, range(200, 210), calibrated=True)


@pytest.mark.slow
@pytest.mark.parametrize("kind", ["resistance", "leakage"])
def test_distortion_forty_sweeps_calibrated(kind):
    """Calibrated priors keep the aware model calibrated on the distorted set (and the plain model biased).
    Measured: resistance T_e 37/40, n_e 35/40 (plain misses T_e in 40/40); leakage T_e 35/40, n_e 36/40
    (plain misses 33/40); band [30, 40]."""
    check_kind(kind, range(100, 140), calibrated=True)
