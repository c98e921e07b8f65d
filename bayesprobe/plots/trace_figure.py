"""The trace figure: thinned sampler draws of every chain against draw index, with
per-chain histograms and the convergence diagnostics of each parameter."""
from __future__ import annotations

import math

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from .style import PALETTE, Scales, figure_title

__all__ = ["plot_trace"]

_TRACE_POINTS = 800     # at most this many points per chain in a trace


def plot_trace(result) -> Figure:
    """Thinned sampler draws against draw index for every chain, with per-chain histograms.

    One row per sampled parameter (``result.parameter_order``), labelled with
    its R-hat and bulk ESS from ``result.diagnostics``.
    """
    names = [n for n in result.parameter_order if n in result.draws]
    if not names:
        raise ValueError("the result holds no draws of its sampled parameters")
    scales = Scales(result)
    P = len(names)
    fig = Figure(figsize=(10.5, 1.45 * P + 1.1), layout="constrained")
    gs = fig.add_gridspec(P, 2, width_ratios=(4.2, 1.0))
    first = None
    for i, n in enumerate(names):
        x = np.asarray(result.draws[n], float) * scales.factor(n)
        x = x.reshape(-1, x.shape[-1]) if x.ndim >= 2 else x[None]
        a_tr = fig.add_subplot(gs[i, 0], sharex=first)
        first = first or a_tr
        a_h = fig.add_subplot(gs[i, 1], sharey=a_tr)
        _draw_chains(a_tr, a_h, x)
        _diagnostics_note(a_tr, n, result.diagnostics or {})
        a_tr.set_ylabel(scales.label(n), fontsize=9)
        a_h.tick_params(labelleft=False)
        a_h.set_xticks([])
        if i < P - 1:
            a_tr.tick_params(labelbottom=False)
        else:
            a_tr.set_xlabel("kept draw index within chain (steps × walkers, thinned)")
            a_h.set_xlabel("density")
    C, D = x.shape              # chains and kept draws (the same for every parameter)
    colors = PALETTE["chains"]
    handles = [Line2D([], [], color=colors[c % len(colors)], lw=1.2, label=f"chain {c}") for c in range(C)]
    fig.legend(handles=handles, loc="outside upper right", ncols=min(C, 6), fontsize=8, frameon=False)
    fig.suptitle(f"{figure_title(result)} · {C} chains × {D} kept draws", fontsize=10, x=0.01, ha="left")
    return fig


def _draw_chains(a_tr, a_h, x):
    """Every chain of ``x`` (chain, draw) as a thinned trace and a step histogram."""
    C, D = x.shape
    stride = max(1, int(math.ceil(D / _TRACE_POINTS)))
    finite = x[np.isfinite(x)]
    lo, hi = (float(np.min(finite)), float(np.max(finite))) if finite.size else (0.0, 1.0)
    edges = np.linspace(lo, hi, 31) if hi > lo else np.linspace(lo - 0.5, lo + 0.5, 31)
    colors = PALETTE["chains"]
    for c in range(C):
        color = colors[c % len(colors)]
        steps = np.arange(0, D, stride)
        a_tr.plot(steps, x[c, ::stride], color=color, lw=0.55, alpha=0.75)
        a_h.hist(x[c][np.isfinite(x[c])], bins=edges, orientation="horizontal", histtype="step",
                 color=color, lw=1.0, density=True)


def _diagnostics_note(ax, n, d):
    """R-hat, bulk ESS and autocorrelation time of parameter ``n``; red when a criterion fails."""
    rhat, ess, tau = d.get("r_hat", {}) or {}, d.get("ess_bulk", {}) or {}, d.get("tau", {}) or {}
    r_text = f"{rhat[n]:.3f}" if n in rhat and np.isfinite(rhat[n]) else "n/a"
    e_text = f"{ess[n]:.0f}" if n in ess and np.isfinite(ess[n]) else "n/a"
    note = f"R̂ = {r_text}   ESS(bulk) = {e_text}"
    if n in tau and np.isfinite(tau[n]):
        note += f"   τ = {tau[n]:.0f} steps"
    bad = (n in rhat and rhat[n] > d.get("criteria", {}).get("r_hat_max", 1.01)) or \
          (n in ess and ess[n] < d.get("criteria", {}).get("ess_bulk_min", 0))
    ax.text(0.005, 0.96, note, transform=ax.transAxes, va="top", ha="left", fontsize=8,
            color=PALETTE["flag"] if bad else PALETTE["data"],
            bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.8, "pad": 1.5})
