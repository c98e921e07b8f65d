"""Shared look of the figures: the palette, contour levels, figure sizes, display units and
number formatting.

Display units: currents in A, mA, µA or nA by their size, densities in 10^k m^-3 (k the
power of ten nearest the median density), sigma_rel in percent. Axis labels read the TeX
label of each quantity from the registry (:func:`bayesprobe.quantities.tex_label`).
"""
from __future__ import annotations

import math

import numpy as np

from ..quantities import tex_label

__all__ = ["PALETTE", "CONTOUR_LEVELS", "FIT_FIGSIZE", "current_unit", "Scales", "decimals",
           "format_value", "figure_title"]

#: One palette for every figure: hues chosen to stay distinguishable with the common
#: colour-vision deficiencies, and always paired with distinct line styles or markers.
PALETTE = {
    "data": "#3d3d3d",          # measured points (charcoal)
    "model": "#1d4e89",         # posterior median of the noise-free model (navy)
    "band": "#a9c9e8",          # posterior-predictive band (pale blue)
    "ppc": "#4f86c6",           # posterior-predictive median (mid blue)
    "V_f": "#d1770f",           # floating potential (amber)
    "V_p": "#7b4fa0",           # plasma potential (violet)
    "classical": "#16877a",     # classical (non-Bayesian) estimates (teal)
    "truth": "#111111",         # known true values (near black)
    "flag": "#b2182b",          # points outside +-2 sigma, warnings (crimson)
    "grid": "#d9d9d9",
    "undistorted": "#5a8f29",   # the plasma characteristic with the fitted distortions removed (olive green)
    "posterior": "#1d4e89",     # corner-plot histograms and contours
    "chains": ("#1d4e89", "#d1770f", "#16877a", "#7b4fa0", "#8c8c8c", "#b2182b"),
}

#: Probability mass enclosed by the two 2-D contours of the corner plot: the
#: one- and two-sigma probabilities of a normal distribution (68.3 % and 95.4 %).
#: They are masses, not the 1 - exp(-r^2/2) radii of a 2-D Gaussian.
CONTOUR_LEVELS = (math.erf(1.0 / math.sqrt(2.0)), math.erf(2.0 / math.sqrt(2.0)))

#: Size (inches) of the fit figure.
FIT_FIGSIZE = (12.0, 8.6)

#: line styles of classical estimates and of known true values, in every figure
CLASSICAL_LS = (0, (1, 1.5))
TRUTH_LS = (0, (4, 2, 1, 2))

#: white box behind text drawn over data
TEXT_BOX = {"facecolor": "white", "edgecolor": "none", "alpha": 0.85}


def current_unit(I) -> tuple[float, str]:
    """(factor, unit) so that factor * I reads comfortably: A, mA, µA or nA."""
    m = float(np.nanmax(np.abs(I))) if np.size(I) else 0.0
    for factor, unit in ((1.0, "A"), (1e3, "mA"), (1e6, "µA"), (1e9, "nA")):
        if m >= 1.0 / factor:
            return factor, unit
    return 1e9, "nA"


class Scales:
    """How each quantity of a fit is displayed: a multiplier and a unit label."""

    def __init__(self, result):
        self.current_factor, self.current_unit = current_unit(result.current)
        n_ref = None
        for n in ("n_e", "n_i"):
            if n in result.draws:
                x = np.asarray(result.draws[n], float).ravel()
                x = x[np.isfinite(x) & (x > 0)]
                if x.size:
                    n_ref = float(np.median(x))
                    break
        # nearest power of ten: displayed densities lie in [0.32, 3.2), e.g. 0.998 x 10^16
        self.density_exp = int(round(math.log10(n_ref))) if n_ref else 0
        self.units = dict(result.units)
        # currents other than the sweep's own (noise levels) get a unit of their own size
        self._current = {}
        for name, unit in self.units.items():
            if unit == "A" and name in result.draws:
                x = np.asarray(result.draws[name], float).ravel()
                x = x[np.isfinite(x)]
                self._current[name] = current_unit(np.median(np.abs(x))) if x.size else \
                    (self.current_factor, self.current_unit)

    def factor(self, name) -> float:
        unit = self.units.get(name, "")
        if unit == "m^-3":
            return 10.0 ** (-self.density_exp)
        if unit == "A":
            return self._current.get(name, (self.current_factor, None))[0]
        if name == "sigma_rel":
            return 100.0
        return 1.0

    def unit_label(self, name) -> str:
        unit = self.units.get(name, "")
        if unit == "m^-3":
            return rf"$10^{{{self.density_exp}}}$ m$^{{-3}}$"
        if unit == "A":
            return self._current.get(name, (None, self.current_unit))[1]
        if name == "sigma_rel":
            return "%"
        return unit or "1"

    def label(self, name) -> str:
        return f"{tex_label(name)} [{self.unit_label(name)}]"


def decimals(lo: float, med: float, hi: float) -> int:
    """Decimals that show the shorter side of an interval to two significant digits."""
    width = min(med - lo, hi - med)
    if not (np.isfinite(width) and width > 0):
        width = hi - lo
    if not (np.isfinite(width) and width > 0):
        return 3
    return int(min(6, max(0, 1 - math.floor(math.log10(width)))))


def format_value(v, dec) -> str:
    """``v`` with ``dec`` decimals, or an en dash for a missing or non-finite value."""
    return "–" if v is None or not np.isfinite(v) else f"{v:.{dec}f}"


def figure_title(result) -> str:
    """Sweep id, electron model and ion theory of a fit: the first line of every figure title."""
    sid = result.sweep_info.get("sweep_id") if isinstance(result.sweep_info, dict) else None
    return (f"sweep '{sid or 'unnamed'}' · {result.model} electrons, "
            f"{result.config.ion_collection} ions")
