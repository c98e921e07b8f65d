"""Argument checks shared by the public physics functions (one-line ValueErrors naming the argument)."""
from __future__ import annotations

import numpy as np


def positive(name: str, value, *, allow_zero: bool = False):
    arr = np.asarray(value, dtype=float)
    bad = ~np.isfinite(arr) | ((arr < 0) if allow_zero else (arr <= 0))
    if np.any(bad):
        what = "non-negative" if allow_zero else "positive"
        raise ValueError(f"{name} must be {what} and finite, got {_first(arr, bad)}")
    return value


def fraction(name: str, value):
    arr = np.asarray(value, dtype=float)
    bad = ~np.isfinite(arr) | (arr < 0) | (arr > 1)
    if np.any(bad):
        raise ValueError(f"{name} must lie in [0, 1], got {_first(arr, bad)}")
    return value


def finite(name: str, value):
    arr = np.asarray(value, dtype=float)
    if np.any(~np.isfinite(arr)):
        raise ValueError(f"{name} must be finite")
    return value


def _first(arr, bad):
    return float(arr[bad].ravel()[0]) if arr.ndim else float(arr)
