"""The batch figure: each main parameter against the sweep coordinate, with credible bands."""
from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np

from ..io import atomic_write_bytes
from .columns import STATS

_PREFERRED_COORDS = ("position", "radius", "r", "x", "y", "z", "time", "t")


def plot_profiles(cols, params, path):
    """Each main parameter against the sweep coordinate (median and credible band), one line per source file.

    ``cols`` is the table of :mod:`bayesprobe.batch.columns`; ``params`` the parameters to draw.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    status = cols.s["status"]
    usable = [j for j in range(cols.n) if status[j] in ("ok", "not-converged")]
    if not usable or not params:
        return None
    xname = _coordinate(cols, usable)
    groups: dict = {}
    for pos, j in enumerate(usable):
        x = cols.coords[xname][j] if xname else float(pos)
        if math.isfinite(x):
            groups.setdefault(cols.s["source"][j].split(" [sweep ")[0], []).append((x, j))
    ncols = 2 if len(params) > 1 else 1
    nrows = int(math.ceil(len(params) / ncols))
    fig = Figure(figsize=(5.5 * ncols, 3.0 * nrows), layout="constrained")
    FigureCanvasAgg(fig)
    for k, p in enumerate(params):
        ax = fig.add_subplot(nrows, ncols, k + 1)
        _draw_parameter(ax, cols, p, groups, status)
        ax.set_xlabel(xname if xname else "sweep (table order)")
        if ax.get_legend_handles_labels()[0]:
            ax.legend(fontsize=7)
    levels = {cols.f["credible_level"][j] for j in usable if math.isfinite(cols.f["credible_level"][j])}
    level = f"{100 * levels.pop():g}% " if len(levels) == 1 else ""
    fig.suptitle(f"posterior median and {level}credible band per sweep", fontsize=10)
    b = io.BytesIO()
    fig.savefig(b, format="png", dpi=110)
    return atomic_write_bytes(path, b.getvalue())


def _coordinate(cols, usable):
    """The coordinate on the x axis: a preferred name with finite values, else None (table order)."""
    names = sorted((c for c, col in cols.coords.items() if any(math.isfinite(col[j]) for j in usable)),
                   key=lambda k: (_PREFERRED_COORDS.index(k) if k in _PREFERRED_COORDS else 99, k))
    return names[0] if names else None


def _draw_parameter(ax, cols, p, groups, status):
    """Median line, credible band and points of parameter ``p``, one colour per source file."""
    med, lo, hi = (cols.params[(p, st)] for st in STATS)
    for gi, (src, pts) in enumerate(sorted(groups.items())):
        pts = sorted((x, j) for x, j in pts if math.isfinite(med[j]))
        if not pts:
            continue
        xs = np.array([x for x, _ in pts])
        js = [j for _, j in pts]
        m = np.array([med[j] for j in js])
        ok = np.array([status[j] == "ok" for j in js])
        colour = f"C{gi % 10}"
        ax.fill_between(xs, [lo[j] for j in js], [hi[j] for j in js], color=colour, alpha=0.25, linewidth=0)
        ax.plot(xs, m, "-", color=colour, linewidth=1, label=Path(src).name[:30] if 1 < len(groups) <= 8 else None)
        ax.plot(xs[ok], m[ok], "o", color=colour, markersize=3)
        if np.any(~ok):
            ax.plot(xs[~ok], m[~ok], "o", markerfacecolor="none", color=colour, markersize=4,
                    label="not converged" if gi == 0 else None)
    if p in ("n_e", "n_i"):
        ax.set_yscale("log")
    ax.set_ylabel(f"{p} [{cols.units.get(p, '')}]")
