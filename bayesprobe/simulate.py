"""Synthetic sweeps with known truth, drawn from the forward model.

The noise model is a floor plus a part proportional to the local current,
sigma_i^2 = sigma_floor^2 + (sigma_rel * |I_i|)^2, optionally with a fraction of
heavy-tailed outliers (Student-t with 2 degrees of freedom, scaled by
``outlier_scale`` times the local sigma). Distortions switched on in the config
(RF fluctuation, series resistance, leakage) are simulated with the truth values
``V_rf``, ``R_series``, ``G_leak``, ``I_offset`` (default 0). ``both_directions``
records the grid with rising and then falling bias (a triangular sweep sampled
uniformly in time); with the ``hysteresis`` switch the branches then differ by
``V_shift`` and ``I_cap`` (default 0). Everything is reproducible from ``seed``.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .model import (ModelConfig, distortion_parameter_names, floating_potential, measured_floating_potential,
                    plasma_parameter_names, probe_current)
from .sweep import Sweep, detect_branches

__all__ = ["SimulatedSweep", "simulate", "DEFAULT_TRUTH"]

#: defaults of ``simulate``: an argon plasma seen by a thin tungsten wire
DEFAULT_TRUTH = {"n_e": 1e16, "T_e": 3.0, "V_p": 12.0}


@dataclass
class SimulatedSweep:
    """A synthetic sweep and everything used to make it."""

    sweep: Sweep
    truth: dict
    config: ModelConfig
    noise: dict = field(default_factory=dict)

    def truth_record(self) -> dict:
        """JSON-ready record of the truth, the model settings and the noise."""
        return {"schema": "bayesprobe.truth/1", "synthetic": True,
                "parameters": {k: float(v) for k, v in self.truth.items()},
                "units": {"n_e": "m^-3", "n_i": "m^-3", "T_e": "eV", "T_e_cold": "eV", "T_e_hot": "eV",
                          "hot_fraction": "1", "V_p": "V", "V_f": "V", "V_f_measured": "V", "V_rf": "V",
                          "R_series": "ohm", "G_leak": "S", "I_offset": "A", "V_shift": "V", "I_cap": "A"},
                "model": self.config.to_dict(), "noise": self.noise,
                "n_points": self.sweep.n_points}


def simulate(truth: dict | None = None, *, config: ModelConfig | None = None,
             voltage=None, v_min: float | None = None, v_max: float | None = None, n_points: int = 500,
             noise_floor: float | None = None, noise_rel: float = 0.01,
             outlier_fraction: float = 0.0, outlier_scale: float = 20.0,
             seed: int | None = 0, sweep_id: str = "simulated", both_directions: bool = False) -> SimulatedSweep:
    """Draw one synthetic sweep from the forward model.

    Parameters
    ----------
    truth : dict, optional
        Plasma parameters (see :mod:`bayesprobe.model`); missing ones default to
        :data:`DEFAULT_TRUTH` (``n_i`` defaults to ``n_e``).
    config : ModelConfig, optional
        Probe, ion and theories; default an argon plasma and a 50 um x 5 mm wire.
    voltage : array_like, optional
        Bias points in V. Default: ``n_points`` evenly spaced from ``v_min``
        (default V_p - 12 T_e - 20 V, deep in ion saturation) to ``v_max``
        (default V_p + 3 T_e, into electron saturation).
    noise_floor : float, optional
        Constant noise sd in A; default 1e-3 of the electron saturation current at V_p.
    noise_rel : float
        Proportional noise sd as a fraction of |I|.
    outlier_fraction, outlier_scale : float
        Fraction of points replaced by heavy-tailed (Student-t, 2 dof) noise of
        ``outlier_scale`` times the local sd.
    seed : int
        Random seed (``numpy.random.default_rng``).
    both_directions : bool
        Record the voltage grid rising and then falling (the default grid gets
        ``n_points`` rounded up to even in total, half each way; a given ``voltage`` grid is
        swept both ways); needed by the ``hysteresis`` switch. The sweep carries the directions.
    """
    config = config or ModelConfig()
    params = _truth_parameters(truth, config)
    _check_noise_options(noise_rel, outlier_fraction, outlier_scale, n_points)
    voltage = _voltage_grid(voltage, v_min, v_max, n_points, params, config)
    voltage, branches, order = _directions(voltage, n_points, both_directions, config)
    clean = probe_current(voltage, params, config, branches=branches)
    if noise_floor is None:
        I_ref = abs(float(probe_current(np.array([params["V_p"]]), params, config, distorted=False)[0]))
        noise_floor = 1e-3 * I_ref
    if not np.isfinite(noise_floor) or noise_floor < 0:
        raise ValueError(f"noise_floor must be a non-negative current in A, got {noise_floor!r}")
    rng = np.random.default_rng(seed)
    sigma = np.sqrt(noise_floor**2 + (noise_rel * clean) ** 2)
    noisy = clean + sigma * rng.standard_normal(voltage.size)
    n_out = 0
    outlier_indices = []
    if outlier_fraction > 0:
        mask = rng.random(voltage.size) < outlier_fraction
        n_out = int(mask.sum())
        outlier_indices = np.flatnonzero(mask).tolist()
        noisy[mask] = clean[mask] + outlier_scale * sigma[mask] * rng.standard_t(2, size=n_out)
    truth_out = {k: float(v) for k, v in params.items()}
    truth_out["V_f"] = float(floating_potential(params, config))
    if config.distorted:
        truth_out["V_f_measured"] = float(measured_floating_potential(params, config))
    notes = ["synthetic sweep drawn from the bayesprobe forward model"]
    if branches is not None:
        notes.append("recorded with rising and then falling bias")
    sweep = Sweep(voltage, noisy, sweep_id=sweep_id, source="simulated", notes=notes,
                  direction=None if branches is None else branches[0],
                  ramp=None if branches is None else branches[1],
                  record_order=order)
    noise = {"noise_floor_A": float(noise_floor), "noise_rel": float(noise_rel),
             "outlier_fraction": float(outlier_fraction), "outlier_scale": float(outlier_scale),
             "n_outliers": n_out, "outlier_indices": outlier_indices, "seed": seed}
    return SimulatedSweep(sweep=sweep, truth=truth_out, config=config, noise=noise)


def _truth_parameters(truth, config) -> dict:
    """The true parameters: the defaults of the model, the distortions off, then ``truth``."""
    model = config.electron_model
    params = dict(DEFAULT_TRUTH)
    if "T_e" not in model.parameter_names:
        params.pop("T_e")
    params.update({k: v for k, v in model.default_truth.items() if k not in params})
    for name in distortion_parameter_names(config):
        params[name] = 0.0
    params.update(truth or {})
    expected = plasma_parameter_names(config) + distortion_parameter_names(config)
    unknown = set(params) - set(expected) - {"n_i", "T_e"}
    if unknown:
        raise ValueError(f"unknown truth parameter(s) {sorted(unknown)} for this model; "
                         f"expected {', '.join(expected)}")
    if "T_e" not in model.parameter_names:
        params.pop("T_e", None)
    if "n_i" not in params or config.quasi_neutral:
        params["n_i"] = params["n_e"]
    return params


def _check_noise_options(noise_rel, outlier_fraction, outlier_scale, n_points) -> None:
    for name, val in (("noise_rel", noise_rel), ("outlier_fraction", outlier_fraction),
                      ("outlier_scale", outlier_scale)):
        if not np.isfinite(val) or val < 0:
            raise ValueError(f"{name} must be a non-negative number, got {val!r}")
    if outlier_fraction > 0.5:
        raise ValueError("outlier_fraction must be at most 0.5")
    if not isinstance(n_points, (int, np.integer)) or n_points < 2:
        raise ValueError(f"n_points must be an integer >= 2, got {n_points!r}")


def _voltage_grid(voltage, v_min, v_max, n_points, params, config):
    """The bias grid (sorted): the given one, or ``n_points`` from V_p - 12 T - 20 V to V_p + 3 T."""
    if voltage is None:
        T_scale = float(config.electron_model.coldest_temperature(params))
        lo = params["V_p"] - 12.0 * T_scale - 20.0 if v_min is None else float(v_min)
        hi = params["V_p"] + 3.0 * T_scale if v_max is None else float(v_max)
        if not hi > lo:
            raise ValueError(f"v_max ({hi}) must exceed v_min ({lo})")
        return np.sort(np.linspace(lo, hi, n_points)), False
    return np.sort(np.asarray(voltage, float)), True


def _directions(grid, n_points, both_directions, config):
    """(voltage sorted, branches or None, record order or None) for one or both sweep directions."""
    voltage, user_grid = grid
    if not both_directions:
        if config.hysteresis:
            raise ValueError("the hysteresis switch needs a sweep in both directions: pass both_directions=True")
        return voltage, None, None
    up = voltage if user_grid else np.linspace(voltage[0], voltage[-1], (n_points + 1) // 2)
    recorded = np.concatenate([up, up[::-1]])
    branches = detect_branches(recorded)
    if branches is None:
        raise ValueError("both_directions needs at least 20 points per direction")
    order = np.argsort(recorded, kind="stable")
    return recorded[order], (branches[0][order], branches[1][order]), order
