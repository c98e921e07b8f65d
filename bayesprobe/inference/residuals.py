"""Residual diagnostics: do the points scatter about the model as the likelihood assumes?

The likelihood treats the points as independent. Real sweeps often are not (RF and turbulent
fluctuations slower than the sampling, digitiser filters, oversampling), and then every error
bar is too narrow. The lag-1 autocorrelation of the standardised residuals,

    rho = sum_i r_i r_(i+1) / sum_i r_i^2,    r_i = (I_i - mu_i) / sd_i,

taken along the recorded (time) order of each monotone run of the sweep, is close to 0 for
independent noise, with standard deviation about 1/sqrt(n) (M. S. Bartlett, J. R. Stat. Soc.
Suppl. 8, 27 (1946); the same statistic underlies the Durbin-Watson test, Durbin & Watson,
Biometrika 37, 409 (1950); both from memory). ``z = rho sqrt(n)`` is reported with it.
"""
from __future__ import annotations

import math

import numpy as np

__all__ = ["lag1_autocorrelation", "residual_diagnostics"]


def lag1_autocorrelation(residuals, segments=None) -> tuple[float, int]:
    """(rho, n): the lag-1 autocorrelation of ``residuals`` pooled over ``segments`` (index
    arrays of consecutive points; default one segment), and the number of pairs used."""
    r = np.asarray(residuals, float)
    parts = [np.arange(r.size)] if segments is None else segments
    num = den = 0.0
    pairs = 0
    for idx in parts:
        x = r[np.asarray(idx)]
        x = x[np.isfinite(x)]
        if x.size < 3:
            continue
        x = x - x.mean()
        num += float(np.dot(x[:-1], x[1:]))
        den += float(np.dot(x, x))
        pairs += x.size - 1
    if pairs < 2 or den <= 0:
        return float("nan"), pairs
    return num / den, pairs


def residual_diagnostics(current, model_current, sd, direction=None) -> dict:
    """The ``residuals`` block of summary.json: lag-1 autocorrelation of the standardised
    residuals (points in voltage order; a sweep recorded in both directions is taken one
    direction at a time, each direction being in time order), its z value, and the points used."""
    r = (np.asarray(current, float) - np.asarray(model_current, float)) / np.asarray(sd, float)
    segments = None
    if direction is not None:
        d = np.asarray(direction)
        segments = [np.flatnonzero(d == s) for s in np.unique(d)]
    rho, pairs = lag1_autocorrelation(r, segments)
    z = rho * math.sqrt(pairs) if math.isfinite(rho) else float("nan")
    return {"lag1_autocorrelation": rho, "lag1_z": z, "n_pairs": pairs,
            "evaluated_at": "posterior maximum",
            "note": "independent noise gives |lag1_z| of order 1; large positive values mean correlated "
                    "residuals, and then the intervals are too narrow"}
