"""Tests of bayesprobe.signal_tools, the signal processing shared by the windowed analysis
and the Druyvesteyn EEDF.

References named in the tests:

* Savitzky & Golay, Anal. Chem. 36, 1627 (1964): a cubic least-squares filter reproduces
  any cubic exactly (and its derivatives); the tabulated 5-point convolution weights
  (-3, 12, 17, 12, -3)/35 (smoothing), (1, -8, 0, 8, -1)/12 (first derivative, cubic)
  and (2, -1, -2, -1, 2)/7 (second derivative), from memory.
* Least squares: the weighted straight line and its covariance, Bevington & Robinson,
  *Data Reduction and Error Analysis for the Physical Sciences*, 3rd ed. (2003), ch. 6:
  var(slope) = 1/sum w (x - xbar)^2, var(value at xbar) = 1/sum w (from memory).
* Median absolute deviation of normal samples: MAD = 0.6745 sd (Hampel 1974); its
  large-sample relative sd is about 1.17/sqrt(m) (efficiency 37 %, from memory).
"""
import math

import numpy as np
import pytest

from bayesprobe import signal_tools as st


# ----------------------------------------------------------------------------- filters

@pytest.mark.parametrize("deriv", [0, 1, 2])
def test_savgol_reproduces_a_cubic_and_its_derivatives(deriv):
    """Savitzky & Golay (1964): the filter is the least-squares cubic, exact for a cubic,
    including the one-sided fits at the ends (mode="interp")."""
    x = np.linspace(-2.0, 3.0, 41)
    dx = x[1] - x[0]
    coef = [0.7, -1.3, 0.4, 0.25]                       # c0 + c1 x + c2 x^2 + c3 x^3
    p = np.polynomial.Polynomial(coef)
    got = st.savgol(p(x), 9, deriv=deriv, delta=dx)
    np.testing.assert_allclose(got, p.deriv(deriv)(x), rtol=0, atol=1e-10 * (1 + abs(p(x)).max()) / dx**deriv)
    # negative control: a quartic is not reproduced
    q = np.polynomial.Polynomial(coef + [0.5])
    assert np.max(np.abs(st.savgol(q(x), 9, deriv=deriv, delta=dx) - q.deriv(deriv)(x))) > 1e-4


@pytest.mark.parametrize("deriv, weights", [
    (0, np.array([-3, 12, 17, 12, -3]) / 35),
    (1, np.array([1, -8, 0, 8, -1]) / 12),
    (2, np.array([2, -1, -2, -1, 2]) / 7),
])
def test_noise_gain_of_the_tabulated_five_point_filters(deriv, weights):
    """The centred noise gain is the norm of the tabulated weights (Savitzky & Golay 1964),
    divided by delta^deriv."""
    delta = 0.3
    assert st.savgol_noise_gain(5, deriv, delta) == pytest.approx(np.linalg.norm(weights) / delta**deriv,
                                                                  rel=1e-12)


def test_noise_gains_at_the_ends_are_those_of_one_sided_least_squares_cubics():
    """At position j of the window the filter is the least-squares cubic through the window,
    evaluated (or differentiated) at x_j: its weights are that fit applied to unit impulses.
    Computed here with numpy's polynomial fit, independently of scipy's filter."""
    window, delta, n = 9, 0.05, 30
    x = np.arange(window) * delta
    gains = st.savgol_noise_gains(n, window, 2, delta)
    for j in range(window // 2):
        w = [np.polynomial.Polynomial.fit(x, e, 3).deriv(2)(x[j]) for e in np.eye(window)]
        assert gains[j] == pytest.approx(np.linalg.norm(w), rel=1e-8)
        w_end = [np.polynomial.Polynomial.fit(x, e, 3).deriv(2)(x[window - 1 - j]) for e in np.eye(window)]
        assert gains[n - 1 - j] == pytest.approx(np.linalg.norm(w_end), rel=1e-8)
    centre = [np.polynomial.Polynomial.fit(x, e, 3).deriv(2)(x[window // 2]) for e in np.eye(window)]
    np.testing.assert_allclose(gains[window // 2:n - window // 2], np.linalg.norm(centre), rtol=1e-8)
    # the one-sided fits amplify noise more than the centred one
    assert gains[0] > 2 * gains[n // 2]


def test_noise_gain_is_the_output_sd_for_white_noise():
    """Filtered white noise of sd 1 has sd ||c||. With 2e5 points the sample sd of the
    (correlated over 11 points) output has relative sd about sqrt(11/(2 * 2e5)) = 0.5 %;
    the tolerance is four of those."""
    rng = np.random.default_rng(1)
    y = rng.normal(size=200_000)
    out = st.savgol(y, 11, deriv=1, delta=1.0)[5:-5]
    assert np.std(out) == pytest.approx(st.savgol_noise_gain(11, 1, 1.0), rel=0.02)


def test_window_ladder_is_odd_increasing_and_bounded():
    """Definition: odd, distinct, ascending lengths from about ``lowest`` up to ``top``."""
    w = st.window_ladder(5, 101, 14)
    assert w == sorted(set(w)) and all(k % 2 for k in w)
    assert w[0] == 5 and w[-1] == 101 and len(w) <= 14   # repeats after rounding to odd are merged
    assert st.window_ladder(7, 7, 24) == [7]
    assert st.odd(6) == 7 and st.odd(7) == 7 and st.odd(8.9) == 9


# ----------------------------------------------------------------------------- noise

def _trend(x):
    return 3.0 + 2.0 * x - 0.7 * x**2 + np.exp(x / 3.0)


@pytest.mark.parametrize("estimator", [st.difference_noise, st.savgol_residual_noise])
def test_local_noise_recovers_a_known_sd_on_a_trend(estimator):
    """White normal noise of sd 0.02 on a smooth trend. Each local estimate is a MAD over
    2001 points (relative sd about 1.17/sqrt(2001) = 2.6 %, up to ~1.5x more for the
    correlated residuals); the median over 20 independent spans has about a quarter of
    that, so 5 % is at least five of its sds. The noise sd doubles halfway along, and
    the estimate must follow it (beyond its running span)."""
    rng = np.random.default_rng(7)
    x = np.linspace(0.0, 6.0, 40_000)
    sd = np.where(x < 3.0, 0.02, 0.04)
    est = estimator(_trend(x) + sd * rng.normal(size=x.size))
    left, right = est[2_000:18_000], est[22_000:38_000]
    assert np.median(left) == pytest.approx(0.02, rel=0.05)
    assert np.median(right) == pytest.approx(0.04, rel=0.05)
    # the scale matters: the unscaled spread is MAD = 0.6745 sd, which would fail the check above
    assert np.median(left) / st.MAD_TO_SD == pytest.approx(0.02 * 0.6745, rel=0.05)


def test_noise_floor_of_a_noise_free_curve():
    """A noise-free curve gets the documented floors, never zero."""
    x = np.linspace(0.0, 1.0, 200)
    y = 5.0 * x**2                              # exact quadratic: third differences ~ 0
    assert np.all(st.difference_noise(y) >= 1e-15 * 5.0)
    assert np.all(st.savgol_residual_noise(y) >= 1e-9 * 5.0)


# ----------------------------------------------------------------------------- lines and roots

def test_line_fit_against_the_textbook_formulas():
    """Weighted least squares (Bevington & Robinson ch. 6): the coefficients agree with
    numpy's polyfit, var(slope) = 1/sum w (x - xbar)^2, var(value at xbar) = 1/sum w, no
    correlation about the weighted mean; exact data give chi2 = 0."""
    rng = np.random.default_rng(3)
    x = np.sort(rng.uniform(-5, 5, 40))
    w = rng.uniform(0.5, 2.0, x.size)
    y = 1.5 - 0.8 * x + rng.normal(size=x.size) / np.sqrt(w)
    fit = st.line_fit(x, y, w)
    b, a = np.polyfit(x, y, 1, w=np.sqrt(w))
    assert fit.slope == pytest.approx(b, rel=1e-10)
    assert fit.intercept + fit.slope * (0 - fit.x0) == pytest.approx(a, rel=1e-10)
    xbar = np.sum(w * x) / np.sum(w)
    assert fit.x0 == pytest.approx(xbar, rel=1e-12)
    assert fit.cov[1, 1] == pytest.approx(1 / np.sum(w * (x - xbar) ** 2), rel=1e-10)
    assert fit.cov[0, 0] == pytest.approx(1 / np.sum(w), rel=1e-10)
    assert abs(fit.cov[0, 1]) < 1e-12 * fit.cov[0, 0]
    exact = st.line_fit(x, 2.0 + 0.5 * x)
    assert exact.chi2_red == pytest.approx(0.0, abs=1e-25)
    assert exact.slope == pytest.approx(0.5, rel=1e-12)


def test_upward_crossings_and_interpolated_root():
    """sin(x) turns from negative to positive at 2 pi k; the secant root of a straight
    line is exact."""
    x = np.linspace(0.1, 20.0, 1000)
    k = st.upward_crossings(np.sin(x))
    np.testing.assert_allclose(x[k + 1], [2 * np.pi, 4 * np.pi, 6 * np.pi], atol=x[1] - x[0])
    v = np.linspace(-1.0, 4.0, 11)
    s = 2.0 * v - 3.0
    (j,) = st.upward_crossings(s)
    assert st.interpolated_root(v, s, j) == pytest.approx(1.5, rel=1e-14)
    assert st.upward_crossings(-np.ones(5)).size == 0
    # downward crossings are not counted
    assert st.upward_crossings(np.array([1.0, -1.0, -2.0])).size == 0


# ----------------------------------------------------------------------------- input and windows

def test_clean_sweep_sorts_drops_and_averages():
    """Non-finite points dropped (from every array), sorted by bias, repeated biases
    averaged in every array (definition)."""
    V = np.array([2.0, 1.0, np.nan, 2.0, 0.0, 3.0])
    I = np.array([10.0, 5.0, 1.0, 20.0, 0.0, np.inf])
    extra = np.array([1.0, 2.0, 3.0, 5.0, 4.0, 6.0])
    Vc, Ic, Ec = st.clean_sweep(V, I, extra)
    np.testing.assert_array_equal(Vc, [0.0, 1.0, 2.0])
    np.testing.assert_array_equal(Ic, [0.0, 5.0, 15.0])
    np.testing.assert_array_equal(Ec, [4.0, 2.0, 3.0])
    Vc, Ic = st.clean_sweep(np.array([3.0, 1.0, 2.0]), np.array([30.0, 10.0, 20.0]))
    np.testing.assert_array_equal(Ic, [10.0, 20.0, 30.0])


def test_saturation_window_stages():
    """The three stages of the documented preference order (common practice, no source)."""
    V = np.linspace(-10.0, 10.0, 21)
    mask, top, stage = st.saturation_window(V, -4.5, 0.0, 5)
    assert stage == 0 and top == -4.5 and np.count_nonzero(mask) == 6
    mask, top, stage = st.saturation_window(V, -8.5, 6.0, 5)       # 2 points: quarter of [-10, 6]
    assert stage == 1 and top == pytest.approx(-6.0) and np.count_nonzero(mask) == 5
    mask, top, stage = st.saturation_window(V, math.nan, -8.0, 5)  # quarter holds 1 point
    assert stage == 2 and top == V[4] and np.flatnonzero(mask).tolist() == [0, 1, 2, 3, 4]
