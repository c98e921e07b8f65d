"""Electron current to a probe: retardation and saturation branches.

Every function is a pure, vectorised function: parameters broadcast against the
voltages, so parameters of shape ``(k, 1)`` and voltages of shape ``(n,)`` give
currents of shape ``(k, n)``. SI units; temperatures in eV; electron current is
returned positive.

Retardation (V <= V_p), any convex probe, Maxwellian electrons, collisionless
sheath::

    I_e = I_es exp(-(V_p - V)/T_e),    I_es = e n_e A sqrt(e T_e / (2 pi m_e))

Saturation (V > V_p), chi = (V - V_p)/T_e, orbital-motion-limited collection of
attracted Maxwellian electrons:

* sphere:   I_e = I_es (1 + chi)
* cylinder: I_e = I_es [2 sqrt(chi/pi) + exp(chi) erfc(sqrt(chi))]
  (tends to I_es (2/sqrt(pi)) sqrt(1 + chi) for chi >~ 2)
* planar:   I_e = I_es (flat), or with an electron Child-law sheath growing the
  collecting area of a disc, A (1 + s_e/r_p)^2, s_e = 1.2552 lambda_D chi^(3/4).

All three are continuous in value and slope-continuous (cylinder, sphere) at V_p.

References
----------
* H. M. Mott-Smith & I. Langmuir, Phys. Rev. 28, 727 (1926): orbital-motion-limited
  collection for sphere and cylinder.
* I. H. Hutchinson, *Principles of Plasma Diagnostics*, 2nd ed. (CUP, 2002), ch. 3.
* M. A. Lieberman & A. J. Lichtenberg, *Principles of Plasma Discharges and
  Materials Processing*, 2nd ed. (Wiley, 2005), ch. 6 (sheaths) and sec. 6.6 (probes).
"""
from __future__ import annotations

import numpy as np
from scipy.special import erfcx

from ._checks import finite as _finite, fraction as _fraction, positive as _positive
from .constants import E_CHARGE, M_E
from .formulary import _debye_length
from .geometry import Probe

__all__ = ["electron_saturation_current", "attracted_factor", "maxwellian_electron_current",
           "electron_current"]

_SQRT_E_OVER_2PI_ME = np.sqrt(E_CHARGE / (2.0 * np.pi * M_E))
# electron Child-law coefficient sqrt(8 sqrt(pi)/9) (re-derived like the ion Child law,
# with the random electron flux n e v_mean/4 at the sheath edge)
_ELECTRON_CHILD = np.sqrt(8.0 * np.sqrt(np.pi) / 9.0)
_TWO_OVER_SQRT_PI = 2.0 / np.sqrt(np.pi)


def electron_saturation_current(n_e, T_e, area):
    """Random electron current e n_e A sqrt(e T_e/(2 pi m_e)) in A."""
    _positive("n_e", n_e, allow_zero=True)
    _positive("T_e", T_e)
    _positive("area", area)
    return _saturation(n_e, T_e, area)


def _saturation(n_e, T_e, area):
    return E_CHARGE * n_e * area * _SQRT_E_OVER_2PI_ME * np.sqrt(T_e)


def attracted_factor(chi, geometry: str, *, probe_radius=None, debye_length=None):
    """Saturation-branch growth factor I_e/I_es for chi = (V - V_p)/T_e >= 0.

    ``chi`` below zero is treated as zero (factor 1 for every geometry). For
    ``planar`` the factor is 1 unless ``debye_length`` is given, in which case the
    electron Child-law sheath grows the area of a disc of radius ``probe_radius``.
    """
    if geometry not in ("planar", "cylindrical", "spherical"):
        raise ValueError(f"geometry must be planar, cylindrical or spherical, got {geometry!r}")
    if debye_length is not None:
        _positive("probe_radius", probe_radius)
        _positive("debye_length", debye_length)
    return _attracted(chi, geometry, probe_radius, debye_length)


def _attracted(chi, geometry, probe_radius=None, debye_length=None):
    chi = np.maximum(chi, 0.0)
    if geometry == "spherical":
        return 1.0 + chi
    if geometry == "cylindrical":
        # 1 wherever chi = 0 (the whole retardation region of an electron sweep): erfcx only where
        # it matters, which halves the model's cost on the sampler's hot path
        out = np.ones_like(chi)
        pos = chi > 0.0
        root = np.sqrt(chi[pos])
        out[pos] = _TWO_OVER_SQRT_PI * root + erfcx(root)
        return out
    if debye_length is None:
        return np.ones_like(chi)
    s = _ELECTRON_CHILD * debye_length * np.sqrt(chi) * np.sqrt(np.sqrt(chi))
    return (1.0 + s / probe_radius) ** 2


def _attracted_slope(chi, geometry, probe_radius=None, debye_length=None):
    """d/dchi of :func:`_attracted` (0 where chi <= 0, the side the factor is flat on).

    Cylinder: d/dchi [2 sqrt(chi/pi) + erfcx(sqrt chi)] = erfcx(sqrt chi), since
    erfcx'(r) = 2 r erfcx(r) - 2/sqrt(pi). Planar Child-law sheath: 2 (1 + s/r_p) ds/dchi / r_p
    with s proportional to chi^(3/4) (infinite slope at chi = 0+, where it is taken as 0).
    """
    chi = np.asarray(chi, float)
    pos = chi > 0.0
    if geometry == "spherical":
        return pos.astype(float)
    if geometry == "cylindrical":
        out = np.zeros(chi.shape)
        out[pos] = erfcx(np.sqrt(chi[pos]))
        return out
    if debye_length is None:
        return np.zeros(chi.shape)
    c = np.maximum(chi, 0.0)
    q = np.sqrt(np.sqrt(c))                                   # chi^(1/4)
    k = _ELECTRON_CHILD * debye_length / probe_radius
    with np.errstate(divide="ignore", invalid="ignore"):
        d = 2.0 * (1.0 + k * q * q * q) * 0.75 * k / q
    return np.where(pos, d, 0.0)


def _maxwellian(V, V_p, n_e, T_e, probe, sheath_expansion, slope=False):
    """Current of one Maxwellian population (unchecked); with ``slope`` also dI/dV: (I, dI/dV).

    exp(min(x, 0)) below V_p, growth factor above; both equal 1 at V_p, so their sum minus 1
    is the piecewise function without masks (cheaper on the sampler's hot path).
    """
    x = (V - V_p) / T_e
    lam = None
    if sheath_expansion and probe.geometry == "planar":
        lam = _debye_length(np.maximum(n_e, 1.0), T_e)
    I_es = _saturation(n_e, T_e, probe.area)
    ex = np.exp(np.minimum(x, 0.0))
    if probe.geometry == "planar" and lam is None:
        # flat saturation: the factor is exp(min(x, 0))
        value = I_es * ex
        return (value, np.where(x < 0.0, value / T_e, 0.0)) if slope else value
    value = I_es * (ex + _attracted(x, probe.geometry, probe.radius, lam) - 1.0)
    if not slope:
        return value
    return value, (I_es / T_e) * np.where(x < 0.0, ex, _attracted_slope(x, probe.geometry, probe.radius, lam))


def _sum_groups(one, V, V_p, groups, probe, sheath_expansion, slope, *extra):
    """Sum of ``one(V, V_p, n, T, probe, sheath_expansion, *extra, slope=slope)`` over the
    Maxwellian groups ``(n, T)``: the current, or (current, dI/dV) with ``slope``."""
    total = None
    for n, T in groups:
        part = one(V, V_p, n, T, probe, sheath_expansion, *extra, slope=slope)
        if total is None:
            total = part
        elif slope:
            total = (total[0] + part[0], total[1] + part[1])
        else:
            total = total + part
    return total


def maxwellian_groups(n_e, T_e, hot_fraction=None, T_hot=None):
    """The Maxwellian groups (density, temperature) of one population or of a cold + hot pair."""
    if hot_fraction is None:
        return ((n_e, T_e),)
    return ((1.0 - hot_fraction) * n_e, T_e), (hot_fraction * n_e, T_hot)


def maxwellian_electron_current(V, V_p, n_e, T_e, probe: Probe, *, sheath_expansion=False):
    """Electron current of one Maxwellian population over the whole sweep, in A.

    Parameters
    ----------
    V : array_like
        Probe bias (V).
    V_p, n_e, T_e : array_like
        Plasma potential (V), density of this population (m^-3), temperature (eV);
        broadcast against ``V``.
    probe : Probe
    sheath_expansion : bool
        Planar probes only: grow the saturation-branch area with the electron
        Child-law sheath (approximate; electron-sheath physics is richer).
    """
    _finite("V", V)
    _finite("V_p", V_p)
    _positive("n_e", n_e, allow_zero=True)
    _positive("T_e", T_e)
    return _maxwellian(V, V_p, n_e, T_e, probe, sheath_expansion)


def electron_current(V, V_p, n_e, T_e, probe: Probe, *, hot_fraction=None, T_hot=None,
                     sheath_expansion=False):
    """Electron current for a Maxwellian or a two-temperature (bi-Maxwellian) plasma, in A.

    With ``hot_fraction`` = a and ``T_hot`` given, the electrons are a cold group
    (density (1-a) n_e, temperature ``T_e``) plus a hot group (a n_e, ``T_hot``), each
    collected as above; a = 0 reproduces the Maxwellian exactly.
    """
    _finite("V", V)
    _finite("V_p", V_p)
    _positive("n_e", n_e, allow_zero=True)
    _positive("T_e", T_e)
    if hot_fraction is not None:
        _fraction("hot_fraction", hot_fraction)
        if T_hot is None:
            raise ValueError("T_hot is required when hot_fraction is given")
        _positive("T_hot", T_hot)
    return _electron_current(V, V_p, n_e, T_e, probe, hot_fraction, T_hot, sheath_expansion)


def _electron_current(V, V_p, n_e, T_e, probe, hot_fraction=None, T_hot=None, sheath_expansion=False,
                      slope=False):
    """Unchecked electron current (or (current, dI/dV) with ``slope``) of one or two Maxwellian groups."""
    return _sum_groups(_maxwellian, V, V_p, maxwellian_groups(n_e, T_e, hot_fraction, T_hot), probe,
                       sheath_expansion, slope)
