"""Quantities derived from every posterior draw, so their intervals carry the correlations."""
from __future__ import annotations

import numpy as np

from .model import ModelConfig, effective_temperature, floating_potential, measured_floating_potential
from .physics.constants import E_CHARGE, EPS0, M_E
from .physics.formulary import _debye_length
from .quantities import QUANTITIES

__all__ = ["DERIVED_UNITS", "derived_quantities"]

#: name -> (unit, description) of every derived quantity (from the registry, bayesprobe.quantities)
DERIVED_UNITS = {q.name: (q.unit, q.description) for q in QUANTITIES.values() if q.group == "derived"}


def derived_quantities(phys: dict, config: ModelConfig) -> dict:
    """Derived quantities for every draw; ``phys`` maps names to (k,) arrays."""
    out = {}
    n_e = np.asarray(phys["n_e"], float)
    n_i = np.asarray(phys.get("n_i", n_e), float)
    model = config.electron_model
    T_s = model.screening_temperature(phys)
    T_eff = effective_temperature(phys, config)
    if model.two_temperature:
        out["T_e_eff"] = T_eff
        out["T_e_screen"] = T_s
    V_f = floating_potential(phys, config)
    out["V_f"] = V_f
    if config.distorted:
        out["V_f_measured"] = measured_floating_potential(phys, config)
    out["Vp_minus_Vf_over_Te"] = (phys["V_p"] - V_f) / T_eff
    lam = _debye_length(n_e, T_s)
    out["debye_length"] = lam
    out["r_p_over_debye"] = config.probe.radius / lam
    out["omega_pe"] = np.sqrt(n_e * E_CHARGE**2 / (EPS0 * M_E))
    out["omega_pi"] = np.sqrt(n_i * E_CHARGE**2 / (EPS0 * config.ion_mass_kg))
    out["bohm_speed"] = np.sqrt(E_CHARGE * T_s / config.ion_mass_kg)
    out["electron_mean_speed"] = np.sqrt(8 * E_CHARGE * T_eff / (np.pi * M_E))
    if not config.quasi_neutral:
        out["n_i_over_n_e"] = n_i / n_e
    return out
