"""The corner plot: 1-D and 2-D marginal posteriors of the main quantities, with classical
and known values."""
from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from ..quantities import tex_label
from .draws import classical_values, flat, interval, main_names, tails, truth_values
from .style import CLASSICAL_LS, CONTOUR_LEVELS, PALETTE, TEXT_BOX, TRUTH_LS, Scales, decimals, figure_title

__all__ = ["plot_corner"]


def plot_corner(result, *, names=None, truth=None) -> Figure:
    """Corner plot of the main parameters with classical values and optional truth.

    Densities are shown in units of 10^k m^-3 (k: the power of ten nearest the
    median n_e).  The 1-D
    panels carry dashed lines at the median and the tails of the credible level;
    the 2-D contours enclose 68.3 % and 95.4 % of the posterior mass.  Classical
    estimates are teal dotted lines and squares; ``truth`` values are black.
    Values outside a panel's range are noted with an arrow at its edge.

    Parameters
    ----------
    result : FitResult
    names : sequence of str, optional
        Parameters to show (default: temperature(s), n_e, n_i, V_p, V_f).
    truth : dict, optional
    """
    import corner

    names = _checked_names(result, names)
    scales = Scales(result)
    X = _finite_draws(result, names, scales)
    K = len(names)
    ranges = [_corner_range(X[:, j]) for j in range(K)]
    truth_v = truth_values(truth)
    classical = classical_values(result)
    known = {"classical": [classical[n] * scales.factor(n) if n in classical else None for n in names],
             "true": [truth_v[n] * scales.factor(n) if n in truth_v else None for n in names]}

    side = 1.85
    fig = Figure(figsize=(side * K + 1.2, side * K + 1.2))
    bins = 30 if X.shape[0] >= 2000 else 20
    lo_q, hi_q = tails(result.credible_level)
    corner.corner(X, fig=fig, bins=bins, range=ranges, labels=[scales.label(n) for n in names],
                  color=PALETTE["posterior"], quantiles=[lo_q, 0.5, hi_q], levels=CONTOUR_LEVELS,
                  plot_datapoints=False,
                  plot_density=False, fill_contours=True, smooth=1.0, smooth1d=None,
                  max_n_ticks=3, label_kwargs={"fontsize": 9},
                  contour_kwargs={"linewidths": 0.9},
                  hist_kwargs={"color": PALETTE["posterior"], "lw": 1.1})
    _overplot_known(corner, fig, known)
    _diagonal_titles(np.array(fig.axes).reshape(K, K), names, X, ranges, known, result.credible_level)
    _corner_legend(fig, result, known)
    return fig


def _checked_names(result, names) -> list[str]:
    """The parameters to show (default: the main ones), each with draws; at least two."""
    if names is None:
        names = main_names(result)
    names = list(names)
    missing = [n for n in names if n not in result.draws]
    if missing:
        raise ValueError(f"no posterior draws for {', '.join(missing)}; "
                         f"available: {', '.join(result.draws)}")
    if len(names) < 2:
        raise ValueError("a corner plot needs at least two parameters")
    return names


def _finite_draws(result, names, scales) -> np.ndarray:
    """(draws, parameters) in display units, rows with any non-finite value dropped."""
    X = np.column_stack([flat(result, n) * scales.factor(n) for n in names])
    X = X[np.all(np.isfinite(X), axis=1)]
    if X.shape[0] < 2 * len(names) + 10:
        raise ValueError(f"too few finite draws ({X.shape[0]}) for a corner plot")
    return X


def _corner_range(x) -> list[float]:
    x = x[np.isfinite(x)]
    lo, hi = np.quantile(x, [0.0025, 0.9975])
    pad = 0.1 * (hi - lo)
    if not pad > 0:
        pad = max(abs(float(lo)) * 1e-3, 1e-12)
    return [float(lo - pad), float(hi + pad)]


#: how classical and known (true) values are drawn: colour, line style, marker
_KNOWN_STYLE = {"classical": (PALETTE["classical"], CLASSICAL_LS, "s"),
                "true": (PALETTE["truth"], TRUTH_LS, "X")}


def _overplot_known(corner, fig, known):
    """Lines and points at the classical and known values (None: not available)."""
    for tag, vals in known.items():
        color, ls, marker = _KNOWN_STYLE[tag]
        if any(v is not None for v in vals):
            corner.overplot_lines(fig, vals, color=color, lw=0.9, ls=ls)
            pts = np.array([[v if v is not None else np.nan for v in vals]])
            corner.overplot_points(fig, pts, marker=marker, ms=4.5, color=color)


def _edge_note(ax, value, lim, text, color, row):
    """Mark a value that lies outside the axis range with an arrow label at that edge."""
    if lim[0] <= value <= lim[1]:
        return
    left = value < lim[0]
    ax.text(0.02 if left else 0.98, 0.92 - 0.12 * row, ("◀ " if left else "") + text + ("" if left else " ▶"),
            transform=ax.transAxes, ha="left" if left else "right", va="top", fontsize=7, color=color,
            bbox={**TEXT_BOX, "pad": 1.0}, zorder=5)


def _diagonal_titles(axes, names, X, ranges, known, level):
    """Median and interval with sensible digits above each 1-D panel; off-range values noted."""
    for j, n in enumerate(names):
        lo, med, hi = interval(X[:, j], level)
        dec = decimals(lo, med, hi)
        axes[j, j].set_title(f"{tex_label(n)} = {med:.{dec}f}"
                             f"$^{{+{hi - med:.{dec}f}}}_{{-{med - lo:.{dec}f}}}$", fontsize=8.5)
        for row, (tag, vals) in enumerate(known.items()):
            if vals[j] is not None:
                _edge_note(axes[j, j], vals[j], ranges[j], f"{tag} {vals[j]:.{dec}f}", _KNOWN_STYLE[tag][0], row)


def _corner_legend(fig, result, known):
    handles = [Line2D([], [], color=PALETTE["posterior"], lw=1.1,
                      label=f"posterior; dashed: median and {result.credible_level * 100:g} % interval"),
               Line2D([], [], color=PALETTE["posterior"], lw=0.9,
                      label="contours enclose 68 % and 95 %")]
    labels = {"classical": "classical estimate", "true": "true value"}
    for tag, vals in known.items():
        if any(v is not None for v in vals):
            color, ls, marker = _KNOWN_STYLE[tag]
            handles.append(Line2D([], [], color=color, lw=0.9, ls=ls, marker=marker, ms=4.5, label=labels[tag]))
    fig.legend(handles=handles, loc="upper right", bbox_to_anchor=(0.98, 0.98), fontsize=8.5,
               frameon=False, title=figure_title(result), title_fontsize=9)
