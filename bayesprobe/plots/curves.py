"""Model curves of a fit evaluated on thinned posterior draws: the noise-free net and electron
currents, the characteristic with the distortions removed, the noise model and the
posterior-predictive band.

Figures never evaluate the model on every stored draw: curves and bands use an evenly
thinned subset (:data:`MODEL_DRAWS` draws, at most :data:`PPC_DRAWS` stored replicates).
"""
from __future__ import annotations

import numpy as np

from ..model import distortion_parameter_names, plasma_parameter_names, probe_current
from .draws import flat, n_draws, tails, thin_index

__all__ = ["MODEL_DRAWS", "PPC_DRAWS", "electron_current_draws", "undistorted_current_draws",
           "noise_sd", "predictive", "segments"]

MODEL_DRAWS = 200      # default number of draws evaluated for the noise-free model
PPC_DRAWS = 1000       # at most this many posterior-predictive draws for the band


def _model_params(result, idx) -> dict:
    names = plasma_parameter_names(result.config) + distortion_parameter_names(result.config)
    return {n: flat(result, n)[idx] for n in names if n in result.draws}


def electron_current_draws(result, idx=None):
    """Noise-free net current and electron current (A) of the draws ``idx``.

    Returns ``(V, I_net, I_electron)`` with the currents of shape (k, n).  The
    electron part is the same model with the ion density set to zero (the ion
    term is proportional to n_i once n_e is given separately).
    """
    V = np.asarray(result.voltage, float)
    if idx is None:
        idx = thin_index(n_draws(result), MODEL_DRAWS)
    params = _model_params(result, idx)
    I_net = probe_current(V, params, result.config, validate=False, branches=result.branches)
    separate = result.config.with_(quasi_neutral=False).undistorted()
    p_e = dict(params)
    p_e["n_i"] = np.zeros_like(p_e["n_e"])
    I_e = probe_current(V, p_e, separate, validate=False)
    if result.config.distorted:
        # the ion current of the undistorted plasma, added to the measured (distorted) model
        I_e = I_net + (I_e - probe_current(V, params, separate, validate=False))
    return V, np.atleast_2d(I_net), np.atleast_2d(I_e)


def undistorted_current_draws(result, idx=None):
    """Noise-free plasma characteristic with the fitted distortions removed, (k, n) in A."""
    V = np.asarray(result.voltage, float)
    if idx is None:
        idx = thin_index(n_draws(result), MODEL_DRAWS)
    return np.atleast_2d(probe_current(V, _model_params(result, idx), result.config, validate=False,
                                       distorted=False))


def segments(result, order):
    """Index arrays (increasing V) of the curves to draw: one, or the rising and falling branches."""
    if result.branches is None:
        return [order]
    direction = np.asarray(result.branches[0])[order]
    return [order[direction > 0], order[direction < 0]]


def noise_sd(result, idx, I_model) -> np.ndarray | None:
    """Per-draw noise sd (k, n): sd^2 = sigma_floor^2 + (sigma_rel I_model)^2, or None."""
    if "sigma_floor" not in result.draws:
        return None
    sf = flat(result, "sigma_floor")[idx][:, None]
    sr = flat(result, "sigma_rel")[idx][:, None] if "sigma_rel" in result.draws else 0.0
    return np.sqrt(sf**2 + (sr * I_model) ** 2)


def predictive(result, level, I_model, sd):
    """(low, median, high) of the posterior-predictive current at every point, in A.

    From the stored replicates when the result has them, else drawn from the noise model
    around ``I_model`` with a fixed seed; None when neither is available.
    """
    lo, hi = tails(level)
    pp = None
    idata = result.idata
    if idata is not None and hasattr(idata, "posterior_predictive") and \
            "current" in idata.posterior_predictive:
        arr = np.asarray(idata.posterior_predictive["current"].values, float)
        pp = arr.reshape(-1, arr.shape[-1])
        pp = pp[thin_index(pp.shape[0], PPC_DRAWS)]
    elif sd is not None:           # no stored replicates: draw them from the noise model
        rng = np.random.default_rng(0)
        pp = I_model + sd * rng.standard_normal(I_model.shape)
    if pp is None:
        return None
    q = np.quantile(pp, [lo, 0.5, hi], axis=0)
    return q[0], q[1], q[2]
