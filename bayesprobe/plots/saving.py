"""Writing the four figures of a fit to files, atomically."""
from __future__ import annotations

import io
from pathlib import Path

from matplotlib.figure import Figure

from .corner_figure import plot_corner
from .eedf_figure import plot_eedf
from .fit_figure import plot_fit
from .trace_figure import plot_trace

__all__ = ["save_figures"]


def _save_atomic(fig: Figure, path: Path, fmt: str, dpi) -> Path:
    """Render ``fig`` in memory, then write it with a same-directory temp file + rename."""
    from ..io import atomic_write_bytes
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=dpi)
    return atomic_write_bytes(path, buf.getvalue())


def _checked_formats(formats) -> tuple[str, ...]:
    """File formats as lower-case extensions, each one matplotlib's Agg canvas can write."""
    if isinstance(formats, str):
        formats = (formats,)
    formats = tuple(str(f).lower().lstrip(".") for f in formats)
    if not formats:
        raise ValueError("give at least one figure format, e.g. formats=('png',)")
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    supported = FigureCanvasAgg(Figure()).get_supported_filetypes()
    bad = [f for f in formats if f not in supported]
    if bad:
        raise ValueError(f"unsupported figure format(s) {', '.join(bad)}; "
                         f"choose from {', '.join(sorted(supported))}")
    return formats


def save_figures(result, out_dir, *, formats=("png",), dpi=110, truth=None) -> list[Path]:
    """Write ``fit``, ``corner``, ``trace`` and ``eedf`` figures into ``out_dir``.

    Each file is written to a temporary name in the same directory and renamed
    into place, so readers never see a partial image.  Returns the paths in the
    order fit, corner, trace, eedf (each in every format).
    """
    formats = _checked_formats(formats)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    makers = (("fit", lambda: plot_fit(result, truth=truth)),
              ("corner", lambda: plot_corner(result, truth=truth)),
              ("trace", lambda: plot_trace(result)),
              ("eedf", lambda: plot_eedf(result, truth=truth)))
    paths = []
    for stem, make in makers:
        fig = make()
        try:
            for fmt in formats:
                paths.append(_save_atomic(fig, out / f"{stem}.{fmt}", fmt, dpi))
        finally:
            fig.clear()
    return paths
