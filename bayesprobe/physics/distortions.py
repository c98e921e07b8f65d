"""Distortions of a measured sweep: RF fluctuation of V_p, series resistance, leakage.

Every function is pure and vectorised like the rest of :mod:`bayesprobe.physics`:
parameters of shape ``(k, 1)`` broadcast against voltages of shape ``(n,)`` (or
``(k, n)``). SI units, temperatures in eV, electron current positive.

RF fluctuation of the plasma potential
--------------------------------------
With V_p(t) = V_p + A sin(wt) and w_pi << w << w_pe the electrons follow the
instantaneous potential and the ions see the mean, so the measured (time-averaged)
electron current is the phase average

    <I_e>(V) = (1/pi) int_0^pi I_e(V - V_p - A cos(theta)) d theta .

Below the knee (V + A <= V_p at every phase) the exponential branch gives exactly
``I_es exp((V - V_p)/T_e) I0(A/T_e)`` (I0 the modified Bessel function): the
log-slope is unchanged but the current is multiplied by I0, so the floating
potential moves by -T_e ln I0(A/T_e). Near the knee the clipping at saturation
flattens the curve and a straight-line fit there returns an inflated T_e. Here the
retardation region uses the Bessel closed form; the knee region is integrated
numerically in theta, split at the phase where the probe crosses V_p so that each
piece is smooth (Gauss-Legendre on both pieces); the saturation region uses
Gauss-Chebyshev quadrature, which is the exact rule for the arcsine average of a
polynomial of degree <= 2m - 1.

References: A. Garscadden & K. G. Emeleus, Proc. Phys. Soc. 79, 535 (1962);
V. A. Godyak & V. I. Demidov, J. Phys. D 44, 233001 (2011) (RF distortion, circuit
resistance); I. H. Hutchinson, *Principles of Plasma Diagnostics*, 2nd ed. (CUP
2002), ch. 3. The Bessel identity (1/pi) int_0^pi exp(a cos t) dt = I0(a) is
Abramowitz & Stegun 9.6.19.

Series (circuit) resistance
---------------------------
A resistance R between the bias source and the probe surface (sense resistor,
cable, RF chokes, the plasma's own return path) means the sheath sees
V_s = V - I R, so the measured current solves the implicit equation
``I = f(V - I R)`` with f the plasma characteristic (Godyak & Demidov 2011;
Hutchinson 2002 ch. 3). f is increasing in V, so g(I) = I - f(V - I R) is strictly
increasing and has one root, bracketed by 0 and f(V). :func:`series_resistance_current`
solves it for all walkers and points at once by Newton steps with the analytic slope
of the characteristic (bisection whenever a step leaves the bracket), iterating only on
the elements not yet converged, and takes one last Newton step on each converged element. For a pure exponential
f = a exp(V/T) the root is I = (T/R) W(R a exp(V/T) / T) with Lambert's W, which
the tests use as the outside check.

Leakage and offset
------------------
Insulator or cable leakage and an amplifier offset add a current linear in the
applied bias, ``I_leak = G V + I_0`` (Hutchinson 2002 ch. 3; instrument practice).
It is added in parallel with the probe, outside the series resistance.
"""
from __future__ import annotations

import numpy as np
from scipy.special import i0e

from ._checks import finite as _finite, positive as _positive
from .electrons import _attracted, _attracted_slope, _saturation
from .constants import E_CHARGE, EPS0
from .geometry import Probe

__all__ = ["rf_phase_average", "rf_electron_current", "series_resistance_current", "leakage_current",
           "RF_NODES", "SERIES_RTOL"]

#: quadrature nodes per smooth piece of the phase average (knee and saturation regions);
#: relative error < 1e-4 against adaptive quadrature for A/T_e <= 30 (tests/test_distortions_physics.py)
RF_NODES = 10
_GL_X, _GL_W = np.polynomial.legendre.leggauss(RF_NODES)


def _chebyshev_nodes(m: int) -> np.ndarray:
    j = np.arange(1, m + 1)
    return np.cos(np.pi * (2 * j - 1) / (2 * m))


_CHEB = _chebyshev_nodes(RF_NODES)


def rf_phase_average(x, a, geometry: str, *, probe_radius=None, debye_length=None):
    """Phase-averaged electron shape factor <I_e>/I_es at x = (V - V_p)/T_e, a = A/T_e.

    The unaveraged factor is exp(x) below V_p and the saturation growth factor
    (:func:`bayesprobe.physics.electrons.attracted_factor`) above it. ``a = 0`` gives
    the unaveraged factor.
    """
    if geometry not in ("planar", "cylindrical", "spherical"):
        raise ValueError(f"geometry must be planar, cylindrical or spherical, got {geometry!r}")
    _finite("x", x)
    _positive("a", a, allow_zero=True)
    if debye_length is not None:
        _positive("probe_radius", probe_radius)
        _positive("debye_length", debye_length)
    return _rf_factor(x, a, geometry, probe_radius, debye_length)


def _rf_factor(x, a, geometry, radius=None, lam=None, slope=False):
    """Phase-averaged shape factor; with ``slope=True`` also its derivative in x.

    The derivative of the phase average is the phase average of the derivative (the
    integrand is continuous where the probe crosses V_p, so the moving split point adds
    no boundary term): exp(u) on the retarded part, the growth factor's slope
    (:func:`bayesprobe.physics.electrons._attracted_slope`) on the attracted part, with
    the same quadrature nodes as the value.
    """
    x = np.asarray(x, float)
    a = np.asarray(a, float)
    # retardation at every phase: exp(x) I0(a) = exp(x + a) i0e(a) (no overflow); i0e is
    # evaluated on a's own shape (one value per parameter set), before broadcasting
    out = np.exp(np.minimum(x + a, 0.0)) * i0e(a)
    shape = out.shape
    d_out = out.copy() if slope else None           # d/dx exp(x) I0(a) = itself
    x = np.broadcast_to(x, shape)
    a = np.broadcast_to(a, shape)
    sat = x >= a                         # attracted at every phase
    if geometry == "spherical":
        out = np.where(sat, 1.0 + x, out)     # linear growth factor: its average is exact
        if slope:
            d_out = np.where(sat, 1.0, d_out)
    elif geometry == "planar" and lam is None:
        out = np.where(sat, 1.0, out)
        if slope:
            d_out = np.where(sat, 0.0, d_out)
    elif np.any(sat):
        xs, as_ = x[sat], a[sat]
        u = xs[:, None] - as_[:, None] * _CHEB[None, :]
        ls = None if lam is None else np.broadcast_to(lam, shape)[sat][:, None]
        out[sat] = np.mean(_attracted(u, geometry, radius, ls), axis=1)
        if slope:
            d_out[sat] = np.mean(_attracted_slope(u, geometry, radius, ls), axis=1)
    # knee: split the phase integral where the probe crosses V_p (cos theta* = x/a)
    knee = np.abs(x) < a
    if np.any(knee):
        xk, ak = x[knee][:, None], a[knee][:, None]
        th = np.arccos(xk / ak)
        t1 = 0.5 * th * (1.0 + _GL_X[None, :])                      # theta in [0, theta*]: retarded
        part1 = 0.5 * th[:, 0] * np.sum(_GL_W * np.exp(np.minimum(xk - ak * np.cos(t1), 0.0)), axis=1)
        rest = np.pi - th[:, 0]                                      # theta in [theta*, pi]: attracted
        if geometry == "planar" and lam is None:
            part2, d2 = rest, 0.0                                    # flat saturation: integrand 1
        elif geometry == "spherical":
            # integrand 1 + x - a cos(theta): exact, (1 + x)(pi - theta*) + a sin(theta*)
            part2, d2 = (1.0 + xk[:, 0]) * rest + ak[:, 0] * np.sqrt(1.0 - (xk[:, 0] / ak[:, 0]) ** 2), rest
        else:
            t2 = th + 0.5 * (np.pi - th) * (1.0 + _GL_X[None, :])
            lk = None if lam is None else np.broadcast_to(lam, shape)[knee][:, None]
            u2 = xk - ak * np.cos(t2)
            part2 = 0.5 * rest * np.sum(_GL_W * _attracted(u2, geometry, radius, lk), axis=1)
            if slope:
                d2 = 0.5 * rest * np.sum(_GL_W * _attracted_slope(u2, geometry, radius, lk), axis=1)
        out[knee] = (part1 + part2) / np.pi
        if slope:
            d_out[knee] = (part1 + d2) / np.pi
    return (out, d_out) if slope else out


def _rf_maxwellian(V, V_p, n_e, T_e, probe, sheath_expansion, V_rf):
    """RF-averaged electron current of one Maxwellian population (unchecked)."""
    x = (V - V_p) / T_e
    lam = None
    if sheath_expansion and probe.geometry == "planar":
        lam = np.sqrt(EPS0 * T_e / (np.maximum(n_e, 1.0) * E_CHARGE))
    return _saturation(n_e, T_e, probe.area) * _rf_factor(x, V_rf / T_e, probe.geometry, probe.radius, lam)


def _rf_maxwellian_with_slope(V, V_p, n_e, T_e, probe, sheath_expansion, V_rf):
    """(current, dI/dV) of one RF-averaged Maxwellian population (unchecked)."""
    x = (V - V_p) / T_e
    lam = None
    if sheath_expansion and probe.geometry == "planar":
        lam = np.sqrt(EPS0 * T_e / (np.maximum(n_e, 1.0) * E_CHARGE))
    value, d = _rf_factor(x, V_rf / T_e, probe.geometry, probe.radius, lam, slope=True)
    I_es = _saturation(n_e, T_e, probe.area)
    return I_es * value, (I_es / T_e) * d


def _rf_electron_current_with_slope(V, V_p, n_e, T_e, V_rf, probe, hot_fraction=None, T_hot=None,
                                    sheath_expansion=False):
    if hot_fraction is None:
        return _rf_maxwellian_with_slope(V, V_p, n_e, T_e, probe, sheath_expansion, V_rf)
    c, dc = _rf_maxwellian_with_slope(V, V_p, (1.0 - hot_fraction) * n_e, T_e, probe, sheath_expansion, V_rf)
    h, dh = _rf_maxwellian_with_slope(V, V_p, hot_fraction * n_e, T_hot, probe, sheath_expansion, V_rf)
    return c + h, dc + dh


def rf_electron_current(V, V_p, n_e, T_e, V_rf, probe: Probe, *, hot_fraction=None, T_hot=None,
                        sheath_expansion=False):
    """Time-averaged electron current (A) under a sinusoidal V_p oscillation of amplitude ``V_rf`` (V).

    One Maxwellian, or two (``hot_fraction``, ``T_hot``) each averaged separately.
    ``V_rf = 0`` reproduces :func:`bayesprobe.physics.electrons.electron_current`.
    """
    _finite("V", V)
    _finite("V_p", V_p)
    _positive("n_e", n_e, allow_zero=True)
    _positive("T_e", T_e)
    _positive("V_rf", V_rf, allow_zero=True)
    if not isinstance(probe, Probe):
        raise ValueError("probe must be a bayesprobe.Probe")
    return _rf_electron_current(V, V_p, n_e, T_e, V_rf, probe, hot_fraction, T_hot, sheath_expansion)


def _rf_electron_current(V, V_p, n_e, T_e, V_rf, probe, hot_fraction=None, T_hot=None, sheath_expansion=False):
    if hot_fraction is None:
        return _rf_maxwellian(V, V_p, n_e, T_e, probe, sheath_expansion, V_rf)
    cold = _rf_maxwellian(V, V_p, (1.0 - hot_fraction) * n_e, T_e, probe, sheath_expansion, V_rf)
    hot = _rf_maxwellian(V, V_p, hot_fraction * n_e, T_hot, probe, sheath_expansion, V_rf)
    return cold + hot


#: series-resistance solve: stop when |I - f(V - I R)| <= SERIES_RTOL * max(|I|, 1e-6 max_row |I|), then take
#: one last Newton step. With the exact slope that step leaves an error of order (residual)^2, far below
#: 1e-10 |I|; the residual tolerance itself is 1e-4 of the smallest proportional noise a sweep shows (1 %),
#: and because the last step is always taken, elements stopping one iteration earlier or later differ by
#: that quadratic remainder only, so the log-posterior stays smooth for finite-difference derivatives.
SERIES_RTOL = 1e-6


def series_resistance_current(f, V, R, *, fprime=None, rtol: float = SERIES_RTOL, max_iter: int = 60,
                              step: float = 1e-6):
    """Solve I = f(V - I R) for every element at once; returns I with the broadcast shape.

    Parameters
    ----------
    f : callable
        The plasma characteristic, increasing in its argument and elementwise: ``f(v)``
        returns the current at every voltage of any array ``v`` (its own parameters
        scalars; :func:`bayesprobe.probe_current` handles parameter arrays).
    V : array_like
        Applied bias (V).
    R : array_like
        Series resistance (ohm), >= 0, broadcast against ``V`` (e.g. shape (k, 1)).
    fprime : callable, optional
        df/dv; without it the slope is a forward difference with ``step`` (V).
    rtol : float
        Residual tolerance relative to max(|I|, 1e-6 max_row |I|) (an absolute floor near
        the floating potential where I passes through zero); a final Newton step follows.
    """
    _finite("V", V)
    _positive("R", R, allow_zero=True)
    if fprime is None:
        def both(v, flat):
            fv = f(v)
            return fv, (f(v + step) - fv) / step
    else:
        def both(v, flat):
            return f(v), fprime(v)
    return _solve_series(both, np.asarray(V, float), np.asarray(R, float), rtol, max_iter)


def _solve_series(f, V, R, rtol=SERIES_RTOL, max_iter=60):
    """Safeguarded Newton iteration on g(I) = I - f(V - I R), g'(I) = 1 + R f'(V - I R) >= 1.

    ``f(v, flat)`` returns the characteristic and its slope at voltages ``v`` for the
    elements ``flat`` (indices into the broadcast grid of V and R; ``None`` = the whole
    grid), so after the first step the iteration runs on the elements not yet converged
    only. The start is one Newton step from I = 0; a step leaving the bracket
    [min(0, f(V)), max(0, f(V))] (shrunk as the signs of g are seen) is replaced by
    bisection. Converged elements take one last Newton step.
    """
    V, R = np.broadcast_arrays(np.asarray(V, float), np.asarray(R, float))
    shape = V.shape
    f0, s0 = f(V, None)
    f0 = np.broadcast_to(f0, shape)
    lo = np.minimum(f0, 0.0)
    hi = np.maximum(f0, 0.0)
    I = np.clip(f0 / (1.0 + R * np.maximum(s0, 0.0)), lo, hi)          # one Newton step from I = 0
    Ig = np.abs(f0)
    row = np.max(Ig, axis=-1, keepdims=True) if Ig.ndim else Ig
    floor = 1e-6 * row                                                   # absolute floor where I passes through 0
    active = None                                                        # None: every element (no gathers)
    Vf, Rf = V, R
    for _ in range(max_iter):
        if active is None:
            Ia, Ra, fa, sa = I, R, *f(V - I * R, None)
            lo_a, hi_a, fl = lo, hi, floor
        else:
            Ia, Ra = I[active], Rf[active]
            fa, sa = f(Vf[active] - Ia * Ra, active)
            lo_a, hi_a, fl = lo[active], hi[active], floor[active]
        g = Ia - fa
        lo_a = np.where(g < 0, Ia, lo_a)
        hi_a = np.where(g > 0, Ia, hi_a)
        newton = Ia - g / (1.0 + Ra * np.maximum(sa, 0.0))
        inside = np.isfinite(newton) & (newton >= lo_a) & (newton <= hi_a)
        tol = rtol * np.maximum(np.abs(Ia), fl) + 1e-300
        done = np.abs(g) <= tol
        I_new = np.where(inside, newton, np.where(done, Ia, 0.5 * (lo_a + hi_a)))
        done |= hi_a - lo_a <= tol
        if active is None:
            I = np.array(np.broadcast_to(I_new, shape)).ravel()
            lo = np.array(np.broadcast_to(lo_a, shape)).ravel()
            hi = np.array(np.broadcast_to(hi_a, shape)).ravel()
            floor = np.array(np.broadcast_to(fl, shape)).ravel()
            Vf, Rf = V.ravel(), R.ravel()
            active = np.flatnonzero(~np.broadcast_to(done, shape))
        else:
            I[active], lo[active], hi[active] = I_new, lo_a, hi_a
            active = active[~done]
        if active.size == 0:
            break
    return I.reshape(shape)


def leakage_current(V, conductance, offset):
    """Leakage and offset current G V + I_0 (A) for conductance G (S) and offset I_0 (A)."""
    _finite("V", V)
    _finite("conductance", conductance)
    _finite("offset", offset)
    return np.asarray(conductance, float) * np.asarray(V, float) + np.asarray(offset, float)
