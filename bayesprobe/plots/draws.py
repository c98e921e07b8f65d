"""Reading a fit's posterior draws for the figures: flattening, even thinning, equal-tailed
intervals, and the classical and known (true) values shown beside them."""
from __future__ import annotations

import math

import numpy as np

__all__ = ["flat", "n_draws", "thin_index", "tails", "interval", "classical_values", "truth_values",
           "main_names"]


def flat(result, name) -> np.ndarray:
    """All draws of ``name`` as one float vector (chains and draws flattened)."""
    return np.asarray(result.draws[name], float).reshape(-1)


def n_draws(result) -> int:
    """Number of stored draws per parameter."""
    return int(np.asarray(next(iter(result.draws.values()))).size)


def thin_index(total: int, k: int) -> np.ndarray:
    """About ``k`` evenly spaced indices into ``total`` draws (all of them if fewer)."""
    if k >= total:
        return np.arange(total)
    return np.unique(np.linspace(0, total - 1, max(int(k), 2)).round().astype(int))


def tails(level: float) -> tuple[float, float]:
    """Lower and upper tail probabilities of the equal-tailed interval of ``level``."""
    t = 0.5 * (1.0 - level)
    return t, 1.0 - t


def interval(x, level) -> tuple[float, float, float]:
    """(low, median, high) of the equal-tailed interval of finite draws (NaNs if none)."""
    x = np.asarray(x, float).ravel()
    x = x[np.isfinite(x)]
    if not x.size:
        return (math.nan, math.nan, math.nan)
    lo, hi = tails(level)
    q = np.quantile(x, [lo, 0.5, hi])
    return float(q[0]), float(q[1]), float(q[2])


def classical_values(result) -> dict:
    """Finite classical estimates by name ({} if the classical analysis failed)."""
    c = result.classical if isinstance(result.classical, dict) else {}
    if "error" in c:
        return {}
    out = {}
    for k, v in c.items():
        if isinstance(v, (int, float, np.floating)) and np.isfinite(v):
            out[k] = float(v)
    return out


def truth_values(truth) -> dict:
    """Finite known values by name from the user's ``truth`` dict ({} for None)."""
    if truth is None:
        return {}
    if not isinstance(truth, dict):
        raise ValueError("truth must be a dict of parameter name -> value")
    out = {}
    for k, v in truth.items():
        if isinstance(v, (int, float, np.floating, np.integer)) and np.isfinite(v):
            out[k] = float(v)
    return out


def main_names(result) -> list[str]:
    """The main quantities of a fit that have draws: temperature(s), n_e, n_i, V_p, V_f."""
    names = list(result.config.electron_model.temperature_names)
    names += ["n_e", "n_i", "V_p", "V_f"]
    return [n for n in names if n in result.draws]
