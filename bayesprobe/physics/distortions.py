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
solves it for all walkers and points at once: one Newton step, then secant steps,
with bisection whenever a step leaves the bracket, iterating only on the elements not
yet converged. For a pure exponential
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
from .electrons import _attracted, _saturation
from .constants import E_CHARGE, EPS0
from .geometry import Probe

__all__ = ["rf_phase_average", "rf_electron_current", "series_resistance_current", "leakage_current",
           "RF_NODES"]

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


def _rf_factor(x, a, geometry, radius=None, lam=None):
    x = np.asarray(x, float)
    a = np.asarray(a, float)
    # retardation at every phase: exp(x) I0(a) = exp(x + a) i0e(a) (no overflow); i0e is
    # evaluated on a's own shape (one value per parameter set), before broadcasting
    out = np.exp(np.minimum(x + a, 0.0)) * i0e(a)
    shape = out.shape
    x = np.broadcast_to(x, shape)
    a = np.broadcast_to(a, shape)
    sat = x >= a                         # attracted at every phase
    if geometry == "spherical":
        out = np.where(sat, 1.0 + x, out)     # linear growth factor: its average is exact
    elif geometry == "planar" and lam is None:
        out = np.where(sat, 1.0, out)
    elif np.any(sat):
        xs, as_ = x[sat], a[sat]
        u = xs[:, None] - as_[:, None] * _CHEB[None, :]
        ls = None if lam is None else np.broadcast_to(lam, shape)[sat][:, None]
        out[sat] = np.mean(_attracted(u, geometry, radius, ls), axis=1)
    # knee: split the phase integral where the probe crosses V_p (cos theta* = x/a)
    knee = np.abs(x) < a
    if np.any(knee):
        xk, ak = x[knee][:, None], a[knee][:, None]
        th = np.arccos(xk / ak)
        t1 = 0.5 * th * (1.0 + _GL_X[None, :])                      # theta in [0, theta*]: retarded
        part1 = 0.5 * th[:, 0] * np.sum(_GL_W * np.exp(np.minimum(xk - ak * np.cos(t1), 0.0)), axis=1)
        t2 = th + 0.5 * (np.pi - th) * (1.0 + _GL_X[None, :])       # theta in [theta*, pi]: attracted
        lk = None if lam is None else np.broadcast_to(lam, shape)[knee][:, None]
        att = _attracted(xk - ak * np.cos(t2), geometry, radius, lk)
        part2 = 0.5 * (np.pi - th[:, 0]) * np.sum(_GL_W * att, axis=1)
        out[knee] = (part1 + part2) / np.pi
    return out


def _rf_maxwellian(V, V_p, n_e, T_e, probe, sheath_expansion, V_rf):
    """RF-averaged electron current of one Maxwellian population (unchecked)."""
    x = (V - V_p) / T_e
    lam = None
    if sheath_expansion and probe.geometry == "planar":
        lam = np.sqrt(EPS0 * T_e / (np.maximum(n_e, 1.0) * E_CHARGE))
    return _saturation(n_e, T_e, probe.area) * _rf_factor(x, V_rf / T_e, probe.geometry, probe.radius, lam)


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


def series_resistance_current(f, V, R, *, rtol: float = 1e-10, max_iter: int = 60, step: float = 1e-4):
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
    rtol : float
        Stop when every |I - f(V - I R)| <= rtol * max(|I|, 1e-6 max_row |I|) or the
        bracket has shrunk to that width (relative accuracy, with an absolute floor
        near the floating potential where I passes through zero).
    step : float
        Finite-difference step (V) for the slope in the Newton update.
    """
    _finite("V", V)
    _positive("R", R, allow_zero=True)
    return _solve_series(lambda v, flat: f(v), np.asarray(V, float), np.asarray(R, float), rtol, max_iter, step)


def _solve_series(f, V, R, rtol=1e-10, max_iter=60, step=1e-4):
    """Safeguarded secant iteration on g(I) = I - f(V - I R).

    ``f(v, flat)`` evaluates the characteristic at voltages ``v`` for the elements
    ``flat`` (indices into the broadcast grid of V and R; ``None`` = the whole grid),
    so the iteration runs on the elements not yet converged only. The first step is a
    Newton step from I = 0 with a finite-difference slope; later steps are secant
    steps through the last two iterates, replaced by bisection of the bracket
    [min(0, f(V)), max(0, f(V))] whenever they leave it.
    """
    V, R = np.broadcast_arrays(np.asarray(V, float), np.asarray(R, float))
    shape = V.shape
    f0 = np.broadcast_to(f(V, None), shape)
    slope0 = (np.broadcast_to(f(V + step, None), shape) - f0) / step
    lo = np.minimum(f0, 0.0).ravel()
    hi = np.maximum(f0, 0.0).ravel()
    Vf, Rf = V.ravel(), R.ravel()
    I = np.clip((f0 / (1.0 + R * np.maximum(slope0, 0.0))).ravel(), lo, hi)   # one Newton step from I = 0
    I_prev = np.zeros(I.size)
    g_prev = -f0.ravel().copy()                                                  # g(0) = -f(V)
    Ig = np.abs(I).reshape(shape)
    row = np.max(Ig, axis=-1, keepdims=True) if Ig.ndim else Ig
    floor = (1e-6 * np.broadcast_to(row, shape)).ravel()      # absolute floor where I passes through 0
    active = np.arange(I.size)
    for _ in range(max_iter):
        Ia = I[active]
        g = Ia - f(Vf[active] - Ia * Rf[active], active)
        tol = rtol * np.maximum(np.abs(Ia), floor[active]) + 1e-300
        lo_a = np.where(g < 0, Ia, lo[active])
        hi_a = np.where(g > 0, Ia, hi[active])
        lo[active], hi[active] = lo_a, hi_a
        keep = ~((np.abs(g) <= tol) | (hi_a - lo_a <= tol))
        if not np.any(keep):
            break
        active, Ia, g, lo_a, hi_a = active[keep], Ia[keep], g[keep], lo_a[keep], hi_a[keep]
        Ip, gp = I_prev[active], g_prev[active]
        dg = g - gp
        with np.errstate(divide="ignore", invalid="ignore"):
            secant = Ia - g * (Ia - Ip) / dg
        inside = np.isfinite(secant) & (secant > lo_a) & (secant < hi_a)
        I_prev[active], g_prev[active] = Ia, g
        I[active] = np.where(inside, secant, 0.5 * (lo_a + hi_a))
    return I.reshape(shape)


def leakage_current(V, conductance, offset):
    """Leakage and offset current G V + I_0 (A) for conductance G (S) and offset I_0 (A)."""
    _finite("V", V)
    _finite("conductance", conductance)
    _finite("offset", offset)
    return np.asarray(conductance, float) * np.asarray(V, float) + np.asarray(offset, float)
