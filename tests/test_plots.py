"""Tests for the figures (bayesprobe.plots): structure, labels, numbers drawn, files written."""
from __future__ import annotations

import dataclasses
import io
import math
import warnings

import matplotlib

matplotlib.use("Agg")

import matplotlib.image as mpimg  # noqa: E402
import numpy as np  # noqa: E402
import pytest  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

import bayesprobe as bp  # noqa: E402
from bayesprobe import plots  # noqa: E402
from bayesprobe.plots import curves, draws, saving, style  # noqa: E402
from bayesprobe.physics.electrons import electron_current  # noqa: E402
from bayesprobe.physics.ions import ion_current  # noqa: E402

QUICK = bp.SamplerSettings(initial_steps=300, max_steps=600)
PROBE = bp.Probe("cylindrical", radius=5e-5, length=5e-3)
TRUTH = {"n_e": 1e16, "T_e": 3.0, "V_p": 12.0}


@pytest.fixture(scope="module")
def sim():
    cfg = bp.ModelConfig(probe=PROBE, ion_collection="oml")
    return bp.simulate(TRUTH, config=cfg, n_points=200, noise_rel=0.01, seed=1, sweep_id="plotsweep")


@pytest.fixture(scope="module")
def result(sim):
    with pytest.warns(bp.ConvergenceWarning, match="did not converge"):          # QUICK: a 600-step budget
        return bp.fit(sim.sweep, config=sim.config, seed=3, sampler=QUICK)


@pytest.fixture(scope="module")
def result_bi():
    cfg = bp.ModelConfig(probe=PROBE, ion_collection="oml", electrons="bi-maxwellian")
    s = bp.simulate({"n_e": 1e16, "T_e_cold": 2.0, "T_e_hot": 8.0, "hot_fraction": 0.1, "V_p": 12.0},
                    config=cfg, n_points=200, noise_rel=0.01, seed=1, sweep_id="twotemp")
    with pytest.warns(bp.ConvergenceWarning, match="did not converge"):          # QUICK: a 600-step budget
        return bp.fit(s.sweep, config=cfg.with_(electrons="maxwellian"), model="bi-maxwellian", seed=3,
                      sampler=QUICK)


@pytest.fixture(scope="module")
def fit_fig(result, sim):
    return plots.plot_fit(result, truth=sim.truth)


def _render(fig):
    """Draw the figure (layout engines only act, and warn, at draw time)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=40)
    return buf.getvalue()


def _texts(fig):
    return [t.get_text() for ax in fig.axes for t in ax.texts]


def _vline_positions(ax):
    """x positions of the vertical lines (axvline) on an axes."""
    out = []
    for line in ax.get_lines():
        x = np.asarray(line.get_xdata(), float)
        y = np.asarray(line.get_ydata(), float)
        if x.size == 2 and x[0] == x[1] and tuple(y) == (0.0, 1.0):
            out.append(float(x[0]))
    return np.array(out)


# ----------------------------------------------------------------------------- helpers

@pytest.mark.parametrize("current,unit", [(1.6e-3, "mA"), (0.4, "mA"), (2.0, "A"), (5e-5, "µA"),
                                          (1e-6, "µA"), (3e-9, "nA")])
def test_current_unit_follows_magnitude(current, unit):
    factor, u = style.current_unit(np.array([-current / 10, current]))
    assert u == unit
    assert 1.0 <= factor * current < 1000.0


def test_contour_levels_are_68_and_95_percent_masses():
    lo, hi = plots.CONTOUR_LEVELS
    assert lo == pytest.approx(0.6827, abs=1e-4)
    assert hi == pytest.approx(0.9545, abs=1e-4)
    # not the 2-D "one/two sigma radius" masses 1 - exp(-r^2/2) (0.39, 0.86)
    assert abs(lo - (1 - math.exp(-0.5))) > 0.2


def test_electron_current_split_matches_physics(result):
    idx = np.array([0, 7, 31])
    V, I_net, I_e = plots.electron_current_draws(result, idx)
    cfg = result.config
    for row, k in enumerate(idx):
        p = {n: float(result.draws[n].reshape(-1)[k]) for n in ("n_e", "n_i", "T_e", "V_p")}
        Ie = electron_current(V, p["V_p"], p["n_e"], p["T_e"], cfg.probe)
        Ii = ion_current(V, p["V_p"], p["n_i"], p["T_e"], cfg.probe, cfg.ion_mass_kg,
                         theory=cfg.ion_collection, n_e=p["n_e"], T_i=cfg.T_i)
        np.testing.assert_allclose(I_e[row], Ie, rtol=1e-10, atol=1e-15)
        np.testing.assert_allclose(I_net[row], Ie - Ii, rtol=1e-10, atol=1e-15)


def test_predictive_band_covers_the_credible_level_of_points(result):
    idx = draws.thin_index(result.draws["n_e"].size, 200)
    _, I_mod, _ = plots.electron_current_draws(result, idx)
    sd = curves.noise_sd(result, idx, I_mod)
    lo, med, hi = curves.predictive(result, result.credible_level, I_mod, sd)
    inside = np.mean((result.current >= lo) & (result.current <= hi))
    # 200 points: binomial sd of the coverage is about 0.02
    assert abs(inside - result.credible_level) < 0.07
    assert np.all(lo <= med) and np.all(med <= hi)


# ----------------------------------------------------------------------------- plot_fit

def test_plot_fit_layout_and_labels(fit_fig):
    assert isinstance(fit_fig, Figure)
    assert len(fit_fig.axes) == 4
    a_lin, a_log, a_res, a_tab = fit_fig.axes
    assert a_lin.get_ylabel() == "probe current I [mA]"        # 1.6 mA peak
    assert "[mA]" in a_log.get_ylabel() and a_log.get_yscale() == "log"
    assert a_res.get_xlabel() == "probe bias V [V]"
    assert "σ" in a_res.get_ylabel()
    assert not a_tab.axison
    title = a_lin.get_title(loc="left")
    assert "plotsweep" in title and "maxwellian" in title


def test_plot_fit_summary_panel_reports_posterior_and_classical(fit_fig, result):
    text = "\n".join(_texts(fit_fig))
    summary = result.parameter_summary()
    for name, tex in (("T_e", r"$T_\mathrm{e}$"), ("n_e", r"$n_\mathrm{e}$"), ("n_i", r"$n_\mathrm{i}$"),
                      ("V_f", r"$V_\mathrm{f}$"), ("V_p", r"$V_\mathrm{p}$")):
        assert tex in text
    # the temperature median appears with the digits its interval warrants
    e = summary["T_e"]
    dec = style.decimals(e["ci_low"], e["median"], e["ci_high"])
    assert f"{e['median']:.{dec}f}" in text
    assert f"classical {result.classical['T_e']:.{dec}f}" in text
    assert "90 %" in text
    assert f"true {TRUTH['T_e']:.{dec}f}" in text


def test_plot_fit_marks_potentials(fit_fig, result, sim):
    a_lin = fit_fig.axes[0]
    xs = _vline_positions(a_lin)
    for name in ("V_f", "V_p"):
        med = float(np.median(result.draws[name]))
        assert np.any(np.isclose(xs, med)), name
        assert np.any(np.isclose(xs, result.classical[name])), name
        assert np.any(np.isclose(xs, sim.truth[name])), name
    # intervals are shaded (one span per potential)
    spans = [p for p in a_lin.patches if p.get_alpha() is not None and p.get_alpha() < 0.3]
    assert len(spans) >= 2


def test_plot_fit_without_truth_draws_no_truth_lines(result, sim):
    fig = plots.plot_fit(result)
    xs = _vline_positions(fig.axes[0])
    assert not np.any(np.isclose(xs, sim.truth["V_p"]))
    assert "true" not in "\n".join(_texts(fig))


def test_standardised_residuals_have_unit_scale(fit_fig, result):
    a_res = fit_fig.axes[2]
    z = np.concatenate([np.asarray(l.get_ydata(), float) for l in a_res.get_lines()
                        if l.get_linestyle() == "None"])
    assert z.size == result.current.size
    # data simulated with the fitted noise model: residuals / sigma are ~ N(0, 1)
    assert 0.75 < np.std(z) < 1.3
    assert abs(np.mean(z)) < 0.3
    # the +-2 reference lines
    ys = [tuple(l.get_ydata()) for l in a_res.get_lines() if l.get_linestyle() != "None"]
    assert (2.0, 2.0) in ys and (-2.0, -2.0) in ys


def test_plot_fit_into_given_axes_and_bad_options(result):
    fig = Figure(layout="constrained")
    axes = fig.subplots(2, 2).ravel()
    out = plots.plot_fit(result, ax=axes, n_band_draws=30)
    assert out is fig and len(fig.axes) == 4
    with pytest.raises(ValueError, match="four Axes"):
        plots.plot_fit(result, ax=axes[:2])
    with pytest.raises(ValueError, match="n_band_draws"):
        plots.plot_fit(result, n_band_draws=1)
    with pytest.raises(ValueError, match="truth"):
        plots.plot_fit(result, truth=[1, 2])


def test_plot_fit_without_idata_or_classical(result):
    r = dataclasses.replace(result, _idata=None, idata_builder=None, classical={"error": "no knee found"})
    fig = plots.plot_fit(r)
    text = "\n".join(_texts(fig))
    assert "classical analysis failed" in text
    # the predictive band is still drawn (from the noise model)
    assert any(type(c).__name__ in ("PolyCollection", "FillBetweenPolyCollection")
               for c in fig.axes[0].collections)
    _render(fig)


# ----------------------------------------------------------------------------- plot_corner

def test_plot_corner_structure_and_units(result):
    fig = plots.plot_corner(result)
    assert isinstance(fig, Figure)
    K = 5
    assert len(fig.axes) == K * K
    axes = np.array(fig.axes).reshape(K, K)
    xlabels = [axes[-1, j].get_xlabel() for j in range(K)]
    assert "[eV]" in xlabels[0]
    assert "$10^{16}$ m$^{-3}$" in xlabels[1] and "$10^{16}$ m$^{-3}$" in xlabels[2]
    assert xlabels[3].endswith("[V]") and xlabels[4].endswith("[V]")
    # 1-D quantile lines at the credible-level tails and the median (T_e panel, unscaled)
    x = result.draws["T_e"].ravel()
    xs = _vline_positions(axes[0, 0])
    for q in (0.05, 0.5, 0.95):
        assert np.any(np.isclose(xs, np.quantile(x, q), rtol=0, atol=2e-3 * np.std(x) + 1e-12)), q
    # classical T_e shown as its own overlay
    teal = [l for l in axes[0, 0].get_lines() if l.get_color() == plots.PALETTE["classical"]]
    assert teal and np.isclose(teal[0].get_xdata()[0], result.classical["T_e"])
    # densities drawn in units of 1e16 m^-3
    assert 0.5 < np.mean(axes[1, 1].get_xlim()) < 2.0


def test_plot_corner_passes_explicit_levels_and_quantiles(result, monkeypatch):
    import corner
    seen = {}
    real = corner.corner

    def spy(data, *args, **kwargs):
        seen.update(kwargs)
        seen["n"] = np.shape(data)
        return real(data, *args, **kwargs)

    monkeypatch.setattr(corner, "corner", spy)
    fig = plots.plot_corner(result, names=["T_e", "V_p"], truth=TRUTH)
    assert len(fig.axes) == 4
    assert tuple(seen["levels"]) == plots.CONTOUR_LEVELS
    assert seen["plot_datapoints"] is False
    np.testing.assert_allclose(seen["quantiles"], [0.05, 0.5, 0.95])
    assert seen["n"][1] == 2
    # the truth overlay is drawn (V_p = 12 V), in its own colour
    axes = np.array(fig.axes).reshape(2, 2)
    truth_lines = [l for l in axes[1, 1].get_lines() if l.get_color() == plots.PALETTE["truth"]]
    assert truth_lines and np.isclose(truth_lines[0].get_xdata()[0], 12.0)


def test_plot_corner_rejects_unknown_names(result):
    with pytest.raises(ValueError, match="no posterior draws"):
        plots.plot_corner(result, names=["T_e", "bogus"])
    with pytest.raises(ValueError, match="at least two"):
        plots.plot_corner(result, names=["T_e"])


# ----------------------------------------------------------------------------- plot_trace

def test_plot_trace_rows_labels_and_diagnostics(result):
    fig = plots.plot_trace(result)
    names = list(result.parameter_order)
    assert len(fig.axes) == 2 * len(names)
    n_chains = result.draws[names[0]].shape[0]
    text = "\n".join(_texts(fig))
    for i, n in enumerate(names):
        a_tr = fig.axes[2 * i]
        assert "[" in a_tr.get_ylabel() and "]" in a_tr.get_ylabel()
        assert len(a_tr.get_lines()) == n_chains
        assert f"R̂ = {result.diagnostics['r_hat'][n]:.3f}" in text
        assert f"ESS(bulk) = {result.diagnostics['ess_bulk'][n]:.0f}" in text
    labels = {fig.axes[2 * i].get_ylabel() for i in range(len(names))}
    assert any("[eV]" in s for s in labels) and any("m$^{-3}$" in s for s in labels)
    assert any("[%]" in s for s in labels)                   # sigma_rel in percent
    # the trace shows the draws themselves (thinned), in display units
    first = fig.axes[2 * names.index("T_e")].get_lines()[0]
    y = np.asarray(first.get_ydata())
    stride = int(first.get_xdata()[1] - first.get_xdata()[0])
    np.testing.assert_allclose(y, result.draws["T_e"][0, ::stride])


# ----------------------------------------------------------------------------- save_figures

def test_save_figures_writes_readable_pngs_of_the_right_size(result, tmp_path, monkeypatch):
    sizes = {}
    real = saving._save_atomic

    def record(fig, path, fmt, dpi):
        sizes[path.name] = fig.get_size_inches() * dpi
        return real(fig, path, fmt, dpi)

    monkeypatch.setattr(saving, "_save_atomic", record)
    out = tmp_path / "figs"
    paths = plots.save_figures(result, out, dpi=50)
    assert [p.name for p in paths] == ["fit.png", "corner.png", "trace.png", "eedf.png"]
    for p in paths:
        assert p.parent == out and p.stat().st_size > 1000
        img = mpimg.imread(p)
        w, h = sizes[p.name]
        assert img.shape[:2] == (round(h), round(w))
    assert sizes["fit.png"][0] == pytest.approx(plots.FIT_FIGSIZE[0] * 50)
    assert sorted(x.name for x in out.iterdir()) == ["corner.png", "eedf.png", "fit.png",
                                                     "trace.png"]  # no temp files


def test_save_figures_formats_and_errors(result, tmp_path):
    with pytest.raises(ValueError, match="unsupported figure format"):
        plots.save_figures(result, tmp_path, formats=("png", "docx"))
    with pytest.raises(ValueError, match="at least one"):
        plots.save_figures(result, tmp_path, formats=())
    assert list(tmp_path.iterdir()) == []


# ----------------------------------------------------------------------------- two temperatures

def test_bi_maxwellian_result_plots(result_bi):
    assert result_bi.config.electrons == "bi-maxwellian"
    fig = plots.plot_fit(result_bi)
    text = "\n".join(_texts(fig))
    for tex in (r"$T_\mathrm{e,cold}$", r"$T_\mathrm{e,hot}$", "hot fraction", r"$T_\mathrm{e,eff}$"):
        assert tex in text
    assert "bi-maxwellian" in fig.axes[0].get_title(loc="left")
    _render(fig)

    cfig = plots.plot_corner(result_bi)
    K = 7                                    # T_e_cold, T_e_hot, hot_fraction, n_e, n_i, V_p, V_f
    assert len(cfig.axes) == K * K
    axes = np.array(cfig.axes).reshape(K, K)
    assert "cold" in axes[-1, 0].get_xlabel() and "[eV]" in axes[-1, 0].get_xlabel()
    assert "hot fraction" in axes[-1, 2].get_xlabel()
    _render(cfig)

    tfig = plots.plot_trace(result_bi)
    assert len(tfig.axes) == 2 * len(result_bi.parameter_order)
    _render(tfig)


def test_no_pyplot_figures_left_open(result):
    import matplotlib.pyplot as plt
    before = plt.get_fignums()
    plots.plot_trace(result)
    assert plt.get_fignums() == before == []


def test_rendering_emits_no_warnings(fit_fig):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert _render(fit_fig)[:8] == b"\x89PNG\r\n\x1a\n"
