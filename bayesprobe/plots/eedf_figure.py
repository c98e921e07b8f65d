"""The energy-distribution figure: the EEPF of the fitted distribution with its credible band,
the model-free Druyvesteyn estimate and, for simulated sweeps, the true EEPF."""
from __future__ import annotations

import math

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ..eedf import druyvesteyn_eedf, maxwellian_eepf, model_eedf
from .draws import flat, truth_values
from .style import PALETTE, TEXT_BOX, TRUTH_LS, figure_title

__all__ = ["plot_eedf"]

_EEDF_MARKERS = 150     # at most this many Druyvesteyn points are drawn


def plot_eedf(result, *, druyvesteyn=True, truth=None) -> Figure:
    """Electron energy probability function (EEPF) of a fit, log-linear.

    The EEPF f_p(eps) = g(eps)/sqrt(eps) is drawn on a log axis against a linear
    energy axis, where a Maxwellian is a straight line of slope -1/T_e and a hot
    tail shows as a bend. Shown: the posterior median of the fitted
    distribution with its central credible band (``result.credible_level``,
    from thinned draws, see :func:`bayesprobe.eedf.model_eedf`), and, with
    ``druyvesteyn``, the model-free estimate from the second derivative of the
    measured current (:func:`bayesprobe.eedf.druyvesteyn_eedf`, with V_p the
    posterior median, the probe area of the fit, and the ion current removed as
    in the classical analysis: a straight line, or an I^2 line for a cylinder
    with orbital-motion-limited ions) as open teal circles. ``truth`` (dict with
    ``n_e`` and ``T_e``, or ``T_e_cold``/``T_e_hot``/``hot_fraction``) adds the
    true EEPF as a dash-dotted black line.
    """
    truth_v = truth_values(truth)
    m = model_eedf(result)
    eps = m["energy_eV"]
    fig = Figure(figsize=(7.6, 5.4), layout="constrained")
    ax = fig.add_subplot()
    ax.fill_between(eps, m["eepf_low"], m["eepf_high"], color=PALETTE["band"], lw=0, zorder=1)
    ax.plot(eps, m["eepf_median"], color=PALETTE["model"], lw=1.6, zorder=3)
    handles = [Line2D([], [], color=PALETTE["model"], lw=1.6,
                      label=f"fit ({result.model}): posterior median"),
               Patch(color=PALETTE["band"], label=f"{result.credible_level * 100:g} % credible band")]
    notes = _draw_druyvesteyn(ax, result, eps[-1], handles) if druyvesteyn else []
    p = m["parameters"]
    T_fit = result.config.electron_model.effective_temperature(p)
    notes.insert(0, (f"fit median: n_e = {np.median(p['n_e']):.3g} m⁻³, "
                     f"T_eff = {np.median(T_fit):.3g} eV", PALETTE["model"]))
    true_fp = _true_eepf(truth_v, eps)
    if true_fp is not None:
        ax.plot(eps, true_fp, color=PALETTE["truth"], lw=1.0, ls=TRUTH_LS, zorder=3.5)
        handles.append(Line2D([], [], color=PALETTE["truth"], lw=1.0, ls=TRUTH_LS, label="true EEPF"))
    peak = float(np.max(m["eepf_high"]))
    bottom = max(0.5 * float(np.min(m["eepf_median"])), 1e-5 * peak)
    _finish_axes(ax, result, eps, (bottom, 2.0 * peak), handles, notes)
    return fig


def _druyvesteyn_ion_current(result):
    """How the ion current is removed before differentiating: an I^2 line for a cylinder
    collecting orbital-motion-limited ions, else a straight line (None)."""
    probe = result.config.probe
    if probe.geometry == "cylindrical" and result.config.ion_theory.orbital:
        return "oml"
    return None


def _draw_druyvesteyn(ax, result, e_max, handles) -> list[tuple[str, str]]:
    """Druyvesteyn points up to ``e_max`` (eV) with their legend entry; returns the notes."""
    notes = []
    V_p = float(np.median(flat(result, "V_p"))) if "V_p" in result.draws else math.nan
    try:
        d = druyvesteyn_eedf(result.voltage, result.current, V_p, result.config.probe.area,
                             ion_current=_druyvesteyn_ion_current(result))
    except ValueError as exc:
        return [(f"no Druyvesteyn estimate: {exc}", PALETTE["flag"])]
    if not d["energy_eV"].size:
        return notes
    E, fp = d["energy_eV"], d["eepf"]
    keep = (fp > 0) & (E <= e_max)
    stride = max(1, int(math.ceil(np.count_nonzero(keep) / _EEDF_MARKERS)))
    ax.plot(E[keep][::stride], fp[keep][::stride], ls="none", marker="o", ms=3.2, mfc="none",
            mew=0.7, color=PALETTE["classical"], zorder=2.5)
    handles.append(Line2D([], [], ls="none", marker="o", ms=4, mfc="none", color=PALETTE["classical"],
                          label=f"Druyvesteyn, d²I/dV² (window {d['window_V']:.2g} V)"))
    notes.append((f"Druyvesteyn, {d['energy_range'][0]:.2g}–{d['energy_range'][1]:.3g} eV: "
                  f"n_e = {d['n_e']:.3g} m⁻³, T_eff = {d['T_eff']:.3g} eV", PALETTE["classical"]))
    if d["flags"]:
        notes.append(("flags: " + ", ".join(d["flags"]), PALETTE["flag"]))
    return notes


def _true_eepf(truth_v, energy):
    """EEPF of known parameters (Maxwellian or two Maxwellians), or None if they are incomplete."""
    if "n_e" not in truth_v:
        return None
    n = truth_v["n_e"]
    if all(k in truth_v for k in ("T_e_cold", "T_e_hot", "hot_fraction")):
        a = truth_v["hot_fraction"]
        return (1.0 - a) * maxwellian_eepf(energy, n, truth_v["T_e_cold"]) + \
            a * maxwellian_eepf(energy, n, truth_v["T_e_hot"])
    if "T_e" in truth_v:
        return maxwellian_eepf(energy, n, truth_v["T_e"])
    return None


def _finish_axes(ax, result, eps, ylim, handles, notes):
    """Log EEPF axis, labels, legend, the notes stacked from the bottom, and the title."""
    ax.set_yscale("log")
    ax.set_xlim(0.0, float(eps[-1]))
    ax.set_ylim(*ylim)
    ax.set_xlabel("electron energy ε [eV]")
    ax.set_ylabel("EEPF [m⁻³ eV⁻³ᐟ²]")
    ax.grid(True, which="major", color=PALETTE["grid"], lw=0.6)
    ax.legend(handles=handles, loc="upper right", fontsize=8, frameon=True, framealpha=0.9)
    y = 0.03
    for text, color in reversed(notes):
        ax.text(0.02, y, text, transform=ax.transAxes, ha="left", va="bottom", fontsize=7.5, color=color,
                bbox={**TEXT_BOX, "pad": 1.2}, zorder=5)
        y += 0.05
    ax.set_title(f"{figure_title(result)}\nEEPF f(ε) = g(ε)/√ε: fitted distribution and model-free "
                 "estimate; a Maxwellian is a straight line", fontsize=9.5, loc="left")
