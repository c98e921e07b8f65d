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

from .model import ModelConfig
from .physics.constants import E_CHARGE, M_E
from .physics.electrons import electron_saturation_current
from .physics.formulary import child_sheath_thickness
from .physics.ions import ION_THEORIES
from .signal_tools import (clean_sweep, interpolated_root, line_fit, odd, savgol, savgol_noise_gain,
                           savgol_residual_noise, saturation_window, upward_crossings, window_ladder)

__all__ = ["ClassicalResult", "classical_analysis", "oml_ion_density", "oml_ion_square_slope",
           "planar_floating_drop"]

_MIN_POINTS = 8          # distinct points needed to attempt anything
_MIN_WINDOW = 5          # points needed in a fit window
_ION_CLEARANCE = 3.0     # ion window ends this many T_e below V_f
_KNEE_MARGIN = 0.5       # T_e window ends this many T_e below V_p
_KNEE_NOISE = 0.1        # target noise of the smoothed dI/dV, relative to its peak


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


# ----------------------------------------------------------------------------- steps

@dataclass
class _Grid:
    """The sweep (sorted, distinct biases) and its resampling onto a uniform grid."""

    V: np.ndarray           # biases (V)
    I: np.ndarray           # currents (A)
    sigma: np.ndarray       # local noise sd at V
    Vg: np.ndarray          # uniform grid, as many points as V
    Ig: np.ndarray          # current interpolated onto Vg
    sigma_g: np.ndarray     # local noise sd on Vg
    dV: float
    max_window: int         # widest filter window tried

    @classmethod
    def of(cls, V, I):
        n = V.size
        Vg = np.linspace(V[0], V[-1], n)
        Ig = np.interp(Vg, V, I)
        sigma_g = savgol_residual_noise(Ig)
        return cls(V, I, np.interp(V, Vg, sigma_g), Vg, Ig, sigma_g, Vg[1] - Vg[0],
                   max(_MIN_WINDOW, odd(n // 3) - 2))


@dataclass
class _KneeFilter:
    """The derivative filter chosen for the knee and what it gave."""

    window: int
    deriv: np.ndarray       # smoothed dI/dV on the grid
    d_sd: float             # its noise sd near the knee
    lo: int                 # first grid index above the last - to + crossing of that filter
    noisy: bool             # even the widest window missed the noise target


def _knee_filter(g: _Grid) -> _KneeFilter:
    """The narrowest cubic Savitzky-Golay window whose dI/dV noise above V_f is at most
    :data:`_KNEE_NOISE` of the dI/dV peak there (the widest tried, flagged, if none is)."""
    candidates = window_ladder(_MIN_WINDOW, g.max_window, 14)
    for w in candidates:
        d = savgol(g.Ig, w, deriv=1, delta=g.dV)
        cross = upward_crossings(savgol(g.Ig, w))
        lo = cross[-1] + 1 if cross.size else 0
        peak = float(np.max(d[lo:]))
        sd = float(np.max(g.sigma_g[lo:]) * savgol_noise_gain(w, 1, g.dV))
        if peak > 0 and sd <= _KNEE_NOISE * peak:
            return _KneeFilter(w, d, sd, lo, False)
    return _KneeFilter(w, d, sd, lo, True)


def _floating(Vg, smooth):
    """Last - to + zero crossing of the smoothed current; the sweep end if there is none.

    Returns (V_f, grid index below it, all crossing indices)."""
    cross = upward_crossings(smooth)
    if cross.size == 0:
        k = Vg.size - 1 if smooth[-1] < 0 else 0
        return float(Vg[k]), k, cross
    k = int(cross[-1])
    return interpolated_root(Vg, smooth, k), k, cross


def _floating_flags(cross):
    return ["vf_not_bracketed"] if cross.size == 0 else ["several_zero_crossings"] if cross.size > 1 else []


def _plasma_potential(g: _Grid, knee: _KneeFilter, lo: int, spherical: bool):
    """V_p from the smoothed dI/dV at and above grid index ``lo``; also whether the
    knee ran into the top end of the sweep.

    The filter's end points (mode="interp") are noisier than its interior, so the
    last half-window is searched only if the maximum runs into it.
    """
    deriv, dV, n = knee.deriv, g.dV, g.Vg.size
    edge = n - 1 - knee.window // 2
    d = deriv[lo:edge + 1] if edge > lo else deriv[lo:]
    k_max = int(np.argmax(d))
    if lo + k_max >= edge:
        d = deriv[lo:]
        k_max = int(np.argmax(d))
    j = lo + k_max
    if spherical:
        # dI/dV of a sphere stays flat above V_p: take where it first reaches the top
        threshold = d[k_max] - 2.0 * knee.d_sd
        k_first = int(np.argmax(d >= threshold))
        j = lo + k_first
        if k_first > 0 and deriv[j] > deriv[j - 1]:
            return float(g.Vg[j - 1] + (threshold - deriv[j - 1]) / (deriv[j] - deriv[j - 1]) * dV), False
        return float(g.Vg[j]), False
    V_p = float(g.Vg[j])
    if 0 < j < n - 1:                      # vertex of the parabola through the top three
        y0, y1, y2 = deriv[j - 1], deriv[j], deriv[j + 1]
        curv = y0 - 2.0 * y1 + y2
        if curv < 0:
            V_p += float(np.clip(0.5 * (y0 - y2) / curv, -0.5, 0.5)) * dV
    return V_p, j >= edge


class _IonLine:
    """The extrapolated ion-saturation current I(V) (negative) with its fit covariance.

    ``square``: the line was fitted to I^2 (cold-ion OML cylinder), I = -sqrt(a + b (V - x0)),
    and ``slope`` is d(I^2)/dV; otherwise I = a + b (V - x0) and ``slope`` is None.
    """

    def __init__(self, a, b, x0, cov, square):
        self.a, self.b, self.x0, self.cov, self.square, self.slope = a, b, x0, cov, square, b if square else None

    def __call__(self, v):
        if self.square:
            return -np.sqrt(np.maximum(self.a + self.b * (np.asarray(v) - self.x0), 0.0))
        return self.a + self.b * (np.asarray(v) - self.x0)

    def jac(self, v):
        """d I(v) / d(a, b), shape (len(v), 2)."""
        dx = np.asarray(v) - self.x0
        if self.square:
            root = np.sqrt(np.maximum(self.a + self.b * dx, np.finfo(float).tiny))
            return np.column_stack([-0.5 / root, -0.5 * dx / root])
        return np.column_stack([np.ones_like(dx), dx])


def _ion_line(V, I, V_f, T_e, oml_cylinder):
    """Fit the ion line below V_f - 3 T_e (see the module docstring, step 2).

    Returns (line, flags, window (V_lo, V_hi))."""
    limit = V_f - _ION_CLEARANCE * T_e
    in_win, hi, stage = saturation_window(V, limit, min(V_f, V[-1]), _MIN_WINDOW)
    flags = ["ion_window_short"] if stage == 2 else []
    if hi > V_f - _ION_CLEARANCE * T_e:
        flags.append("ion_window_contaminated")
    Vw, Iw = V[in_win], I[in_win]
    line = None
    if oml_cylinder:
        y = -Iw * np.abs(Iw)                    # I^2 where the current is negative
        scale = float(np.max(np.abs(y))) or 1.0
        a, b, x0, cov, chi2_red = line_fit(Vw, y / scale)
        a, b = a * scale, b * scale
        if b < 0:
            line = _IonLine(a, b, x0, cov * chi2_red * scale**2, square=True)
        else:
            flags.append("ion_slope_wrong_sign")
    if line is None:
        a, b, x0, cov, chi2_red = line_fit(Vw, Iw)
        line = _IonLine(a, b, x0, cov * chi2_red, square=False)
    return line, flags, (float(Vw[0]), float(hi))


def _temperature(g: _Grid, Is_g, ion: _IonLine, V_f, V_p, T_e):
    """Weighted fit of ln I_e over [V_f, V_p - T_e/2] (else [V_f, V_p]), step 4.

    Returns (T_e or NaN, its standard error, flags, window or None).
    """
    V, sigma = g.V, g.sigma
    I_e = g.I - ion(V)
    Ie_s = np.interp(V, g.Vg, Is_g) - ion(V)
    for lo_v, hi_v, tag in ((V_f, V_p - _KNEE_MARGIN * T_e, None), (V_f, V_p, "te_window_widened")):
        sel = (V >= lo_v) & (V <= hi_v) & (I_e > 0) & (Ie_s > 0)
        if np.count_nonzero(sel) < _MIN_WINDOW:
            continue
        flags = [tag] if tag else []
        window = (float(lo_v), float(hi_v))
        Vs = V[sel]
        w = (Ie_s[sel] / sigma[sel]) ** 2
        fit = line_fit(Vs, np.log(I_e[sel]), w)
        b_t, cov = fit.slope, fit.cov
        if not b_t > 0:
            return float("nan"), float("nan"), flags, window
        # the slope is linear in ln I_e: b = g . y. The ion line's own
        # uncertainty moves every ln I_e by -delta(ion)/I_e; add its share.
        gain = cov[1, 0] * w + cov[1, 1] * w * (Vs - fit.x0)
        sens = gain @ (-ion.jac(Vs) / Ie_s[sel, None])
        var_b = cov[1, 1] * max(fit.chi2_red, 1.0) + float(sens @ ion.cov @ sens)
        return 1.0 / b_t, float(np.sqrt(var_b)) / b_t**2, flags, window
    return float("nan"), float("nan"), [], None


@dataclass
class _Iteration:
    """State of the joint V_f / ion line / T_e iteration (steps 1, 2 and 4)."""

    V_f: float
    cross: np.ndarray
    T_e: float
    T_e_se: float = float("nan")
    ion: _IonLine | None = None
    I_is: float = float("nan")
    vf_flags: list = field(default_factory=list)
    ion_flags: list = field(default_factory=list)
    te_flags: list = field(default_factory=list)


def _iterate_ion_and_temperature(g: _Grid, Is_g, window, it: _Iteration, V_p, psi, oml_cylinder, windows):
    """Refine V_f, the ion line and T_e together, at most four rounds, until T_e moves by
    less than 0.1 %. ``windows`` (the result's) receives the V_f, ion and T_e windows."""
    dV = g.dV
    for _ in range(4):
        if it.cross.size and math.isfinite(it.T_e) and it.T_e > 0:
            # the current near V_f is an exponential on the scale T_e: a cubic over
            # V_f +- T_e follows it closely and averages the noise down
            w_f = min(max(window, odd(2.0 * it.T_e / dV)), g.max_window)
            it.V_f, _, it.cross = _floating(g.Vg, savgol(g.Ig, w_f))
            it.vf_flags = _floating_flags(it.cross)
            windows["V_f"] = (it.V_f - (w_f // 2) * dV, it.V_f + (w_f // 2) * dV)
        it.ion, it.ion_flags, windows["ion"] = _ion_line(g.V, g.I, it.V_f, it.T_e, oml_cylinder)
        it.I_is = float(-it.ion(it.V_f))
        T_new, it.T_e_se, it.te_flags, te_window = _temperature(g, Is_g, it.ion, it.V_f, V_p, it.T_e)
        if te_window is not None:
            windows["T_e"] = te_window
        if not math.isfinite(T_new):
            it.te_flags.append("te_from_vf_vp")
            T_new = (V_p - it.V_f) / psi if V_p > it.V_f else float("nan")
            it.T_e_se = float("nan")
        converged = math.isfinite(T_new) and abs(T_new - it.T_e) <= 1e-3 * T_new
        it.T_e = T_new
        if converged or not math.isfinite(it.T_e):
            break
    return it


def _ion_density(result, config, I_is, T_e, V_p, V_f, Is_g, Vg):
    """n_i from the Bohm flux at V_f (step 5); sets ``result.I_is``, ``result.n_i`` and flags."""
    flags, probe, area, M, f_B = result.flags, config.probe, config.probe.area, config.ion_mass_kg, config.bohm_factor
    if not I_is > 0:
        # the extrapolated line is useless (electron current in the ion window);
        # the most negative current seen below V_f is a lower bound on I_is
        below = Is_g[Vg <= V_f]
        I_is = float(-below.min()) if below.size else float("nan")
        flags.append("ion_current_not_negative")
        result.I_is = I_is
    if math.isfinite(T_e) and T_e > 0 and I_is > 0:
        result.n_i = float(I_is / (f_B * E_CHARGE * area * math.sqrt(E_CHARGE * T_e / M)))
        if config.sheath_expansion or not ION_THEORIES[config.ion_collection].bohm_flux:
            # Bohm flux through the bare probe area: say so when the Child-law sheath at
            # V_f would grow the collecting area by more than 10 %
            s = float(child_sheath_thickness(max(V_p - V_f, 0.0), result.n_i, T_e))
            ratio = 1.0 + s / probe.radius
            if (ratio if probe.geometry == "cylindrical" else ratio * ratio) > 1.1:
                flags.append("thick_sheath")


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
    V, I = clean_sweep(V, I)
    if V.size < _MIN_POINTS or not V[-1] > V[0]:
        flags.append("too_few_points")
        return result
    probe = config.probe
    psi = planar_floating_drop(config.ion_mass_kg, config.bohm_factor)
    oml_cylinder = probe.geometry == "cylindrical" and config.ion_theory.orbital
    g = _Grid.of(V, I)

    knee = _knee_filter(g)
    if knee.noisy:
        flags.append("knee_noisy")
    half_width = (knee.window // 2) * g.dV
    Is_g = savgol(g.Ig, knee.window)
    V_f, k_f, cross = _floating(g.Vg, Is_g)            # first pass, refined once T_e is known
    lo = min(knee.lo, V.size - 1) if cross.size else k_f
    V_p, at_end = _plasma_potential(g, knee, lo, probe.geometry == "spherical")
    result.V_p = V_p
    result.windows["knee"] = (V_p - half_width, V_p + half_width)

    T_start = (V_p - V_f) / psi if V_p > V_f else (V[-1] - V[0]) / 20.0
    it = _iterate_ion_and_temperature(g, Is_g, knee.window,
                                      _Iteration(V_f, cross, T_start, vf_flags=_floating_flags(cross)),
                                      V_p, psi, oml_cylinder, result.windows)
    V_f, T_e = it.V_f, it.T_e
    result.V_f = V_f
    flags.extend(it.vf_flags)
    if not V_p > V_f:
        flags.append("vp_below_vf")
    flags.extend(it.ion_flags)
    flags.extend(it.te_flags)
    result.T_e = float(T_e)
    result.T_e_se = float(it.T_e_se)
    T_ok = math.isfinite(T_e) and T_e > 0
    if at_end or (T_ok and V[-1] - V_p < _KNEE_MARGIN * T_e):
        flags.append("vp_at_sweep_end")
    if T_ok and half_width > 0.5 * T_e:
        flags.append("heavy_smoothing")

    # ---- 5. densities
    I_es = float(np.interp(V_p, g.Vg, Is_g) - it.ion(V_p))
    result.I_es = I_es
    result.I_is = it.I_is
    if T_ok and I_es > 0:
        result.n_e = float(I_es / electron_saturation_current(1.0, T_e, probe.area))
    else:
        flags.append("n_e_failed")
    if it.ion.slope is not None:
        result.n_i = float(oml_ion_density(it.ion.slope, probe.area, config.ion_mass_kg))
    else:
        _ion_density(result, config, it.I_is, T_e, V_p, V_f, Is_g, g.Vg)
    return result
