"""The fit figure: the sweep with its posterior on a linear and a log current axis, the
standardised residuals, and a summary panel."""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ..quantities import tex_label
from .curves import (MODEL_DRAWS, electron_current_draws, noise_sd, predictive, segments,
                     undistorted_current_draws)
from .draws import classical_values, interval, n_draws, thin_index, truth_values
from .fit_summary import summary_rows
from .style import CLASSICAL_LS, FIT_FIGSIZE, PALETTE, TEXT_BOX, TRUTH_LS, Scales, figure_title

__all__ = ["plot_fit"]

_BIAS_LABEL = "probe bias V [V]"
_PPC_LS = (0, (5, 2))             # posterior-predictive median and the +-2 residual lines
_UNDISTORTED_LS = (0, (6, 2, 1, 2))


def plot_fit(result, *, ax=None, n_band_draws=None, truth=None) -> Figure:
    """The sweep, the fitted characteristic and the parameter summary in four panels.

    Panels: (1) data, posterior-predictive median and central band, median of the
    noise-free model, on a linear current axis; (2) the electron current on a log
    axis (data minus the model's ion current), showing the retardation region;
    (3) standardised residuals with +-2 lines; (4) a summary of the main
    parameters.  V_f and V_p posterior medians are vertical lines with their
    credible intervals shaded; classical values are thin dotted teal lines with a
    triangle on the top edge; ``truth`` (dict) adds dash-dotted black lines.

    Parameters
    ----------
    result : FitResult
    ax : sequence of four Axes, optional
        Draw into these (linear, log, residual, summary) instead of a new figure.
    n_band_draws : int, optional
        Number of evenly thinned posterior draws evaluated for the noise-free
        model (default 200).  The predictive band uses at most 1000 stored
        replicates.
    truth : dict, optional
        Known values (``V_f``, ``V_p``, ``T_e``, ``n_e`` ...) to overlay.
    """
    truth_v = truth_values(truth)
    if n_band_draws is not None and (not isinstance(n_band_draws, (int, np.integer)) or n_band_draws < 2):
        raise ValueError(f"n_band_draws must be an integer >= 2, got {n_band_draws!r}")
    fig, (a_lin, a_log, a_res, a_tab) = _fit_axes(ax)
    own_figure = ax is None
    scales = Scales(result)
    curves = _fit_curves(result, n_band_draws or MODEL_DRAWS)
    classical = classical_values(result)
    pots = _potential_marks(result, classical, truth_v)
    _draw_linear_panel(a_lin, result, curves, scales, pots, own_figure=own_figure)
    _draw_log_panel(a_log, curves, scales, pots, own_figure=own_figure)
    _draw_residual_panel(a_res, result, curves, pots)
    _draw_summary_panel(a_tab, summary_rows(result, scales, classical, truth_v))
    return fig


def _fit_axes(ax):
    """(figure, [linear, log, residual, summary] axes): a new figure, or the four given axes."""
    if ax is None:
        fig = Figure(figsize=FIT_FIGSIZE, layout="constrained")
        gs = fig.add_gridspec(3, 2, width_ratios=(3.1, 1.0), height_ratios=(3.0, 2.2, 1.4))
        a_lin = fig.add_subplot(gs[0, 0])
        a_log = fig.add_subplot(gs[1, 0], sharex=a_lin)
        a_res = fig.add_subplot(gs[2, 0], sharex=a_lin)
        a_tab = fig.add_subplot(gs[:, 1])
        return fig, [a_lin, a_log, a_res, a_tab]
    axes = list(np.ravel(ax)) if not hasattr(ax, "plot") else [ax]
    if len(axes) != 4:
        raise ValueError("ax must be a sequence of four Axes (linear, log, residuals, summary)")
    return axes[0].figure, axes


@dataclass
class _FitCurves:
    """The data and the posterior summaries drawn in the three curve panels (currents in A)."""

    V: np.ndarray               # bias, in recorded order
    I: np.ndarray               # measured current
    order: np.ndarray           # indices of increasing V
    segs: list                  # index arrays of the curves drawn (one, or rising and falling)
    falling: np.ndarray         # points recorded with falling bias
    model_med: np.ndarray       # median noise-free model
    model_mean: np.ndarray
    el_med: np.ndarray          # median electron current of the model
    ion_med: np.ndarray         # median ion current magnitude of the model
    sd: np.ndarray | None       # per-draw noise sd (k, n)
    noise_floor: float          # typical noise sd
    pred: tuple | None          # posterior-predictive (low, median, high)
    und_med: np.ndarray | None  # median characteristic with the distortions removed


def _fit_curves(result, k: int) -> _FitCurves:
    """Evaluate the model on about ``k`` thinned draws and summarise it point by point."""
    V = np.asarray(result.voltage, float)
    I = np.asarray(result.current, float)
    order = np.argsort(V, kind="stable")
    idx = thin_index(n_draws(result), k)
    _, I_mod, I_el = electron_current_draws(result, idx)
    model_mean = np.mean(I_mod, axis=0)
    sd = noise_sd(result, idx, I_mod)
    falling = np.zeros(V.size, bool) if result.branches is None else np.asarray(result.branches[0]) < 0
    und_med = np.median(undistorted_current_draws(result, idx), axis=0) if result.config.distorted else None
    return _FitCurves(
        V=V, I=I, order=order, segs=segments(result, order), falling=falling,
        model_med=np.median(I_mod, axis=0), model_mean=model_mean,
        el_med=np.median(I_el, axis=0), ion_med=np.median(I_el - I_mod, axis=0),
        sd=sd, noise_floor=float(np.median(sd)) if sd is not None else float(np.std(I - model_mean)),
        pred=predictive(result, result.credible_level, I_mod, sd), und_med=und_med)


def _potential_marks(result, classical, truth_v) -> dict:
    """Posterior intervals, classical and true values of V_f and V_p."""
    level = result.credible_level
    return {"posterior": {n: interval(result.draws[n], level) for n in ("V_f", "V_p") if n in result.draws},
            "classical": {n: classical[n] for n in ("V_f", "V_p") if n in classical},
            "truth": {n: truth_v[n] for n in ("V_f", "V_p") if n in truth_v},
            "level_pct": round(level * 100, 4)}


def _mark_potentials(ax, pots, *, label=False):
    """Posterior V_f / V_p medians with shaded intervals, classical and true values."""
    handles = []
    for name, (lo, med, hi) in pots["posterior"].items():
        if not np.isfinite(med):
            continue
        color = PALETTE[name]
        ax.axvspan(lo, hi, color=color, alpha=0.18, lw=0, zorder=0.5)
        ax.axvline(med, color=color, lw=1.3, ls="-" if name == "V_p" else "--", zorder=1)
        if label:
            handles.append(Line2D([], [], color=color, lw=1.3, ls="-" if name == "V_p" else "--",
                                  label=f"{tex_label(name)} posterior median, "
                                        f"{pots['level_pct']:g} % interval shaded"))
    for v in pots["classical"].values():
        ax.axvline(v, color=PALETTE["classical"], lw=0.8, ls=CLASSICAL_LS, zorder=1.1)
        if label:
            ax.plot([v], [1.0], marker="v", ms=6, color=PALETTE["classical"], clip_on=False,
                    transform=ax.get_xaxis_transform(), zorder=3)
    if label and pots["classical"]:
        handles.append(Line2D([], [], color=PALETTE["classical"], lw=0.8, ls=CLASSICAL_LS, marker="v",
                              ms=5, label="classical " + " / ".join(
                                  tex_label(n) for n in pots["classical"])))
    for v in pots["truth"].values():
        ax.axvline(v, color=PALETTE["truth"], lw=0.9, ls=TRUTH_LS, zorder=1.2)
    if label and pots["truth"]:
        handles.append(Line2D([], [], color=PALETTE["truth"], lw=0.9, ls=TRUTH_LS,
                              label="true " + " / ".join(tex_label(n) for n in pots["truth"])))
    return handles


def _linear_legend(result, c: _FitCurves) -> list:
    """Legend entries of the linear panel, before the potentials: data, model, band, undistorted."""
    handles = [Line2D([], [], ls="none", marker="o", ms=4, mfc="none", color=PALETTE["data"],
                      label="measured" if result.branches is None else "measured, rising bias")]
    if result.branches is not None:
        handles.append(Line2D([], [], ls="none", marker="s", ms=4, mfc="none", color=PALETTE["data"],
                              label="measured, falling bias"))
    handles.append(Line2D([], [], color=PALETTE["model"], lw=1.6,
                          label="model median incl. distortions (noise-free)" if result.config.distorted
                          else "model median (noise-free)"))
    if c.pred is not None:
        handles += [Patch(color=PALETTE["band"],
                          label=f"{result.credible_level * 100:g} % posterior-predictive band"),
                    Line2D([], [], color=PALETTE["ppc"], lw=1.0, ls=_PPC_LS, label="posterior-predictive median")]
    if c.und_med is not None:
        handles.append(Line2D([], [], color=PALETTE["undistorted"], lw=1.4, ls=_UNDISTORTED_LS,
                              label="plasma characteristic, distortions removed"))
    return handles


def _draw_linear_panel(ax, result, c: _FitCurves, scales, pots, *, own_figure):
    """(1) data, predictive band and median, model median and potentials on a linear axis."""
    V, cf = c.V, scales.current_factor
    if c.pred is not None:
        lo, med, hi = c.pred
        for seg in c.segs:
            ax.fill_between(V[seg], lo[seg] * cf, hi[seg] * cf, color=PALETTE["band"], lw=0, zorder=1.5)
            ax.plot(V[seg], med[seg] * cf, color=PALETTE["ppc"], lw=1.0, ls=_PPC_LS, zorder=2.5)
    for points, marker, ms in ((~c.falling, "o", 2.6), (c.falling, "s", 2.4)):
        ax.plot(V[points], c.I[points] * cf, ls="none", marker=marker, ms=ms, mfc="none", mew=0.6,
                color=PALETTE["data"], zorder=2)
    for seg in c.segs:
        ax.plot(V[seg], c.model_med[seg] * cf, color=PALETTE["model"], lw=1.6, zorder=3)
    if c.und_med is not None:
        ax.plot(V[c.order], c.und_med[c.order] * cf, color=PALETTE["undistorted"], lw=1.4, ls=_UNDISTORTED_LS,
                zorder=3.2)
    handles = _linear_legend(result, c) + _mark_potentials(ax, pots, label=True)
    ax.axhline(0.0, color=PALETTE["grid"], lw=0.8, zorder=0.2)
    ax.set_ylabel(f"probe current I [{scales.current_unit}]")
    ax.legend(handles=handles, loc="upper left", fontsize=7.5, frameon=True, framealpha=0.9)
    if own_figure:
        ax.tick_params(labelbottom=False)
    else:
        ax.set_xlabel(_BIAS_LABEL)
    ax.set_title(figure_title(result), fontsize=11, loc="left")


def _log_limits(c: _FitCurves, I_e_data) -> tuple[float, float]:
    """Current range (A) of the log panel: from the noise floor (or the smallest model
    electron current) to the largest electron current."""
    positive = c.el_med[c.el_med > 0]
    bottom = max(0.3 * c.noise_floor, float(positive.min()) if positive.size else 0.0,
                 1e-6 * float(np.max(np.abs(c.I))) if c.I.size else 0.0)
    top = max(float(np.max(I_e_data)) if I_e_data.size else 0.0, float(np.max(c.el_med)))
    if not (np.isfinite(bottom) and bottom > 0):
        bottom = 1e-12
    if not (np.isfinite(top) and top > bottom):
        top = 10 * bottom
    return bottom, top


def _draw_log_panel(ax, c: _FitCurves, scales, pots, *, own_figure):
    """(2) the electron current (data plus the model's ion current) on a log axis."""
    V, cf = c.V, scales.current_factor
    I_e_data = c.I + c.ion_med
    bottom, top = _log_limits(c, I_e_data)
    if c.pred is not None:
        lo_e = np.clip(c.pred[0] + c.ion_med, bottom * 1e-2, None)
        hi_e = np.clip(c.pred[2] + c.ion_med, bottom * 1e-2, None)
        for seg in c.segs:
            ax.fill_between(V[seg], lo_e[seg] * cf, hi_e[seg] * cf, color=PALETTE["band"], lw=0, zorder=1.5)
    pos = I_e_data > 0
    ax.plot(V[pos], I_e_data[pos] * cf, ls="none", marker="o", ms=2.6, mfc="none", mew=0.6,
            color=PALETTE["data"], zorder=2)
    for seg in c.segs:
        good = c.el_med[seg] > 0
        ax.plot(V[seg][good], c.el_med[seg][good] * cf, color=PALETTE["model"], lw=1.6, zorder=3)
    if c.und_med is not None:
        und_el = c.und_med + c.ion_med
        good = und_el[c.order] > 0
        ax.plot(V[c.order][good], und_el[c.order][good] * cf, color=PALETTE["undistorted"], lw=1.4,
                ls=_UNDISTORTED_LS, zorder=3.2)
    ax.set_yscale("log")
    ax.set_ylim(bottom * cf, top * cf * 2.0)
    _mark_potentials(ax, pots)
    ax.set_ylabel(rf"electron current $I_\mathrm{{e}}$ [{scales.current_unit}]")
    ax.text(0.01, 0.97, "data + model ion current; log scale", transform=ax.transAxes,
            va="top", ha="left", fontsize=7.5, color=PALETTE["data"])
    if own_figure:
        ax.tick_params(labelbottom=False)
    else:
        ax.set_xlabel(_BIAS_LABEL)


def _circle_flagged(ax, result, V, z):
    """Circle the points the outlier model flagged, with a count in the corner."""
    flagged = ((result.distortions or {}).get("outliers") or {}).get("indices") or []
    if not flagged:
        return
    fl = np.asarray(flagged, int)
    ax.plot(V[fl], np.clip(z[fl], -11.5, 11.5), ls="none", marker="o", ms=6.5, mfc="none", mew=1.0,
            color=PALETTE["flag"], zorder=2.4)
    ax.text(0.99, 0.95, f"{fl.size} flagged outlier(s) circled", transform=ax.transAxes, va="top",
            ha="right", fontsize=7.5, color=PALETTE["flag"], bbox={**TEXT_BOX, "pad": 1.5}, zorder=4)


def _draw_residual_panel(ax, result, c: _FitCurves, pots):
    """(3) residuals over the mean noise sd, with the +-2 band and the points beyond it."""
    V = c.V
    sigma = np.mean(c.sd, axis=0) if c.sd is not None else np.full(V.shape, c.noise_floor)
    sigma = np.where(sigma > 0, sigma, np.nan)
    z = (c.I - c.model_mean) / sigma
    out = np.abs(z) > 2
    ax.axhspan(-2, 2, color=PALETTE["band"], alpha=0.35, lw=0, zorder=0.3)
    for y in (-2.0, 2.0):
        ax.axhline(y, color=PALETTE["model"], lw=0.8, ls=_PPC_LS, zorder=1)
    ax.axhline(0.0, color=PALETTE["grid"], lw=0.8, zorder=0.4)
    ax.plot(V[~out], z[~out], ls="none", marker="o", ms=2.4, mfc="none", mew=0.6,
            color=PALETTE["data"], zorder=2)
    ax.plot(V[out], z[out], ls="none", marker="D", ms=2.8, color=PALETTE["flag"], zorder=2.2)
    _circle_flagged(ax, result, V, z)
    _mark_potentials(ax, pots)
    finite = np.isfinite(z)
    frac = float(np.mean(out[finite])) if finite.any() else math.nan
    ax.text(0.01, 0.95, f"{100 * frac:.1f} % of points beyond ±2 (4.6 % for Gaussian noise)",
            transform=ax.transAxes, va="top", ha="left", fontsize=7.5, color=PALETTE["data"],
            bbox={**TEXT_BOX, "pad": 1.5}, zorder=4)
    zmax = float(np.nanmax(np.abs(z))) if finite.any() else 3.0
    lim = min(max(3.5, 1.1 * zmax), 12.0)
    ax.set_ylim(-lim, lim)
    ax.set_ylabel("residual / σ [1]")
    ax.set_xlabel(_BIAS_LABEL)


def _draw_summary_panel(ax, rows):
    """(4) the summary text, one row per line from the top."""
    ax.set_axis_off()
    y = 0.99
    step = min(0.032, 0.97 / max(len(rows), 1))
    for text, color, kw in rows:
        ax.text(0.02, y, text, transform=ax.transAxes, va="top", ha="left", fontsize=8.5,
                color=color, **kw)
        y -= step
