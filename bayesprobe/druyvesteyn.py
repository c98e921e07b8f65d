"""The model-free electron energy distribution: Druyvesteyn's second-derivative estimate.

f_p(eps) = (2/e) sqrt(2 m_e / e) / A * d^2 I_e / dV^2 at eps = V_p - V (M. J. Druyvesteyn,
Z. Phys. 64, 781 (1930); Godyak & Demidov, J. Phys. D 44, 233001 (2011)), read off the
measured current in the retarding region after the ion current is removed, with the
derivative from Savitzky-Golay filters whose window is chosen from the noise
(:mod:`bayesprobe.signal_tools`). Conventions as in :mod:`bayesprobe.eedf`.
"""
from __future__ import annotations

import math
from collections import namedtuple
from dataclasses import dataclass

import numpy as np
from scipy.integrate import trapezoid
from scipy.interpolate import CubicSpline

from .physics.constants import E_CHARGE, M_E
from .signal_tools import (clean_sweep, difference_noise, saturation_window, savgol, savgol_noise_gain,
                           savgol_noise_gains, upward_crossings, window_ladder)

__all__ = ["druyvesteyn_eedf", "DRUYVESTEYN_PREFACTOR"]

#: (2/e) sqrt(2 m_e / e), the factor in f_p = (prefactor / A) d^2I_e/dV^2 (SI units;
#: f_p in m^-3 eV^-3/2 for A in m^2 and d^2I/dV^2 in A/V^2).
DRUYVESTEYN_PREFACTOR = 2.0 / E_CHARGE * math.sqrt(2.0 * M_E / E_CHARGE)

_MIN_WINDOW = 5         # smallest window a cubic filter allows
_FIRST_WINDOW = 7       # smallest window tried when the window is chosen from the noise
_NOISE_TARGET = 0.05    # chosen window: noise of d2I/dV2 at most this fraction of its peak
_SNR_CUT = 2.0          # the usable range ends where the EEPF falls below this many noise sd
_ION_CLEARANCE = 3.0    # the ion line is fitted below V_f - 3 T_eff
_MIN_POINTS = 12        # bias points below V_p needed at all


def _windows(n, lowest=_FIRST_WINDOW):
    """Candidate odd window lengths from ``lowest`` to about n/3, geometrically spaced."""
    largest_odd = lambda k: k if k % 2 else k - 1  # noqa: E731
    top = min(max(_FIRST_WINDOW, largest_odd(n // 3)), largest_odd(n))
    return window_ladder(min(lowest, top), top, 24)


def _choose_window(Vg, Ie, V_p, area, delta, sigma, flags):
    """Savitzky-Golay window (points) for the second derivative, from the noise.

    1. Pilot: the narrowest window whose d2I/dV2 noise (centred filter) is at most
       5 % of the largest interior value of d2I/dV2. The log-slope of the pilot
       EEPF gives an energy scale T_s = -1/(d ln f_p/dU).
    2. Final: the narrowest window, not narrower than the pilot, whose usable
       range reaches three decades below the EEPF peak (the dynamic range a good
       probe measurement offers), but with half-width at most T_s/2: a centred
       cubic filter multiplies the second derivative of exp(-U/T_s) by
       1 + (h/T_s)^2/14 + ..., so the bias stays below 1.8 %. If no window reaches
       three decades, the widest allowed one is used.
    """
    below = Vg < V_p
    Ib, sb = Ie[below], sigma[below]
    n = Ib.size
    pilot = None
    for w in _windows(n):
        m = w // 2
        d2 = savgol(Ib, w, 2, delta)[m:n - m]
        if d2.size == 0:
            break
        k = int(np.argmax(d2))
        gain = savgol_noise_gain(w, 2, delta)
        if d2[k] > 0 and sb[m + k] * gain <= _NOISE_TARGET * d2[k]:
            pilot = w
            break
    if pilot is None:
        flags.append("noisy_second_derivative")
        return _windows(n)[-1]
    U, _, fp, _, fp_sd = _druyvesteyn_core(Vg, Ie, V_p, area, pilot, delta, sigma)
    pos = fp > 0
    T_s = math.nan
    if np.count_nonzero(pos) >= 3:
        wts = (fp[pos] / fp_sd[pos]) ** 2
        slope = np.polyfit(U[pos], np.log(fp[pos]), 1, w=np.sqrt(wts))[0]
        T_s = -1.0 / slope if slope < 0 else math.nan
    if not math.isfinite(T_s):
        flags.append("no_energy_scale")
        return pilot
    chosen = pilot
    for w in _windows(n, pilot):
        if (w // 2) * delta > 0.5 * T_s:
            break
        chosen = w
        U, _, fp, _, _ = _druyvesteyn_core(Vg, Ie, V_p, area, w, delta, sigma)
        if fp.size and fp[-1] <= 1e-3 * np.max(fp):
            break
    if (chosen // 2) * delta > 0.5 * T_s:
        flags.append("heavy_smoothing")
    return chosen


def _polyfit_line(x, y):
    """Least-squares straight line by ``np.polyfit`` (not :func:`signal_tools.line_fit`, whose
    normal equations differ in the last digits); returns (intercept at x0, slope, x0)."""
    x0 = float(np.mean(x))
    b, a = np.polyfit(x - x0, y, 1)
    return float(a), float(b), x0


def _druyvesteyn_core(Vg, Ie, V_p, area, window, delta, sigma):
    """EEDF and EEPF below V_p from the electron current on the uniform grid ``Vg``."""
    below = Vg < V_p
    Vb, Ib, sb = Vg[below], Ie[below], sigma[below]
    d2 = savgol(Ib, window, 2, delta)
    sd = sb * savgol_noise_gains(Ib.size, window, 2, delta)
    # ascending energy: reverse the bias order
    U = (V_p - Vb)[::-1]
    d2, sd = d2[::-1], sd[::-1]
    eepf = DRUYVESTEYN_PREFACTOR / area * d2
    eepf_sd = DRUYVESTEYN_PREFACTOR / area * sd
    # usable range: from the lowest energy up to the first point (past the one-sided
    # filter zone next to V_p) where the EEPF is no longer above _SNR_CUT noise sd
    m = window // 2
    weak = np.flatnonzero(eepf[m:] <= _SNR_CUT * eepf_sd[m:])
    stop = m + int(weak[0]) if weak.size else U.size
    U, eepf, eepf_sd = U[:stop], eepf[:stop], eepf_sd[:stop]
    root = np.sqrt(U)
    g = eepf * root
    return U, g, eepf, eepf_sd * root, eepf_sd


def _moments(U, g, from_zero):
    """n = int g dU and T_eff = (2/3) int U g dU / n by the trapezoid rule.

    With ``from_zero`` the piece [0, U_0] below the first point is added assuming
    g proportional to sqrt(U) there (its exact small-energy form for any smooth
    isotropic distribution): int = (2/3) U_0 g_0 and (2/5) U_0^2 g_0.
    """
    if U.size < 2:
        return math.nan, math.nan
    n = float(trapezoid(g, U))
    w = float(trapezoid(U * g, U))
    if from_zero:
        n += 2.0 / 3.0 * U[0] * g[0]
        w += 2.0 / 5.0 * U[0] ** 2 * g[0]
    if not n > 0:
        return math.nan, math.nan
    return n, 2.0 / 3.0 * w / n


def _ion_window(V, V_f, T_eff, V_p, flags):
    """Biases of the ion-saturation fit: V <= V_f - 3 T_eff (electrons there carry
    less than e^-3 of the ion current), else the lowest quarter below V_f (or V_p)."""
    known = V_f is not None and math.isfinite(T_eff)
    limit = V_f - _ION_CLEARANCE * T_eff if known else math.nan
    win, _, stage = saturation_window(V, limit, V_f if V_f is not None else V_p, _MIN_WINDOW)
    if stage > 0:
        flags.append("ion_window_short")
    return win


def _ion_fit(V, I, mode):
    """("line" | "oml-square", function giving the ion current magnitude I_i(V) >= 0)."""
    if mode == "oml":
        a, b, x0 = _polyfit_line(V, -I * np.abs(I))          # I_i^2 where the current is negative
        if b < 0:
            return "oml-square", lambda v: np.sqrt(np.maximum(a + b * (np.asarray(v) - x0), 0.0))
    a, b, x0 = _polyfit_line(V, I)
    return "line", lambda v: -(a + b * (np.asarray(v) - x0))


def _number(x, name, unit) -> float:
    try:
        return float(x)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number ({unit}), got {x!r}") from None


def _checked_inputs(voltage, current, V_p, area, ion_current, smoothing):
    """Validate the arguments of :func:`druyvesteyn_eedf`.

    Returns (V, I, V_p, area, ion_mode, ion_given): ion_mode "line", "oml" or "given".
    """
    V = np.asarray(voltage, dtype=float)
    I = np.asarray(current, dtype=float)
    if V.ndim != 1:
        raise ValueError("voltage must be a 1-D array of biases in V")
    if I.shape != V.shape:
        raise ValueError(f"current must have the shape of voltage {V.shape}, got {I.shape}")
    V_p = _number(V_p, "V_p", "V")
    if not math.isfinite(V_p):
        raise ValueError(f"V_p must be finite, got {V_p!r}")
    area = _number(area, "area", "m^2")
    if not (math.isfinite(area) and area > 0):
        raise ValueError(f"area must be positive and finite (m^2), got {area!r}")
    ion_mode = "line"
    ion_given = None
    if isinstance(ion_current, str):
        if ion_current != "oml":
            raise ValueError(f"ion_current must be None, 'oml' or an array, got {ion_current!r}")
        ion_mode = "oml"
    elif ion_current is not None:
        ion_given = np.asarray(ion_current, dtype=float)
        if ion_given.shape != V.shape:
            raise ValueError(f"ion_current must have the shape of voltage {V.shape}, got {ion_given.shape}")
        if np.any(~np.isfinite(ion_given)) or np.any(ion_given < 0):
            raise ValueError("ion_current must be the finite ion current magnitude I_i >= 0 (A)")
        ion_mode = "given"
    if smoothing is not None:
        if isinstance(smoothing, bool) or not isinstance(smoothing, (int, np.integer)) \
                or smoothing < _MIN_WINDOW or smoothing % 2 == 0:
            raise ValueError(f"smoothing must be an odd window length >= {_MIN_WINDOW} points, "
                             f"got {smoothing!r}")
    return V, I, V_p, area, ion_mode, ion_given


#: one Druyvesteyn estimate from a given electron current (window in points, energies,
#: EEDF, EEPF, their noise sd, the moments n_e and T_eff, and the window-choice flags)
_Estimate = namedtuple("_Estimate", "window U g fp g_sd fp_sd n_e T_eff flags")


@dataclass
class _RetardingGrid:
    """The distinct biases below V_p, on a uniform grid (resampled by a cubic spline if
    they are not evenly spaced), with the settings of the estimate."""

    under: np.ndarray       # mask of the sorted biases below V_p
    Vb: np.ndarray          # those biases
    Vg: np.ndarray          # uniform grid over them, as many points
    delta: float            # its step (V)
    uniform: bool           # Vg is Vb
    V_p: float
    area: float
    smoothing: int | None
    from_zero: bool         # add the piece of the integrals below the first energy
    sigma: np.ndarray | None = None     # noise sd of the current on Vg

    @classmethod
    def of(cls, Vs, V_p, area, smoothing):
        under = Vs < V_p
        Vb = Vs[under]
        step = np.diff(Vb)
        uniform = bool(np.allclose(step, step.mean(), rtol=1e-6, atol=0.0))
        Vg = Vb if uniform else np.linspace(Vb[0], Vb[-1], Vb.size)
        delta = float(Vg[1] - Vg[0])
        return cls(under, Vb, Vg, delta, uniform, V_p, area, smoothing, not V_p > Vs[-1] + 0.5 * delta)

    def resample(self, y):
        """Values at the sorted biases -> values on the grid."""
        return y[self.under] if self.uniform else CubicSpline(self.Vb, y[self.under])(self.Vg)

    def estimate(self, I_e_grid) -> _Estimate:
        """EEDF, EEPF and their moments from the electron current on the grid."""
        window_flags = []
        w = int(self.smoothing) if self.smoothing is not None else \
            _choose_window(self.Vg, I_e_grid, self.V_p, self.area, self.delta, self.sigma, window_flags)
        U, g, fp, g_sd, fp_sd = _druyvesteyn_core(self.Vg, I_e_grid, self.V_p, self.area, w, self.delta,
                                                  self.sigma)
        n_e, T_eff = _moments(U, g, self.from_zero)
        return _Estimate(w, U, g, fp, g_sd, fp_sd, n_e, T_eff, window_flags)


def _with_fitted_ion_line(grid: _RetardingGrid, Vs, Is, Ig, ion_mode, flags):
    """Estimate with the ion current removed by a line fitted below V_f - 3 T_eff (step 2).

    A straight line leaves d2I/dV2 unchanged, so the first estimate (ion current left in)
    gives T_eff and V_f; an I^2 line ("oml") is subtracted and the estimate repeated, at
    most four times, until T_eff moves by less than 1e-4. Returns (estimate, I_i at the
    sorted biases, "line" or "oml-square").
    """
    out = grid.estimate(Ig)
    cross = upward_crossings(savgol(Ig, out.window))
    V_f = float(grid.Vg[cross[-1] + 1]) if cross.size else None
    if V_f is None:
        flags.append("vf_not_bracketed")
    for _ in range(4 if ion_mode == "oml" else 1):
        win = _ion_window(Vs, V_f, out.T_eff, grid.V_p, flags)
        kind, ion_fn = _ion_fit(Vs[win], Is[win], ion_mode)
        if kind == "line" and ion_mode == "oml":
            flags.append("ion_slope_wrong_sign")
        ion_on_data = ion_fn(Vs)
        if kind == "line":
            break
        T_old = out.T_eff
        out = grid.estimate(Ig + ion_fn(grid.Vg))
        if not abs(out.T_eff - T_old) > 1e-4 * abs(out.T_eff):
            break
    return out, ion_on_data, kind


def druyvesteyn_eedf(voltage, current, V_p, area, *, ion_current=None, smoothing=None) -> dict:
    """Model-free EEDF and EEPF from the second derivative of the retarding current.

    For an isotropic distribution, a collisionless sheath and a convex probe of
    area A, the electron current below the plasma potential gives

        g(U) = (2/(A e)) sqrt(2 m_e U / e) d^2I_e/dV^2,     U = V_p - V  (eV),
        f_p(U) = g(U)/sqrt(U),

    with n_e = int g dU and T_eff = (2/3) int U g dU / n_e. This is the
    Druyvesteyn relation [Druyvesteyn, Z. Phys. 64, 781 (1930); Lieberman &
    Lichtenberg, *Principles of Plasma Discharges and Materials Processing*,
    2nd ed. (2005), sec. 6.6; Godyak & Demidov, J. Phys. D 44, 233001 (2011)].

    Procedure:

    1. points are sorted, repeated biases averaged, non-finite points dropped;
       the biases below V_p, if not evenly spaced, are resampled onto a uniform
       grid with as many points (cubic-spline interpolation, whose error is of
       fourth order in the spacing);
    2. the ion current is removed: ``ion_current`` if given; otherwise a straight
       line fitted to I(V) below V_f - 3 T_eff (T_eff from the estimate itself),
       or, with ``ion_current="oml"``, a straight line fitted to I^2 there
       (cold-ion orbital-motion-limited collection by a cylinder, I_i^2 linear in
       V). A straight line has no curvature, so it leaves g unchanged; the
       curvature of an OML ion current does not vanish and adds about
       n_i sqrt(m_e/M) / (pi U) to g if left in;
    3. d^2I_e/dV^2 comes from a cubic Savitzky-Golay filter (``deriv=2``) applied
       to the points below V_p only, so the knee at V_p is never inside the
       window; the half-window next to V_p uses the filter's one-sided fit. The
       window is chosen from the noise of the current (local spread of its third
       differences): first the narrowest window whose noise on d^2I/dV^2 is at
       most 5 % of its peak, which gives an energy scale T_s from the log-slope
       of the EEPF; then the narrowest window whose usable range reaches three
       decades below the EEPF peak (the range a good measurement offers,
       Godyak & Demidov 2011),
       with half-width h <= T_s/2;
    4. the usable range runs from the lowest energy up to where the EEPF first
       drops below twice its noise sd; the integrals cover that range, plus the
       piece between U = 0 and the first point, where g ~ sqrt(U).

    Accuracy: a centred cubic filter of half-width h turns the second derivative
    of exp(-U/T) into itself times 1 + (h/T)^2/14 + ..., i.e. at most 1.8 % for
    h = T/2; this raises n_e and leaves T_eff unchanged. The one-sided fits next
    to V_p pull g down for U < h. Integrals over a range ending at U_max miss the
    tail: for a Maxwellian, n_e comes out as n P(3/2, x) and T_eff as
    T P(5/2, x)/P(3/2, x), x = U_max/T (P the regularised lower incomplete gamma
    function); e.g. 1.3 % low in T_eff for x = 7, 5.8 % for x = 5, so a short
    dynamic range biases T_eff low.

    Parameters
    ----------
    voltage, current : array_like, shape (n,)
        Probe bias (V) and current (A, electron collection positive).
    V_p : float
        Plasma potential (V). It must be accurate: an error dV shifts the energy
        axis by dV, and V_p set too high brings the knee into the filter.
    area : float
        Probe collecting area (m^2).
    ion_current : None, "oml" or array_like, shape (n,)
        Ion current magnitude I_i >= 0 at each bias (I = I_e - I_i), or how to
        estimate it (see above).
    smoothing : int, optional
        Savitzky-Golay window length in grid points (odd, >= 5); chosen from the
        noise if not given.

    Returns
    -------
    dict
        ``energy_eV``, ``eedf`` (m^-3 eV^-1), ``eepf`` (m^-3 eV^-3/2) over the
        usable range, ascending in energy, with their noise sd ``eedf_sd`` and
        ``eepf_sd``; ``n_e`` (m^-3) and ``T_eff`` (eV), the integrals;
        ``energy_range`` (eV); ``window`` (points) and ``window_V`` (its full width
        in V); ``grid_step`` (V); ``resampled`` (bool); ``ion_fit`` ("given",
        "line", "oml-square" or "none"); ``voltage`` (sorted, distinct biases)
        and ``ion_current`` (A, the subtracted I_i there); ``flags`` (list of
        str), any of ``vp_beyond_sweep`` (V_p above the last bias: the lowest
        energies are missing), ``no_ion_current`` (no negative current, nothing
        subtracted), ``vf_not_bracketed``, ``ion_window_short``,
        ``ion_slope_wrong_sign`` (the I^2 fit failed, a straight line was used),
        ``noisy_second_derivative`` (even the widest window is noisy),
        ``no_energy_scale`` (the pilot EEPF does not fall with energy),
        ``heavy_smoothing`` (h > T_s/2), ``no_usable_range``.
    """
    V, I, V_p, area, ion_mode, ion_given = _checked_inputs(voltage, current, V_p, area, ion_current,
                                                           smoothing)
    Vs, Is, *given = clean_sweep(V, I, *(() if ion_given is None else (ion_given,)))
    if np.count_nonzero(Vs < V_p) < _MIN_POINTS:
        raise ValueError(f"voltage: fewer than {_MIN_POINTS} distinct finite biases lie below "
                         f"V_p = {V_p:g} V")
    # uniform grid over the biases below V_p (the knee never enters an interpolant)
    grid = _RetardingGrid.of(Vs, V_p, area, smoothing)
    Ig = grid.resample(Is)
    grid.sigma = difference_noise(Ig)
    if smoothing is not None and smoothing > grid.Vg.size:
        raise ValueError(f"smoothing ({smoothing}) exceeds the {grid.Vg.size} biases below V_p")
    flags = [] if grid.from_zero else ["vp_beyond_sweep"]
    if ion_mode == "given":
        ion_on_data = given[0]
        out = grid.estimate(Ig + grid.resample(given[0]))
    elif np.all(Is >= 0):
        ion_mode, ion_on_data = "none", np.zeros_like(Vs)
        flags.append("no_ion_current")
        out = grid.estimate(Ig)
    else:
        out, ion_on_data, ion_mode = _with_fitted_ion_line(grid, Vs, Is, Ig, ion_mode, flags)
    U, w, delta = out.U, out.window, grid.delta
    flags += out.flags
    if U.size < 2:
        flags.append("no_usable_range")
    flags = list(dict.fromkeys(flags))
    return {"energy_eV": U, "eedf": out.g, "eepf": out.fp, "eedf_sd": out.g_sd, "eepf_sd": out.fp_sd,
            "n_e": out.n_e, "T_eff": out.T_eff,
            "energy_range": (float(U[0]), float(U[-1])) if U.size else (math.nan, math.nan),
            "window": int(w), "window_V": float((w - 1) * delta), "grid_step": delta,
            "resampled": not grid.uniform, "ion_fit": ion_mode, "voltage": Vs, "ion_current": ion_on_data,
            "flags": flags}
