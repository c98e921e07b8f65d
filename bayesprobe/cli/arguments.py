"""Argument types of the command line: sizes with units, probabilities, distortion lists,
measured circuit values; each rejects bad text with a one-line argparse error."""
from __future__ import annotations

import argparse
import math
import re


_LENGTH_UNITS = {"m": 1.0, "cm": 1e-2, "mm": 1e-3, "um": 1e-6, "µm": 1e-6, "micron": 1e-6}
_AREA_UNITS = {"m2": 1.0, "cm2": 1e-4, "mm2": 1e-6, "um2": 1e-12, "µm2": 1e-12}


def _quantity(units: dict, what: str):
    def parse(text: str) -> float:
        m = re.fullmatch(r"\s*([-+0-9.eE]+)\s*([a-zµ0-9^]*)\s*", text)
        if not m:
            raise argparse.ArgumentTypeError(f"{what} must be a number with an optional unit, got {text!r}")
        unit = m.group(2).replace("^", "")
        try:
            value = float(m.group(1))
        except ValueError:
            raise argparse.ArgumentTypeError(f"{what} must be a number, got {text!r}") from None
        if unit and unit not in units:
            raise argparse.ArgumentTypeError(f"unknown unit {unit!r} for {what}; use one of {', '.join(units)}")
        value *= units.get(unit, 1.0)
        if not math.isfinite(value) or value <= 0:
            raise argparse.ArgumentTypeError(f"{what} must be positive, got {text!r}")
        return value
    return parse


def _probability(text):
    try:
        p = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number between 0 and 1, got {text!r}") from None
    if not 0 < p < 1:
        raise argparse.ArgumentTypeError(f"must lie strictly between 0 and 1, got {text!r}")
    return p


def _positive_float(text):
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number, got {text!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise argparse.ArgumentTypeError(f"must be positive, got {text!r}")
    return v


def _int_at_least(minimum: int):
    """argparse type: a whole number >= ``minimum``."""
    def parse(text):
        try:
            v = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"must be a whole number, got {text!r}") from None
        if v < minimum:
            raise argparse.ArgumentTypeError(
                f"must not be negative, got {text!r}" if minimum == 0 else f"must be at least {minimum}, got {text!r}")
        return v
    return parse


def _nu_choice(text):
    if text.strip().lower() == "fit":
        return "fit"
    return _positive_float(text)


def _distortion_choice(text):
    from ..distortion_choice import parse_distortions
    try:
        return parse_distortions(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def _resistance_with_sd(text):
    """``R0:dR`` in ohm (a measured circuit resistance and its uncertainty)."""
    parts = text.replace("+-", ":").replace("\u00b1", ":").split(":")
    try:
        if len(parts) != 2:
            raise ValueError
        value, sd = float(parts[0]), float(parts[1])
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be OHMS:SD, e.g. 47:2 or 0:0.5, got {text!r}") from None
    if not (math.isfinite(value) and value >= 0 and math.isfinite(sd) and sd > 0):
        raise argparse.ArgumentTypeError(f"needs a resistance >= 0 and an uncertainty > 0 (ohm), got {text!r}")
    return value, sd


_positive_int = _int_at_least(1)
_nonneg_int = _int_at_least(0)
