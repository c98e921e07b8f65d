"""Priors for the circuit distortions from what the experimenter knows about the instrument.

With the default (vague) priors of :func:`bayesprobe.inference.posterior.default_parameters`
a series resistance or a leakage line costs T_e precision even on a sweep that has
neither, because the sweep itself cannot tell them apart from T_e:

* a series resistance R makes the sheath see V - I R, so the log-slope of the electron
  retardation region becomes 1/(T_e + I R) near the knee. On the clean test sweeps the
  Cramer-Rao correlation of ln T_e with R is -0.91 and the T_e sd grows 2.4x when R is free
  in both signs; the data bound R only from above (to about 1-2 % of the sheath resistance
  T_e / I_es), so how much the interval widens depends on how much prior mass sits just
  below that bound (tests/test_distortions_calibration.py).
* a leakage line G V + I_0 competes with the ion current that is subtracted in the
  transition region and with the sheath-expansion slope of the ion branch. The posterior
  of G and I_0 is set by the data (its sd is 0.2-0.5 % of the prior sd), so the widening
  (Cramer-Rao ratio 1.20-1.33, sampled 1.24-1.38) does not depend on how wide the
  default prior is: it is information the sweep does not hold.

Both are properties of the circuit, measurable without plasma. These helpers turn such a
measurement into priors for ``fit(..., priors=...)`` (and the command-line options
``--circuit-resistance`` and ``--vacuum-sweep``):

:func:`circuit_resistance_prior`
    a known resistance between bias source and probe surface, R0 +- dR (ohm): a normal
    prior on R_series truncated to R >= 0 (R0 = 0 with dR the measurement's resolution
    says "no resistance beyond dR"). Measuring the circuit resistance (e.g. with the
    probe tip shorted to the chamber, or from the known sense resistor and cables) is
    common practice, no source.
:func:`vacuum_leakage_priors`
    a sweep recorded with the plasma off over the same bias range: with no plasma the
    whole current is leakage plus offset, I = G V + I_0 (Hutchinson, *Principles of Plasma
    Diagnostics*, 2nd ed., ch. 3, on stray leakage), so an ordinary least-squares line
    gives G and I_0 and their standard errors (e.g. Draper & Smith, *Applied Regression
    Analysis*, 3rd ed., ch. 1). The priors are independent normals with the marginal
    means and sds (their correlation is dropped, which gives a wider joint prior than
    the line fit supports), each sd scaled by sqrt((n - 2)/(n - 4)) so that the normal
    has the variance of the Student-t the estimated noise level implies.

Caveat: a leakage path that only appears with plasma (a conducting film deposited on the
insulator during the discharge) is not seen by a vacuum sweep.
"""
from __future__ import annotations

import math

import numpy as np

from .parameters import Prior

__all__ = ["circuit_resistance_prior", "vacuum_leakage_priors", "VacuumLine", "fit_vacuum_line"]


def circuit_resistance_prior(value: float, sd: float) -> Prior:
    """Prior for ``R_series`` from a measured circuit resistance ``value`` +- ``sd`` (ohm).

    A normal prior on R truncated to R >= 0 (the sampler works in ln R, so R stays positive).
    """
    value, sd = float(value), float(sd)
    if not (math.isfinite(value) and value >= 0):
        raise ValueError(f"the circuit resistance must be a non-negative number of ohms, got {value!r}")
    if not (math.isfinite(sd) and sd > 0):
        raise ValueError(f"the circuit resistance uncertainty must be a positive number of ohms, got {sd!r}")
    return Prior("normal", mean=value, sd=sd, lower=0.0)


class VacuumLine:
    """Least-squares line I = G V + I_0 through a plasma-off sweep, with standard errors."""

    def __init__(self, G, I_offset, sd_G, sd_I_offset, corr, residual_sd, n_points):
        self.G, self.I_offset = float(G), float(I_offset)
        self.sd_G, self.sd_I_offset = float(sd_G), float(sd_I_offset)
        self.corr, self.residual_sd, self.n_points = float(corr), float(residual_sd), int(n_points)

    def to_dict(self) -> dict:
        return dict(vars(self))


def fit_vacuum_line(voltage, current) -> VacuumLine:
    """Ordinary least-squares line through a plasma-off sweep (electron-positive current).

    Standard errors from the residual variance with n - 2 degrees of freedom.
    """
    V = np.asarray(voltage, float).ravel()
    I = np.asarray(current, float).ravel()
    if V.shape != I.shape:
        raise ValueError(f"vacuum sweep: voltage and current differ in length ({V.size} vs {I.size})")
    ok = np.isfinite(V) & np.isfinite(I)
    V, I = V[ok], I[ok]
    n = V.size
    if n < 5:
        raise ValueError(f"vacuum sweep: need at least 5 finite points for the leakage line, got {n}")
    Vm = V.mean()
    Sxx = float(np.sum((V - Vm) ** 2))
    if not Sxx > 0:
        raise ValueError("vacuum sweep: the bias does not vary, so no leakage conductance can be measured")
    G = float(np.sum((V - Vm) * (I - I.mean())) / Sxx)
    I0 = float(I.mean() - G * Vm)
    resid = I - (G * V + I0)
    s2 = float(np.sum(resid ** 2) / (n - 2))
    var_G = s2 / Sxx
    var_I0 = s2 * (1.0 / n + Vm ** 2 / Sxx)
    cov = -Vm * s2 / Sxx
    corr = cov / math.sqrt(var_G * var_I0) if var_G > 0 and var_I0 > 0 else 0.0
    return VacuumLine(G, I0, math.sqrt(var_G), math.sqrt(var_I0), corr, math.sqrt(s2), n)


def vacuum_leakage_priors(voltage, current) -> dict:
    """Priors for ``G_leak`` and ``I_offset`` from a plasma-off sweep (see the module docstring).

    Returns ``{"G_leak": Prior, "I_offset": Prior}`` for ``fit(..., priors=...)``; the
    current must be in the fit's convention (electron current positive, A).
    """
    line = fit_vacuum_line(voltage, current)
    n = line.n_points
    t_scale = math.sqrt((n - 2) / (n - 4))            # variance of Student-t(n - 2) = (n - 2)/(n - 4)
    if not line.residual_sd > 0:
        raise ValueError("vacuum sweep: the points lie exactly on a line (no noise), so the line's uncertainty "
                         "is unknown; give the G_leak and I_offset priors directly")
    return {"G_leak": Prior("normal", mean=line.G, sd=line.sd_G * t_scale),
            "I_offset": Prior("normal", mean=line.I_offset, sd=line.sd_I_offset * t_scale)}
