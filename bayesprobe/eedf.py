"""Electron energy distributions: from the fitted model, and model-free from the sweep.

Two ways to look at the electrons' energies:

:func:`model_eedf`
    The energy distribution g(eps) implied by a fit (Maxwellian or two
    Maxwellians), evaluated on thinned posterior draws, with its median and
    central credible band; and the energy-probability function
    f_p(eps) = g(eps)/sqrt(eps).
:func:`druyvesteyn_eedf`
    The same quantities read directly off the measured current through its
    second derivative in the retarding region (no assumption about the shape of
    the distribution), with the density and effective temperature it implies
    (implemented in :mod:`bayesprobe.druyvesteyn`, re-exported here).

Conventions (as in the rest of the package): energies in eV, densities in m^-3,
g(eps) in m^-3 eV^-1 normalised so that n_e = integral of g over eps, f_p in
m^-3 eV^-3/2, probe current positive for net electron collection
(I = I_e - I_i with I_i >= 0), and the effective temperature
T_eff = (2/3) <eps>, which equals T_e for a Maxwellian.
"""
from __future__ import annotations

import math

import numpy as np

from .physics.electron_models import electron_model
from .physics.formulary import maxwellian_eedf
from .quantities import quantity
from .druyvesteyn import DRUYVESTEYN_PREFACTOR, druyvesteyn_eedf

__all__ = ["model_eedf", "druyvesteyn_eedf", "maxwellian_eepf", "DRUYVESTEYN_PREFACTOR"]

_MODEL_GRID = 500       # default number of energies for the model distribution


# ----------------------------------------------------------------------------- model side

def maxwellian_eepf(energy, n_e, T_e):
    """Energy-probability function of a Maxwellian, f_p = g/sqrt(eps), in m^-3 eV^-3/2.

    f_p(eps) = n_e (2/sqrt(pi)) T_e^(-3/2) exp(-eps/T_e); finite at eps = 0, where
    it equals n_e (2/sqrt(pi)) T_e^(-3/2).
    """
    eps = np.clip(np.asarray(energy, float), 0.0, None)
    T = np.asarray(T_e, float)
    if np.any(~np.isfinite(T)) or np.any(T <= 0):
        raise ValueError("T_e must be positive and finite")
    n = np.asarray(n_e, float)
    if np.any(~np.isfinite(n)) or np.any(n < 0):
        raise ValueError("n_e must be non-negative and finite")
    return n * 2.0 / math.sqrt(math.pi) * T ** -1.5 * np.exp(-eps / T)


def _thin(total: int, k: int) -> np.ndarray:
    if k >= total:
        return np.arange(total)
    return np.unique(np.linspace(0, total - 1, k).round().astype(int))


def _physical(flat) -> np.ndarray:
    """Draws whose values are finite and inside their parameter's range: (0, 1) bounds
    for logit-transformed quantities (closed), positive for log-transformed ones."""
    ok = np.all([np.isfinite(x) for x in flat.values()], axis=0)
    ok &= np.all([flat[n] > 0 for n in flat if quantity(n).transform != "logit"], axis=0)
    for n in flat:
        if quantity(n).transform == "logit":
            ok &= (flat[n] >= 0) & (flat[n] <= 1)
    return ok


def _maxwellian_mixture(electrons, p, eps):
    """g (m^-3 eV^-1) and f_p (m^-3 eV^-3/2), shape (k, m), of the draws ``p`` at energies ``eps``.

    One Maxwellian, or (two-temperature model) (1 - a) of the cold group plus a of the hot one.
    """
    n_e = p["n_e"][:, None]
    if not electrons.two_temperature:
        T = electrons.effective_temperature(p)[:, None]
        return maxwellian_eedf(eps, n_e, T), maxwellian_eepf(eps, n_e, T)
    a = p["hot_fraction"][:, None]
    Tc, Th = p["T_e_cold"][:, None], p["T_e_hot"][:, None]
    g = (1.0 - a) * maxwellian_eedf(eps, n_e, Tc) + a * maxwellian_eedf(eps, n_e, Th)
    fp = (1.0 - a) * maxwellian_eepf(eps, n_e, Tc) + a * maxwellian_eepf(eps, n_e, Th)
    return g, fp


def model_eedf(result, energy=None, *, n_draws=400) -> dict:
    """EEDF and EEPF of the fitted electron distribution, from thinned posterior draws.

    For a Maxwellian fit g(eps) = n_e (2/sqrt(pi)) T_e^(-3/2) sqrt(eps) exp(-eps/T_e);
    for two Maxwellians g = (1 - a) g(n_e, T_cold) + a g(n_e, T_hot) with n_e the
    total density and a the hot fraction. Every curve integrates to its draw's n_e.

    Parameters
    ----------
    result : FitResult
    energy : array_like, optional
        Energies in eV (>= 0). Default: 500 evenly spaced values from 0.05 eV to
        8 times the posterior median of the (hottest) electron temperature.
    n_draws : int
        At most this many evenly thinned draws are evaluated.

    Returns
    -------
    dict
        ``energy_eV``; ``median``, ``low``, ``high``: g(eps) in m^-3 eV^-1 (median
        and central band at ``result.credible_level``); ``eepf_median``,
        ``eepf_low``, ``eepf_high``: the same for f_p in m^-3 eV^-3/2;
        ``samples`` (k, m): g of each evaluated draw; ``parameters``: those
        draws' values; ``draw_index``: their positions in the flattened draws;
        ``credible_level``, ``model``, ``units``.
    """
    draws = getattr(result, "draws", None)
    config = getattr(result, "config", None)
    if not isinstance(draws, dict) or config is None:
        raise ValueError("result must be a FitResult (with .draws and .config)")
    model = getattr(config, "electrons", None)
    try:
        electrons = electron_model(model)
    except ValueError:
        raise ValueError(f"result: unsupported electron model {model!r}") from None
    names = ("n_e", *electrons.parameter_names)
    missing = [n for n in names if n not in draws]
    if missing:
        raise ValueError(f"result has no posterior draws of {', '.join(missing)}")
    if isinstance(n_draws, bool) or not isinstance(n_draws, (int, np.integer)) or n_draws < 1:
        raise ValueError(f"n_draws must be a positive integer, got {n_draws!r}")
    level = float(getattr(result, "credible_level", 0.9))
    if not 0.0 < level < 1.0:
        raise ValueError(f"result.credible_level must lie in (0, 1), got {level!r}")

    flat = {n: np.asarray(draws[n], float).reshape(-1) for n in names}
    sizes = {x.size for x in flat.values()}
    if len(sizes) != 1:
        raise ValueError("result: the posterior draws of " + ", ".join(names) + " differ in size")
    good = np.flatnonzero(_physical(flat))
    if good.size == 0:
        raise ValueError("result has no finite, physical posterior draws of " + ", ".join(names))
    idx = good[_thin(good.size, int(n_draws))]
    p = {n: flat[n][idx] for n in names}

    if energy is None:
        T_top = float(np.median(electrons.hottest_temperature(p)))
        eps = np.linspace(0.05, 8.0 * T_top, _MODEL_GRID)
    else:
        eps = np.asarray(energy, float)
        if eps.ndim != 1 or eps.size == 0:
            raise ValueError("energy must be a non-empty 1-D array of energies in eV")
        if np.any(~np.isfinite(eps)) or np.any(eps < 0):
            raise ValueError("energy must be finite and non-negative (eV)")

    g, fp = _maxwellian_mixture(electrons, p, eps)
    tail = 0.5 * (1.0 - level)
    qg = np.quantile(g, [tail, 0.5, 1.0 - tail], axis=0)
    qf = np.quantile(fp, [tail, 0.5, 1.0 - tail], axis=0)
    return {"energy_eV": eps, "median": qg[1], "low": qg[0], "high": qg[2],
            "eepf_median": qf[1], "eepf_low": qf[0], "eepf_high": qf[2],
            "samples": g, "parameters": p, "draw_index": idx, "credible_level": level,
            "model": electrons.name,
            "units": {"energy_eV": "eV", "eedf": "m^-3 eV^-1", "eepf": "m^-3 eV^-3/2"}}
