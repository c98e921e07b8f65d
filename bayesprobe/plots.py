"""Figures of one fit: the characteristic with its posterior, a corner plot, sampler traces,
and the electron energy distribution.

Every function builds a fresh :class:`matplotlib.figure.Figure` (no pyplot state is
touched, so it works headless and in worker processes) and returns it; the caller
saves or discards it.  :func:`save_figures` writes all four atomically.

Figures never evaluate the model on every stored draw: curves and bands use an
evenly thinned subset, so each figure takes well under two seconds even for
4000 draws of a 1000-point sweep.
"""
from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from .model import distortion_parameter_names, plasma_parameter_names, probe_current
from .quantities import tex_label

__all__ = ["PALETTE", "CONTOUR_LEVELS", "FIT_FIGSIZE", "plot_fit", "plot_corner", "plot_trace",
           "plot_eedf", "save_figures", "electron_current_draws"]

#: One palette for every figure: hues chosen to stay distinguishable with the common
#: colour-vision deficiencies, and always paired with distinct line styles or markers.
PALETTE = {
    "data": "#3d3d3d",          # measured points (charcoal)
    "model": "#1d4e89",         # posterior median of the noise-free model (navy)
    "band": "#a9c9e8",          # posterior-predictive band (pale blue)
    "ppc": "#4f86c6",           # posterior-predictive median (mid blue)
    "V_f": "#d1770f",           # floating potential (amber)
    "V_p": "#7b4fa0",           # plasma potential (violet)
    "classical": "#16877a",     # classical (non-Bayesian) estimates (teal)
    "truth": "#111111",         # known true values (near black)
    "flag": "#b2182b",          # points outside +-2 sigma, warnings (crimson)
    "grid": "#d9d9d9",
    "undistorted": "#5a8f29",   # the plasma characteristic with the fitted distortions removed (olive green)
    "posterior": "#1d4e89",     # corner-plot histograms and contours
    "chains": ("#1d4e89", "#d1770f", "#16877a", "#7b4fa0", "#8c8c8c", "#b2182b"),
}

#: Probability mass enclosed by the two 2-D contours of the corner plot: the
#: one- and two-sigma probabilities of a normal distribution (68.3 % and 95.4 %).
#: They are masses, not the 1 - exp(-r^2/2) radii of a 2-D Gaussian.
CONTOUR_LEVELS = (math.erf(1.0 / math.sqrt(2.0)), math.erf(2.0 / math.sqrt(2.0)))

#: Size (inches) of the fit figure.
FIT_FIGSIZE = (12.0, 8.6)

_MODEL_DRAWS = 200      # default number of draws evaluated for the noise-free model
_PPC_DRAWS = 1000       # at most this many posterior-predictive draws for the band
_TRACE_POINTS = 800     # at most this many points per chain in a trace

_TEMPERATURES = {"maxwellian": ("T_e",), "bi-maxwellian": ("T_e_cold", "T_e_hot", "hot_fraction")}


# ----------------------------------------------------------------------------- helpers

def _current_unit(I) -> tuple[float, str]:
    """(factor, unit) so that factor * I reads comfortably: A, mA, µA or nA."""
    m = float(np.nanmax(np.abs(I))) if np.size(I) else 0.0
    for factor, unit in ((1.0, "A"), (1e3, "mA"), (1e6, "µA"), (1e9, "nA")):
        if m >= 1.0 / factor:
            return factor, unit
    return 1e9, "nA"


class _Scales:
    """How each quantity is displayed: a multiplier and a unit label."""

    def __init__(self, result):
        self.current_factor, self.current_unit = _current_unit(result.current)
        n_ref = None
        for n in ("n_e", "n_i"):
            if n in result.draws:
                x = np.asarray(result.draws[n], float).ravel()
                x = x[np.isfinite(x) & (x > 0)]
                if x.size:
                    n_ref = float(np.median(x))
                    break
        # nearest power of ten: displayed densities lie in [0.32, 3.2), e.g. 0.998 x 10^16
        self.density_exp = int(round(math.log10(n_ref))) if n_ref else 0
        self.units = dict(result.units)
        # currents other than the sweep's own (noise levels) get a unit of their own size
        self._current = {}
        for name, unit in self.units.items():
            if unit == "A" and name in result.draws:
                x = np.asarray(result.draws[name], float).ravel()
                x = x[np.isfinite(x)]
                self._current[name] = _current_unit(np.median(np.abs(x))) if x.size else \
                    (self.current_factor, self.current_unit)

    def factor(self, name) -> float:
        unit = self.units.get(name, "")
        if unit == "m^-3":
            return 10.0 ** (-self.density_exp)
        if unit == "A":
            return self._current.get(name, (self.current_factor, None))[0]
        if name == "sigma_rel":
            return 100.0
        return 1.0

    def unit_label(self, name) -> str:
        unit = self.units.get(name, "")
        if unit == "m^-3":
            return rf"$10^{{{self.density_exp}}}$ m$^{{-3}}$"
        if unit == "A":
            return self._current.get(name, (None, self.current_unit))[1]
        if name == "sigma_rel":
            return "%"
        return unit or "1"

    def label(self, name) -> str:
        return f"{tex_label(name)} [{self.unit_label(name)}]"


def _flat(result, name) -> np.ndarray:
    return np.asarray(result.draws[name], float).reshape(-1)


def _n_draws(result) -> int:
    return int(np.asarray(next(iter(result.draws.values()))).size)


def _thin_index(total: int, k: int) -> np.ndarray:
    """About ``k`` evenly spaced indices into ``total`` draws (all of them if fewer)."""
    if k >= total:
        return np.arange(total)
    return np.unique(np.linspace(0, total - 1, max(int(k), 2)).round().astype(int))


def _tails(level: float) -> tuple[float, float]:
    t = 0.5 * (1.0 - level)
    return t, 1.0 - t


def _interval(x, level) -> tuple[float, float, float]:
    """(low, median, high) of the equal-tailed interval of finite draws (NaNs if none)."""
    x = np.asarray(x, float).ravel()
    x = x[np.isfinite(x)]
    if not x.size:
        return (math.nan, math.nan, math.nan)
    lo, hi = _tails(level)
    q = np.quantile(x, [lo, 0.5, hi])
    return float(q[0]), float(q[1]), float(q[2])


def _decimals(lo: float, med: float, hi: float) -> int:
    """Decimals that show the shorter side of an interval to two significant digits."""
    width = min(med - lo, hi - med)
    if not (np.isfinite(width) and width > 0):
        width = hi - lo
    if not (np.isfinite(width) and width > 0):
        return 3
    return int(min(6, max(0, 1 - math.floor(math.log10(width)))))


def _fmt(v, dec) -> str:
    return "–" if v is None or not np.isfinite(v) else f"{v:.{dec}f}"


def _classical_values(result) -> dict:
    """Finite classical estimates by name ({} if the classical analysis failed)."""
    c = result.classical if isinstance(result.classical, dict) else {}
    if "error" in c:
        return {}
    out = {}
    for k, v in c.items():
        if isinstance(v, (int, float, np.floating)) and np.isfinite(v):
            out[k] = float(v)
    return out


def _truth_values(truth) -> dict:
    if truth is None:
        return {}
    if not isinstance(truth, dict):
        raise ValueError("truth must be a dict of parameter name -> value")
    out = {}
    for k, v in truth.items():
        if isinstance(v, (int, float, np.floating, np.integer)) and np.isfinite(v):
            out[k] = float(v)
    return out


def _title(result) -> str:
    sid = result.sweep_info.get("sweep_id") if isinstance(result.sweep_info, dict) else None
    return (f"sweep '{sid or 'unnamed'}' · {result.model} electrons, "
            f"{result.config.ion_collection} ions")


def _main_names(result) -> list[str]:
    names = list(_TEMPERATURES.get(result.config.electrons, ("T_e",)))
    names += ["n_e", "n_i", "V_p", "V_f"]
    return [n for n in names if n in result.draws]


def _model_params(result, idx) -> dict:
    names = plasma_parameter_names(result.config) + distortion_parameter_names(result.config)
    return {n: _flat(result, n)[idx] for n in names if n in result.draws}


def electron_current_draws(result, idx=None):
    """Noise-free net current and electron current (A) of the draws ``idx``.

    Returns ``(V, I_net, I_electron)`` with the currents of shape (k, n).  The
    electron part is the same model with the ion density set to zero (the ion
    term is proportional to n_i once n_e is given separately).
    """
    V = np.asarray(result.voltage, float)
    if idx is None:
        idx = _thin_index(_n_draws(result), _MODEL_DRAWS)
    params = _model_params(result, idx)
    I_net = probe_current(V, params, result.config, validate=False, branches=result.branches)
    separate = result.config.with_(quasi_neutral=False).undistorted()
    p_e = dict(params)
    p_e["n_i"] = np.zeros_like(p_e["n_e"])
    I_e = probe_current(V, p_e, separate, validate=False)
    if result.config.distorted:
        # the ion current of the undistorted plasma, added to the measured (distorted) model
        I_e = I_net + (I_e - probe_current(V, params, separate, validate=False))
    return V, np.atleast_2d(I_net), np.atleast_2d(I_e)


def _segments(result, order):
    """Index arrays (increasing V) of the curves to draw: one, or the rising and falling branches."""
    if result.branches is None:
        return [order]
    direction = np.asarray(result.branches[0])[order]
    return [order[direction > 0], order[direction < 0]]


def undistorted_current_draws(result, idx=None):
    """Noise-free plasma characteristic with the fitted distortions removed, (k, n) in A."""
    V = np.asarray(result.voltage, float)
    if idx is None:
        idx = _thin_index(_n_draws(result), _MODEL_DRAWS)
    return np.atleast_2d(probe_current(V, _model_params(result, idx), result.config, validate=False,
                                       distorted=False))


def _noise_sd(result, idx, I_model) -> np.ndarray | None:
    """Per-draw noise sd (k, n): sd^2 = sigma_floor^2 + (sigma_rel I_model)^2, or None."""
    if "sigma_floor" not in result.draws:
        return None
    sf = _flat(result, "sigma_floor")[idx][:, None]
    sr = _flat(result, "sigma_rel")[idx][:, None] if "sigma_rel" in result.draws else 0.0
    return np.sqrt(sf**2 + (sr * I_model) ** 2)


def _predictive(result, level, I_model, sd):
    """(low, median, high) of the posterior-predictive current at every point, in A."""
    lo, hi = _tails(level)
    pp = None
    idata = result.idata
    if idata is not None and hasattr(idata, "posterior_predictive") and \
            "current" in idata.posterior_predictive:
        arr = np.asarray(idata.posterior_predictive["current"].values, float)
        pp = arr.reshape(-1, arr.shape[-1])
        pp = pp[_thin_index(pp.shape[0], _PPC_DRAWS)]
    elif sd is not None:           # no stored replicates: draw them from the noise model
        rng = np.random.default_rng(0)
        pp = I_model + sd * rng.standard_normal(I_model.shape)
    if pp is None:
        return None
    q = np.quantile(pp, [lo, 0.5, hi], axis=0)
    return q[0], q[1], q[2]


# ----------------------------------------------------------------------------- fit figure

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
    for name, v in pots["classical"].items():
        ax.axvline(v, color=PALETTE["classical"], lw=0.8, ls=(0, (1, 1.5)), zorder=1.1)
        if label:
            ax.plot([v], [1.0], marker="v", ms=6, color=PALETTE["classical"], clip_on=False,
                    transform=ax.get_xaxis_transform(), zorder=3)
    if label and pots["classical"]:
        handles.append(Line2D([], [], color=PALETTE["classical"], lw=0.8, ls=(0, (1, 1.5)), marker="v",
                              ms=5, label="classical " + " / ".join(
                                  tex_label(n) for n in pots["classical"])))
    for name, v in pots["truth"].items():
        ax.axvline(v, color=PALETTE["truth"], lw=0.9, ls=(0, (4, 2, 1, 2)), zorder=1.2)
    if label and pots["truth"]:
        handles.append(Line2D([], [], color=PALETTE["truth"], lw=0.9, ls=(0, (4, 2, 1, 2)),
                              label="true " + " / ".join(tex_label(n) for n in pots["truth"])))
    return handles


def _table_text(result, scales, classical, truth) -> list[tuple[str, str, dict]]:
    """Lines of the summary panel as (text, colour, extra text kwargs)."""
    level = result.credible_level
    names = list(_TEMPERATURES.get(result.config.electrons, ("T_e",)))
    if result.config.electrons != "maxwellian" and "T_e_eff" in result.draws:
        names.append("T_e_eff")
    names += ["n_e", "n_i", "V_f", "V_p"]
    rows = [(f"posterior median  [{level * 100:g} % interval]", PALETTE["data"], {"weight": "bold"})]
    for n in names:
        if n not in result.draws:
            continue
        f = scales.factor(n)
        lo, med, hi = (v * f for v in _interval(result.draws[n], level))
        dec = _decimals(lo, med, hi)
        rows.append((f"{tex_label(n)} [{scales.unit_label(n)}]", PALETTE["data"], {}))
        rows.append((f"    {_fmt(med, dec)}   [{_fmt(lo, dec)}, {_fmt(hi, dec)}]", PALETTE["model"],
                     {"family": "monospace"}))
        extra = []
        if n in classical:
            extra.append(("classical " + _fmt(classical[n] * f, dec), PALETTE["classical"]))
        if n in truth:
            extra.append(("true " + _fmt(truth[n] * f, dec), PALETTE["truth"]))
        for text, color in extra:
            rows.append((f"    {text}", color, {"family": "monospace"}))
    if result.config.electrons != "maxwellian" and "T_e" in classical:
        rows.append((f"classical single-T analysis: {tex_label('T_e')} = {classical['T_e']:.3f} eV",
                     PALETTE["classical"], {}))
    if isinstance(result.classical, dict) and "error" in result.classical:
        rows.append(("classical analysis failed", PALETTE["flag"], {}))
    d = result.diagnostics or {}
    rows.append(("", PALETTE["data"], {}))
    if "sigma_floor" in result.draws:
        sf = float(np.median(_flat(result, "sigma_floor"))) * scales.factor("sigma_floor")
        noise = f"noise: σ_floor {sf:.3g} {scales.unit_label('sigma_floor')}"
        if "sigma_rel" in result.draws:
            noise += f", σ_rel {100 * float(np.median(_flat(result, 'sigma_rel'))):.3g} %"
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
    truth_v = _truth_values(truth)
    if n_band_draws is not None and (not isinstance(n_band_draws, (int, np.integer)) or n_band_draws < 2):
        raise ValueError(f"n_band_draws must be an integer >= 2, got {n_band_draws!r}")
    if ax is None:
        fig = Figure(figsize=FIT_FIGSIZE, layout="constrained")
        gs = fig.add_gridspec(3, 2, width_ratios=(3.1, 1.0), height_ratios=(3.0, 2.2, 1.4))
        a_lin = fig.add_subplot(gs[0, 0])
        a_log = fig.add_subplot(gs[1, 0], sharex=a_lin)
        a_res = fig.add_subplot(gs[2, 0], sharex=a_lin)
        a_tab = fig.add_subplot(gs[:, 1])
    else:
        axes = list(np.ravel(ax)) if not hasattr(ax, "plot") else [ax]
        if len(axes) != 4:
            raise ValueError("ax must be a sequence of four Axes (linear, log, residuals, summary)")
        a_lin, a_log, a_res, a_tab = axes
        fig = a_lin.figure

    level = result.credible_level
    scales = _Scales(result)
    cf, cu = scales.current_factor, scales.current_unit
    V = np.asarray(result.voltage, float)
    I = np.asarray(result.current, float)
    order = np.argsort(V, kind="stable")
    segs = _segments(result, order)          # the rising and falling branches are drawn as separate curves

    idx = _thin_index(_n_draws(result), n_band_draws or _MODEL_DRAWS)
    _, I_mod, I_el = electron_current_draws(result, idx)
    I_ion = I_el - I_mod                                   # ion current magnitude, per draw
    model_med = np.median(I_mod, axis=0)
    model_mean = np.mean(I_mod, axis=0)
    sd = _noise_sd(result, idx, I_mod)
    pred = _predictive(result, level, I_mod, sd)

    classical = _classical_values(result)
    pots = {"posterior": {n: _interval(result.draws[n], level) for n in ("V_f", "V_p") if n in result.draws},
            "classical": {n: classical[n] for n in ("V_f", "V_p") if n in classical},
            "truth": {n: truth_v[n] for n in ("V_f", "V_p") if n in truth_v},
            "level_pct": round(level * 100, 4)}

    # (1) linear current
    handles = []
    if pred is not None:
        lo, med, hi = pred
        for seg in segs:
            a_lin.fill_between(V[seg], lo[seg] * cf, hi[seg] * cf, color=PALETTE["band"], lw=0, zorder=1.5)
            a_lin.plot(V[seg], med[seg] * cf, color=PALETTE["ppc"], lw=1.0, ls=(0, (5, 2)), zorder=2.5)
        handles += [Patch(color=PALETTE["band"], label=f"{level * 100:g} % posterior-predictive band"),
                    Line2D([], [], color=PALETTE["ppc"], lw=1.0, ls=(0, (5, 2)),
                           label="posterior-predictive median")]
    falling = np.zeros(V.size, bool) if result.branches is None else np.asarray(result.branches[0]) < 0
    a_lin.plot(V[~falling], I[~falling] * cf, ls="none", marker="o", ms=2.6, mfc="none", mew=0.6,
               color=PALETTE["data"], zorder=2)
    a_lin.plot(V[falling], I[falling] * cf, ls="none", marker="s", ms=2.4, mfc="none", mew=0.6,
               color=PALETTE["data"], zorder=2)
    for seg in segs:
        a_lin.plot(V[seg], model_med[seg] * cf, color=PALETTE["model"], lw=1.6, zorder=3)
    distorted = result.config.distorted
    data_handles = [Line2D([], [], ls="none", marker="o", ms=4, mfc="none", color=PALETTE["data"],
                           label="measured" if result.branches is None else "measured, rising bias")]
    if result.branches is not None:
        data_handles.append(Line2D([], [], ls="none", marker="s", ms=4, mfc="none", color=PALETTE["data"],
                                   label="measured, falling bias"))
    handles = data_handles + [
               Line2D([], [], color=PALETTE["model"], lw=1.6,
                      label="model median incl. distortions (noise-free)" if distorted
                      else "model median (noise-free)")] + handles
    if distorted:
        und_med = np.median(undistorted_current_draws(result, idx), axis=0)
        a_lin.plot(V[order], und_med[order] * cf, color=PALETTE["undistorted"], lw=1.4, ls=(0, (6, 2, 1, 2)),
                   zorder=3.2)
        handles.append(Line2D([], [], color=PALETTE["undistorted"], lw=1.4, ls=(0, (6, 2, 1, 2)),
                              label="plasma characteristic, distortions removed"))
    handles += _mark_potentials(a_lin, pots, label=True)
    a_lin.axhline(0.0, color=PALETTE["grid"], lw=0.8, zorder=0.2)
    a_lin.set_ylabel(f"probe current I [{cu}]")
    a_lin.legend(handles=handles, loc="upper left", fontsize=7.5, frameon=True, framealpha=0.9)
    if ax is None:
        a_lin.tick_params(labelbottom=False)
    a_lin.set_title(_title(result), fontsize=11, loc="left")

    # (2) electron current on a log axis
    ion_med = np.median(I_ion, axis=0)
    el_med = np.median(I_el, axis=0)
    I_e_data = I + ion_med
    noise_floor = float(np.median(sd)) if sd is not None else float(np.std(I - model_mean))
    positive = el_med[el_med > 0]
    bottom = max(0.3 * noise_floor, float(positive.min()) if positive.size else 0.0,
                 1e-6 * float(np.max(np.abs(I))) if I.size else 0.0)
    top_candidates = [float(np.max(I_e_data)) if I_e_data.size else 0.0, float(np.max(el_med))]
    top = max(top_candidates)
    if not (np.isfinite(bottom) and bottom > 0):
        bottom = 1e-12
    if not (np.isfinite(top) and top > bottom):
        top = 10 * bottom
    if pred is not None:
        lo_e = np.clip(pred[0] + ion_med, bottom * 1e-2, None)
        hi_e = np.clip(pred[2] + ion_med, bottom * 1e-2, None)
        for seg in segs:
            a_log.fill_between(V[seg], lo_e[seg] * cf, hi_e[seg] * cf, color=PALETTE["band"], lw=0, zorder=1.5)
    pos = I_e_data > 0
    a_log.plot(V[pos], I_e_data[pos] * cf, ls="none", marker="o", ms=2.6, mfc="none", mew=0.6,
               color=PALETTE["data"], zorder=2)
    for seg in segs:
        good = el_med[seg] > 0
        a_log.plot(V[seg][good], el_med[seg][good] * cf, color=PALETTE["model"], lw=1.6, zorder=3)
    if distorted:
        und_el = und_med + ion_med
        good = und_el[order] > 0
        a_log.plot(V[order][good], und_el[order][good] * cf, color=PALETTE["undistorted"], lw=1.4,
                   ls=(0, (6, 2, 1, 2)), zorder=3.2)
    a_log.set_yscale("log")
    a_log.set_ylim(bottom * cf, top * cf * 2.0)
    _mark_potentials(a_log, pots)
    a_log.set_ylabel(rf"electron current $I_\mathrm{{e}}$ [{cu}]")
    a_log.text(0.01, 0.97, "data + model ion current; log scale", transform=a_log.transAxes,
               va="top", ha="left", fontsize=7.5, color=PALETTE["data"])
    if ax is None:
        a_log.tick_params(labelbottom=False)
    else:
        a_log.set_xlabel("probe bias V [V]")

    # (3) standardised residuals
    sigma = np.mean(sd, axis=0) if sd is not None else np.full(V.shape, noise_floor)
    sigma = np.where(sigma > 0, sigma, np.nan)
    z = (I - model_mean) / sigma
    out = np.abs(z) > 2
    a_res.axhspan(-2, 2, color=PALETTE["band"], alpha=0.35, lw=0, zorder=0.3)
    for y in (-2.0, 2.0):
        a_res.axhline(y, color=PALETTE["model"], lw=0.8, ls=(0, (5, 2)), zorder=1)
    a_res.axhline(0.0, color=PALETTE["grid"], lw=0.8, zorder=0.4)
    a_res.plot(V[~out], z[~out], ls="none", marker="o", ms=2.4, mfc="none", mew=0.6,
               color=PALETTE["data"], zorder=2)
    a_res.plot(V[out], z[out], ls="none", marker="D", ms=2.8, color=PALETTE["flag"], zorder=2.2)
    flagged = ((result.distortions or {}).get("outliers") or {}).get("indices") or []
    if flagged:
        fl = np.asarray(flagged, int)
        a_res.plot(V[fl], np.clip(z[fl], -11.5, 11.5), ls="none", marker="o", ms=6.5, mfc="none", mew=1.0,
                   color=PALETTE["flag"], zorder=2.4)
        a_res.text(0.99, 0.95, f"{fl.size} flagged outlier(s) circled", transform=a_res.transAxes, va="top",
                   ha="right", fontsize=7.5, color=PALETTE["flag"],
                   bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.85, "pad": 1.5}, zorder=4)
    _mark_potentials(a_res, pots)
    finite = np.isfinite(z)
    frac = float(np.mean(out[finite])) if finite.any() else math.nan
    a_res.text(0.01, 0.95, f"{100 * frac:.1f} % of points beyond ±2 (4.6 % for Gaussian noise)",
               transform=a_res.transAxes, va="top", ha="left", fontsize=7.5, color=PALETTE["data"],
               bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.85, "pad": 1.5}, zorder=4)
    zmax = float(np.nanmax(np.abs(z))) if finite.any() else 3.0
    lim = min(max(3.5, 1.1 * zmax), 12.0)
    a_res.set_ylim(-lim, lim)
    a_res.set_ylabel("residual / σ [1]")
    a_res.set_xlabel("probe bias V [V]")
    if ax is not None:
        a_lin.set_xlabel("probe bias V [V]")

    # (4) summary
    a_tab.set_axis_off()
    rows = _table_text(result, scales, classical, truth_v)
    y = 0.99
    step = min(0.032, 0.97 / max(len(rows), 1))
    for text, color, kw in rows:
        a_tab.text(0.02, y, text, transform=a_tab.transAxes, va="top", ha="left", fontsize=8.5,
                   color=color, **kw)
        y -= step
    return fig


# ----------------------------------------------------------------------------- corner

def _corner_range(x) -> list[float]:
    x = x[np.isfinite(x)]
    lo, hi = np.quantile(x, [0.0025, 0.9975])
    pad = 0.1 * (hi - lo)
    if not pad > 0:
        pad = max(abs(float(lo)) * 1e-3, 1e-12)
    return [float(lo - pad), float(hi + pad)]


def _edge_note(ax, value, lim, text, color, row):
    """Mark a value that lies outside the axis range with an arrow label at that edge."""
    if lim[0] <= value <= lim[1]:
        return
    left = value < lim[0]
    ax.text(0.02 if left else 0.98, 0.92 - 0.12 * row, ("◀ " if left else "") + text + ("" if left else " ▶"),
            transform=ax.transAxes, ha="left" if left else "right", va="top", fontsize=7, color=color,
            bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.85, "pad": 1.0}, zorder=5)


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

    if names is None:
        names = _main_names(result)
    names = list(names)
    missing = [n for n in names if n not in result.draws]
    if missing:
        raise ValueError(f"no posterior draws for {', '.join(missing)}; "
                         f"available: {', '.join(result.draws)}")
    if len(names) < 2:
        raise ValueError("a corner plot needs at least two parameters")
    scales = _Scales(result)
    level = result.credible_level
    X = np.column_stack([_flat(result, n) * scales.factor(n) for n in names])
    X = X[np.all(np.isfinite(X), axis=1)]
    if X.shape[0] < 2 * len(names) + 10:
        raise ValueError(f"too few finite draws ({X.shape[0]}) for a corner plot")
    K = len(names)
    ranges = [_corner_range(X[:, j]) for j in range(K)]
    lo_q, hi_q = _tails(level)
    truth_v = _truth_values(truth)
    truths = [truth_v[n] * scales.factor(n) if n in truth_v else None for n in names]
    classical = _classical_values(result)
    cls = [classical[n] * scales.factor(n) if n in classical else None for n in names]

    side = 1.85
    fig = Figure(figsize=(side * K + 1.2, side * K + 1.2))
    labels = [scales.label(n) for n in names]
    bins = 30 if X.shape[0] >= 2000 else 20
    corner.corner(X, fig=fig, bins=bins, range=ranges, labels=labels, color=PALETTE["posterior"],
                  quantiles=[lo_q, 0.5, hi_q], levels=CONTOUR_LEVELS, plot_datapoints=False,
                  plot_density=False, fill_contours=True, smooth=1.0, smooth1d=None,
                  max_n_ticks=3, label_kwargs={"fontsize": 9},
                  contour_kwargs={"linewidths": 0.9},
                  hist_kwargs={"color": PALETTE["posterior"], "lw": 1.1})
    axes = np.array(fig.axes).reshape(K, K)
    for vals, color, ls, marker in ((cls, PALETTE["classical"], (0, (1, 1.5)), "s"),
                                    (truths, PALETTE["truth"], (0, (4, 2, 1, 2)), "X")):
        if any(v is not None for v in vals):
            corner.overplot_lines(fig, vals, color=color, lw=0.9, ls=ls)
            pts = np.array([[v if v is not None else np.nan for v in vals]])
            corner.overplot_points(fig, pts, marker=marker, ms=4.5, color=color)
    # own 1-D titles: median and interval with sensible digits
    for j, n in enumerate(names):
        lo, med, hi = _interval(X[:, j], level)
        dec = _decimals(lo, med, hi)
        axes[j, j].set_title(f"{tex_label(n)} = {med:.{dec}f}"
                             f"$^{{+{hi - med:.{dec}f}}}_{{-{med - lo:.{dec}f}}}$", fontsize=8.5)
        for row, (vals, color, tag) in enumerate(((cls, PALETTE["classical"], "classical"),
                                                  (truths, PALETTE["truth"], "true"))):
            if vals[j] is not None:
                _edge_note(axes[j, j], vals[j], ranges[j], f"{tag} {vals[j]:.{dec}f}", color, row)
    handles = [Line2D([], [], color=PALETTE["posterior"], lw=1.1,
                      label=f"posterior; dashed: median and {level * 100:g} % interval"),
               Line2D([], [], color=PALETTE["posterior"], lw=0.9,
                      label="contours enclose 68 % and 95 %")]
    if any(c is not None for c in cls):
        handles.append(Line2D([], [], color=PALETTE["classical"], lw=0.9, ls=(0, (1, 1.5)), marker="s",
                              ms=4.5, label="classical estimate"))
    if any(t is not None for t in truths):
        handles.append(Line2D([], [], color=PALETTE["truth"], lw=0.9, ls=(0, (4, 2, 1, 2)), marker="X",
                              ms=4.5, label="true value"))
    fig.legend(handles=handles, loc="upper right", bbox_to_anchor=(0.98, 0.98), fontsize=8.5,
               frameon=False, title=_title(result), title_fontsize=9)
    return fig


# ----------------------------------------------------------------------------- traces

def plot_trace(result) -> Figure:
    """Thinned sampler draws against draw index for every chain, with per-chain histograms.

    One row per sampled parameter (``result.parameter_order``), labelled with
    its R-hat and bulk ESS from ``result.diagnostics``.
    """
    names = [n for n in result.parameter_order if n in result.draws]
    if not names:
        raise ValueError("the result holds no draws of its sampled parameters")
    scales = _Scales(result)
    d = result.diagnostics or {}
    rhat, ess, tau = d.get("r_hat", {}) or {}, d.get("ess_bulk", {}) or {}, d.get("tau", {}) or {}
    P = len(names)
    fig = Figure(figsize=(10.5, 1.45 * P + 1.1), layout="constrained")
    gs = fig.add_gridspec(P, 2, width_ratios=(4.2, 1.0))
    colors = PALETTE["chains"]
    first = None
    for i, n in enumerate(names):
        x = np.asarray(result.draws[n], float) * scales.factor(n)
        x = x.reshape(-1, x.shape[-1]) if x.ndim >= 2 else x[None]
        C, D = x.shape
        stride = max(1, int(math.ceil(D / _TRACE_POINTS)))
        a_tr = fig.add_subplot(gs[i, 0], sharex=first)
        first = first or a_tr
        a_h = fig.add_subplot(gs[i, 1], sharey=a_tr)
        finite = x[np.isfinite(x)]
        lo, hi = (float(np.min(finite)), float(np.max(finite))) if finite.size else (0.0, 1.0)
        edges = np.linspace(lo, hi, 31) if hi > lo else np.linspace(lo - 0.5, lo + 0.5, 31)
        for c in range(C):
            color = colors[c % len(colors)]
            steps = np.arange(0, D, stride)
            a_tr.plot(steps, x[c, ::stride], color=color, lw=0.55, alpha=0.75)
            a_h.hist(x[c][np.isfinite(x[c])], bins=edges, orientation="horizontal", histtype="step",
                     color=color, lw=1.0, density=True)
        r_text = f"{rhat[n]:.3f}" if n in rhat and np.isfinite(rhat[n]) else "n/a"
        e_text = f"{ess[n]:.0f}" if n in ess and np.isfinite(ess[n]) else "n/a"
        note = f"R̂ = {r_text}   ESS(bulk) = {e_text}"
        if n in tau and np.isfinite(tau[n]):
            note += f"   τ = {tau[n]:.0f} steps"
        bad = (n in rhat and rhat[n] > d.get("criteria", {}).get("r_hat_max", 1.01)) or \
              (n in ess and ess[n] < d.get("criteria", {}).get("ess_bulk_min", 0))
        a_tr.text(0.005, 0.96, note, transform=a_tr.transAxes, va="top", ha="left", fontsize=8,
                  color=PALETTE["flag"] if bad else PALETTE["data"],
                  bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.8, "pad": 1.5})
        a_tr.set_ylabel(scales.label(n), fontsize=9)
        a_h.tick_params(labelleft=False)
        a_h.set_xticks([])
        if i < P - 1:
            a_tr.tick_params(labelbottom=False)
        else:
            a_tr.set_xlabel("kept draw index within chain (steps × walkers, thinned)")
            a_h.set_xlabel("density")
    handles = [Line2D([], [], color=colors[c % len(colors)], lw=1.2, label=f"chain {c}") for c in range(C)]
    fig.legend(handles=handles, loc="outside upper right", ncols=min(C, 6), fontsize=8, frameon=False)
    fig.suptitle(f"{_title(result)} · {C} chains × {D} kept draws", fontsize=10, x=0.01, ha="left")
    return fig


# ----------------------------------------------------------------------------- saving

def _save_atomic(fig: Figure, path: Path, fmt: str, dpi) -> Path:
    """Render ``fig`` in memory, then write it with a same-directory temp file + rename."""
    from .io import atomic_write_bytes
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=dpi)
    return atomic_write_bytes(path, buf.getvalue())


def save_figures(result, out_dir, *, formats=("png",), dpi=110, truth=None) -> list[Path]:
    """Write ``fit``, ``corner``, ``trace`` and ``eedf`` figures into ``out_dir``.

    Each file is written to a temporary name in the same directory and renamed
    into place, so readers never see a partial image.  Returns the paths in the
    order fit, corner, trace, eedf (each in every format).
    """
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


# ----------------------------------------------------------------------------- energy distribution

_EEDF_MARKERS = 150     # at most this many Druyvesteyn points are drawn


def _true_eepf(truth_v, energy):
    """EEPF of known parameters (Maxwellian or two Maxwellians), or None if they are incomplete."""
    from .eedf import maxwellian_eepf
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
    from .eedf import druyvesteyn_eedf, model_eedf

    truth_v = _truth_values(truth)
    level = result.credible_level
    m = model_eedf(result)
    eps = m["energy_eV"]
    fig = Figure(figsize=(7.6, 5.4), layout="constrained")
    ax = fig.add_subplot()
    ax.fill_between(eps, m["eepf_low"], m["eepf_high"], color=PALETTE["band"], lw=0, zorder=1)
    ax.plot(eps, m["eepf_median"], color=PALETTE["model"], lw=1.6, zorder=3)
    handles = [Line2D([], [], color=PALETTE["model"], lw=1.6,
                      label=f"fit ({result.model}): posterior median"),
               Patch(color=PALETTE["band"], label=f"{level * 100:g} % credible band")]
    peak = float(np.max(m["eepf_high"]))
    bottom = max(0.5 * float(np.min(m["eepf_median"])), 1e-5 * peak)
    notes = []
    if druyvesteyn:
        V_p = float(np.median(_flat(result, "V_p"))) if "V_p" in result.draws else math.nan
        probe = result.config.probe
        ion = "oml" if probe.geometry == "cylindrical" and result.config.ion_collection in ("oml", "auto") \
            else None
        try:
            d = druyvesteyn_eedf(result.voltage, result.current, V_p, probe.area, ion_current=ion)
        except ValueError as exc:
            d = None
            notes.append((f"no Druyvesteyn estimate: {exc}", PALETTE["flag"]))
        if d is not None and d["energy_eV"].size:
            E, fp = d["energy_eV"], d["eepf"]
            keep = (fp > 0) & (E <= eps[-1])
            stride = max(1, int(math.ceil(np.count_nonzero(keep) / _EEDF_MARKERS)))
            ax.plot(E[keep][::stride], fp[keep][::stride], ls="none", marker="o", ms=3.2, mfc="none",
                    mew=0.7, color=PALETTE["classical"], zorder=2.5)
            handles.append(Line2D([], [], ls="none", marker="o", ms=4, mfc="none",
                                  color=PALETTE["classical"],
                                  label=f"Druyvesteyn, d²I/dV² (window {d['window_V']:.2g} V)"))
            notes.append((f"Druyvesteyn, {d['energy_range'][0]:.2g}–{d['energy_range'][1]:.3g} eV: "
                          f"n_e = {d['n_e']:.3g} m⁻³, T_eff = {d['T_eff']:.3g} eV", PALETTE["classical"]))
            if d["flags"]:
                notes.append(("flags: " + ", ".join(d["flags"]), PALETTE["flag"]))
    p = m["parameters"]
    T_fit = p["T_e"] if "T_e" in p else \
        (1 - p["hot_fraction"]) * p["T_e_cold"] + p["hot_fraction"] * p["T_e_hot"]
    notes.insert(0, (f"fit median: n_e = {np.median(p['n_e']):.3g} m⁻³, "
                     f"T_eff = {np.median(T_fit):.3g} eV", PALETTE["model"]))
    true_fp = _true_eepf(truth_v, eps)
    if true_fp is not None:
        ax.plot(eps, true_fp, color=PALETTE["truth"], lw=1.0, ls=(0, (4, 2, 1, 2)), zorder=3.5)
        handles.append(Line2D([], [], color=PALETTE["truth"], lw=1.0, ls=(0, (4, 2, 1, 2)),
                              label="true EEPF"))
    ax.set_yscale("log")
    ax.set_xlim(0.0, float(eps[-1]))
    ax.set_ylim(bottom, 2.0 * peak)
    ax.set_xlabel("electron energy ε [eV]")
    ax.set_ylabel("EEPF [m⁻³ eV⁻³ᐟ²]")
    ax.grid(True, which="major", color=PALETTE["grid"], lw=0.6)
    ax.legend(handles=handles, loc="upper right", fontsize=8, frameon=True, framealpha=0.9)
    y = 0.03
    for text, color in reversed(notes):
        ax.text(0.02, y, text, transform=ax.transAxes, ha="left", va="bottom", fontsize=7.5, color=color,
                bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.85, "pad": 1.2}, zorder=5)
        y += 0.05
    ax.set_title(f"{_title(result)}\nEEPF f(ε) = g(ε)/√ε: fitted distribution and model-free "
                 "estimate; a Maxwellian is a straight line", fontsize=9.5, loc="left")
    return fig

