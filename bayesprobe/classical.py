"""The textbook windowed analysis of a single-probe I-V sweep, automated.

This is the procedure taught in the standard texts, made into a function that
runs without a human choosing the windows:

1. **Floating potential** V_f: where the smoothed current changes sign from
   negative to positive (the last such crossing), by linear interpolation. Once
   T_e is known the current is re-smoothed with a cubic over V_f +- T_e, on which
   scale the exponential rise is smooth, and the crossing is found again.
2. **Ion saturation**: a straight line fitted to I(V) over the most negative part
   of the sweep, [V_min, V_f - 3 T_e] (electrons there carry less than
   e^-3 ~ 5 % of the ion current), or the lowest quarter of [V_min, V_f] if that
   window is nearly empty. For a cylinder with orbital-motion-limited ions the
   *square* of the current is fitted instead, because cold-ion OML gives
   I_i^2 proportional to (V_p - V). The extrapolated ion current is removed,
   leaving the electron current I_e.
3. **Plasma potential** V_p: the knee, where the Savitzky-Golay-smoothed dI/dV
   is largest (refined between grid points by a parabola through the top three
   values). The filter is the narrowest whose dI/dV noise is at most 10 % of the
   peak. A sphere's dI/dV stays flat above V_p, so there the knee is where the
   smoothed derivative first comes within twice its noise of the top.
4. **Electron temperature** T_e: weighted least-squares slope of ln I_e against V
   over [V_f, V_p - T_e/2] (weights from the local noise), iterated together with
   the ion window. The standard error is the least-squares one, inflated by the
   reduced chi-square when that exceeds one, plus the share propagated from the
   ion line's own uncertainty.
5. **Densities**: n_e from I_e at V_p, I_es = e n_e A sqrt(e T_e/(2 pi m_e));
   n_i from the ion current at V_f through the Bohm flux
   I_is = f_B e n_i A sqrt(e T_e/M) (plane, sphere, and cylinders with
   ``thin-sheath`` or ``abr`` collection), or, for a cylinder with ``oml``/``auto``
   collection, from the slope of I_i^2:
   ``n_i = (pi/(A e)) sqrt(M |d(I_i^2)/dV| / (2 e))``.

The analysis never raises on a sweep that looks like a probe characteristic: when
a step cannot be done as described it falls back to something cruder and records
a short flag in :attr:`ClassicalResult.flags`:

============================  ==================================================
``too_few_points``            fewer than 8 distinct finite points; nothing
                              estimated
``vf_not_bracketed``          the current never changes sign from - to +; V_f is
                              the sweep end (a bound, not an estimate)
``several_zero_crossings``    more than one - to + crossing; the last one is used
``ion_window_contaminated``   the ion fit reaches above V_f - 3 T_e (the sweep does
                              not go deep enough into ion saturation)
``ion_window_short``          fewer than 5 points in the ion window
``ion_slope_wrong_sign``      the I^2 fit of a cylinder had the wrong slope sign;
                              the linear fit and the Bohm formula were used instead
``ion_current_not_negative``  the ion line is not negative at V_f; I_is is the most
                              negative current seen below V_f (a lower bound)
``thick_sheath``              the Bohm density uses the bare probe area, but a
                              Child-law sheath at V_f would add more than 10 % to
                              it: n_i is high
``knee_noisy``                even the widest filter leaves dI/dV noisy
``heavy_smoothing``           the filter half-width exceeds T_e/2: V_p is low
``vp_below_vf``               the knee lies at or below V_f (not a usable sweep)
``vp_at_sweep_end``           the knee is at (or within T_e/2 of) the top of the
                              sweep: V_p and n_e are lower bounds
``te_window_widened``         too few points in [V_f, V_p - T_e/2]; [V_f, V_p] used
``te_from_vf_vp``             the ln I_e fit failed; T_e = (V_p - V_f)/psi with the
                              planar thin-sheath value
                              psi = ln(M/(2 pi m_e))/2 - ln f_B; T_e_se is NaN
``n_e_failed``                I_e at V_p is not positive
============================  ==================================================

The method is biased, and is reported beside the Bayesian result for that reason:

* smoothing rounds the knee, so V_p comes out low, and n_e with it (I_e is read
  at the estimated V_p, i.e. exp(-(V_p - V_p,est)/T_e) too low). The pull is
  largest for planar probes, whose knee is a sharp corner: 0.5-0.6 times the
  filter half-width for a cubic Savitzky-Golay derivative;
* electrons leaking into the ion window (up to e^-3 of the ion current at its
  top) make the extrapolated ion current too small: n_i a few % low for a plane,
  a few % high from the I^2 slope of a cylinder, T_e slightly low;
* a straight ion line cannot follow sheath expansion, which leaks into T_e;
* the Bohm and OML density formulas each hold only in their own regime.

References
----------
* I. H. Hutchinson, *Principles of Plasma Diagnostics*, 2nd ed. (CUP, 2002), ch. 3.
* R. L. Merlino, "Understanding Langmuir probe current-voltage characteristics",
  Am. J. Phys. 75, 1078 (2007).
* M. A. Lieberman & A. J. Lichtenberg, *Principles of Plasma Discharges and
  Materials Processing*, 2nd ed. (Wiley, 2005), sec. 6.6.
* H. M. Mott-Smith & I. Langmuir, Phys. Rev. 28, 727 (1926): OML collection,
  whose cold-ion cylinder limit gives the I^2 slope formula.
* A. Savitzky & M. J. E. Golay, Anal. Chem. 36, 1627 (1964): smoothing and
  differentiating filters.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.ndimage import median_filter
from scipy.signal import savgol_coeffs, savgol_filter

from .model import ModelConfig
from .physics.constants import E_CHARGE, M_E
from .physics.electrons import electron_saturation_current
from .physics.formulary import child_sheath_thickness

__all__ = ["ClassicalResult", "classical_analysis", "oml_ion_density", "oml_ion_square_slope",
           "planar_floating_drop"]

_MIN_POINTS = 8          # distinct points needed to attempt anything
_MIN_WINDOW = 5          # points needed in a fit window
_ION_CLEARANCE = 3.0     # ion window ends this many T_e below V_f
_KNEE_MARGIN = 0.5       # T_e window ends this many T_e below V_p
_KNEE_NOISE = 0.1        # target noise of the smoothed dI/dV, relative to its peak
_POLYORDER = 3


# ----------------------------------------------------------------------------- formulas

def oml_ion_square_slope(n_i, area, ion_mass):
    """|d(I_i^2)/dV| in A^2/V for cold-ion OML collection by a cylinder of side area ``area``.

    From I_i = A n e (sqrt 2/pi) sqrt(e (V_p - V)/M): |d(I_i^2)/dV| = 2 A^2 n^2 e^3/(pi^2 M).
    """
    return 2.0 * (area * np.asarray(n_i, float)) ** 2 * E_CHARGE**3 / (np.pi**2 * ion_mass)


def oml_ion_density(slope, area, ion_mass):
    """Ion density (m^-3) from the slope of I_i^2 against V for a cylinder (cold-ion OML).

    n = (pi/(A e)) sqrt(M |d(I_i^2)/dV| / (2 e)); the sign of ``slope`` is ignored.
    """
    return np.pi / (area * E_CHARGE) * np.sqrt(ion_mass * np.abs(np.asarray(slope, float)) / (2.0 * E_CHARGE))


def planar_floating_drop(ion_mass, bohm_factor=float(np.exp(-0.5))):
    """(V_p - V_f)/T_e for a planar thin-sheath probe and Maxwellian electrons.

    Equating the retarded random electron current with the Bohm ion flux gives
    psi = (1/2) ln(M/(2 pi m_e)) - ln f_B (5.18 for argon with f_B = exp(-1/2)).
    """
    return 0.5 * math.log(ion_mass / (2.0 * math.pi * M_E)) - math.log(bohm_factor)


# ----------------------------------------------------------------------------- result

@dataclass
class ClassicalResult:
    """Outcome of :func:`classical_analysis` (SI units, temperatures in eV).

    Attributes
    ----------
    T_e, T_e_se : float
        Electron temperature and its least-squares standard error (eV).
    V_f, V_p : float
        Floating and plasma potential (V).
    n_e, n_i : float
        Electron and ion density (m^-3).
    I_es, I_is : float
        Electron current at V_p and ion current magnitude at V_f (A), both positive.
    flags : list of str
        Short codes for every fallback taken (see the module docstring).
    windows : dict of str -> (float, float)
        Voltage windows used: ``"ion"`` (ion line fit), ``"T_e"`` (ln I_e fit),
        ``"knee"`` (V_p plus and minus the smoothing half-width).
    """

    T_e: float = float("nan")
    T_e_se: float = float("nan")
    V_f: float = float("nan")
    V_p: float = float("nan")
    n_e: float = float("nan")
    n_i: float = float("nan")
    I_es: float = float("nan")
    I_is: float = float("nan")
    flags: list = field(default_factory=list)
    windows: dict = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        """True if T_e, n_e, n_i are finite and positive and V_f, V_p finite."""
        positive = all(math.isfinite(x) and x > 0 for x in (self.T_e, self.n_e, self.n_i))
        return positive and math.isfinite(self.V_f) and math.isfinite(self.V_p)

    def to_dict(self) -> dict:
        """The five plasma quantities as plain floats, with their units."""
        return {"T_e": float(self.T_e), "n_e": float(self.n_e), "n_i": float(self.n_i),
                "V_f": float(self.V_f), "V_p": float(self.V_p),
                "units": {"T_e": "eV", "n_e": "m^-3", "n_i": "m^-3", "V_f": "V", "V_p": "V"}}


# ----------------------------------------------------------------------------- helpers

def _odd(k) -> int:
    k = int(k)
    return k if k % 2 else k + 1


def _merge_duplicates(V, I):
    """Sort by voltage and average the currents of repeated voltages."""
    order = np.argsort(V, kind="stable")
    V, I = V[order], I[order]
    Vu, inverse, counts = np.unique(V, return_inverse=True, return_counts=True)
    if Vu.size == V.size:
        return V, I
    return Vu, np.bincount(inverse, weights=I) / counts


def _smooth(y, window, deriv=0, delta=1.0):
    return savgol_filter(y, window, _POLYORDER, deriv=deriv, delta=delta, mode="interp")


def _local_noise(y):
    """Local noise sd of ``y`` (uniform grid): robust running spread of the residual
    about a short cubic Savitzky-Golay fit, corrected for the fit's own leverage."""
    w = 7                                   # callers guarantee y.size >= 8
    resid = y - _smooth(y, w)
    h0 = savgol_coeffs(w, _POLYORDER)[w // 2]
    scale = 1.4826 / np.sqrt(1.0 - h0)
    span = _odd(max(15, y.size // 20))
    sd = scale * median_filter(np.abs(resid), size=span, mode="nearest")
    # floor: a thousandth of the typical noise, and never below 1e-9 of the largest
    # current (a noise-free sweep would otherwise get infinite weights)
    floor = max(1e-3 * scale * float(np.median(np.abs(resid))), 1e-9 * float(np.max(np.abs(y))), 1e-300)
    return np.maximum(sd, floor)


def _line_fit(x, y, w=None):
    """Weighted least-squares line y = a + b (x - x0).

    Returns (a, b, x0, cov, chi2_red); ``cov`` uses the weights as inverse
    variances, so it is absolute when they are.
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
    return float(coef[0]), float(coef[1]), x0, np.linalg.inv(F), chi2_red


def _crossings(s):
    """Indices k with s[k] < 0 <= s[k+1]."""
    return np.flatnonzero((s[:-1] < 0) & (s[1:] >= 0))


def _interp_root(V, s, k):
    v0, v1, s0, s1 = V[k], V[k + 1], s[k], s[k + 1]
    return float(v0 - s0 * (v1 - v0) / (s1 - s0))


def _floating(Vg, smooth):
    """Last - to + zero crossing of the smoothed current; the sweep end if there is none."""
    cross = _crossings(smooth)
    if cross.size == 0:
        k = Vg.size - 1 if smooth[-1] < 0 else 0
        return float(Vg[k]), k, cross
    k = int(cross[-1])
    return _interp_root(Vg, smooth, k), k, cross


def _floating_flags(cross):
    if cross.size == 0:
        return ["vf_not_bracketed"]
    return ["several_zero_crossings"] if cross.size > 1 else []


# ----------------------------------------------------------------------------- analysis

def classical_analysis(voltage, current, config: ModelConfig) -> ClassicalResult:
    """Windowed textbook analysis of one I-V sweep (see the module docstring).

    Parameters
    ----------
    voltage, current : array_like, shape (n,)
        Probe bias (V) and current (A, electron collection positive). Non-finite
        points are dropped; the points are sorted and repeated voltages averaged.
    config : ModelConfig
        Supplies the probe (area, geometry), the ion mass, the ion collection
        theory (which selects the ion fit and density formula) and the Bohm factor.

    Returns
    -------
    ClassicalResult
        Best estimates with flags; quantities that could not be estimated are NaN.

    Raises
    ------
    ValueError
        Only if ``voltage`` and ``current`` are not 1-D arrays of equal length.
    """
    V = np.asarray(voltage, dtype=float)
    I = np.asarray(current, dtype=float)
    if V.ndim != 1 or V.shape != I.shape:
        raise ValueError("voltage and current must be 1-D arrays of the same length")
    result = ClassicalResult()
    flags = result.flags
    good = np.isfinite(V) & np.isfinite(I)
    V, I = _merge_duplicates(V[good], I[good])
    if V.size < _MIN_POINTS or not V[-1] > V[0]:
        flags.append("too_few_points")
        return result

    probe = config.probe
    area = probe.area
    M = config.ion_mass_kg
    f_B = config.bohm_factor
    psi = planar_floating_drop(M, f_B)
    oml_cylinder = probe.geometry == "cylindrical" and config.ion_collection in ("oml", "auto")

    # uniform grid for the Savitzky-Golay filters
    n = V.size
    Vg = np.linspace(V[0], V[-1], n)
    dV = Vg[1] - Vg[0]
    Ig = np.interp(Vg, V, I)
    sigma_g = _local_noise(Ig)
    sigma = np.interp(V, Vg, sigma_g)

    # ---- smoothing width: the narrowest window whose dI/dV noise is small at the knee
    max_window = max(_MIN_WINDOW, _odd(n // 3) - 2)
    candidates = sorted({min(_odd(w), max_window) for w in np.geomspace(_MIN_WINDOW, max_window, 14)})
    deriv = d_sd = None
    window = candidates[-1]
    for w in candidates:
        d = _smooth(Ig, w, deriv=1, delta=dV)
        c = savgol_coeffs(w, _POLYORDER, deriv=1, delta=dV)
        smooth_w = _smooth(Ig, w)
        cross = _crossings(smooth_w)
        lo = cross[-1] + 1 if cross.size else 0
        peak = float(np.max(d[lo:]))
        sd = float(np.max(sigma_g[lo:]) * np.linalg.norm(c))
        deriv, d_sd, window, lo_knee = d, sd, w, lo
        if peak > 0 and sd <= _KNEE_NOISE * peak:
            break
    else:
        flags.append("knee_noisy")
    half_width = (window // 2) * dV
    Is_g = _smooth(Ig, window)

    # ---- 1. floating potential (first pass; refined below once T_e is known)
    V_f, k_f, cross = _floating(Vg, Is_g)
    vf_flags = _floating_flags(cross)

    # ---- 3. plasma potential: the knee of the smoothed dI/dV above V_f
    # The filter's end points (mode="interp") are noisier than its interior, so the
    # last half-window is searched only if the maximum runs into it.
    lo = min(lo_knee, n - 1) if cross.size else k_f
    edge = n - 1 - window // 2
    d = deriv[lo:edge + 1] if edge > lo else deriv[lo:]
    k_max = int(np.argmax(d))
    if lo + k_max >= edge:
        d = deriv[lo:]
        k_max = int(np.argmax(d))
    j = lo + k_max
    if probe.geometry == "spherical":
        # dI/dV of a sphere stays flat above V_p: take where it first reaches the top
        threshold = d[k_max] - 2.0 * d_sd
        k_first = int(np.argmax(d >= threshold))
        j = lo + k_first
        if k_first > 0 and deriv[j] > deriv[j - 1]:
            V_p = float(Vg[j - 1] + (threshold - deriv[j - 1]) / (deriv[j] - deriv[j - 1]) * dV)
        else:
            V_p = float(Vg[j])
        at_end = False
    else:
        V_p = float(Vg[j])
        if 0 < j < n - 1:                      # vertex of the parabola through the top three
            y0, y1, y2 = deriv[j - 1], deriv[j], deriv[j + 1]
            curv = y0 - 2.0 * y1 + y2
            if curv < 0:
                V_p += float(np.clip(0.5 * (y0 - y2) / curv, -0.5, 0.5)) * dV
        at_end = j >= edge
    result.V_p = V_p
    result.windows["knee"] = (V_p - half_width, V_p + half_width)

    # ---- 2 + 4. ion line and T_e, iterated
    T_e = (V_p - V_f) / psi if V_p > V_f else (V[-1] - V[0]) / 20.0
    T_e_se = float("nan")
    ion_line = None
    I_is = float("nan")
    n_i_slope = None
    for _ in range(4):
        if cross.size and math.isfinite(T_e) and T_e > 0:
            # the current near V_f is an exponential on the scale T_e: a cubic over
            # V_f +- T_e follows it closely and averages the noise down
            w_f = min(max(window, _odd(2.0 * T_e / dV)), max_window)
            V_f, k_f, cross = _floating(Vg, _smooth(Ig, w_f))
            vf_flags = _floating_flags(cross)
            result.windows["V_f"] = (V_f - (w_f // 2) * dV, V_f + (w_f // 2) * dV)
        ion_flags = []
        hi = V_f - _ION_CLEARANCE * T_e
        in_win = V <= hi
        if np.count_nonzero(in_win) < _MIN_WINDOW:
            hi = V[0] + 0.25 * (min(V_f, V[-1]) - V[0])
            in_win = V <= hi
        if np.count_nonzero(in_win) < _MIN_WINDOW:
            ion_flags.append("ion_window_short")
            in_win = np.zeros(n, bool)
            in_win[:_MIN_WINDOW] = True
            hi = float(V[_MIN_WINDOW - 1])
        if hi > V_f - _ION_CLEARANCE * T_e:
            ion_flags.append("ion_window_contaminated")
        Vw, Iw = V[in_win], I[in_win]
        n_i_slope = None
        if oml_cylinder:
            y = -Iw * np.abs(Iw)                    # I^2 where the current is negative
            scale = float(np.max(np.abs(y))) or 1.0
            a, b, x0, cov, chi2_red = _line_fit(Vw, y / scale)
            a, b = a * scale, b * scale
            if b < 0:
                n_i_slope = b
                ion_cov = cov * chi2_red * scale**2

                def ion_line(v, a=a, b=b, x0=x0):
                    return -np.sqrt(np.maximum(a + b * (np.asarray(v) - x0), 0.0))

                def ion_jac(v, a=a, b=b, x0=x0):
                    dx = np.asarray(v) - x0
                    root = np.sqrt(np.maximum(a + b * dx, np.finfo(float).tiny))
                    return np.column_stack([-0.5 / root, -0.5 * dx / root])
            else:
                ion_flags.append("ion_slope_wrong_sign")
        if n_i_slope is None:
            a, b, x0, cov, chi2_red = _line_fit(Vw, Iw)
            ion_cov = cov * chi2_red

            def ion_line(v, a=a, b=b, x0=x0):
                return a + b * (np.asarray(v) - x0)

            def ion_jac(v, x0=x0):
                dx = np.asarray(v) - x0
                return np.column_stack([np.ones_like(dx), dx])
        result.windows["ion"] = (float(Vw[0]), float(hi))
        I_is = float(-ion_line(V_f))

        # electron current and the ln I_e fit
        I_e = I - ion_line(V)
        Ie_s = np.interp(V, Vg, Is_g) - ion_line(V)
        te_flags = []
        T_new = float("nan")
        for lo_v, hi_v, tag in ((V_f, V_p - _KNEE_MARGIN * T_e, None), (V_f, V_p, "te_window_widened")):
            sel = (V >= lo_v) & (V <= hi_v) & (I_e > 0) & (Ie_s > 0)
            if np.count_nonzero(sel) >= _MIN_WINDOW:
                if tag:
                    te_flags.append(tag)
                Vs = V[sel]
                w = (Ie_s[sel] / sigma[sel]) ** 2
                a_t, b_t, x0_t, cov, chi2_red = _line_fit(Vs, np.log(I_e[sel]), w)
                result.windows["T_e"] = (float(lo_v), float(hi_v))
                if b_t > 0:
                    T_new = 1.0 / b_t
                    # the slope is linear in ln I_e: b = g . y. The ion line's own
                    # uncertainty moves every ln I_e by -delta(ion)/I_e; add its share.
                    g = cov[1, 0] * w + cov[1, 1] * w * (Vs - x0_t)
                    sens = g @ (-ion_jac(Vs) / Ie_s[sel, None])
                    var_b = cov[1, 1] * max(chi2_red, 1.0) + float(sens @ ion_cov @ sens)
                    T_e_se = float(np.sqrt(var_b)) / b_t**2
                break
        if not math.isfinite(T_new):
            te_flags.append("te_from_vf_vp")
            T_new = (V_p - V_f) / psi if V_p > V_f else float("nan")
            T_e_se = float("nan")
        converged = math.isfinite(T_new) and abs(T_new - T_e) <= 1e-3 * T_new
        T_e = T_new
        if converged or not math.isfinite(T_e):
            break
    result.V_f = V_f
    flags.extend(vf_flags)
    if not V_p > V_f:
        flags.append("vp_below_vf")
    flags.extend(ion_flags)
    flags.extend(te_flags)
    result.T_e = float(T_e)
    result.T_e_se = float(T_e_se)

    if math.isfinite(T_e) and T_e > 0:
        if at_end or V[-1] - V_p < _KNEE_MARGIN * T_e:
            flags.append("vp_at_sweep_end")
        if half_width > 0.5 * T_e:
            flags.append("heavy_smoothing")
    elif at_end:
        flags.append("vp_at_sweep_end")

    # ---- 5. densities
    I_es = float(np.interp(V_p, Vg, Is_g) - ion_line(V_p))
    result.I_es = I_es
    result.I_is = I_is
    T_ok = math.isfinite(T_e) and T_e > 0
    if T_ok and I_es > 0:
        result.n_e = float(I_es / electron_saturation_current(1.0, T_e, area))
    else:
        flags.append("n_e_failed")
    if n_i_slope is not None:
        result.n_i = float(oml_ion_density(n_i_slope, area, M))
        return result
    if not I_is > 0:
        # the extrapolated line is useless (electron current in the ion window);
        # the most negative current seen below V_f is a lower bound on I_is
        below = Is_g[Vg <= V_f]
        I_is = float(-below.min()) if below.size else float("nan")
        flags.append("ion_current_not_negative")
        result.I_is = I_is
    if T_ok and I_is > 0:
        result.n_i = float(I_is / (f_B * E_CHARGE * area * math.sqrt(E_CHARGE * T_e / M)))
        if config.sheath_expansion or config.ion_collection != "thin-sheath":
            # Bohm flux through the bare probe area: say so when the Child-law sheath at
            # V_f would grow the collecting area by more than 10 %
            s = float(child_sheath_thickness(max(V_p - V_f, 0.0), result.n_i, T_e))
            ratio = 1.0 + s / probe.radius
            if (ratio if probe.geometry == "cylindrical" else ratio * ratio) > 1.1:
                flags.append("thick_sheath")
    return result
