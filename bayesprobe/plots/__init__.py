"""Figures of one fit: the characteristic with its posterior, a corner plot, sampler traces,
and the electron energy distribution.

Every function builds a fresh :class:`matplotlib.figure.Figure` (no pyplot state is
touched, so it works headless and in worker processes) and returns it; the caller
saves or discards it.  :func:`save_figures` writes all four atomically.

Figures never evaluate the model on every stored draw: curves and bands use an
evenly thinned subset, so each figure takes well under two seconds even for
4000 draws of a 1000-point sweep.

Modules: :mod:`.fit_figure` (fit + residuals, with its text panel in :mod:`.fit_summary`),
:mod:`.corner_figure`, :mod:`.trace_figure`, :mod:`.eedf_figure`, :mod:`.saving`; shared
look and display units in :mod:`.style`; reading draws in :mod:`.draws`; model curves on
thinned draws in :mod:`.curves`.
"""
from .corner_figure import plot_corner
from .curves import electron_current_draws, undistorted_current_draws
from .eedf_figure import plot_eedf
from .fit_figure import plot_fit
from .saving import save_figures
from .style import CONTOUR_LEVELS, FIT_FIGSIZE, PALETTE
from .trace_figure import plot_trace

__all__ = ["PALETTE", "CONTOUR_LEVELS", "FIT_FIGSIZE", "plot_fit", "plot_corner", "plot_trace",
           "plot_eedf", "save_figures", "electron_current_draws", "undistorted_current_draws"]
