"""Log-posterior of the whole characteristic: priors plus a per-point likelihood.

Noise model (fitted, since users rarely know their noise): independent points with
sd sigma_i = sqrt(sigma_floor^2 + (sigma_rel * mu_i)^2), mu_i the model current.
The likelihood is Gaussian, or Student-t with ``student_nu`` degrees of freedom
(scale sigma_i) when outliers are expected. The pointwise log-likelihood is
available for model comparison (PSIS-LOO).
"""
from __future__ import annotations

import numpy as np
from scipy.special import gammaln

from ..model import ModelConfig, plasma_parameter_names, probe_current
from .parameters import Parameter, ParameterSet, Prior

__all__ = ["default_parameters", "LogPosterior", "MIN_HOT_RATIO"]

#: the hot group must be at least this much hotter than the cold group (ordering, no label switching)
MIN_HOT_RATIO = 1.5
_LOG_MIN_RATIO = float(np.log(MIN_HOT_RATIO))

_LABELS = {"n_e": (r"$n_e$", "m^-3", "electron density"),
           "n_i": (r"$n_i$", "m^-3", "ion density"),
           "T_e": (r"$T_e$", "eV", "electron temperature"),
           "T_e_cold": (r"$T_{e,c}$", "eV", "cold-electron temperature"),
           "T_e_hot": (r"$T_{e,h}$", "eV", "hot-electron temperature"),
           "hot_fraction": (r"$\alpha_h$", "1", "hot electron density / total"),
           "V_p": (r"$V_p$", "V", "plasma potential"),
           "sigma_floor": (r"$\sigma_0$", "A", "noise floor (sd)"),
           "sigma_rel": (r"$\sigma_r$", "1", "noise proportional to |I| (sd / |I|)")}


def default_parameters(config: ModelConfig, voltage, current) -> ParameterSet:
    """The fitted parameters and their default priors for ``config`` and this sweep."""
    v_min, v_max = float(np.min(voltage)), float(np.max(voltage))
    i_max = float(np.max(np.abs(current)))
    defaults = {
        "n_e": Prior("log-uniform", 1e12, 1e21), "n_i": Prior("log-uniform", 1e12, 1e21),
        "T_e": Prior("log-uniform", 0.1, 100.0), "T_e_cold": Prior("log-uniform", 0.1, 100.0),
        "T_e_hot": Prior("log-uniform", 0.5, 300.0), "hot_fraction": Prior("beta", upper=0.5, a=1.0, b=4.0),
        "V_p": Prior("uniform", v_min, v_max + 0.5 * (v_max - v_min)),
        "sigma_floor": Prior("log-uniform", 1e-7 * i_max, i_max),
        "sigma_rel": Prior("log-uniform", 1e-4, 1.0),
    }
    names = list(plasma_parameter_names(config)) + ["sigma_floor", "sigma_rel"]
    out = []
    for n in names:
        label, unit, desc = _LABELS[n]
        transform = "identity" if n == "V_p" else ("logit" if n == "hot_fraction" else "log")
        out.append(Parameter(n, unit, label, defaults[n], transform=transform, description=desc))
    return ParameterSet(out)


class LogPosterior:
    """Vectorised log-posterior over parameter sets in sampler coordinates.

    Calling the object with ``Z`` of shape (k, d) returns shape (k,); it is what
    emcee calls with ``vectorize=True``.
    """

    def __init__(self, voltage, current, config: ModelConfig, parameters: ParameterSet, *,
                 student_nu: float | None = None):
        self.voltage = np.asarray(voltage, float)
        self.current = np.asarray(current, float)
        self.config = config
        self.parameters = parameters
        self.student_nu = student_nu
        self.n_points = self.voltage.size
        self._has_order = "T_e_hot" in parameters.names
        if student_nu is not None:
            nu = float(student_nu)
            self._t_const = gammaln((nu + 1) / 2) - gammaln(nu / 2) - 0.5 * np.log(nu * np.pi)

    def physical(self, Z) -> dict:
        return self.parameters.to_physical(Z)

    def model_current(self, Z) -> np.ndarray:
        """Model current for every row of Z, shape (k, n)."""
        return probe_current(self.voltage, self.physical(Z), self.config, validate=False)

    def _sigma(self, phys, mu):
        return np.sqrt(phys["sigma_floor"][:, None] ** 2 + (phys["sigma_rel"][:, None] * mu) ** 2)

    def pointwise_loglik(self, Z, mu=None) -> np.ndarray:
        """Log-likelihood of every point for every row of Z, shape (k, n).

        ``mu``: the model current of these rows if already computed (``model_current``).
        """
        Z = np.atleast_2d(Z)
        phys = self.physical(Z)
        if mu is None:
            mu = probe_current(self.voltage, phys, self.config, validate=False)
        sigma = self._sigma(phys, mu)
        r = (self.current - mu) / sigma
        if self.student_nu is None:
            return -0.5 * r * r - np.log(sigma) - 0.5 * np.log(2 * np.pi)
        nu = self.student_nu
        return self._t_const - np.log(sigma) - 0.5 * (nu + 1) * np.log1p(r * r / nu)

    def log_prior(self, Z) -> np.ndarray:
        Z = np.atleast_2d(Z)
        lp = self.parameters.log_prior(Z)
        if self._has_order:
            i_c = self.parameters.index["T_e_cold"]
            i_h = self.parameters.index["T_e_hot"]
            lp = np.where(Z[:, i_h] - Z[:, i_c] >= _LOG_MIN_RATIO, lp, -np.inf)
        return lp

    def __call__(self, Z) -> np.ndarray:
        Z = np.atleast_2d(np.asarray(Z, float))
        lp = self.log_prior(Z)
        ok = np.isfinite(lp)
        out = np.full(Z.shape[0], -np.inf)
        if np.any(ok):
            with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
                ll = self.pointwise_loglik(Z[ok]).sum(axis=1)
            out[ok] = np.where(np.isfinite(ll), ll + lp[ok], -np.inf)
        return out

    def posterior_predictive(self, Z, rng: np.random.Generator, mu=None) -> np.ndarray:
        """One replicated sweep per row of Z (same noise model), shape (k, n); ``mu`` as above."""
        Z = np.atleast_2d(Z)
        phys = self.physical(Z)
        if mu is None:
            mu = probe_current(self.voltage, phys, self.config, validate=False)
        sigma = self._sigma(phys, mu)
        eps = rng.standard_normal(mu.shape) if self.student_nu is None else rng.standard_t(self.student_nu, mu.shape)
        return mu + sigma * eps
