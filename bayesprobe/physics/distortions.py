"""Distortions of a measured sweep: RF fluctuation of V_p and leakage.

The series (circuit) resistance has its own module, :mod:`bayesprobe.physics.series`.

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

Leakage and offset
------------------
Insulator or cable leakage and an amplifier offset add a current linear in the
applied bias, ``I_leak = G V + I_0`` (Hutchinson 2002 ch. 3; instrument practice).
It is added in parallel with the probe, outside the series resistance.
"""
from __future__ import annotations

import numpy as np
from scipy.special import i0e

from ._checks import finite as _finite
from ._checks import positive as _positive
from .formulary import _debye_length
from .electron_models import ElectronModel
from .electrons import _attracted, _attracted_slope, _saturation, _sum_groups, maxwellian_groups
from .geometry import Probe

__all__ = ["rf_phase_average", "rf_electron_current", "RFAveraged", "leakage_current", "RF_NODES"]

#: quadrature nodes per smooth piece of the phase average (knee and saturation regions);
#: relative error < 1e-4 against adaptive quadrature for A/T_e <= 30 (tests/test_distortions_physics.py)
RF_NODES = 10
_GL_X, _GL_W = np.polynomial.legendre.leggauss(RF_NODES)


def _chebyshev_nodes(m: int) -> np.ndarray:
    j = np.arange(1, m + 1)
    return np.cos(np.pi * (2 * j - 1) / (2 * m))


_CHEB = _chebyshev_nodes(RF_NODES)
#: Gauss-Legendre nodes per phase interval for models that are not sums of Maxwellians
#: (:class:`RFAveraged`); relative error < 1e-5 against adaptive quadrature for A/T_e <= 30
#: (tests/test_strategies.py)
RF_GENERIC_NODES = 24
_GLG_X, _GLG_W = np.polynomial.legendre.leggauss(RF_GENERIC_NODES)


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


def _rf_maxwellian(V, V_p, n_e, T_e, probe, sheath_expansion, V_rf, slope=False):
    """RF-averaged current of one Maxwellian population (unchecked); with ``slope``, (I, dI/dV)."""
    x = (V - V_p) / T_e
    lam = None
    if sheath_expansion and probe.geometry == "planar":
        lam = _debye_length(np.maximum(n_e, 1.0), T_e)
    I_es = _saturation(n_e, T_e, probe.area)
    if not slope:
        return I_es * _rf_factor(x, V_rf / T_e, probe.geometry, probe.radius, lam)
    value, d = _rf_factor(x, V_rf / T_e, probe.geometry, probe.radius, lam, slope=True)
    return I_es * value, (I_es / T_e) * d


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
    return _sum_groups(_rf_maxwellian, V, V_p, maxwellian_groups(n_e, T_e, hot_fraction, T_hot), probe,
                       sheath_expansion, False, V_rf)


class RFAveraged(ElectronModel):
    """Any electron model seen through a sinusoidal plasma-potential oscillation V_p + V_rf sin(wt).

    The current is the phase average of the wrapped model's current (module docstring). A model
    made of Maxwellian groups (:meth:`ElectronModel.groups`) is averaged group by group with the
    Bessel closed form and the split quadrature of :func:`rf_phase_average`; any other model by
    Gauss-Legendre quadrature of its own current on the two phase intervals either side of the
    phase where the probe crosses V_p (where its slope may jump). Everything else (parameters,
    temperatures) is the wrapped model's; ``V_rf`` comes from the parameter columns.
    """

    def __init__(self, model: ElectronModel):
        self.model = model
        self.name = model.name
        self.parameter_names = model.parameter_names
        self.temperature_names = model.temperature_names
        self.two_temperature = model.two_temperature
        self.complexity = model.complexity

    def groups(self, cols):
        return self.model.groups(cols)

    def screening_temperature(self, params):
        return self.model.screening_temperature(params)

    def effective_temperature(self, params):
        return self.model.effective_temperature(params)

    def hottest_temperature(self, params):
        return self.model.hottest_temperature(params)

    def coldest_temperature(self, params):
        return self.model.coldest_temperature(params)

    def current(self, V, cols, probe, *, sheath_expansion=False, slope=False):
        groups = self.model.groups(cols)
        if groups is not None:
            return _sum_groups(_rf_maxwellian, V, cols["V_p"], groups, probe, sheath_expansion, slope, cols["V_rf"])
        return _phase_average(self.model, V, cols, probe, sheath_expansion, slope)

    def __repr__(self):
        return f"RFAveraged({self.model!r})"


def _phase_average(model, V, cols, probe, sheath_expansion, slope):
    """(1/pi) int_0^pi I(V + A cos(theta)) d theta of any model's current (and of its slope), by
    Gauss-Legendre quadrature on [0, theta*] and [theta*, pi], theta* the phase where the probe
    crosses V_p (cos theta* = (V_p - V)/A, clipped to [-1, 1]). The shift V_p -> V_p - A cos(theta)
    is applied to the plasma potential, so the model sees one voltage per node."""
    V = np.asarray(V, float)
    V_p, A = cols["V_p"], cols["V_rf"]
    shape = np.broadcast_shapes(V.shape, np.shape(V_p), np.shape(A))
    with np.errstate(divide="ignore", invalid="ignore"):
        c = np.where(A > 0, (V_p - V) / A, np.sign(V_p - V))
    th = np.arccos(np.clip(np.broadcast_to(c, shape), -1.0, 1.0))[..., None]
    node = _GLG_X.reshape((1,) * len(shape) + (-1,))
    thetas = np.concatenate([0.5 * th * (1.0 + node), th + 0.5 * (np.pi - th) * (1.0 + node)], axis=-1)
    weights = np.concatenate([0.5 * th * _GLG_W, 0.5 * (np.pi - th) * _GLG_W], axis=-1) / np.pi
    shifted = dict(cols)
    shifted["V_p"] = np.asarray(V_p)[..., None] - np.asarray(A)[..., None] * np.cos(thetas)
    for name, value in cols.items():
        if name != "V_p":
            shifted[name] = np.asarray(value)[..., None]
    out = model.current(V[..., None], shifted, probe, sheath_expansion=sheath_expansion, slope=slope)
    if slope:
        return np.sum(weights * out[0], axis=-1), np.sum(weights * out[1], axis=-1)
    return np.sum(weights * out, axis=-1)


def leakage_current(V, conductance, offset):
    """Leakage and offset current G V + I_0 (A) for conductance G (S) and offset I_0 (A)."""
    _finite("V", V)
    _finite("conductance", conductance)
    _finite("offset", offset)
    return np.asarray(conductance, float) * np.asarray(V, float) + np.asarray(offset, float)
