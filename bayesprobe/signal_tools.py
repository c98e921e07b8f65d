"""Signal processing shared by the windowed analysis and the Druyvesteyn EEDF.

Both read a measured characteristic the same way: drop non-finite points, sort by
bias and average repeated biases; smooth and differentiate with cubic
Savitzky-Golay filters on a uniform grid, with the filter's noise gain telling how
much of the current's noise reaches the result; estimate that noise locally and
robustly; find where the smoothed current turns from negative to positive; fit
straight lines; and pick the ion-saturation window at the low end of the sweep.

Everything here is plain numerics on arrays (no plasma physics); the voltages are
in V and the currents in A only by convention of the callers.

References
----------
* A. Savitzky & M. J. E. Golay, "Smoothing and differentiation of data by
  simplified least squares procedures", Anal. Chem. 36, 1627 (1964).
* F. R. Hampel, "The influence curve and its role in robust estimation",
  J. Am. Stat. Assoc. 69, 383 (1974): the median absolute deviation, scaled by
  1.4826 to estimate a normal standard deviation.
* P. Hall, J. W. Kay & D. M. Titterington, "Asymptotically optimal
  difference-based estimation of variance in nonparametric regression",
  Biometrika 77, 521 (1990): noise from differences of neighbouring points.
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from scipy.ndimage import median_filter
from scipy.signal import savgol_coeffs, savgol_filter

__all__ = ["POLYORDER", "MAD_TO_SD", "odd", "window_ladder", "clean_sweep", "savgol",
           "savgol_noise_gain", "savgol_noise_gains", "running_spread", "savgol_residual_noise",
           "difference_noise", "LineFit", "line_fit", "upward_crossings", "interpolated_root",
           "saturation_window"]

#: Savitzky-Golay polynomial order: a cubic follows an exponential over a few of its
#: scale lengths closely (common practice, no source for the choice)
POLYORDER = 3
#: median absolute deviation -> standard deviation for normal noise, 1/Phi^-1(3/4) (Hampel 1974)
MAD_TO_SD = 1.4826


# ----------------------------------------------------------------------------- windows

def odd(k) -> int:
    """``int(k)``, made odd by adding one if it is even (filter windows are odd)."""
    k = int(k)
    return k if k % 2 else k + 1


def window_ladder(lowest, top, count) -> list[int]:
    """Odd window lengths from about ``lowest`` to ``top``, ``count`` geometric steps, no repeats.

    Used to search for the narrowest filter that meets a noise target (common
    practice, no source).
    """
    return sorted({min(odd(w), top) for w in np.geomspace(lowest, top, count)})


# ----------------------------------------------------------------------------- input

def clean_sweep(voltage, current, *more):
    """Finite points sorted by bias, with the values at repeated biases averaged.

    Points where ``voltage`` or ``current`` is not finite are dropped (from
    ``more`` too); the sort is stable. Returns ``(V, I, *more)``.
    """
    good = np.isfinite(voltage) & np.isfinite(current)
    V = voltage[good]
    order = np.argsort(V, kind="stable")
    V = V[order]
    ys = [y[good][order] for y in (current, *more)]
    Vu, inverse, counts = np.unique(V, return_inverse=True, return_counts=True)
    if Vu.size != V.size:
        V = Vu
        ys = [np.bincount(inverse, weights=y) / counts for y in ys]
    return (V, *ys)


# ----------------------------------------------------------------------------- filters

def savgol(y, window, deriv=0, delta=1.0):
    """Cubic Savitzky-Golay smoothing (``deriv=0``) or derivative of ``y`` on a uniform grid.

    The ends use the filter's one-sided polynomial fits (``mode="interp"``).
    Savitzky & Golay, Anal. Chem. 36, 1627 (1964).
    """
    return savgol_filter(y, window, POLYORDER, deriv=deriv, delta=delta, mode="interp")


def savgol_noise_gain(window, deriv, delta, pos=None) -> float:
    """Noise gain ||c|| of a cubic Savitzky-Golay filter: the output sd for white input noise of sd 1.

    ``pos`` is the position of the evaluated point in the window (default: the
    centre); off-centre positions are the one-sided fits used at the ends.
    """
    return float(np.linalg.norm(savgol_coeffs(window, POLYORDER, deriv=deriv, delta=delta, pos=pos,
                                              use="dot")))


def savgol_noise_gains(n, window, deriv, delta) -> np.ndarray:
    """Noise gain of :func:`savgol` at each of ``n`` grid points.

    Interior points use the centred coefficients; the first and last half-window
    the one-sided fits of ``mode="interp"``.
    """
    m = window // 2
    gains = np.full(n, savgol_noise_gain(window, deriv, delta))
    for j in range(m):
        gains[j] = savgol_noise_gain(window, deriv, delta, pos=j)
        gains[n - 1 - j] = savgol_noise_gain(window, deriv, delta, pos=window - 1 - j)
    return gains


# ----------------------------------------------------------------------------- noise

def running_spread(r) -> np.ndarray:
    """Running median of |r| over odd(max(15, n/20)) points: a local, robust spread.

    Times :data:`MAD_TO_SD` (and any normalisation of ``r``) it estimates a
    slowly varying noise sd; a median ignores the few large residuals of a kink
    or an outlier (Hampel 1974). The span is common practice, no source.
    """
    span = odd(max(15, r.size // 20))
    return median_filter(np.abs(r), size=span, mode="nearest")


def savgol_residual_noise(y) -> np.ndarray:
    """Local noise sd of ``y`` (uniform grid, at least 8 points) from the residual about a short filter.

    The residual about a 7-point cubic Savitzky-Golay fit has variance
    sd^2 (1 - h0), h0 the fit's central weight (its leverage); its running
    spread is divided by sqrt(1 - h0). Floor: a thousandth of the typical noise,
    and never below 1e-9 of the largest |y| (a noise-free sweep would otherwise
    get infinite weights).
    """
    w = 7
    resid = y - savgol(y, w)
    h0 = savgol_coeffs(w, POLYORDER)[w // 2]
    scale = MAD_TO_SD / np.sqrt(1.0 - h0)
    sd = scale * running_spread(resid)
    floor = max(1e-3 * scale * float(np.median(np.abs(resid))), 1e-9 * float(np.max(np.abs(y))), 1e-300)
    return np.maximum(sd, floor)


def difference_noise(y) -> np.ndarray:
    """Local noise sd of ``y`` (uniform grid) from third differences.

    r_k = (y[k+2] - 3 y[k+1] + 3 y[k] - y[k-1]) / sqrt(20) has the sd of white
    noise (1 + 9 + 9 + 1 = 20) and removes any quadratic trend (a difference-based
    estimate, Hall, Kay & Titterington 1990); its running spread follows slowly
    varying noise. Floor: 1e-15 of the largest |y|.
    """
    r = np.diff(y, 3) / math.sqrt(20.0)
    r = np.pad(r, (1, 2), mode="edge")
    sd = MAD_TO_SD * running_spread(r)
    floor = max(1e-15 * float(np.max(np.abs(y))), np.finfo(float).tiny)
    return np.maximum(sd, floor)


# ----------------------------------------------------------------------------- lines and roots

class LineFit(NamedTuple):
    """y = intercept + slope (x - x0); ``cov`` of (intercept, slope); reduced chi-square."""

    intercept: float
    slope: float
    x0: float
    cov: np.ndarray
    chi2_red: float


def line_fit(x, y, w=None) -> LineFit:
    """Weighted least-squares straight line about the weighted mean x0 (normal equations).

    ``cov`` uses the weights as inverse variances, so it is absolute when they
    are; with unit weights multiply it by ``chi2_red``. Textbook least squares,
    e.g. P. R. Bevington & D. K. Robinson, *Data Reduction and Error Analysis for
    the Physical Sciences*, 3rd ed. (McGraw-Hill, 2003), ch. 6.
    """
    if w is None:
        w = np.ones_like(x)
    x0 = float(np.average(x, weights=w))
    X = np.column_stack([np.ones_like(x), x - x0])
    XtW = X.T * w
    F = XtW @ X
    coef = np.linalg.solve(F, XtW @ y)
    resid = y - X @ coef
    dof = max(x.size - 2, 1)
    chi2_red = float(np.sum(w * resid**2) / dof)
    return LineFit(float(coef[0]), float(coef[1]), x0, np.linalg.inv(F), chi2_red)


def upward_crossings(s) -> np.ndarray:
    """Indices k with s[k] < 0 <= s[k+1] (where ``s`` turns from negative to non-negative)."""
    return np.flatnonzero((s[:-1] < 0) & (s[1:] >= 0))


def interpolated_root(x, s, k) -> float:
    """Root of the straight line through (x[k], s[k]) and (x[k+1], s[k+1])."""
    x0, x1, s0, s1 = x[k], x[k + 1], s[k], s[k + 1]
    return float(x0 - s0 * (x1 - x0) / (s1 - s0))


# ----------------------------------------------------------------------------- ion window

def saturation_window(V, limit, fallback_top, min_points):
    """Points of the low-bias (ion-saturation) window of a sorted bias array ``V``.

    In order of preference: ``V <= limit`` (NaN: skip); the lowest quarter of
    [V[0], fallback_top]; the first ``min_points`` points. A stage is used if it
    holds at least ``min_points`` points (common practice, no source).

    Returns
    -------
    mask : ndarray of bool
    top : float
        Upper end of the window: ``limit``, the quarter point, or the last point.
    stage : int
        0, 1 or 2 for the three choices above.
    """
    mask = V <= limit
    if np.count_nonzero(mask) >= min_points:
        return mask, limit, 0
    top = V[0] + 0.25 * (fallback_top - V[0])
    mask = V <= top
    if np.count_nonzero(mask) >= min_points:
        return mask, top, 1
    mask = np.zeros(V.size, bool)
    mask[:min_points] = True
    return mask, float(V[min_points - 1]), 2
