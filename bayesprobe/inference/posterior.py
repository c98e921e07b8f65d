"""Log-posterior of the whole characteristic: priors plus a per-point likelihood.

Noise model (fitted, since users rarely know their noise): independent points with
sd sigma_i = sqrt(sigma_floor^2 + (sigma_rel * mu_i)^2), mu_i the model current.
The likelihood is Gaussian, or Student-t with ``student_nu`` degrees of freedom
(scale sigma_i) when outliers are expected; ``student_nu="fit"`` makes the degrees
of freedom a parameter ``nu``. The pointwise log-likelihood is available for model
comparison (PSIS-LOO).

Priors of the distortion (nuisance) parameters, in physical units; ``span`` is the
voltage range of the sweep and ``I_max`` its largest |I|:

============  =========================  ===============================================
parameter     prior                      why
============  =========================  ===============================================
V_rf          log-uniform 1 mV .. span/2  scale-free over the amplitudes a sweep can show;
                                          below 1 mV the effect (~(A/T_e)^2/4) is invisible
R_series      log-uniform 1e-5 .. 1 x     from negligible (I_max R = 1e-5 span) to a
              span / I_max (ohm)          resistance that eats the whole sweep
G_leak        normal(0, 0.1 I_max/span)   leakage is small next to the probe current;
I_offset      normal(0, 0.1 I_max)        either sign (common practice, no source)
V_shift       normal(0, 0.1 span)         either sign; contamination shifts are a few
                                          volts at most (common practice, no source)
I_cap         normal(0, 0.1 I_max)        either sign (depends on the wiring of the
                                          sweep); small next to the probe current
nu            gamma(shape 2, rate 0.1),   Juarez & Steel, J. Bus. Econ. Stat. 28, 52 (2010)
              truncated to 1 .. 1000      (from memory): mean 20, mode 10, allows heavy tails
============  =========================  ===============================================

Calibrated circuit (the override for ``fit(..., priors=...)``, or the ``fit`` command's
``--circuit-resistance`` and ``--vacuum-sweep``; helpers and sources in
:mod:`bayesprobe.inference.instrument_priors`):

============  =========================  ===============================================
parameter     prior                      from
============  =========================  ===============================================
R_series      normal(R0, dR), R >= 0      a measured circuit resistance R0 +- dR (ohm);
                                          "0 +- dR": no resistance beyond dR
G_leak,       normal(line fit, its sd)    least-squares line through a plasma-off sweep
I_offset                                  (sd scaled to the Student-t variance)
============  =========================  ===============================================

Why the defaults stay vague and the calibration exists: on clean sweeps neither a series
resistance nor a leakage line can be told apart from T_e by the sweep itself. The T_e
information sits in the transition region V_f .. V_p; R changes its local log-slope to
1/(T_e + I R) (Cramer-Rao correlation of ln T_e with R: -0.91) and the data only bound R
from above (at about 1-2 % of the sheath resistance T_e/I_es), so the widening of the T_e
interval depends on the prior mass just below that bound (measured 4-69 % with the default
prior on the test sweeps). The leakage line's posterior is set by the data (its sd is
0.2-0.5 % of the default prior sd) and the widening is the Cramer-Rao ratio, 20-33 %; even a
prior as tight as 0.1 I_is would leave 20-32 %, and would exclude real leakage of a good
fraction of I_is, which the distortion is there to catch. With the circuit measured (R
known to about 0.5 % of T_e/I_es, or a plasma-off sweep) the widening on the test sweeps is
4-15 % and 0-10 % (tests/test_distortions_calibration.py, tests/distortion_information.py).

Outliers: under the Student-t model each point has a latent precision weight whose
posterior mean given the parameters is (nu + 1)/(nu + r^2), r the standardised
residual (the scale-mixture representation of the t distribution; e.g. Lange, Little
& Taylor, JASA 84, 881 (1989)). :meth:`LogPosterior.outlier_weights` returns it per
draw and point.
"""
from __future__ import annotations

import numpy as np
from scipy.special import gammaln

from ..model import ModelConfig, distortion_parameter_names, plasma_parameter_names, probe_current
from ..quantities import QUANTITIES, SweepScale
from .parameters import Parameter, ParameterSet

__all__ = ["default_parameters", "LogPosterior", "MIN_HOT_RATIO", "NU_PRIOR"]

#: prior of the fitted Student-t degrees of freedom (Juarez & Steel 2010), truncated to [1, 1000]
NU_PRIOR = QUANTITIES["nu"].default_prior(None)

#: the hot group must be at least this much hotter than the cold group (ordering, no label switching)
MIN_HOT_RATIO = 1.5
_LOG_MIN_RATIO = float(np.log(MIN_HOT_RATIO))


def default_parameters(config: ModelConfig, voltage, current, *, fit_nu: bool = False) -> ParameterSet:
    """The fitted parameters and their default priors for ``config`` and this sweep.

    ``fit_nu`` adds the Student-t degrees of freedom ``nu`` (see the module docstring).
    """
    scale = SweepScale.of(voltage, current)
    names = list(plasma_parameter_names(config)) + list(distortion_parameter_names(config)) \
        + ["sigma_floor", "sigma_rel"] + (["nu"] if fit_nu else [])
    out = []
    for n in names:
        q = QUANTITIES[n]
        out.append(Parameter(n, q.unit, q.tex, q.default_prior(scale), transform=q.transform,
                             description=q.description))
    return ParameterSet(out)


class LogPosterior:
    """Vectorised log-posterior over parameter sets in sampler coordinates.

    Calling the object with ``Z`` of shape (k, d) returns shape (k,); it is what
    emcee calls with ``vectorize=True``.
    """

    def __init__(self, voltage, current, config: ModelConfig, parameters: ParameterSet, *,
                 student_nu: float | None = None, branches=None):
        self.voltage = np.asarray(voltage, float)
        self.current = np.asarray(current, float)
        self.config = config
        if config.hysteresis and branches is None:
            raise ValueError("the hysteresis distortion needs a sweep recorded with rising and falling bias "
                             "(this one has a single direction)")
        # float copies once, not at every call on the sampler's hot path
        self.branches = tuple(np.asarray(b, float) for b in branches) if config.hysteresis else None
        self.parameters = parameters
        self.student_nu = student_nu
        self.n_points = self.voltage.size
        self._has_order = "T_e_hot" in parameters.names
        self.fit_nu = isinstance(student_nu, str)
        if self.fit_nu:
            if student_nu != "fit":
                raise ValueError(f"student_nu must be a positive number or 'fit', got {student_nu!r}")
            if "nu" not in parameters.names:
                raise ValueError("student_nu='fit' needs a parameter 'nu' (default_parameters(..., fit_nu=True))")
        elif student_nu is not None:
            nu = float(student_nu)
            self._t_const = gammaln((nu + 1) / 2) - gammaln(nu / 2) - 0.5 * np.log(nu * np.pi)

    @property
    def noise_mask(self) -> np.ndarray:
        """True for the noise-model parameters (sigma_floor, sigma_rel, nu), in parameter order."""
        return np.array([n in ("sigma_floor", "sigma_rel", "nu") for n in self.parameters.names])

    def physical(self, Z) -> dict:
        return self.parameters.to_physical(Z)

    def model_current(self, Z) -> np.ndarray:
        """Model current for every row of Z, shape (k, n)."""
        return self._mu(self.physical(Z))

    def _mu(self, phys):
        """Model current for physical parameter arrays, shape (k, n). The series-resistance solve
        is the interpolated one (:func:`bayesprobe.model.probe_current`, error < 1e-4 max |I|)."""
        return probe_current(self.voltage, phys, self.config, validate=False, branches=self.branches,
                             series_solver="interpolate")

    def _sigma(self, phys, mu):
        return np.sqrt(phys["sigma_floor"][:, None] ** 2 + (phys["sigma_rel"][:, None] * mu) ** 2)

    def pointwise_loglik(self, Z, mu=None) -> np.ndarray:
        """Log-likelihood of every point for every row of Z, shape (k, n).

        ``mu``: the model current of these rows if already computed (``model_current``).
        """
        Z = np.atleast_2d(Z)
        phys = self.physical(Z)
        if mu is None:
            mu = self._mu(phys)
        sigma = self._sigma(phys, mu)
        r = (self.current - mu) / sigma
        if self.student_nu is None:
            return -0.5 * r * r - np.log(sigma) - 0.5 * np.log(2 * np.pi)
        if self.fit_nu:
            nu = phys["nu"][:, None]
            const = gammaln((nu + 1) / 2) - gammaln(nu / 2) - 0.5 * np.log(nu * np.pi)
            return const - np.log(sigma) - 0.5 * (nu + 1) * np.log1p(r * r / nu)
        nu = self.student_nu
        return self._t_const - np.log(sigma) - 0.5 * (nu + 1) * np.log1p(r * r / nu)

    def score_and_information(self, z, h, free=None):
        """Log-posterior, its gradient and the expected information at ``z`` (sampler coordinates).

        Returns ``(f, g, A)``: ``f`` the log-posterior, ``g`` its central-difference gradient
        (steps ``h``), and ``A`` = J^T W J + P, the expected (Fisher) information of the
        likelihood plus the negative curvature of the prior, clipped at zero. J holds the
        central-difference derivatives of the model current mu_i and of ln sigma_i, all from
        one vectorised call of 2d + 1 rows (d: the ``free`` coordinates, default all; the others get
        zero gradient and unit information). For independent points with location mu_i and
        scale sigma_i the information per point is 1/sigma_i^2 for mu_i and 2 for ln sigma_i
        under the Gaussian likelihood, (nu + 1)/((nu + 3) sigma_i^2) and 2 nu/(nu + 3) under a
        Student-t likelihood with nu degrees of freedom (Lange, Little & Taylor, JASA 84,
        881 (1989)); the cross terms vanish for a symmetric density. ``A`` is positive
        semi-definite everywhere (unlike the Hessian), which is what a Fisher-scoring /
        Levenberg-Marquardt step needs. Returns None when the degrees of freedom are fitted
        (``nu`` is then a parameter with no closed-form information here) or ``f`` is not finite.
        """
        if self.fit_nu:
            return None
        z = np.asarray(z, float)
        free = np.ones(z.size, bool) if free is None else np.asarray(free, bool)
        h = np.asarray(h, float)[free]
        d = int(free.sum())
        E = np.zeros((d, z.size))
        E[np.arange(d), np.flatnonzero(free)] = h
        Z = np.vstack([z[None, :], z + E, z - E])
        lp = self.log_prior(Z)
        if not np.isfinite(lp[0]):
            return None
        phys = self.physical(Z)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            mu = self._mu(phys)
            ll = self.pointwise_loglik(Z, mu=mu).sum(axis=1)
            f = ll + lp
            if not np.isfinite(f[0]):
                return None
            ln_sigma = np.log(self._sigma(phys, mu))
            fp, fm = f[1:d + 1], f[d + 1:]
            ok = np.isfinite(fp) & np.isfinite(fm)
            g = np.where(ok, (fp - fm) / (2 * h), 0.0)
            J_mu = ((mu[1:d + 1] - mu[d + 1:]) / (2 * h)[:, None]).T              # (n, d)
            J_ls = ((ln_sigma[1:d + 1] - ln_sigma[d + 1:]) / (2 * h)[:, None]).T
            lpp, lpm = lp[1:d + 1], lp[d + 1:]
            prior_curv = np.where(np.isfinite(lpp) & np.isfinite(lpm), -(lpp - 2 * lp[0] + lpm) / h ** 2, 0.0)
        if self.student_nu is None:
            w_mu, w_ls = 1.0, 2.0
        else:
            nu = float(self.student_nu)
            w_mu, w_ls = (nu + 1) / (nu + 3), 2 * nu / (nu + 3)
        s0 = np.exp(ln_sigma[0])
        good = np.all(np.isfinite(J_mu), axis=1) & np.all(np.isfinite(J_ls), axis=1)
        Jm = J_mu[good] / s0[good, None]
        Js = J_ls[good]
        A = w_mu * Jm.T @ Jm + w_ls * Js.T @ Js + np.diag(np.maximum(prior_curv, 0.0))
        if d < z.size:                           # held coordinates: zero gradient, unit information
            g_all, A_all = np.zeros(z.size), np.eye(z.size)
            g_all[free] = g
            A_all[np.ix_(free, free)] = A
            g, A = g_all, A_all
        return float(f[0]), g, A

    def outlier_weights(self, Z) -> np.ndarray:
        """Posterior mean precision weight (nu + 1)/(nu + r^2) of every point for every row of Z.

        About 1 for a point the noise model explains; small for a point the data treat as
        an outlier. All ones under the Gaussian likelihood.
        """
        Z = np.atleast_2d(Z)
        phys = self.physical(Z)
        mu = self._mu(phys)
        r = (self.current - mu) / self._sigma(phys, mu)
        if self.student_nu is None:
            return np.ones_like(r)
        nu = phys["nu"][:, None] if self.fit_nu else self.student_nu
        return (nu + 1.0) / (nu + r * r)

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
            mu = self._mu(phys)
        sigma = self._sigma(phys, mu)
        if self.student_nu is None:
            eps = rng.standard_normal(mu.shape)
        elif self.fit_nu:
            eps = rng.standard_t(np.broadcast_to(phys["nu"][:, None], mu.shape))
        else:
            eps = rng.standard_t(self.student_nu, mu.shape)
        return mu + sigma * eps
