"""Every call into arviz lives here, so a move to another arviz major version is one file.

Written against the arviz 0.2x API (InferenceData, ``az.rhat``/``az.ess``/``az.loo``).
arviz (with the matplotlib, xarray and pandas it pulls in) is imported on the first call,
not when this module is imported; ``az`` (the arviz module) is available as an attribute.
"""
from __future__ import annotations

import functools
import warnings

import numpy as np

# ``az`` is served by the module __getattr__ below
__all__ = ["az", "rhat_rank", "ess_bulk", "ess_tail", "build_inference_data", "loo", "compare",  # noqa: F822
           "load_inference_data", "psis_smooth"]


@functools.cache
def _arviz():
    """The arviz module, imported once on first use."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=r"\s*ArviZ is undergoing", category=FutureWarning)
        import arviz
    return arviz


def __getattr__(name):
    if name == "az":
        return _arviz()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | {"az"})


def _dataset(array_chain_draw: np.ndarray):
    # arviz expects (chain, draw); short runs with many walkers legitimately have more chains than draws
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="More chains", category=UserWarning)
        return _arviz().convert_to_dataset({"x": array_chain_draw})


def rhat_rank(chains: np.ndarray) -> float:
    """Rank-normalised split R-hat of a (chain, draw) array."""
    return float(_arviz().rhat(_dataset(chains), method="rank")["x"].values)


def ess_bulk(chains: np.ndarray) -> float:
    return float(_arviz().ess(_dataset(chains), method="bulk")["x"].values)


def ess_tail(chains: np.ndarray) -> float:
    return float(_arviz().ess(_dataset(chains), method="tail")["x"].values)


def build_inference_data(posterior: dict, *, log_likelihood: dict, observed_data: dict,
                         posterior_predictive: dict, sample_stats: dict, constant_data: dict,
                         coords: dict, dims: dict, attrs: dict):
    """InferenceData with posterior, sample_stats, log_likelihood, observed_data, posterior_predictive."""
    return _arviz().from_dict(posterior=posterior, log_likelihood=log_likelihood,
                              observed_data=observed_data, posterior_predictive=posterior_predictive,
                              sample_stats=sample_stats, constant_data=constant_data, coords=coords,
                              dims=dims, attrs=attrs)


def loo(idata, *, reff: float | None = None):
    """PSIS-LOO of the ``current`` log-likelihood (``reff`` from the posterior's ESS if None)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        return _arviz().loo(idata, pointwise=True, reff=reff, var_name="current")


def compare(models: dict):
    # arviz 0.23 triggers pandas deprecation warnings inside compare; Pareto-k problems are
    # reported by bayesprobe itself from the loo results
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return _arviz().compare(models, ic="loo", var_name="current")


def load_inference_data(path):
    return _arviz().from_netcdf(path)


def psis_smooth(log_weights: np.ndarray) -> tuple[np.ndarray, float]:
    """Pareto-smoothed importance weights of independent draws (Vehtari et al., JMLR 25(72), 2024).

    ``log_weights`` is a 1-D array of raw log importance ratios (``-inf`` for zero weight).
    Returns the smoothed log weights, normalised so that their exponentials sum to one,
    and the Pareto shape estimate k-hat of the ratios' right tail. The draws are
    independent, so the relative efficiency passed on is 1.
    """
    lw = np.asarray(log_weights, dtype=float).copy()
    with np.errstate(over="ignore"):   # extreme tails overflow inside the Pareto fit; k-hat then rejects them
        smoothed, khat = _arviz().psislw(lw, reff=1.0, normalize=True)
    return np.asarray(smoothed, dtype=float), float(khat)
