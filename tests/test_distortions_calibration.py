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
  at most 25 % (the issue's requirement) on every sweep. Met for rf and outliers; NOT met for
  resistance and leakage (strict xfail below, with the measured ratios).

The always-run tests use a handful of sweeps (the binomial band is then loose: a smoke test); the
``slow`` tests use 40 sweeps per distortion. Sweeps: tests/distortion_cases.py.
"""
import numpy as np
import pytest
from scipy.stats import binom

from distortion_cases import KINDS, covers, run_case

#: the quantity each distortion biases in the plain fit
BIASED = {"rf": "T_e", "resistance": "T_e", "leakage": "T_e"}
COVERED = ("T_e", "n_e")


def band(n, p=0.9, mass=0.99):
    return int(binom.ppf((1 - mass) / 2, n, p)), int(binom.ppf(1 - (1 - mass) / 2, n, p))


def width(entry, name="T_e"):
    lo, _, hi = entry[name]
    return hi - lo


def check_kind(kind, indices):
    results = [run_case(kind, i) for i in indices]
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


def check_clean(kind, indices):
    ratios = []
    for i in indices:
        r = run_case(kind, i, clean=True)
        ratios.append(width(r["aware"]) / width(r["plain"]))
    print(kind, "clean-sweep T_e interval width ratio aware/plain", np.round(ratios, 3))
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


#: measured on sweeps 200-209 (see the issue report): the T_e interval widens by up to 69 % with a
#: series resistance and 24-38 % with leakage + offset, because both take over part of the information
#: the knee (resistance) and the ion branch (leakage) carry about T_e. The requirement is not met for
#: these two with the present priors; strict xfail keeps that visible and fails if it silently changes.
_WIDENS = pytest.mark.xfail(strict=True, reason="requirement not met: interval widens by more than 25 %")


@pytest.mark.slow
@pytest.mark.parametrize("kind", [pytest.param(k, marks=_WIDENS) if k in ("resistance", "leakage") else k
                                  for k in KINDS])
def test_clean_sweeps_ten(kind):
    check_clean(kind, range(200, 210))
