"""Tests for the HTML report (bayesprobe.report): structure, traceable numbers, escaping,
warnings, batch folders, and rendering in headless Chromium."""
from __future__ import annotations

import base64
import csv
import json
import math
import os
import re
import shutil
import subprocess
import tempfile
from html.parser import HTMLParser
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402

import bayesprobe as bp  # noqa: E402
from bayesprobe import report  # noqa: E402
from bayesprobe.report import formatting as fmt  # noqa: E402
from bayesprobe.schema import RESULTS_FIXED  # noqa: E402
from bayesprobe.errors import InputError  # noqa: E402
from bayesprobe.fitting import make_config  # noqa: E402

QUICK = bp.SamplerSettings(initial_steps=300, max_steps=600)
PROBE = bp.Probe("cylindrical", radius=5e-5, length=5e-3)
ARTIFACTS = Path(__file__).parent / "artifacts"
HOSTILE = '<script>alert(1)</script>"><img src=x onerror=alert(2)>&amp;'
TRUTH = {
    "r010mm": {"n_e": 2e16, "T_e": 3.0, "V_p": 12.0},
    "r020mm": {"n_e": 1e16, "T_e_cold": 2.0, "T_e_hot": 9.0, "hot_fraction": 0.1, "V_p": 11.0},
}


# ----------------------------------------------------------------------------- fixtures

@pytest.fixture(scope="module")
def collection(tmp_path_factory):
    """A folder shaped like the demo output: two fit folders and demo_table.csv (synthetic, truth known).

    r010mm: one temperature, Maxwellian fit; r020mm: two temperatures, model="auto" (comparison).
    Short sampler budgets, so both are marked not converged.
    """
    root = tmp_path_factory.mktemp("collection")
    config = make_config(probe=PROBE, ion="Ar", ion_collection="oml")
    rows = ["sweep_id,model,parameter,unit,median,ci_low,ci_high,truth,classical"]
    for k, (sid, truth) in enumerate(TRUTH.items()):
        electrons = "bi-maxwellian" if "T_e_hot" in truth else "maxwellian"
        sim = bp.simulate(truth, config=config.with_(electrons=electrons), n_points=300, noise_rel=0.01,
                          seed=10 + k, sweep_id=sid)
        with pytest.warns(bp.ConvergenceWarning, match="did not converge"):          # the short budget
            result = bp.fit(sim.sweep, config=config, model="auto" if electrons != "maxwellian" else "maxwellian",
                            seed=3, sampler=QUICK, progress=False)
        result.save(root / sid)
        for name, e in result.parameter_summary().items():
            if name in ("T_e", "T_e_cold", "T_e_hot", "hot_fraction", "n_e", "n_i", "V_f", "V_p"):
                t = sim.truth.get(name)
                c = result.classical.get(name)
                rows.append(",".join([sid, result.model, name, e["unit"], repr(e["median"]), repr(e["ci_low"]),
                                      repr(e["ci_high"]), "" if t is None else repr(float(t)),
                                      "" if c is None else repr(float(c))]))
    (root / "demo_table.csv").write_text("\n".join(rows) + "\n")
    return root


@pytest.fixture(scope="module")
def collection_html(collection):
    path = report.build_report(collection)
    return path, path.read_text(encoding="utf-8")


def _copy_fit(src: Path, dst: Path, edit=None) -> Path:
    shutil.copytree(src, dst)
    if edit is not None:
        s = json.loads((dst / "summary.json").read_text())
        edit(s)
        (dst / "summary.json").write_text(json.dumps(s, indent=1))
    return dst


class _Doc(HTMLParser):
    """Tags with attributes, the text of <data> elements, <figure> nesting, <script> bodies."""

    def __init__(self, text):
        super().__init__(convert_charrefs=True)
        self.tags, self.data, self.scripts, self.figures = [], [], [], []
        self._data = None
        self._fig = None
        self._script = None
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "data":
            self._data = [a.get("value"), ""]
        elif tag == "figure":
            self._fig = {"imgs": [], "caption": ""}
        elif tag == "img" and self._fig is not None:
            self._fig["imgs"].append(a)
        elif tag == "figcaption" and self._fig is not None:
            self._fig["in_caption"] = True
        elif tag == "script":
            self._script = ""

    def handle_endtag(self, tag):
        if tag == "data" and self._data is not None:
            self.data.append(tuple(self._data))
            self._data = None
        elif tag == "figure" and self._fig is not None:
            self.figures.append(self._fig)
            self._fig = None
        elif tag == "figcaption" and self._fig is not None:
            self._fig["in_caption"] = False
        elif tag == "script" and self._script is not None:
            self.scripts.append(self._script)
            self._script = None

    def handle_data(self, d):
        if self._data is not None:
            self._data[1] += d
        if self._fig is not None and self._fig.get("in_caption"):
            self._fig["caption"] += d
        if self._script is not None:
            self._script += d


def _numbers_in(obj, out: set):
    if isinstance(obj, bool) or obj is None:
        return out
    if isinstance(obj, (int, float)):
        out.add(float(obj))
    elif isinstance(obj, dict):
        for v in obj.values():
            _numbers_in(v, out)
    elif isinstance(obj, list):
        for v in obj:
            _numbers_in(v, out)
    return out


def _csv_numbers(path: Path, out: set):
    with open(path, newline="") as fh:
        for row in csv.reader(fh):
            for cell in row:
                try:
                    x = float(cell)
                except ValueError:
                    continue
                if math.isfinite(x):
                    out.add(x)
    return out


def _shown_value(text: str) -> tuple[float, float]:
    """(value, half a unit in the last shown digit) of a displayed number such as '1.234 × 10^16' or '-0.26'."""
    t = text.replace("\u202f", " ").replace("\xa0", " ").strip()
    m = re.fullmatch(r"(-?\d+(?:\.(\d+))?)(?:\s*×\s*10(-?\d+))?", t)
    if m is None:
        m = re.fullmatch(r"(-?\d+(?:\.(\d+))?)(?:e(-?\d+))?", t)
    assert m is not None, f"unexpected number format {text!r}"
    exp = int(m.group(3)) if m.group(3) else 0
    decimals = len(m.group(2) or "")
    return float(m.group(1)) * 10.0 ** exp, 0.5 * 10.0 ** (exp - decimals)


# ----------------------------------------------------------------------------- structure

def test_collection_report_structure(collection, collection_html):
    path, text = collection_html
    assert path == collection / "report.html"
    doc = _Doc(text)
    tags = [t for t, _ in doc.tags]
    # tables: summary, and per sweep parameters, comparison, diagnostics, correlations, priors, settings
    assert tags.count("table") >= 2 + 2 * 6
    caption_texts = re.findall(r"<caption>(.*?)</caption>", text)
    assert any("Main results" in c for c in caption_texts)
    assert any("Priors" in c for c in caption_texts)
    assert any("compared by PSIS-LOO" in c for c in caption_texts)
    # units in the summary table
    summary = text[text.index('id="summary"'):text.index('class="sweep"')]
    for unit in ("<td>eV</td>", "<td>V</td>", "<td>m<sup>&minus;3</sup></td>"):
        assert unit in summary
    # truth column from demo_table.csv and the synthetic label
    assert ">truth</th>" in summary and "SYNTHETIC DATA" in text
    # every image is a PNG data URI inside a figure with a numbered caption; nothing is fetched
    imgs = [a for t, a in doc.tags if t == "img"]
    assert len(imgs) == 8                                  # fit, eedf, corner, trace for both sweeps
    assert f'data-images="{len(imgs)}"' in text
    for a in imgs:
        assert a["src"].startswith("data:image/png;base64,")
        raw = base64.b64decode(a["src"].split(",", 1)[1], validate=True)
        assert raw.startswith(b"\x89PNG\r\n\x1a\n")
        assert int(a["width"]) > 100 and int(a["height"]) > 100 and a["alt"]
    assert sum(len(f["imgs"]) for f in doc.figures) == len(imgs)
    for k, f in enumerate(doc.figures, start=1):
        assert len(f["imgs"]) == 1 and f["caption"].startswith(f"Figure {k}.") and len(f["caption"]) > 120
    for t, a in doc.tags:
        for key in ("src", "href"):
            v = a.get(key) or ""
            assert not re.match(r"\s*(https?:|//|ftp:|file:)", v, re.I), (t, v)
        assert t not in ("link", "iframe", "object", "embed")
        if t == "script":
            assert "src" not in a
    assert "default-src 'none'" in text                     # the page may load nothing
    # model comparison in words, rule, reasoning
    s2 = json.loads((collection / "r020mm" / "summary.json").read_text())
    assert s2["comparison"]["reasoning"] and fmt._e(s2["comparison"]["reasoning"]) in text
    assert "Decision:" in text
    # priors, versions, safety
    assert "log-uniform" in text
    assert f"<code>{s2['versions']['numpy']}</code>" in text and "arviz" in text
    assert "licensed" in text and 'id="safety"' in text
    # both not converged (short budgets) -> warnings box with problems
    box = text[text.index('id="warnings"') - 40:text.index('id="summary"')]
    assert 'class="alerts grave"' in box and box.count("not converged") >= 2


def test_every_number_traces_back_to_the_result_files(collection, collection_html):
    _, text = collection_html
    known = set()
    for sub in ("r010mm", "r020mm"):
        _numbers_in(json.loads((collection / sub / "summary.json").read_text()), known)
        _csv_numbers(collection / sub / "parameters.csv", known)
    _csv_numbers(collection / "demo_table.csv", known)
    doc = _Doc(text)
    assert len(doc.data) > 300
    for value, shown in doc.data:
        x = float(value)
        assert x in known, f"{value} (shown as {shown!r}) is in no result file"
        y, half = _shown_value(shown)
        assert abs(y - x) <= half * 1.0001 + 1e-300, (value, shown)
    # the headline numbers are there: T_e median of the first sweep, as in summary.json
    s1 = json.loads((collection / "r010mm" / "summary.json").read_text())
    assert f'<data value="{s1["parameters"]["T_e"]["median"]!r}"' in text


def test_shown_value_parser_rejects_a_mismatch():
    """The tracing test above can fail: a shown number that disagrees with its value is caught."""
    y, half = _shown_value("2.603")
    assert abs(y - 2.6031) <= half and not abs(y - 2.6041) <= half
    y, half = _shown_value("1.234\u202f×\u202f10-6")
    assert math.isclose(y, 1.234e-6) and math.isclose(half, 5e-10)


def test_number_formatting():
    assert fmt._n(2.60229) == '<data value="2.60229" title="2.60229">2.602</data>'
    assert fmt._n(4.000009e16) == ('<data value="4.000009e+16" title="4.000009e+16">'
                                      '4.000&#8239;&times;&#8239;10<sup>16</sup></data>')
    assert fmt._n(99999.7) .endswith("10<sup>5</sup></data>")
    assert fmt._n(1485) == '<data value="1485">1485</data>'
    assert fmt._n(0.9, shortest=True) == '<data value="0.9" title="0.9">0.9</data>'
    assert "&ndash;" in fmt._n(None) and "&ndash;" in fmt._n(float("nan")) and "&ndash;" in fmt._n("x")
    assert "&ndash;" in fmt._n(True)
    assert fmt._sig_digits(14.0029, 13.9935, 14.0121) == 6
    assert fmt._sig_digits(4e16, 3.99e16, 4.01e16) == 4
    assert fmt._unit("m^-3") == "m<sup>&minus;3</sup>"
    assert fmt._unit("<b>") == "&lt;b&gt;"


def test_hostile_strings_are_escaped(collection, tmp_path):
    def edit(s):
        s["sweep_id"] = HOSTILE
        s["sweep"]["notes"] = [f"dropped 3 rows {HOSTILE}"]
        s["comparison"] = {"selected": "maxwellian", "reasoning": HOSTILE, "rule": HOSTILE, "warnings": [HOSTILE],
                           "models": {HOSTILE: {"elpd_loo": 1.0}}}
        s["model_settings"]["ion"] = HOSTILE
        s["versions"]["numpy"] = HOSTILE
        s["parameters"]["T_e"]["unit"] = HOSTILE
    folder = _copy_fit(collection / "r010mm", tmp_path / "hostile", edit)
    text = report.build_report(folder).read_text()
    assert HOSTILE not in text
    assert "<script>alert" not in text and "<img src=x" not in text
    assert "&lt;script&gt;alert(1)&lt;/script&gt;&quot;&gt;&lt;img src=x onerror=alert(2)&gt;&amp;amp;" in text
    doc = _Doc(text)
    assert [t for t, _ in doc.tags].count("script") == 1          # only the report's own self-check
    assert not any(k.startswith("on") for _, a in doc.tags for k in a)
    assert all(a["src"].startswith("data:image/png;base64,") for t, a in doc.tags if t == "img")
    # the hostile id is never used as an element id or link target
    assert all(re.fullmatch(r"[A-Za-z0-9_-]+", a["id"]) for _, a in doc.tags if "id" in a)
    # hostile folder names (shown as file paths and as the fallback sweep name) are escaped too
    bad_name = "<b onmouseover=alert(3)>x"
    outer = tmp_path / "outer<i>"
    _copy_fit(collection / "r010mm", outer / bad_name, lambda s: s.update(sweep_id=None))
    text = report.build_report(outer).read_text()
    assert bad_name not in text and "<i>" not in text and "&lt;b onmouseover=alert(3)&gt;x" in text
    assert not any(k.startswith("on") for _, a in _Doc(text).tags for k in a)


def test_warnings_for_non_convergence_pareto_k_and_distortions(collection, tmp_path):
    def bad(s):
        s["diagnostics"]["converged"] = False
        s["diagnostics"]["unmet"] = ["bulk ESS 321 < 1000"]
        s["comparison"] = {"selected": "maxwellian", "reasoning": "kept one temperature", "warnings": [],
                           "models": {"maxwellian": {"elpd_loo": 10.0, "pareto_k_max": 1.3,
                                                     "n_pareto_k_above_0.7": 4, "converged": False}}}
        s["sweep"]["notes"] = ["dropped 7 rows with a missing or non-finite voltage or current"]
        # the summary's distortions block as fits write it (distortion_choice.describe_distortions)
        s["distortions"] = {"enabled": ["hysteresis"], "parameters": ["V_shift", "I_cap"],
                            "descriptions": {"hysteresis": "up/down sweep hysteresis"},
                            "note": "up and down sweeps differ by 0.4 V",
                            "hysteresis": {"V_shift_V": {"median": 0.4, "lower": 0.35, "upper": 0.45},
                                           "I_cap_A": {"median": 1e-8, "lower": -1e-8, "upper": 3e-8},
                                           "credible_level": 0.9, "shift_excludes_zero": True,
                                           "note": "up and down sweeps differ by 0.4 V"}}
    text = report.build_report(_copy_fit(collection / "r010mm", tmp_path / "bad", bad)).read_text()
    box = text[text.index('id="warnings"') - 40:text.index('id="summary"')]
    assert 'class="alerts grave"' in box
    assert "not converged" in box and "bulk ESS 321 &lt; 1000" in box
    assert "high Pareto k" in box and "(the selected one)" in box
    assert "dropped 7 rows" in box and "hysteresis" not in box
    assert "shifted by &Delta;V<sub>h</sub> = 0.4 V (interval 0.35 to 0.45 V; excludes zero)" in box
    section = text[text.index("<h3>Distortions</h3>"):text.index("<h3>Model comparison</h3>")]
    assert "up and down sweeps differ by 0.4 V" in section and '<data value="0.35"' in section

    def good(s):
        s["diagnostics"]["converged"] = True
        s["diagnostics"]["unmet"] = []
        s["sweep"]["notes"] = []
        s["parameters"]["n_i_over_n_e"].update(ci_low=0.98, ci_high=1.02)
        for name in s["priors"]:                     # intervals well inside the prior ranges
            s["priors"][name]["prior"] = {"kind": "uniform", "lower": -1e30, "upper": 1e30}
    text = report.build_report(_copy_fit(collection / "r010mm", tmp_path / "good", good)).read_text()
    box = text[text.index('id="warnings"') - 40:text.index('id="summary"')]
    assert 'class="alerts clean"' in box and "Warnings: none" in box and "not converged" not in text


def test_prior_bound_and_density_ratio_cautions(collection, tmp_path):
    def edit(s):
        s["parameters"]["n_i_over_n_e"].update(ci_low=1.4, ci_high=1.6)
        s["priors"]["T_e"]["prior"]["upper"] = s["parameters"]["T_e"]["ci_high"] * 1.001
    text = report.build_report(_copy_fit(collection / "r010mm", tmp_path / "edge", edit)).read_text()
    box = text[text.index('id="warnings"'):text.index('id="summary"')]
    assert "upper prior bound" in box and "n<sub>i</sub>/n<sub>e</sub> lies in" in box


def test_missing_and_broken_figures_are_reported_not_embedded(collection, tmp_path):
    folder = _copy_fit(collection / "r010mm", tmp_path / "figs")
    (folder / "corner.png").write_bytes(b"<svg onload=alert(1)>")
    (folder / "trace.png").unlink()
    text = report.build_report(folder).read_text()
    doc = _Doc(text)
    assert len([1 for t, _ in doc.tags if t == "img"]) == 2 and 'data-images="2"' in text
    assert "corner.png not a PNG image" in text and "trace.png not written" in text
    assert "onload" not in text


def test_importance_sampling_fit_reports_its_own_diagnostics(tmp_path):
    config = make_config(probe=PROBE, ion="Ar", ion_collection="oml")
    sim = bp.simulate({"n_e": 1e16, "T_e": 3.0, "V_p": 12.0}, config=config, n_points=300, noise_rel=0.01, seed=5,
                      sweep_id="fast")
    result = bp.fit(sim.sweep, config=config, seed=3, progress=False, engine="fast")
    result.save(tmp_path / "fast")
    d = json.loads((tmp_path / "fast" / "summary.json").read_text())["diagnostics"]
    text = report.build_report(tmp_path / "fast").read_text()
    diag = text[text.index("<h3>Sampler diagnostics</h3>"):text.index("<h3>Priors and settings")]
    if d["engine"] == "importance":
        assert "Pareto k&#770; of the importance weights" in diag and f'<data value="{d["khat"]!r}"' in diag
        assert "rank-normalised R&#770;" not in diag and "Figure 4. Posterior draws." in _Doc(text).figures[3]["caption"]
    else:                               # importance weights rejected: MCMC fallback, said in words
        assert "not accepted" in diag and "rank-normalised R&#770;" in diag


def test_out_option_and_atomic_write(collection, tmp_path):
    folder = _copy_fit(collection / "r010mm", tmp_path / "single")
    target = tmp_path / "deep" / "r.html"
    assert report.build_report(folder, out=target) == target
    assert target.read_text().startswith("<!DOCTYPE html>")
    assert not (folder / "report.html").exists()
    assert not [p for p in target.parent.iterdir() if p.name != "r.html"]     # no temporary left behind
    with pytest.raises(InputError, match="is a folder"):
        report.build_report(folder, out=tmp_path)


def test_folders_without_results_raise_input_error(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        report.build_report(tmp_path / "nope")
    (tmp_path / "empty" / "sub").mkdir(parents=True)
    with pytest.raises(InputError, match="holds no bayesprobe results"):
        report.build_report(tmp_path / "empty")
    (tmp_path / "broken").mkdir()
    (tmp_path / "broken" / "summary.json").write_text("{not json")
    with pytest.raises(InputError, match="unreadable"):
        report.build_report(tmp_path / "broken")
    assert not (tmp_path / "empty" / "report.html").exists()


def test_cli_report_command(collection, tmp_path, capsys):
    from bayesprobe import cli
    folder = _copy_fit(collection / "r010mm", tmp_path / "cli")
    assert cli.main(["report", str(folder)]) == 0
    assert (folder / "report.html").is_file()
    assert cli.main(["report", str(folder), "--out", str(tmp_path / "x.html")]) == 0
    assert (tmp_path / "x.html").is_file()
    capsys.readouterr()
    (tmp_path / "none").mkdir()
    assert cli.main(["report", str(tmp_path / "none")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "no bayesprobe results" in err


# ----------------------------------------------------------------------------- batch folders

def _write_png(path: Path):
    from matplotlib.figure import Figure
    fig = Figure(figsize=(4, 3))
    ax = fig.add_subplot()
    ax.plot([0, 1, 2], [3.0, 2.5, 2.8], "o-")
    ax.set_xlabel("time [s]")
    ax.set_ylabel("T_e [eV]")
    fig.savefig(path, format="png", dpi=60)


def test_batch_folder_from_records_and_table(collection, tmp_path):
    """A batch folder as documented (records with a nested summary, results.csv, profiles.png)."""
    out = tmp_path / "batch"
    (out / "sweeps").mkdir(parents=True)
    header = list(RESULTS_FIXED[:4]) + ["time"] + list(RESULTS_FIXED[4:])
    params = ["T_e", "n_e", "V_p"]
    header += [f"{p}_{s}" for p in params for s in ("median", "ci_low", "ci_high")]
    rows = []
    s = json.loads((collection / "r010mm" / "summary.json").read_text())
    for k in range(3):
        sid = f"t{k:02d}"
        status = "failed" if k == 2 else "not-converged"
        label = "run 1/raw <b>" if k == 1 else sid      # an id that had to be made file-safe
        rec = {"schema": "bayesprobe.batch-sweep/1", "sweep_id": sid, "label": label, "source": "series.npz",
               "index": k, "coords": {"time": 0.5 * k}, "seed": 12345678901234567 + k, "status": status,
               "reason": f"fit failed: {HOSTILE}" if k == 2 else "", "summary": None if k == 2 else s}
        (out / "sweeps" / f"{sid}.json").write_text(json.dumps(rec))
        row = {"sweep_id": sid, "label": label, "source": "series.npz", "index": str(k), "time": repr(0.5 * k),
               "status": status, "reason": rec["reason"], "seed": str(rec["seed"])}
        if k < 2:
            d = s["diagnostics"]
            row.update(model=s["model"], converged="false", credible_level="0.9",
                       r_hat_max=repr(d["r_hat_max"]), ess_bulk_min=repr(d["ess_bulk_min"]))
            for p in params:
                e = s["parameters"][p]
                row.update({f"{p}_median": repr(e["median"]), f"{p}_ci_low": repr(e["ci_low"]),
                            f"{p}_ci_high": repr(e["ci_high"])})
        rows.append(row)
    with open(out / "results.csv", "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=header, restval="")
        w.writeheader()
        w.writerows(rows)
    _write_png(out / "profiles.png")
    text = report.build_report(out).read_text()
    assert "batch of 3 sweeps" in text and 'id="profiles"' in text
    doc = _Doc(text)
    assert len([1 for t, _ in doc.tags if t == "img"]) == 1 and "Figure 1. Profiles." in doc.figures[0]["caption"]
    table = text[text.index('class="summary batch"'):]
    table = table[:table.index("</table>")]
    assert table.count("<tr>") == 1 + 3 and "T<sub>e</sub> [eV]" in table and "m<sup>&minus;3</sup>" in table
    assert ">time</th>" in table
    assert '<a href="#s2">t01</a>' in table and "<code>run 1/raw &lt;b&gt;</code>" in text   # id in the input
    box = text[text.index('id="warnings"'):text.index('id="summary"')]
    assert "the fit failed: fit failed: &lt;script&gt;" in box and HOSTILE not in text
    assert box.count("not converged") >= 2
    known = set()
    _numbers_in(s, known)
    _csv_numbers(out / "results.csv", known)
    for sub in (out / "sweeps").iterdir():
        _numbers_in(json.loads(sub.read_text()), known)
    known |= {3.0, 0.0, 2.0, 1.0}                      # the status counts
    for value, shown in doc.data:
        assert float(value) in known, (value, shown)
    assert '<data value="12345678901234567">12345678901234567</data>' in text   # 64-bit seeds exactly


def test_batch_folder_written_by_fit_many(tmp_path):
    batch = pytest.importorskip("bayesprobe.batch")
    config = make_config(probe=PROBE, ion="Ar", ion_collection="oml")
    V = np.linspace(-20, 18, 200)
    currents = []
    for k, T in enumerate((2.5, 3.5)):
        sim = bp.simulate({"n_e": 1e16, "T_e": T, "V_p": 12.0}, config=config, n_points=200, noise_rel=0.01,
                          seed=k, v_min=-20, v_max=18)
        currents.append(np.interp(V, sim.sweep.voltage, sim.sweep.current))
    np.savez(tmp_path / "series.npz", voltage=V, current=np.array(currents), time=np.array([0.0, 1.0]))
    summary = batch.fit_many([tmp_path / "series.npz"], out_dir=tmp_path / "out", config=config, workers=1,
                             sampler=QUICK, progress=False)
    assert summary.n_sweeps == 2
    text = report.build_report(tmp_path / "out").read_text()
    assert "batch of 2 sweeps" in text and "series-0" in text and "series-1" in text
    assert 'class="summary batch"' in text and 'id="s1"' in text and 'id="s2"' in text
    n_img = len([1 for t, _ in _Doc(text).tags if t == "img"])
    assert f'data-images="{n_img}"' in text and n_img == int((tmp_path / "out" / "profiles.png").is_file())


# ----------------------------------------------------------------------------- headless Chromium

def _chromium():
    for c in ("/usr/bin/chromium", shutil.which("chromium"), shutil.which("chromium-browser")):
        if c and os.path.isfile(c) and os.access(c, os.X_OK):
            return c
    return None


CHROMIUM = _chromium()
needs_chromium = pytest.mark.skipif(CHROMIUM is None, reason="headless Chromium not installed "
                                                              "(Debian: apt-get install chromium)")


def _chromium_run(html_path: Path, *extra: str) -> subprocess.CompletedProcess:
    with tempfile.TemporaryDirectory(prefix="bp-chromium-") as profile:
        args = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                "--disable-background-networking", "--disable-component-update", "--disable-sync",
                "--disable-dev-shm-usage", "--hide-scrollbars", f"--user-data-dir={profile}", *extra,
                html_path.resolve().as_uri()]
        env = dict(os.environ, HOME=profile)
        return subprocess.run(args, capture_output=True, text=True, timeout=180, env=env)


def _selfcheck(html_path: Path) -> str:
    proc = _chromium_run(html_path, "--virtual-time-budget=3000", "--dump-dom")
    m = re.search(r'data-selfcheck="([^"]*)"', proc.stdout)
    assert m, f"no self-check marker in the rendered page (exit {proc.returncode}): {proc.stderr[-800:]}"
    return m.group(1)


def _screenshot(html_path: Path, png: Path) -> Path:
    png.parent.mkdir(parents=True, exist_ok=True)
    if png.exists():
        png.unlink()
    _chromium_run(html_path, f"--screenshot={png}", "--window-size=1280,2000")
    assert png.is_file(), "Chromium wrote no screenshot"
    return png


def _check_screenshot(png: Path):
    import matplotlib.image as mpimg
    img = mpimg.imread(png)
    assert img.shape[1] == 1280 and img.shape[0] == 2000
    assert float(np.std(img[..., :3])) > 0.05           # not a blank page


@needs_chromium
def test_demo_shaped_report_renders_in_chromium(collection_html):
    path, _ = collection_html
    assert _selfcheck(path) == "ok:8"
    png = _screenshot(path, ARTIFACTS / "report-collection.png")
    _check_screenshot(png)
    print(f"screenshot: {png}")


@needs_chromium
def test_selfcheck_reports_a_broken_image(collection_html, tmp_path):
    _, text = collection_html
    start = text.index("data:image/png;base64,") + len("data:image/png;base64,")
    broken = text[:start] + base64.b64encode(b"\x89PNG\r\n\x1a\n" + b"\0" * 64).decode() + \
        text[text.index('"', start):]
    (tmp_path / "broken.html").write_text(broken)
    mark = _selfcheck(tmp_path / "broken.html")
    assert mark.startswith("fail:") and "1 of 8 images not loaded" in mark


@needs_chromium
def test_selfcheck_reports_script_errors_and_blocked_scripts(collection_html, tmp_path):
    _, text = collection_html
    # an injected inline script is refused by the page's content security policy
    injected = text.replace("</main>", "<script>document.title='pwned'</script></main>", 1)
    (tmp_path / "injected.html").write_text(injected)
    mark = _selfcheck(tmp_path / "injected.html")
    assert mark.startswith("fail:") and "blocked script-src" in mark
    # without the policy, a script error is caught by the error hook
    no_csp = re.sub(r'<meta http-equiv="Content-Security-Policy"[^>]*>', "", text)
    no_csp = no_csp.replace("</main>", "<script>throw new Error('boom')</script></main>", 1)
    (tmp_path / "error.html").write_text(no_csp)
    mark = _selfcheck(tmp_path / "error.html")
    assert mark.startswith("fail:") and "script error" in mark and "boom" in mark


@pytest.mark.slow
@needs_chromium
def test_real_demo_report_renders_in_chromium(tmp_path):
    """The full `bayesprobe demo` output (a few minutes) rendered as a report."""
    from bayesprobe.demo import run_demo
    run_demo(tmp_path / "demo", quiet=True)
    path = report.build_report(tmp_path / "demo")
    n = len([1 for t, _ in _Doc(path.read_text()).tags if t == "img"])
    assert n == 12 and _selfcheck(path) == f"ok:{n}"
    png = _screenshot(path, ARTIFACTS / "report-demo.png")
    _check_screenshot(png)
    print(f"screenshot: {png}")


# ----------------------------------------------------------------------------- a real fit with distortions

@pytest.fixture(scope="module")
def distorted_folder(tmp_path_factory):
    """A real fit folder whose summary has a distortions block: a sweep recorded with rising and
    falling bias, the rising branch shifted by 0.4 V, 3 % heavy-tailed outliers; fitted with the
    hysteresis and outlier models by the fast engine and saved by FitResult.save."""
    config = make_config(probe=PROBE, ion="Ar", ion_collection="oml")
    sim = bp.simulate({"n_e": 1e16, "T_e": 3.0, "V_p": 12.0, "V_shift": 0.4, "I_cap": 0.0},
                      config=config.with_(hysteresis=True), n_points=300, noise_rel=0.01, seed=5,
                      sweep_id="hyst", both_directions=True, outlier_fraction=0.03)
    result = bp.fit(sim.sweep, config=config, seed=3, progress=False, engine="fast",
                    distortions=("hysteresis", "outliers"))
    return result.save(tmp_path_factory.mktemp("distorted") / "hyst")


def test_report_shows_the_distortions_of_a_real_fit(distorted_folder):
    """The distortions block of summary.json (a dict: note, hysteresis shift, outliers) reaches the page:
    as warnings in the box and as its own block in the sweep's section, every number traced."""
    s = json.loads((distorted_folder / "summary.json").read_text())
    d = s["distortions"]
    assert isinstance(d, dict) and d["outliers"]["n_flagged"] > 0 and d["hysteresis"]["shift_excludes_zero"]
    text = report.build_report(distorted_folder).read_text()
    box = text[text.index('id="warnings"'):text.index('id="summary"')]
    assert f"{d['outliers']['n_flagged']} point(s) flagged as outliers" in box
    assert "shifted by &Delta;V<sub>h</sub> = " in box and "excludes zero" in box
    section = text[text.index("<h3>Distortions</h3>"):text.index("<h3>Model comparison</h3>")]
    assert fmt._e(d["note"]) in section
    assert f'<data value="{d["hysteresis"]["V_shift_V"]["median"]!r}"' in section
    assert f'<data value="{d["outliers"]["n_flagged"]}">' in section
    for desc in d["descriptions"].values():
        assert fmt._e(desc) in section
    known = _numbers_in(s, set())
    _csv_numbers(distorted_folder / "parameters.csv", known)
    for value, shown in _Doc(text).data:
        assert float(value) in known, (value, shown)


def test_report_takes_descriptions_from_the_file_escaped_and_labels_from_the_registry(distorted_folder, tmp_path):
    def edit(s):
        s["quantities"]["T_e"]["description"] = f"temperature {HOSTILE}"
        s["quantities"]["T_e"]["label_html"] = "<b onclick=alert(4)>T</b>"
    text = report.build_report(_copy_fit(distorted_folder, tmp_path / "labels", edit)).read_text()
    params = text[text.index('<table class="parameters">'):]
    params = params[:params.index("</table>")]
    assert "temperature &lt;script&gt;" in params and HOSTILE not in text
    assert "onclick" not in text and "T<sub>e</sub>" in params            # markup only from the registry
