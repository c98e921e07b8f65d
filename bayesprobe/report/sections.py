"""The report's sections and the whole page: header, contents, warnings, summary, one section
per sweep, software, safety; and :func:`build_report`, which writes it."""
from __future__ import annotations

from pathlib import Path

from ..errors import InputError
from .alerts import _sweep_alerts, _warnings_box, collect_warnings
from .blocks import (_comparison_block, _diagnostics_block, _distortions_block, _settings_block,
                     _versions_block)
from .formatting import _dict, _e, _list, _natural_key, _num, _pct, _status_badge, _value
from .page import _Page
from .reading import _Results, _Sweep, find_results
from .tables import _batch_table, _correlation_table, _parameter_table, _summary_table

#: default file name, written inside the results folder
REPORT_NAME = "report.html"
#: attribute of <html> set by the self-check script: "ok:N" or "fail:reasons"
SELFCHECK_ATTRIBUTE = "data-selfcheck"
FIGURE_FILES = ("fit", "eedf", "corner", "trace")

SAFETY_NOTE = (
    "Probe work involves hazards that software cannot remove. Bias supplies and source-measure units can "
    "deliver lethal voltages and currents; RF-driven plasmas put high voltage on probe shafts, cables and "
    "feedthroughs and can cause RF burns; vacuum vessels, viewports and gas lines store energy; reactive "
    "process gases can be toxic. Follow your laboratory's safety rules, local electrical codes and the "
    "instructions of the equipment's makers, and leave design and sign-off of high-voltage, RF and vacuum "
    "systems to qualified, licensed people. bayesprobe only analyses data; it does not make any setup safe.")


def _captions(s: dict) -> dict:
    level = _pct(s.get("credible_level"))
    return {
        "fit": ("Fit and residuals",
                "Top: measured probe current against bias voltage (open circles) with the posterior median of the "
                f"noise-free model (line) and the {level} posterior-predictive band; the floating and plasma "
                "potentials are marked with their credible intervals shaded, the classical estimates dotted. Middle: "
                "electron current (data plus the model's ion current) on a logarithmic axis, where the "
                "retardation region of a Maxwellian is a straight line of slope 1/T<sub>e</sub>. Bottom: residuals in "
                "units of the fitted noise sd, with &plusmn;2 marked; about 4.6&nbsp;% of points lie outside for "
                "Gaussian noise, and a trend means the model misses a feature of the sweep. Right: the main "
                "parameters as read from the posterior."),
        "eedf": ("Electron energy distribution",
                 "Electron energy probability function (EEPF) against electron energy, on a logarithmic axis: the "
                 f"fitted distribution's posterior median (line) with its {level} credible band, and the model-free "
                 "Druyvesteyn estimate from the second derivative of the measured current (open circles). A single "
                 "Maxwellian is a straight line; a hot tail bends the curve upward at high energy."),
        "corner": ("Posterior of the main parameters",
                   "One- and two-dimensional marginal posteriors of the main parameters. Contours enclose 68.3&nbsp;% "
                   "and 95.4&nbsp;% of the posterior mass; dashed lines in the histograms mark the median and the "
                   f"{level} interval; classical estimates are marked (by an arrow at the panel edge when they "
                   "fall outside it). Tilted contours are "
                   "correlations (see the table)."),
        "trace": ("Sampler traces",
                  "Kept draws of every sampled parameter against draw index, one colour per chain, with per-chain "
                  "histograms on the right; R&#770;, bulk ESS and the autocorrelation time are written on each row "
                  "(red when a criterion is not met). Well-mixed chains overlap and show no drift."),
    }


def _meta_list(sw: _Sweep, s: dict) -> str:
    """The sweep's results file, input, points, seed, coordinates and reason, as a definition list."""
    sweep = _dict(s.get("sweep"))
    meta = [("results file", f"<code>{_e(sw.source, 500)}</code>")]
    if sw.given_label:
        meta.append(("id in the input", f"<code>{_e(sw.given_label, 500)}</code>"))
    if s:
        meta += [("electron model", _e(s.get("model", ""))), ("input", f"<code>{_e(s.get('input', ''), 500)}</code>"),
                 ("points", _value(sweep.get("n_points"))),
                 ("seed", _value(s.get("seed") if sw.seed is None else sw.seed)),
                 ("credible level", _value(s.get("credible_level")))]
    elif sw.seed is not None:
        meta.append(("seed", _value(sw.seed)))
    for k, v in list(sw.coords.items())[:16]:
        meta.append((_e(k, 60), _value(v)))
    if sw.reason:
        meta.append(("reason", _e(sw.reason)))
    return '<dl class="meta">' + "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in meta) + "</dl>"


def _sweep_section(page: _Page, sw: _Sweep, anchor: str, warnings: list, batch: bool) -> None:
    s = sw.summary or {}
    page.add(f'<section class="sweep" id="{anchor}"><h2>Sweep {_e(sw.label, 300)} {_status_badge(sw.status)}</h2>')
    page.add(_meta_list(sw, s), _sweep_alerts(warnings))
    if not s:
        page.add('<p class="missing">No summary is recorded for this sweep.</p></section>')
        return
    caps = _captions(s)
    if _dict(s.get("diagnostics")).get("engine") == "importance":
        caps["trace"] = ("Posterior draws", "Posterior draws of every fitted parameter from importance sampling "
                         "against draw index, with their histograms on the right. The draws are independent, so "
                         "there are no chains to mix; the acceptance test is on the Pareto k&#770; and effective "
                         "sample size of the importance weights (see the table above).")
    figs = {k: (sw.folder / f"{k}.png" if sw.folder is not None else None) for k in FIGURE_FILES}
    sid = sw.label
    page.add("<h3>Parameters</h3>", _parameter_table(s))
    if batch:
        page.add('<p class="small">Per-sweep figures are not part of a batch folder; fit this sweep alone with '
                 "<code>bayesprobe fit</code> to draw them.</p>")
    else:
        page.figure(figs["fit"], f"fit and residuals of sweep {sid}", caps["fit"][1], caps["fit"][0])
    distortions = _distortions_block(s)
    if distortions:
        page.add("<h3>Distortions</h3>", distortions)
    page.add("<h3>Model comparison</h3>", _comparison_block(s))
    if not batch:
        page.add("<h3>Electron energy distribution</h3>")
        page.figure(figs["eedf"], f"EEPF of sweep {sid}", caps["eedf"][1], caps["eedf"][0])
        page.add("<h3>Posterior</h3>")
        page.figure(figs["corner"], f"corner plot of sweep {sid}", caps["corner"][1], caps["corner"][0])
    page.add(_correlation_table(s))
    page.add("<h3>Sampler diagnostics</h3>", _diagnostics_block(s))
    if not batch:
        page.figure(figs["trace"], f"sampler traces of sweep {sid}", caps["trace"][1], caps["trace"][0])
    page.add("<h3>Priors and settings (to reproduce this fit)</h3>", _settings_block(s))
    page.add("</section>")


def _is_synthetic(res: _Results) -> bool:
    if any(_num(r.get("truth")) is not None for r in res.demo_rows):
        return True
    for sw in res.sweeps:
        notes = " ".join(str(x) for x in _list(_dict((sw.summary or {}).get("sweep")).get("notes")))
        if "synthetic" in notes.lower():
            return True
    return False


def _header(res: _Results, version: str) -> str:
    kind_text = {"fit": "one fit", "collection": f"{res.n_sweeps} fits",
                 "batch": f"batch of {res.n_sweeps} sweeps"}[res.kind]
    return ('<header class="top"><div class="inner"><div class="kicker">bayesprobe &middot; Langmuir-probe '
            f'analysis report</div><h1>{_e(res.root.resolve().name or str(res.root), 200)}</h1>'
            f"<p>{kind_text}; built with bayesprobe {_e(version)} from the result files in this folder. "
            "Every number below is read from those files (hover a number for its full precision).</p>"
            + ('<p><span class="badge synthetic">SYNTHETIC DATA</span> the sweeps in this report were '
               "simulated (an invented scenario), so their true values are known.</p>" if _is_synthetic(res) else "")
            + "</div></header><main>")


def _toc(res: _Results, anchors: dict) -> str:
    toc = ['<li><a href="#warnings">Warnings</a></li>', '<li><a href="#summary">Summary</a></li>']
    if res.kind == "batch":
        toc.append('<li><a href="#profiles">Profiles</a></li>')
    toc += [f'<li><a href="#{anchors[id(sw)]}">Sweep {_e(sw.label, 80)}</a></li>' for sw in res.sweeps[:40]]
    if len(res.sweeps) > 40:
        toc.append(f"<li>&hellip; {len(res.sweeps) - 40} more sweeps</li>")
    toc += ['<li><a href="#software">Software and reproducibility</a></li>', '<li><a href="#safety">Safety</a></li>']
    return '<nav class="toc" aria-label="contents"><strong>Contents</strong><ol>' + "".join(toc) + "</ol></nav>"


def _batch_summary(res: _Results, anchors: dict) -> str:
    c = res.batch_counts
    parts = [f'<p><data value="{res.n_sweeps}">{res.n_sweeps}</data> sweeps: '
             f'<data value="{c.get("ok", 0)}">{c.get("ok", 0)}</data> converged, '
             f'<data value="{c.get("not-converged", 0)}">{c.get("not-converged", 0)}</data> not converged, '
             f'<data value="{c.get("failed", 0)}">{c.get("failed", 0)}</data> failed'
             + (f', <data value="{c["other"]}">{c["other"]}</data> unknown' if c.get("other") else "") + ".</p>"]
    units = {}
    for sw in res.sweeps:
        for name, e in _dict((sw.summary or {}).get("parameters")).items():
            units.setdefault(name, e["unit"])
    if res.batch_header:
        anchors_by_label = {sw.label: anchors[id(sw)] for sw in res.sweeps}
        parts.append(_batch_table(res, units, anchors_by_label))
    elif res.sweeps:
        parts.append('<p class="small">No <code>results.csv</code> yet (the batch is running or was interrupted); '
                     "the table is built from the per-sweep records.</p>" + _summary_table(res, anchors))
    return "".join(parts)


def _profiles(page: _Page, res: _Results) -> None:
    page.add('<section id="profiles"><h2>Profiles</h2>')
    page.figure(res.root / "profiles.png", "parameter profiles across the batch",
                "Posterior median (points and line) and credible band of each main parameter against the sweep "
                "coordinate recorded in the input (or the table order when there is none), one colour per source "
                "file; open markers are sweeps that did not converge. Axes carry each quantity's unit.",
                "Profiles")
    page.add("</section>")


def _closing(page: _Page, res: _Results, version: str) -> None:
    """Software versions, the files read, the safety note and the footer."""
    page.add('<section id="software"><h2>Software and reproducibility</h2>', _versions_block(res))
    files = sorted(set(res.files), key=_natural_key)
    page.add('<p>Files read for this report: ' + ", ".join(f"<code>{_e(f, 300)}</code>" for f in files[:60])
             + (" &hellip;" if len(files) > 60 else "") + ". The full posteriors are in "
             + ("<code>results.nc</code> (summaries) and, if kept, <code>posteriors/</code>"
                if res.kind == "batch" else "<code>posterior.nc</code> beside each <code>summary.json</code>")
             + ".</p></section>")
    page.add(f'<section class="safety" id="safety"><h2>Safety</h2><p>{_e(SAFETY_NOTE)}</p></section>')
    page.add("</main>")
    page.add(f"<footer>bayesprobe {_e(version)} report &middot; no network resources are used; figures are "
             "embedded. Printing: one sweep per page.</footer>")


def _render(res: _Results) -> str:
    from .._version import __version__
    page = _Page(res)
    anchors = {id(sw): f"s{k + 1}" for k, sw in enumerate(res.sweeps)}
    all_w, per_sweep = collect_warnings(res, anchors)
    page.add(_header(res, __version__), _toc(res, anchors), _warnings_box(all_w, res))
    page.add('<section id="summary"><h2>Summary</h2>',
             _batch_summary(res, anchors) if res.kind == "batch" else _summary_table(res, anchors), "</section>")
    if res.kind == "batch":
        _profiles(page, res)
    for sw in res.sweeps:
        _sweep_section(page, sw, anchors[id(sw)], per_sweep[id(sw)], batch=res.kind == "batch")
    _closing(page, res, __version__)
    return page.html(f"bayesprobe report: {res.root.resolve().name or res.root}")


def build_report(results_dir, *, out=None) -> Path:
    """Write a self-contained HTML report of a results folder and return its path.

    Parameters
    ----------
    results_dir : path
        A fit folder (``summary.json`` and figures), a folder of fit folders (such as
        ``bayesprobe demo`` output) or a batch folder (``results.csv``, ``sweeps/``).
    out : path, optional
        The HTML file to write (default ``results_dir/report.html``); written atomically.

    Raises
    ------
    InputError
        The folder does not exist or holds no bayesprobe results.
    """
    from ..io import atomic_write_text
    res = find_results(results_dir)
    text = _render(res)
    target = Path(out) if out is not None else Path(results_dir) / REPORT_NAME
    if target.is_dir():
        raise InputError(f"--out {str(target)!r} is a folder; give the name of the HTML file to write")
    target.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(target, text)
    return target
