"""The text panel of the fit figure: posterior medians and intervals of the main quantities,
classical and known values beside them, the noise level and the sampler's verdict."""
from __future__ import annotations

import numpy as np

from ..quantities import tex_label
from .draws import flat, interval
from .style import PALETTE, decimals, format_value

__all__ = ["summary_rows"]

_MONO = {"family": "monospace"}


def summary_rows(result, scales, classical, truth) -> list[tuple[str, str, dict]]:
    """Lines of the summary panel as (text, colour, extra text kwargs)."""
    return _parameter_rows(result, scales, classical, truth) + _diagnostic_rows(result, scales)


def _panel_names(result) -> list[str]:
    electrons = result.config.electron_model
    names = list(electrons.temperature_names)
    if electrons.two_temperature and "T_e_eff" in result.draws:
        names.append("T_e_eff")
    return names + ["n_e", "n_i", "V_f", "V_p"]


def _parameter_rows(result, scales, classical, truth) -> list[tuple[str, str, dict]]:
    level = result.credible_level
    rows = [(f"posterior median  [{level * 100:g} % interval]", PALETTE["data"], {"weight": "bold"})]
    for n in _panel_names(result):
        if n not in result.draws:
            continue
        f = scales.factor(n)
        lo, med, hi = (v * f for v in interval(result.draws[n], level))
        dec = decimals(lo, med, hi)
        rows.append((f"{tex_label(n)} [{scales.unit_label(n)}]", PALETTE["data"], {}))
        rows.append((f"    {format_value(med, dec)}   [{format_value(lo, dec)}, {format_value(hi, dec)}]",
                     PALETTE["model"], _MONO))
        if n in classical:
            rows.append(("    classical " + format_value(classical[n] * f, dec), PALETTE["classical"], _MONO))
        if n in truth:
            rows.append(("    true " + format_value(truth[n] * f, dec), PALETTE["truth"], _MONO))
    if result.config.electron_model.two_temperature and "T_e" in classical:
        rows.append((f"classical single-T analysis: {tex_label('T_e')} = {classical['T_e']:.3f} eV",
                     PALETTE["classical"], {}))
    if isinstance(result.classical, dict) and "error" in result.classical:
        rows.append(("classical analysis failed", PALETTE["flag"], {}))
    return rows


def _diagnostic_rows(result, scales) -> list[tuple[str, str, dict]]:
    d = result.diagnostics or {}
    rows = [("", PALETTE["data"], {})]
    if "sigma_floor" in result.draws:
        sf = float(np.median(flat(result, "sigma_floor"))) * scales.factor("sigma_floor")
        noise = f"noise: σ_floor {sf:.3g} {scales.unit_label('sigma_floor')}"
        if "sigma_rel" in result.draws:
            noise += f", σ_rel {100 * float(np.median(flat(result, 'sigma_rel'))):.3g} %"
        rows.append((noise, PALETTE["data"], {}))
    if d.get("engine") == "importance":
        rows.append((f"importance sampling: k̂ {d.get('khat', float('nan')):.2f} · ESS {d['ess_bulk_min']:.0f}",
                     PALETTE["data"], {}))
        rows.append(("importance weights accepted", PALETTE["classical"], {"weight": "bold"}))
    elif d.get("r_hat_max") is not None and d.get("ess_bulk_min") is not None:
        ok = bool(d.get("converged", False))
        rows.append((f"R̂ max {d['r_hat_max']:.3f} · ESS min {d['ess_bulk_min']:.0f}",
                     PALETTE["data"], {}))
        rows.append(("sampler converged" if ok else "sampler NOT converged",
                     PALETTE["classical"] if ok else PALETTE["flag"], {"weight": "bold"}))
    return rows
