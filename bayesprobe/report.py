"""``bayesprobe report``: one self-contained HTML page for a results folder.

A results folder is one of

* a **fit folder** (``summary.json``, ``parameters.csv``, ``posterior.nc`` and the
  figures ``fit.png``, ``corner.png``, ``trace.png``, ``eedf.png``) as written by
  ``bayesprobe fit``;
* a **folder of fit folders**, such as the output of ``bayesprobe demo`` (which
  adds ``demo_table.csv`` with the known truth of its synthetic sweeps);
* a **batch folder** (``results.csv``, ``results.nc``, ``sweeps/<id>.json``,
  ``profiles.png``) as written by ``bayesprobe batch``.

The page embeds the existing PNG figures as ``data:`` URIs, carries its own
stylesheet and a small self-check script, and loads nothing from the network
(a Content-Security-Policy forbids it). Every number on the page is read from
``summary.json``, ``results.csv``, ``sweeps/<id>.json`` or ``demo_table.csv``
and written inside ``<data value="...">`` with its full-precision value, so it
can be traced back to those files. Every string read from the folder is
untrusted and HTML-escaped.

On load, the self-check script sets ``data-selfcheck`` on the ``<html>`` element
to ``ok:N`` (all N images decoded, no script error, no blocked resource) or to
``fail:...`` with the reasons; the test suite reads it from a headless browser.
"""
from __future__ import annotations

import base64
import csv
import hashlib
import html
import json
import math
import re
import struct
from dataclasses import dataclass, field
from pathlib import Path

from .errors import InputError
from .quantities import description_of, html_label, main_names, unit_of

__all__ = ["build_report", "REPORT_NAME", "SAFETY_NOTE", "SELFCHECK_ATTRIBUTE"]

#: default file name, written inside the results folder
REPORT_NAME = "report.html"
#: attribute of <html> set by the self-check script: "ok:N" or "fail:reasons"
SELFCHECK_ATTRIBUTE = "data-selfcheck"

SAFETY_NOTE = (
    "Probe work involves hazards that software cannot remove. Bias supplies and source-measure units can "
    "deliver lethal voltages and currents; RF-driven plasmas put high voltage on probe shafts, cables and "
    "feedthroughs and can cause RF burns; vacuum vessels, viewports and gas lines store energy; reactive "
    "process gases can be toxic. Follow your laboratory's safety rules, local electrical codes and the "
    "instructions of the equipment's makers, and leave design and sign-off of high-voltage, RF and vacuum "
    "systems to qualified, licensed people. bayesprobe only analyses data; it does not make any setup safe.")

#: largest JSON file read (bytes); larger ones are reported, not read
MAX_JSON_BYTES = 16 << 20
#: largest PNG embedded (bytes)
MAX_IMAGE_BYTES = 24 << 20
#: rows of a batch table shown (all rows are counted for the warnings)
MAX_TABLE_ROWS = 2000
#: sweeps given a section of their own (fit folders or batch records)
MAX_SECTIONS = 100
#: warnings listed one by one in the box at the top (all are counted)
MAX_LISTED_WARNINGS = 60
#: longest string taken from a file that is shown (characters)
MAX_TEXT = 2000
#: n_i/n_e is flagged when its whole credible interval lies outside [1/(1+x), 1+x]
RATIO_TOLERANCE = 0.10
#: a credible interval that comes within this fraction of the prior range
#: (in the sampled, possibly log, coordinate) of a prior bound is flagged
PRIOR_EDGE = 0.01
#: Pareto k above which PSIS-LOO is unreliable at a point (Vehtari, Gelman & Gabry 2017)
PARETO_K_LIMIT = 0.7

FIGURE_FILES = ("fit", "eedf", "corner", "trace")
_PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
_BATCH_FIXED = ("sweep_id", "label", "source", "index", "status", "reason", "model", "converged",
                "credible_level", "seed", "n_points", "r_hat_max", "ess_bulk_min", "tau_max", "n_steps", "n_draws")


# ============================================================================ small helpers

_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f]")
#: reader notes that mean the data were altered or damaged (a caution); other notes are informational
_DISTORTION_WORDS = re.compile(r"dropp|missing|non-finite|clip|saturat|duplicat|outlier|distort|overflow|"
                               r"truncat|hysteres", re.IGNORECASE)


def _e(text, limit: int = MAX_TEXT) -> str:
    """HTML-escape untrusted text (control characters hidden, length capped)."""
    s = _CONTROL.sub("?", str(text))
    if len(s) > limit:
        s = s[: limit - 1] + "\u2026"
    return html.escape(s, quote=True)


def _num(v):
    """A finite float from a JSON/CSV value, or None (bools and strings other than numbers are not numbers)."""
    if isinstance(v, bool) or v is None:
        return None
    if isinstance(v, (int, float)):
        x = float(v)
    elif isinstance(v, str):
        try:
            x = float(v.strip())
        except ValueError:
            return None
    else:
        return None
    return x if math.isfinite(x) else None


def _dict(v) -> dict:
    return v if isinstance(v, dict) else {}


def _list(v) -> list:
    return v if isinstance(v, list) else []


def _natural_key(s: str):
    return [(0, int(t), "") if t.isdigit() else (1, 0, t) for t in re.split(r"(\d+)", s) if t] + [(2, 0, s)]


def _sig_digits(value, lo=None, hi=None) -> int:
    """Significant digits that show the shorter side of an interval to two digits (3 to 8)."""
    widths = [w for w in ((value - lo) if lo is not None else None, (hi - value) if hi is not None else None)
              if w is not None and w > 0]
    if not widths or value == 0:
        return 4
    w = min(widths)
    digits = math.floor(math.log10(abs(value))) - math.floor(math.log10(w)) + 2
    return int(min(8, max(3, digits)))


def _mantissa_html(text: str) -> str:
    """'1.234e+16' -> '1.234 &times; 10<sup>16</sup>'; plain numbers unchanged."""
    if "e" not in text:
        return text
    mant, exp = text.split("e")
    return f"{mant}&#8239;&times;&#8239;10<sup>{int(exp)}</sup>"     # narrow no-break spaces


def _format(x: float, digits: int) -> str:
    if x == 0:
        return "0"
    exp = math.floor(math.log10(abs(x)))
    if -3 <= exp < 5:
        decimals = max(0, digits - 1 - exp)
        text = f"{x:.{decimals}f}"
        if float(text) != 0 and abs(float(text)) >= 10 ** 5:     # rounded up past the range
            text = f"{x:.{digits - 1}e}"
        return text
    return f"{x:.{digits - 1}e}"


def _n(v, digits: int = 4, *, fixed: int | None = None, shortest: bool = False) -> str:
    """A number from a results file as <data value=full precision>formatted</data>; '–' if missing.

    ``digits`` significant digits (trailing zeros kept, they show the precision), or
    ``fixed`` decimals, or with ``shortest`` up to ``digits`` significant digits without
    trailing zeros (settings such as 0.9 or 1e-4).
    """
    x = _num(v)
    if x is None:
        return '<span class="na" title="not available">&ndash;</span>'
    if isinstance(v, int) and not isinstance(v, bool) and abs(v) < 10 ** 40:     # counts, seeds: exact
        return f'<data value="{v}">{v}</data>'
    if fixed is not None:
        shown = f"{x:.{fixed}f}"
    elif shortest:
        shown = f"{x:.{digits}g}".replace("e+", "e")
        if "e" in shown:
            m, ex = shown.split("e")
            shown = f"{m}e{int(ex)}"
    else:
        shown = _format(x, digits)
    return f'<data value="{x!r}" title="{x!r}">{_mantissa_html(shown)}</data>'


def _unit(u) -> str:
    """Unit string as HTML: 'm^-3' -> m<sup>-3</sup>; '1' -> dimensionless dash."""
    if u is None or u == "":
        return ""
    s = str(u)
    if s == "1":
        return '<span class="dimless" title="dimensionless">1</span>'
    return re.sub(r"\^(-?\d+)", lambda m: f"<sup>{m.group(1).replace('-', '&minus;')}</sup>", _e(s, 40))


def _symbol(name: str) -> str:
    return html_label(name) or _e(name, 80)


def _name_cell(name: str, description: str | None = None) -> str:
    desc = f'<span class="desc">{_e(description, 200)}</span>' if description else ""
    return f'<th scope="row">{_symbol(name)} <code>{_e(name, 80)}</code>{desc}</th>'


def _pct(level) -> str:
    x = _num(level)
    return "?" if x is None else f"{100 * x:g}&nbsp;%"


def _yesno(v) -> str:
    if v is True:
        return '<span class="yes">yes</span>'
    if v is False:
        return '<span class="no">no</span>'
    return '<span class="na">&ndash;</span>'


def _value(v) -> str:
    """Any JSON scalar as HTML (numbers traced, strings escaped); booleans as plain yes/no."""
    if isinstance(v, bool):
        return "yes" if v else "no"
    if v is None:
        return '<span class="na">&ndash;</span>'
    if isinstance(v, (int, float)):
        return _n(v, 6, shortest=True)
    if isinstance(v, (list, tuple)):
        return ", ".join(_value(x) for x in v[:50]) or "&ndash;"
    if isinstance(v, dict):
        return _e(json.dumps(v, sort_keys=True)[:MAX_TEXT])
    return _e(v)


def _flatten(d: dict, prefix: str = "") -> list[tuple[str, object]]:
    out = []
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out += _flatten(v, key + ".")
        else:
            out.append((key, v))
    return out


def _png_size(data: bytes):
    """(width, height) from a PNG's IHDR chunk, or None if the bytes are not a PNG."""
    if len(data) < 24 or not data.startswith(_PNG_MAGIC) or data[12:16] != b"IHDR":
        return None
    w, h = struct.unpack(">II", data[16:24])
    return (w, h) if 0 < w < 100_000 and 0 < h < 100_000 else None


# ============================================================================ reading the folder

@dataclass
class _Sweep:
    """One fit: a fit folder or one batch record."""

    label: str
    source: str                       # the file its numbers come from (relative path, for the reader)
    summary: dict | None
    status: str                       # ok | not-converged | failed
    reason: str = ""
    folder: Path | None = None        # where its figures are (fit folders)
    coords: dict = field(default_factory=dict)
    seed: object = None               # batch: the sweep's own seed from its record
    given_label: str | None = None    # batch: the id as given in the input, when the file id differs


@dataclass
class _Results:
    kind: str                         # fit | collection | batch
    root: Path
    sweeps: list = field(default_factory=list)
    n_sweeps: int = 0                 # all sweeps (batch: every row), even those without a section
    problems: list = field(default_factory=list)     # unreadable files: (sweep label or '', message)
    files: list = field(default_factory=list)        # files read, relative to root
    demo_rows: list = field(default_factory=list)    # demo_table.csv rows (dicts)
    batch_header: list = field(default_factory=list)
    batch_rows: list = field(default_factory=list)   # results.csv rows (dicts), at most MAX_TABLE_ROWS
    batch_counts: dict = field(default_factory=dict)
    batch_problem_rows: list = field(default_factory=list)   # (sweep_id, status, reason), capped
    truncated_sections: int = 0


def _rel(path: Path, root: Path) -> str:
    try:
        return str(path.relative_to(root))
    except ValueError:
        return str(path)


def _read_json(path: Path, res: _Results, label: str = ""):
    try:
        size = path.stat().st_size
        if size > MAX_JSON_BYTES:
            res.problems.append((label, f"{_rel(path, res.root)} is {size} bytes, more than the "
                                        f"{MAX_JSON_BYTES} read; it is left out"))
            return None
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError, RecursionError) as exc:
        res.problems.append((label, f"{_rel(path, res.root)} is unreadable ({type(exc).__name__}); "
                                    "it is left out"))
        return None
    if not isinstance(data, dict):
        res.problems.append((label, f"{_rel(path, res.root)} does not hold a JSON object; it is left out"))
        return None
    res.files.append(_rel(path, res.root))
    return data


def _status_of(summary: dict) -> str:
    return "ok" if _dict(summary.get("diagnostics")).get("converged") is True else "not-converged"


def _fit_sweep(folder: Path, res: _Results, fallback_label: str) -> _Sweep | None:
    summary = _read_json(folder / "summary.json", res, fallback_label)
    if summary is None:
        return None
    label = summary.get("sweep_id") if isinstance(summary.get("sweep_id"), str) and summary.get("sweep_id") \
        else fallback_label
    return _Sweep(label=label, source=_rel(folder / "summary.json", res.root), summary=summary,
                  status=_status_of(summary), folder=folder)


def _read_csv(path: Path, res: _Results):
    """(header, generator of row dicts) of a CSV read as a stream, or (None, None).

    Close the generator if it is not run to the end (that closes the file).
    """
    try:
        fh = open(path, newline="", encoding="utf-8")
    except OSError as exc:
        res.problems.append(("", f"{_rel(path, res.root)} is unreadable ({type(exc).__name__}); it is left out"))
        return None, None
    reader = csv.reader(fh)
    try:
        header = next(reader)
    except (StopIteration, csv.Error, UnicodeError, OSError):
        fh.close()
        res.problems.append(("", f"{_rel(path, res.root)} is empty or not CSV; it is left out"))
        return None, None
    res.files.append(_rel(path, res.root))

    def rows():
        with fh:
            try:
                for line in reader:
                    if line:
                        yield dict(zip(header, line))
            except (csv.Error, UnicodeError, OSError):
                res.problems.append(("", f"{_rel(path, res.root)} has a malformed line; the rest is left out"))
    return header, rows()


def _record_sweep(path: Path, res: _Results) -> _Sweep:
    rec = _read_json(path, res, path.stem)
    if rec is None:
        return _Sweep(label=path.stem, source=_rel(path, res.root), summary=None, status="failed",
                      reason="the record of this sweep is unreadable")
    summary = rec.get("summary") if isinstance(rec.get("summary"), dict) else (
        rec if isinstance(rec.get("parameters"), dict) else None)
    status = rec.get("status") if rec.get("status") in ("ok", "not-converged", "failed") else (
        _status_of(summary) if summary else "failed")
    sid = rec.get("sweep_id") if isinstance(rec.get("sweep_id"), str) and rec.get("sweep_id") else path.stem
    given = rec.get("label")
    return _Sweep(label=sid, source=_rel(path, res.root), summary=summary, status=status,
                  reason=str(rec.get("reason") or ""), coords=_dict(rec.get("coords")), seed=rec.get("seed"),
                  given_label=str(given) if given not in (None, "", sid) else None)


def find_results(results_dir) -> _Results:
    """Read what a results folder holds (no figures decoded yet).

    Raises :class:`~bayesprobe.errors.InputError` if the folder holds no results.
    """
    root = Path(results_dir)
    if not root.is_dir():
        raise InputError(f"results folder {str(root)!r} does not exist or is not a folder")
    if (root / "summary.json").is_file():
        res = _Results("fit", root)
        sw = _fit_sweep(root, res, root.name)
        if sw is None:
            raise InputError(f"{str(root / 'summary.json')!r} is unreadable; "
                             f"{res.problems[0][1] if res.problems else ''}")
        res.sweeps.append(sw)
        res.n_sweeps = 1
        return res
    if (root / "results.csv").is_file() or (root / "sweeps").is_dir():
        res = _Results("batch", root)
        _read_batch(res)
        if res.n_sweeps == 0 and not res.sweeps:
            raise InputError(f"batch folder {str(root)!r} holds no sweep results yet "
                             "(results.csv and sweeps/*.json are missing or empty)")
        return res
    subs = sorted((p for p in root.iterdir() if p.is_dir() and not p.name.startswith(".")
                   and (p / "summary.json").is_file()), key=lambda p: _natural_key(p.name))
    if not subs:
        raise InputError(f"{str(root)!r} holds no bayesprobe results: expected summary.json, sub-folders "
                         "with summary.json, or a batch's results.csv / sweeps/*.json")
    res = _Results("collection", root)
    res.n_sweeps = len(subs)
    for p in subs[:MAX_SECTIONS]:
        sw = _fit_sweep(p, res, p.name)
        if sw is not None:
            res.sweeps.append(sw)
    res.truncated_sections = max(0, len(subs) - MAX_SECTIONS)
    if not res.sweeps:
        raise InputError(f"no readable summary.json in the sub-folders of {str(root)!r}")
    if (root / "demo_table.csv").is_file():
        header, rows = _read_csv(root / "demo_table.csv", res)
        if header is not None:
            res.demo_rows = [r for _, r in zip(range(10_000), rows)]
            rows.close()
    return res


def _read_batch(res: _Results):
    root = res.root
    counts = {"ok": 0, "not-converged": 0, "failed": 0, "other": 0}
    if (root / "results.csv").is_file():
        header, rows = _read_csv(root / "results.csv", res)
        if header is not None:
            res.batch_header = header
            for row in rows:
                res.n_sweeps += 1
                st = row.get("status", "")
                counts[st if st in counts else "other"] += 1
                if len(res.batch_rows) < MAX_TABLE_ROWS:
                    res.batch_rows.append(row)
                if st != "ok" and len(res.batch_problem_rows) < 10_000:
                    res.batch_problem_rows.append((row.get("sweep_id", ""), st, row.get("reason", "")))
    records = []
    if (root / "sweeps").is_dir():
        records = sorted((p for p in (root / "sweeps").iterdir() if p.suffix == ".json"
                          and not p.name.startswith(".") and p.is_file()), key=lambda p: _natural_key(p.stem))
    if not res.batch_header:          # no table: the records are all there is
        res.n_sweeps = len(records)
    for p in records[:MAX_SECTIONS]:
        sw = _record_sweep(p, res)
        res.sweeps.append(sw)
        if not res.batch_header:
            counts[sw.status if sw.status in counts else "other"] += 1
            if sw.status != "ok":
                res.batch_problem_rows.append((sw.label, sw.status, sw.reason))
    if not res.batch_header and len(records) > MAX_SECTIONS:
        counts["other"] += len(records) - MAX_SECTIONS
    res.truncated_sections = max(0, len(records) - MAX_SECTIONS)
    res.batch_counts = counts


# ============================================================================ warnings

@dataclass
class _Warning:
    level: str        # problem | caution | note
    sweep: str        # label ('' for the whole folder)
    anchor: str       # section id ('' if none)
    html: str


def _prior_edges(summary: dict) -> list[str]:
    """Parameters whose credible interval reaches a prior bound (HTML messages)."""
    out = []
    params = _dict(summary.get("parameters"))
    for name, spec in _dict(summary.get("priors")).items():
        prior = _dict(_dict(spec).get("prior"))
        e = _dict(params.get(name))
        lower, upper = _num(prior.get("lower")), _num(prior.get("upper"))
        lo, hi = _num(e.get("ci_low")), _num(e.get("ci_high"))
        if None in (lower, upper, lo, hi) or not upper > lower:
            continue
        log = _dict(spec).get("transform") == "log" and lower > 0 and lo > 0
        t = (lambda x: math.log(x)) if log else (lambda x: x)
        span = t(upper) - t(lower)
        if t(lo) - t(lower) < PRIOR_EDGE * span:
            out.append(f"the credible interval of {_symbol(name)} reaches the lower prior bound "
                       f"{_n(lower)} {_unit(e.get('unit'))} (interval from {_n(lo)}): the data do not "
                       "bound it from below, or the prior is too narrow")
        if t(upper) - t(hi) < PRIOR_EDGE * span:
            out.append(f"the credible interval of {_symbol(name)} reaches the upper prior bound "
                       f"{_n(upper)} {_unit(e.get('unit'))} (interval up to {_n(hi)}): the data do not "
                       "bound it from above, or the prior is too narrow")
    return out


def _sweep_warnings(sw: _Sweep, anchor: str) -> list[_Warning]:
    W = []

    def add(level, text):
        W.append(_Warning(level, sw.label, anchor, text))

    if sw.status == "failed":
        add("problem", "the fit failed" + (f": {_e(sw.reason)}" if sw.reason else ""))
    s = sw.summary
    if not s:
        return W
    d = _dict(s.get("diagnostics"))
    if d.get("converged") is not True:
        unmet = "; ".join(_e(u, 300) for u in _list(d.get("unmet"))[:10] if isinstance(u, str))
        crit = _dict(d.get("criteria"))
        add("problem", "<strong>not converged</strong>: the sampler stopped at its step budget before the "
                       "convergence criteria were met" + (f" ({unmet})" if unmet else "") +
            f"; R&#770; max {_n(d.get('r_hat_max'))} (limit {_n(crit.get('r_hat_max'), shortest=True)}), bulk ESS "
            f"min {_n(d.get('ess_bulk_min'))} (limit {_n(crit.get('ess_bulk_min'), shortest=True)}). "
            "Treat the intervals as "
            "approximate; rerun with a larger step budget.")
    if isinstance(d.get("fallback_reason"), str) and d["fallback_reason"]:
        add("note", f"importance sampling was not accepted ({_e(d['fallback_reason'], 300)}); MCMC was used")
    comp = _dict(s.get("comparison"))
    selected = comp.get("selected")
    for model, m in _dict(comp.get("models")).items():
        m = _dict(m)
        n_bad = _num(m.get("n_pareto_k_above_0.7"))
        k_max = _num(m.get("pareto_k_max"))
        if (n_bad or 0) > 0 or (k_max is not None and k_max > PARETO_K_LIMIT):
            level = "problem" if model == selected else "caution"
            add(level, f"<strong>high Pareto k</strong> in the {_e(model)} model"
                       f"{' (the selected one)' if model == selected else ''}: "
                       f"{_n(m.get('n_pareto_k_above_0.7'))} point(s) with k &gt; {PARETO_K_LIMIT:g}, "
                       f"max k {_n(k_max, 3)}; PSIS-LOO is unreliable at those points, so the model "
                       "comparison is less certain (look for outliers or distortions in the residuals)")
        if model != selected and m.get("converged") is False:
            add("caution", f"the alternative {_e(model)} model did not converge; its elpd_loo in the "
                           "comparison is approximate")
    sweep = _dict(s.get("sweep"))
    for note in _list(sweep.get("notes"))[:20]:
        serious = isinstance(note, str) and _DISTORTION_WORDS.search(note)
        add("caution" if serious else "note", f"input: {_e(note, 400)}")
    if sweep.get("sign_flipped") is True and not any("sign" in str(x) for x in _list(sweep.get("notes"))):
        add("note", "the current sign of the input was flipped (ion current positive in the file)")
    for item in _list(s.get("distortions"))[:20]:
        if isinstance(item, dict):
            text = item.get("message") or item.get("description") or item.get("kind") or json.dumps(item)[:300]
        else:
            text = item
        add("caution", f"<strong>distortion</strong>: {_e(text, 400)}")
    classical = _dict(s.get("classical"))
    if "error" in classical:
        add("caution", f"the classical windowed analysis failed: {_e(classical.get('error'), 400)}")
    for flag in _list(classical.get("flags"))[:20]:
        add("caution", f"classical analysis flag: <code>{_e(flag, 80)}</code>")
    ratio = _dict(_dict(s.get("parameters")).get("n_i_over_n_e"))
    lo, hi = _num(ratio.get("ci_low")), _num(ratio.get("ci_high"))
    if lo is not None and hi is not None and (hi < 1 / (1 + RATIO_TOLERANCE) or lo > 1 + RATIO_TOLERANCE):
        add("caution", f"n<sub>i</sub>/n<sub>e</sub> lies in [{_n(lo)}, {_n(hi)}], more than "
                       f"{100 * RATIO_TOLERANCE:g}&nbsp;% from 1: the ion collection theory, the probe area or "
                       "the ion mass may not suit this sweep (a consistency check, not an error)")
    for text in _prior_edges(s):
        add("caution", text)
    return W


# ============================================================================ the page

_CSS = """
:root{--ink:#1f2430;--muted:#5d6472;--paper:#fbfaf7;--card:#ffffff;--rule:#d9d5cc;--stripe:#f3f1ec;
--accent:#1d4e89;--accent2:#7b4fa0;--ok:#16877a;--ok-bg:#e3f3f0;--warn:#9a5200;--warn-bg:#fff2dc;
--bad:#b2182b;--bad-bg:#fbe8ea;--note-bg:#eef1f6}
*{box-sizing:border-box}
html{font-size:15px}
body{margin:0;background:var(--paper);color:var(--ink);line-height:1.5;
font-family:system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif}
main{max-width:74rem;margin:0 auto;padding:0 1.25rem 3rem}
header.top{background:var(--accent);color:#fff;padding:1.1rem 1.25rem 1rem}
header.top .inner{max-width:74rem;margin:0 auto}
header.top h1{margin:.1rem 0 .3rem;font-size:1.55rem;font-weight:650;letter-spacing:.01em}
header.top p{margin:.15rem 0;color:#dfe7f2}
.kicker{text-transform:uppercase;font-size:.78rem;letter-spacing:.12em;color:#b9cbe3}
.badge{display:inline-block;border-radius:.3rem;padding:.05rem .45rem;font-size:.8rem;font-weight:600;
vertical-align:middle}
.badge.ok{background:var(--ok-bg);color:var(--ok)}.badge.not-converged{background:var(--warn-bg);color:var(--warn)}
.badge.failed{background:var(--bad-bg);color:var(--bad)}.badge.synthetic{background:#fff;color:var(--accent2)}
nav.toc{margin:1rem 0;padding:.6rem .9rem;background:var(--card);border:1px solid var(--rule);border-radius:.4rem}
nav.toc ol{margin:.2rem 0;padding-left:1.3rem;columns:2 16rem}
h2{font-size:1.3rem;margin:2.2rem 0 .6rem;padding-bottom:.25rem;border-bottom:2px solid var(--accent);
color:var(--accent)}
h3{font-size:1.07rem;margin:1.5rem 0 .4rem}
section.sweep{background:var(--card);border:1px solid var(--rule);border-radius:.5rem;padding:.2rem 1.1rem 1rem;
margin:1.6rem 0}
section.sweep>h2{border-bottom-color:var(--accent2);color:var(--ink)}
.scroll{overflow-x:auto;max-width:100%}
table{border-collapse:collapse;margin:.4rem 0 .8rem;font-size:.9rem;font-variant-numeric:tabular-nums}
caption{caption-side:top;text-align:left;font-weight:600;padding:.2rem 0 .35rem;color:var(--muted)}
th,td{padding:.28rem .6rem;border-bottom:1px solid var(--rule);text-align:left;vertical-align:top}
thead th{background:var(--stripe);border-bottom:2px solid var(--rule);white-space:nowrap}
td.num,th.num{text-align:right;white-space:nowrap}
tbody tr:nth-child(even) td{background:#faf9f6}
tr.selected td,tr.selected th{background:#eaf1fa}
th[scope=row]{font-weight:600;white-space:nowrap}
table.parameters th[scope=row]{white-space:normal;min-width:11rem}
th[scope=row] code{font-weight:400;color:var(--muted);font-size:.78rem;margin-left:.3rem}
.desc{display:block;font-weight:400;color:var(--muted);font-size:.78rem;white-space:normal}
code{font-family:ui-monospace,"SFMono-Regular",Menlo,Consolas,monospace;font-size:.86em}
.na{color:#9aa0aa}.yes{color:var(--ok);font-weight:600}.no{color:var(--bad);font-weight:600}
td.strong{font-weight:700}
.ci{font-size:.8em;color:var(--muted);white-space:normal}
table.batch{font-size:.84rem}table.batch th,table.batch td{padding:.25rem .4rem}
.settings{display:flex;flex-wrap:wrap;gap:0 2rem;align-items:flex-start}
figure{margin:1.1rem 0;padding:.6rem;background:#fff;border:1px solid var(--rule);border-radius:.4rem}
figure img{display:block;max-width:100%;height:auto;margin:0 auto}
figcaption{font-size:.88rem;color:var(--muted);margin-top:.45rem}
figcaption b{color:var(--ink)}
.missing{color:var(--muted);font-style:italic}
.alerts{border-radius:.5rem;padding:.7rem 1rem;margin:1rem 0;border:1px solid}
.alerts.clean{background:var(--ok-bg);border-color:#9fd2c8}
.alerts.some{background:var(--warn-bg);border-color:#e8c48c}
.alerts.grave{background:var(--bad-bg);border-color:#e7a2aa}
.alerts h2{border:0;margin:.2rem 0 .4rem;padding:0;font-size:1.15rem;color:var(--ink)}
.alerts ul{margin:.3rem 0;padding-left:1.2rem}
.alerts li{margin:.2rem 0}
.lvl{display:inline-block;min-width:4.6rem;font-size:.74rem;font-weight:700;text-transform:uppercase;
letter-spacing:.05em}
.lvl.problem{color:var(--bad)}.lvl.caution{color:var(--warn)}.lvl.note{color:var(--muted)}
.reasoning{background:var(--note-bg);border-left:4px solid var(--accent);padding:.55rem .8rem;margin:.5rem 0}
.small{font-size:.85rem;color:var(--muted)}
dl.meta{display:grid;grid-template-columns:max-content 1fr;gap:.15rem 1rem;margin:.5rem 0;font-size:.92rem}
dl.meta dt{color:var(--muted)}dl.meta dd{margin:0;overflow-wrap:anywhere}
.safety{border:2px solid var(--bad);background:#fff;border-radius:.5rem;padding:.6rem 1rem;margin:2rem 0 1rem}
.safety h2{border:0;color:var(--bad);margin:.2rem 0}
footer{max-width:74rem;margin:0 auto;padding:1rem 1.25rem 2rem;color:var(--muted);font-size:.82rem}
@media (max-width:40rem){html{font-size:14px}dl.meta{grid-template-columns:1fr}}
@media print{
html{font-size:10pt}body{background:#fff}
header.top{background:#fff;color:var(--ink);border-bottom:3px solid var(--accent);padding:0 0 .4rem}
header.top p{color:var(--ink)}.kicker{color:var(--accent)}
nav.toc{display:none}main{max-width:none;padding:0}
section.sweep{border:0;padding:0;break-before:page}
figure,table,.alerts,.reasoning,.safety{break-inside:avoid}
figure{border:0;padding:0}figure img{max-height:23cm;width:auto}
.scroll{overflow:visible}
table{font-size:7.5pt}th,td{padding:.12rem .28rem}td.num,th.num{white-space:normal}
thead th{white-space:normal}.desc{font-size:6.5pt}th[scope=row] code{display:none}
table.parameters th[scope=row]{min-width:0}
*{-webkit-print-color-adjust:exact;print-color-adjust:exact}
}
"""

_SCRIPT = """
(function(){
var problems=[],loaded=false;
function mark(){
var root=document.documentElement;
root.setAttribute('data-selfcheck',problems.length?'fail:'+problems.join('; '):'ok:'+document.images.length);
}
function note(text){problems.push(text);if(loaded){mark();}}
window.addEventListener('error',function(ev){
var t=ev.target;
if(t&&t!==window&&t.tagName){note('resource '+t.tagName.toLowerCase()+' failed');}
else{note('script error: '+(ev.message||'unknown'));}
},true);
document.addEventListener('securitypolicyviolation',function(ev){note('blocked '+ev.violatedDirective);});
window.addEventListener('load',function(){
var root=document.documentElement,imgs=document.images,bad=0,i;
for(i=0;i<imgs.length;i++){if(!(imgs[i].complete&&imgs[i].naturalWidth>0)){bad++;}}
if(bad){problems.push(bad+' of '+imgs.length+' images not loaded');}
var want=parseInt(root.getAttribute('data-images'),10);
if(want!==imgs.length){problems.push('expected '+want+' images, found '+imgs.length);}
loaded=true;
mark();
});
})();
"""


def _csp_hash(text: str) -> str:
    return "'sha256-" + base64.b64encode(hashlib.sha256(text.encode("utf-8")).digest()).decode("ascii") + "'"


class _Page:
    """Builds the HTML; counts figures and images."""

    def __init__(self, res: _Results):
        self.res = res
        self.parts: list[str] = []
        self.n_fig = 0
        self.n_img = 0

    def add(self, *chunks: str):
        self.parts.extend(chunks)

    def figure(self, path: Path | None, alt: str, caption_html: str, what: str) -> None:
        """Embed a PNG (if present and valid) with a numbered caption; otherwise say why it is missing."""
        data = None
        reason = "not written (the fit was run without figures)"
        if path is not None and path.is_file():
            try:
                if path.stat().st_size > MAX_IMAGE_BYTES:
                    reason = f"too large to embed (over {MAX_IMAGE_BYTES >> 20} MB)"
                else:
                    data = path.read_bytes()
                    if _png_size(data) is None:
                        data, reason = None, "not a PNG image"
            except OSError as exc:
                data, reason = None, f"unreadable ({type(exc).__name__})"
        if data is None:
            self.add(f'<p class="missing">{_e(what)}: {_e(path.name if path else "figure")} {reason}.</p>')
            return
        self.n_fig += 1
        self.n_img += 1
        w, h = _png_size(data)
        uri = "data:image/png;base64," + base64.b64encode(data).decode("ascii")
        self.add(f'<figure id="fig{self.n_fig}"><img src="{uri}" width="{w}" height="{h}" alt="{_e(alt)}">'
                 f'<figcaption><b>Figure {self.n_fig}. {_e(what)}.</b> {caption_html} '
                 f'<span class="small">(from <code>{_e(_rel(path, self.res.root))}</code>)</span>'
                 f'</figcaption></figure>')

    def html(self, title: str) -> str:
        csp = (f"default-src 'none'; img-src data:; style-src {_csp_hash(_CSS)}; "
               f"script-src {_csp_hash(_SCRIPT)}; base-uri 'none'; form-action 'none'")
        head = ('<!DOCTYPE html>\n'
                f'<html lang="en" data-images="{self.n_img}">\n<head>\n<meta charset="utf-8">\n'
                f'<meta http-equiv="Content-Security-Policy" content="{csp}">\n'
                '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
                '<meta name="generator" content="bayesprobe report">\n'
                f'<title>{_e(title)}</title>\n<style>{_CSS}</style>\n<script>{_SCRIPT}</script>\n</head>\n')
        return head + "<body>\n" + "\n".join(self.parts) + "\n</body>\n</html>\n"


# ---------------------------------------------------------------------------- tables

def _main_names(summary: dict) -> list[str]:
    params = _dict(summary.get("parameters"))
    return list(main_names(params))


def _interval(e: dict, digits: int) -> str:
    return f"[{_n(e.get('ci_low'), digits)}, {_n(e.get('ci_high'), digits)}]"


def _summary_table(res: _Results, anchors: dict) -> str:
    """Fit folders: one block of rows per sweep with the main parameters."""
    truth = {}
    for r in res.demo_rows:
        if _num(r.get("truth")) is not None:
            truth[(r.get("sweep_id"), r.get("parameter"))] = r.get("truth")
    show_truth = bool(truth)
    levels = {_num(sw.summary.get("credible_level")) for sw in res.sweeps if sw.summary}
    level_head = f"{_pct(next(iter(levels)))} credible interval" if len(levels) == 1 else "credible interval"
    head = ("<thead><tr><th>sweep</th><th>model</th><th>status</th><th>quantity</th><th>unit</th>"
            f'<th class="num">median</th><th class="num">{level_head}</th>'
            '<th class="num">classical</th>' + ('<th class="num">truth</th>' if show_truth else "") +
            "</tr></thead>")
    body = []
    for sw in res.sweeps:
        s = sw.summary or {}
        names = _main_names(s)
        params = _dict(s.get("parameters"))
        classical = _dict(s.get("classical"))
        span = max(1, len(names))
        link = f'<a href="#{anchors[id(sw)]}">{_e(sw.label, 200)}</a>'
        first = (f'<th scope="rowgroup" rowspan="{span}">{link}</th><td rowspan="{span}">{_e(s.get("model", ""))}'
                 f'</td><td rowspan="{span}">{_status_badge(sw.status)}</td>')
        if not names:
            body.append(f"<tr>{first}<td colspan=\"{5 + show_truth}\" class=\"missing\">no parameters</td></tr>")
            continue
        for k, name in enumerate(names):
            e = _dict(params.get(name))
            med = _num(e.get("median"))
            digits = _sig_digits(med, _num(e.get("ci_low")), _num(e.get("ci_high"))) if med is not None else 4
            cells = (f"<td>{_symbol(name)}</td><td>{_unit(e.get('unit'))}</td>"
                     f'<td class="num">{_n(e.get("median"), digits)}</td>'
                     f'<td class="num">{_interval(e, digits)}</td>'
                     f'<td class="num">{_n(classical.get(name), digits)}</td>')
            if show_truth:
                cells += f'<td class="num">{_n(truth.get((sw.label, name)), digits)}</td>'
            body.append(f"<tr>{first if k == 0 else ''}{cells}</tr>")
    note = ('<p class="small">median and equal-tailed credible interval of the posterior; '
            '<em>classical</em>: the automated windowed textbook analysis of the same sweep'
            + ('; <em>truth</em>: the values the synthetic sweeps were simulated with (from '
               '<code>demo_table.csv</code>)' if show_truth else "") + ".</p>")
    return (f'<div class="scroll"><table class="summary"><caption>Main results</caption>{head}<tbody>'
            + "".join(body) + "</tbody></table></div>" + note)


def _status_badge(status: str) -> str:
    text = {"ok": "converged", "not-converged": "not converged", "failed": "failed"}.get(status, status)
    cls = status if status in ("ok", "not-converged", "failed") else "failed"
    return f'<span class="badge {cls}">{_e(text, 40)}</span>'


def _batch_table(res: _Results, units: dict, anchors_by_label: dict) -> str:
    header = res.batch_header
    params = [h[: -len("_median")] for h in header if h.endswith("_median")]
    coords = [h for h in header if h not in _BATCH_FIXED and not h.endswith(("_median", "_ci_low", "_ci_high"))]
    levels = {r.get("credible_level") for r in res.batch_rows}
    level_text = f" (median [{_pct(next(iter(levels)))} interval])" if len(levels) == 1 else " (median [interval])"
    models = {r.get("model", "") for r in res.batch_rows if r.get("model")}
    one_model = len(models) <= 1
    if one_model and models:
        level_text += f"; electron model: {_e(next(iter(models)), 40)}"
    head = ["<th>sweep</th>"] + [f'<th class="num">{_e(c, 60)}</th>' for c in coords]
    head += ["<th>status</th>"] + ([] if one_model else ["<th>model</th>"])
    head += ['<th class="num">R&#770; max</th>', '<th class="num">ESS min</th>']
    head += [f'<th class="num">{_symbol(p)} [{_unit(units.get(p, unit_of(p)))}]</th>' for p in params]
    body = []
    for r in res.batch_rows:
        sid = r.get("sweep_id", "")
        name = _e(sid, 200)
        if sid in anchors_by_label:
            name = f'<a href="#{anchors_by_label[sid]}">{name}</a>'
        cells = [f'<th scope="row">{name}</th>']
        cells += [f'<td class="num">{_n(r.get(c), 6, shortest=True)}</td>' for c in coords]
        cells += [f"<td>{_status_badge(r.get('status', ''))}</td>"]
        cells += [] if one_model else [f"<td>{_e(r.get('model', ''), 40)}</td>"]
        cells += [f'<td class="num">{_n(r.get("r_hat_max"), 4)}</td>',
                  f'<td class="num">{_n(r.get("ess_bulk_min"), 4)}</td>']
        for p in params:
            med, lo, hi = (r.get(f"{p}_{s}") for s in ("median", "ci_low", "ci_high"))
            if _num(med) is None:
                cells.append('<td class="num"><span class="na">&ndash;</span></td>')
                continue
            digits = _sig_digits(_num(med), _num(lo), _num(hi))
            cells.append(f'<td class="num">{_n(med, digits)}<br><span class="ci">[{_n(lo, digits)}, '
                         f'{_n(hi, digits)}]</span></td>')
        body.append("<tr>" + "".join(cells) + "</tr>")
    more = ""
    if res.n_sweeps > len(res.batch_rows):
        more = (f'<p class="small">The first <data value="{len(res.batch_rows)}">{len(res.batch_rows)}</data> of '
                f'<data value="{res.n_sweeps}">{res.n_sweeps}</data> sweeps are shown; every sweep is in '
                "<code>results.csv</code> and <code>results.nc</code>.</p>")
    return (f'<div class="scroll"><table class="summary batch"><caption>One row per sweep{level_text}, from '
            f'<code>results.csv</code></caption><thead><tr>{"".join(head)}</tr></thead><tbody>'
            + "".join(body) + "</tbody></table></div>" + more)


def _parameter_table(s: dict) -> str:
    params = _dict(s.get("parameters"))
    classical = _dict(s.get("classical"))
    priors = _dict(s.get("priors"))
    fitted = set(x for x in _list(s.get("parameter_order")) if isinstance(x, str))
    rows = []
    for name, e in params.items():
        e = _dict(e)
        med = _num(e.get("median"))
        digits = _sig_digits(med, _num(e.get("ci_low")), _num(e.get("ci_high"))) if med is not None else 4
        desc = description_of(name) or _dict(priors.get(name)).get("description")
        desc = (desc if isinstance(desc, str) else "") + (" · fitted" if name in fitted else " · derived")
        rows.append(f"<tr>{_name_cell(name, desc.lstrip(' ·'))}"
                    f"<td>{_unit(e.get('unit'))}</td><td class=\"num\">{_n(e.get('median'), digits)}</td>"
                    f'<td class="num">{_interval(e, digits)}</td><td class="num">{_n(e.get("mean"), digits)}</td>'
                    f'<td class="num">{_n(e.get("sd"), 2)}</td><td class="num">{_n(classical.get(name), digits)}'
                    "</td></tr>")
    return ('<div class="scroll"><table class="parameters"><caption>Posterior of every fitted and derived '
            f'quantity ({_pct(s.get("credible_level"))} equal-tailed credible interval)</caption><thead><tr>'
            '<th>quantity</th><th>unit</th><th class="num">median</th><th class="num">interval</th>'
            '<th class="num">mean</th><th class="num">sd</th><th class="num">classical</th></tr></thead><tbody>'
            + "".join(rows) + "</tbody></table></div>"
            '<p class="small">unit 1: dimensionless. The same numbers, at full precision, are in '
            "<code>summary.json</code> and <code>parameters.csv</code>.</p>")


def _comparison_block(s: dict) -> str:
    comp = _dict(s.get("comparison"))
    if not comp:
        return (f"<p>Only the {_e(s.get('model', '?'))} electron model was fitted, so there is no model "
                "comparison. Fit with <code>--model auto</code> to compare one and two electron temperatures by "
                "PSIS-LOO.</p>")
    selected = comp.get("selected")
    rows = []
    for model, m in _dict(comp.get("models")).items():
        m = _dict(m)
        diff = m.get("elpd_diff_vs_maxwellian")
        diff_html = (f"{_n(diff, 4)} &plusmn; {_n(m.get('se_diff'), 3)}" if _num(diff) is not None
                     else '<span class="na">reference</span>' if model == "maxwellian" else _n(None))
        cls = ' class="selected"' if model == selected else ""
        rows.append(f"<tr{cls}><th scope=\"row\">{_e(model, 60)}{' &#10003; selected' if model == selected else ''}"
                    f'</th><td class="num">{_n(m.get("elpd_loo"), 6)}</td><td class="num">{_n(m.get("se"), 3)}</td>'
                    f'<td class="num">{diff_html}</td><td class="num">{_n(m.get("p_loo"), 3)}</td>'
                    f'<td class="num">{_n(m.get("weight"), 3)}</td><td class="num">{_n(m.get("pareto_k_max"), 3)}</td>'
                    f'<td class="num">{_n(m.get("n_pareto_k_above_0.7"))}</td>'
                    f'<td>{_yesno(m.get("converged"))}</td></tr>')
    table = ('<div class="scroll"><table class="comparison"><caption>Electron models compared by '
             f'{_e(comp.get("method", "PSIS-LOO"), 60)} (higher elpd is better)</caption><thead><tr><th>model</th>'
             '<th class="num">elpd<sub>loo</sub></th><th class="num">SE</th>'
             '<th class="num">&Delta;elpd vs maxwellian &plusmn; SE</th><th class="num">p<sub>loo</sub></th>'
             '<th class="num">weight</th><th class="num">max Pareto k</th>'
             f'<th class="num">points k&nbsp;&gt;&nbsp;{PARETO_K_LIMIT:g}</th><th>converged</th></tr></thead><tbody>'
             + "".join(rows) + "</tbody></table></div>")
    text = []
    if isinstance(comp.get("reasoning"), str) and comp["reasoning"]:
        text.append(f'<p class="reasoning"><strong>Decision:</strong> {_e(comp["reasoning"])}</p>')
    if isinstance(comp.get("rule"), str) and comp["rule"]:
        text.append(f'<p class="small">Rule: {_e(comp["rule"])}.</p>')
    text.append('<p class="small">elpd<sub>loo</sub>: expected log predictive density of a left-out point, summed '
                "over the sweep (leave-one-out cross-validation by Pareto-smoothed importance sampling); "
                "p<sub>loo</sub>: effective number of parameters; weight: stacking weight.</p>")
    warns = [w for w in _list(comp.get("warnings")) if isinstance(w, str)]
    if warns:
        text.append('<ul class="small">' + "".join(f"<li>{_e(w, 600)}</li>" for w in warns[:20]) + "</ul>")
    return table + "".join(text)


def _check_row(label: str, value_html: str, criterion_html: str = "", met=None) -> str:
    met_html = "" if met is None else (met if isinstance(met, str) else _yesno(bool(met)))
    return (f'<tr><th scope="row">{label}</th><td class="num">{value_html}</td><td>{criterion_html}</td>'
            f"<td>{met_html}</td></tr>")


def _at_most(v, limit):
    return None if _num(v) is None or _num(limit) is None else _num(v) <= _num(limit)


def _at_least(v, limit):
    return None if _num(v) is None or _num(limit) is None else _num(v) >= _num(limit)


def _diagnostics_block(s: dict) -> str:
    d = _dict(s.get("diagnostics"))
    if not d:
        return '<p class="missing">No sampler diagnostics recorded.</p>'
    crit = _dict(d.get("criteria"))
    importance = d.get("engine") == "importance"
    verdict = ('<p><span class="badge ok">converged</span> every criterion below was met.</p>'
               if d.get("converged") is True else
               '<p><span class="badge failed">not converged</span> unmet: ' +
               ("; ".join(_e(u, 300) for u in _list(d.get("unmet"))[:10]) or "not recorded") + ".</p>")
    engine = {"importance": "importance sampling from the Laplace approximation",
              "mcmc": "MCMC (independent affine-invariant ensembles)"}.get(d.get("engine"), None)
    if engine:
        requested = d.get("engine_requested")
        verdict += f"<p>Sampler: {engine}" + (f" (requested: <code>{_e(requested, 40)}</code>)"
                                              if isinstance(requested, str) else "") + ".</p>"
    if isinstance(d.get("fallback_reason"), str) and d["fallback_reason"]:
        verdict += (f'<p class="small">Importance sampling was tried first and not accepted '
                    f'({_e(d["fallback_reason"], 400)}); the posterior comes from MCMC.</p>')
    rows = []
    if importance:
        rows.append(_check_row("Pareto k&#770; of the importance weights", _n(d.get("khat"), 3),
                               f"&le; {_n(crit.get('khat_max'), shortest=True)}",
                               _at_most(d.get("khat"), crit.get("khat_max"))))
        rows.append(_check_row("effective sample size of the weights", _n(d.get("is_ess")),
                               f"&ge; {_n(crit.get('is_ess_min'), shortest=True)}",
                               _at_least(d.get("is_ess"), crit.get("is_ess_min"))))
        rows.append(_check_row("rounds (model evaluations)",
                               f"{_n(d.get('is_rounds'))} ({_n(d.get('is_n_evaluations'))})"))
        rows.append(_check_row("kept draws", _n(d.get("n_draws"))))
    else:
        tau_met = True if d.get("converged") is True else '<span class="na">see unmet list</span>'
        rows.append(_check_row("largest rank-normalised R&#770;", _n(d.get("r_hat_max")),
                               f"&le; {_n(crit.get('r_hat_max'), shortest=True)}",
                               _at_most(d.get("r_hat_max"), crit.get("r_hat_max"))))
        rows.append(_check_row("smallest bulk ESS", _n(d.get("ess_bulk_min")),
                               f"&ge; {_n(crit.get('ess_bulk_min'), shortest=True)}",
                               _at_least(d.get("ess_bulk_min"), crit.get("ess_bulk_min"))))
        rows.append(_check_row("largest autocorrelation time &tau; [steps]", _n(d.get("tau_max")),
                               f"kept chain &ge; {_n(crit.get('tau_multiple_min'), shortest=True)} &tau;, "
                               "&tau; stable", tau_met))
        rows.append(_check_row("steps per walker (burn-in)", f"{_n(d.get('n_steps'))} ({_n(d.get('burn_in'))})"))
        rows.append(_check_row("kept draws", _n(d.get("n_draws"))))
        rows.append(_check_row("ensembles &times; walkers",
                               f"{_n(d.get('n_ensembles'))} &times; {_n(d.get('n_walkers'))}"))
        rows.append(_check_row("acceptance fraction", _n(d.get("acceptance"), 3)))
    overall = ('<table class="diagnostics"><caption>Convergence</caption><thead><tr><th>check</th>'
               '<th class="num">value</th><th>criterion</th><th>met</th></tr></thead><tbody>'
               + "".join(rows) + "</tbody></table>")
    rhat, ess, tau = _dict(d.get("r_hat")), _dict(d.get("ess_bulk")), _dict(d.get("tau"))
    names = list(dict.fromkeys(list(tau) + list(rhat) + list(ess)))
    per = ""
    if names and not importance:        # with importance weights every quantity shares one ESS
        body = "".join(f'<tr><th scope="row">{_symbol(n)} <code>{_e(n, 80)}</code></th>'
                       f'<td class="num">{_n(rhat.get(n))}</td><td class="num">{_n(ess.get(n))}</td>'
                       f'<td class="num">{_n(tau.get(n))}</td></tr>' for n in names[:100])
        per = ('<table class="diagnostics"><caption>Per quantity</caption><thead><tr><th>quantity</th>'
               '<th class="num">R&#770;</th><th class="num">bulk ESS</th><th class="num">&tau; [steps]</th></tr>'
               f"</thead><tbody>{body}</tbody></table>")
    return verdict + f'<div class="scroll">{overall}</div><div class="scroll">{per}</div>'


def _correlation_table(s: dict) -> str:
    corr = _dict(s.get("correlations"))
    names = [n for n in corr if isinstance(corr[n], dict)][:12]
    if not names:
        return ""
    head = "".join(f'<th class="num">{_symbol(n)}</th>' for n in names)
    rows = []
    for a in names:
        cells = []
        for b in names:
            if a == b:
                cells.append('<td class="num"><span class="na">1</span></td>')
                continue
            v = _num(_dict(corr[a]).get(b))
            strong = ' strong' if v is not None and abs(v) >= 0.8 else ""
            cells.append(f'<td class="num{strong}">{_n(v, fixed=2)}</td>')
        rows.append(f'<tr><th scope="row">{_symbol(a)}</th>{"".join(cells)}</tr>')
    note = s.get("correlations_note")
    note = f'<p class="small">{_e(note, 300)}.</p>' if isinstance(note, str) else ""
    return ('<div class="scroll"><table class="correlations"><caption>Posterior correlations (|r|&nbsp;&ge;&nbsp;0.8 '
            f'in bold)</caption><thead><tr><th></th>{head}</tr></thead><tbody>'
            + "".join(rows) + "</tbody></table></div>" + note)


def _settings_block(s: dict) -> str:
    """Priors, model settings, likelihood, sampler settings and seed: what reproduces the fit."""
    prior_rows = []
    for name, spec in _dict(s.get("priors")).items():
        spec = _dict(spec)
        p = _dict(spec.get("prior"))
        extra = ", ".join(f"{_e(k, 40)} = {_value(v)}" for k, v in p.items() if k not in ("kind", "lower", "upper"))
        desc = spec.get("description") if isinstance(spec.get("description"), str) else None
        prior_rows.append(f'<tr>{_name_cell(name, desc)}'
                          f"<td>{_unit(spec.get('unit'))}</td><td>{_e(p.get('kind', ''), 60)}</td>"
                          f'<td class="num">{_n(p.get("lower"), 6, shortest=True)}</td>'
                          f'<td class="num">{_n(p.get("upper"), 6, shortest=True)}</td>'
                          f"<td>{extra}</td><td>{_e(spec.get('transform', ''), 40)}</td></tr>")
    priors = ('<div class="scroll"><table class="priors"><caption>Priors</caption><thead><tr><th>parameter</th>'
              '<th>unit</th><th>kind</th><th class="num">lower</th><th class="num">upper</th><th>other</th>'
              '<th>sampled as</th></tr></thead><tbody>' + "".join(prior_rows) + "</tbody></table></div>"
              ) if prior_rows else '<p class="missing">No priors recorded.</p>'

    def kv(title, d):
        items = _flatten(_dict(d))
        if not items:
            return ""
        rows = "".join(f'<tr><th scope="row"><code>{_e(k, 80)}</code></th><td>{_value(v)}</td></tr>'
                       for k, v in items[:80])
        return f'<table class="kv"><caption>{title}</caption><tbody>{rows}</tbody></table>'

    lik = kv("Likelihood and noise model", s.get("likelihood"))
    model = kv("Probe and plasma model (SI units, temperatures in eV)", s.get("model_settings"))
    sampler = kv("Sampler settings", s.get("sampler_settings"))
    runs = (f'<dl class="meta"><dt>seed</dt><dd>{_value(s.get("seed"))}</dd><dt>credible level</dt>'
            f'<dd>{_value(s.get("credible_level"))}</dd><dt>input</dt>'
            f'<dd><code>{_e(s.get("input", ""), 500)}</code></dd>'
            f'<dt>schema</dt><dd><code>{_e(s.get("schema", ""), 80)}</code></dd></dl>')
    return (priors + f'<div class="settings"><div class="scroll">{model}</div><div class="scroll">{lik}{runs}</div>'
            f'<div class="scroll">{sampler}</div></div>' +
            '<p class="small">The same input, model settings, priors, sampler settings and seed under the software '
            "versions listed below give the same numbers, bit for bit.</p>")


# ---------------------------------------------------------------------------- captions

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


# ---------------------------------------------------------------------------- sections

def _sweep_section(page: _Page, sw: _Sweep, anchor: str, warnings: list, batch: bool) -> None:
    s = sw.summary or {}
    page.add(f'<section class="sweep" id="{anchor}"><h2>Sweep {_e(sw.label, 300)} {_status_badge(sw.status)}</h2>')
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
    page.add('<dl class="meta">' + "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in meta) + "</dl>")
    if warnings:
        grave = any(w.level == "problem" for w in warnings)
        page.add(f'<div class="alerts {"grave" if grave else "some"}"><ul>' +
                 "".join(f'<li><span class="lvl {w.level}">{w.level}</span> {w.html}</li>' for w in warnings)
                 + "</ul></div>")
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


def _versions_block(res: _Results) -> str:
    groups: dict = {}
    for sw in res.sweeps:
        v = _dict((sw.summary or {}).get("versions"))
        if v:
            groups.setdefault(json.dumps(v, sort_keys=True), (v, []))[1].append(sw.label)
    if not groups:
        return '<p class="missing">No software versions recorded.</p>'
    out = []
    for v, labels in groups.values():
        who = "all fits" if len(groups) == 1 else "sweeps " + ", ".join(_e(x, 100) for x in labels[:20]) + (
            " &hellip;" if len(labels) > 20 else "")
        rows = "".join(f'<tr><th scope="row">{_e(k, 60)}</th><td><code>{_e(val, 200)}</code></td></tr>'
                       for k, val in v.items())
        out.append(f'<div class="scroll"><table class="versions"><caption>Software used for {who}</caption>'
                   f"<tbody>{rows}</tbody></table></div>")
    return "".join(out)


def _warnings_box(all_w: list, res: _Results) -> str:
    counts = {lvl: sum(1 for w in all_w if w.level == lvl) for lvl in ("problem", "caution", "note")}
    if not all_w:
        what = "every fit converged" if res.sweeps else "no sweep is recorded"
        return ('<section class="alerts clean" id="warnings"><h2>Warnings: none</h2>'
                f"<p>{what}; no point has Pareto k above {PARETO_K_LIMIT:g}; no distortion, input problem or prior-"
                "bound hit was recorded.</p></section>")
    cls = "grave" if counts["problem"] else "some"
    parts = [f'<section class="alerts {cls}" id="warnings"><h2>Warnings: '
             f'{counts["problem"]} problem(s), {counts["caution"]} caution(s), {counts["note"]} note(s)</h2><ul>']
    order = {"problem": 0, "caution": 1, "note": 2}
    for w in sorted(all_w, key=lambda w: order[w.level])[:MAX_LISTED_WARNINGS]:
        where = ""
        if w.sweep:
            where = (f'<a href="#{w.anchor}">{_e(w.sweep, 200)}</a>: ' if w.anchor else f"{_e(w.sweep, 200)}: ")
        parts.append(f'<li><span class="lvl {w.level}">{w.level}</span> {where}{w.html}</li>')
    if len(all_w) > MAX_LISTED_WARNINGS:
        parts.append(f"<li>&hellip; and {len(all_w) - MAX_LISTED_WARNINGS} more (see each sweep"
                     + (" and the status and reason columns of <code>results.csv</code>" if res.kind == "batch" else "")
                     + ").</li>")
    parts.append("</ul></section>")
    return "".join(parts)


def _is_synthetic(res: _Results) -> bool:
    if any(_num(r.get("truth")) is not None for r in res.demo_rows):
        return True
    for sw in res.sweeps:
        notes = " ".join(str(x) for x in _list(_dict((sw.summary or {}).get("sweep")).get("notes")))
        if "synthetic" in notes.lower():
            return True
    return False


def _render(res: _Results) -> str:
    page = _Page(res)
    kind_text = {"fit": "one fit", "collection": f"{res.n_sweeps} fits",
                 "batch": f"batch of {res.n_sweeps} sweeps"}[res.kind]
    anchors = {id(sw): f"s{k + 1}" for k, sw in enumerate(res.sweeps)}
    anchors_by_label = {sw.label: anchors[id(sw)] for sw in res.sweeps}
    from ._version import __version__

    # warnings
    all_w: list = [_Warning("problem", sw, "", _e(msg)) for sw, msg in res.problems]
    per_sweep = {}
    for sw in res.sweeps:
        per_sweep[id(sw)] = _sweep_warnings(sw, anchors[id(sw)])
        all_w += per_sweep[id(sw)]
    if res.kind == "batch":
        listed = {sw.label for sw in res.sweeps}
        for sid, st, reason in res.batch_problem_rows:
            if sid in listed:
                continue
            if st == "failed":
                all_w.append(_Warning("problem", sid, "", "the fit failed" + (f": {_e(reason)}" if reason else "")))
            elif st == "not-converged":
                all_w.append(_Warning("problem", sid, "", "<strong>not converged</strong> within the step budget"))
            else:
                all_w.append(_Warning("caution", sid, "", f"status {_e(st, 40)!s}"))
    if res.truncated_sections:
        all_w.append(_Warning("note", "", "", f"{res.truncated_sections} sweep(s) have no section of their own "
                                              f"(only the first {MAX_SECTIONS} are shown in detail)"))

    synthetic = _is_synthetic(res)
    title = f"bayesprobe report: {res.root.resolve().name or res.root}"
    page.add('<header class="top"><div class="inner"><div class="kicker">bayesprobe &middot; Langmuir-probe '
             f'analysis report</div><h1>{_e(res.root.resolve().name or str(res.root), 200)}</h1>'
             f"<p>{kind_text}; built with bayesprobe {_e(__version__)} from the result files in this folder. "
             "Every number below is read from those files (hover a number for its full precision).</p>"
             + ('<p><span class="badge synthetic">SYNTHETIC DATA</span> the sweeps in this report were '
                "simulated (an invented scenario), so their true values are known.</p>" if synthetic else "")
             + "</div></header><main>")
    toc = ['<li><a href="#warnings">Warnings</a></li>', '<li><a href="#summary">Summary</a></li>']
    if res.kind == "batch":
        toc.append('<li><a href="#profiles">Profiles</a></li>')
    toc += [f'<li><a href="#{anchors[id(sw)]}">Sweep {_e(sw.label, 80)}</a></li>' for sw in res.sweeps[:40]]
    if len(res.sweeps) > 40:
        toc.append(f"<li>&hellip; {len(res.sweeps) - 40} more sweeps</li>")
    toc += ['<li><a href="#software">Software and reproducibility</a></li>', '<li><a href="#safety">Safety</a></li>']
    page.add('<nav class="toc" aria-label="contents"><strong>Contents</strong><ol>' + "".join(toc) + "</ol></nav>")
    page.add(_warnings_box(all_w, res))

    page.add('<section id="summary"><h2>Summary</h2>')
    if res.kind == "batch":
        c = res.batch_counts
        page.add(f'<p><data value="{res.n_sweeps}">{res.n_sweeps}</data> sweeps: '
                 f'<data value="{c.get("ok", 0)}">{c.get("ok", 0)}</data> converged, '
                 f'<data value="{c.get("not-converged", 0)}">{c.get("not-converged", 0)}</data> not converged, '
                 f'<data value="{c.get("failed", 0)}">{c.get("failed", 0)}</data> failed'
                 + (f', <data value="{c["other"]}">{c["other"]}</data> unknown' if c.get("other") else "") + ".</p>")
        units = {}
        for sw in res.sweeps:
            for name, e in _dict((sw.summary or {}).get("parameters")).items():
                if isinstance(_dict(e).get("unit"), str):
                    units.setdefault(name, e["unit"])
        if res.batch_header:
            page.add(_batch_table(res, units, anchors_by_label))
        elif res.sweeps:
            page.add('<p class="small">No <code>results.csv</code> yet (the batch is running or was interrupted); '
                     "the table is built from the per-sweep records.</p>", _summary_table(res, anchors))
    else:
        page.add(_summary_table(res, anchors))
    page.add("</section>")

    if res.kind == "batch":
        page.add('<section id="profiles"><h2>Profiles</h2>')
        page.figure(res.root / "profiles.png", "parameter profiles across the batch",
                    "Posterior median (points and line) and credible band of each main parameter against the sweep "
                    "coordinate recorded in the input (or the table order when there is none), one colour per source "
                    "file; open markers are sweeps that did not converge. Axes carry each quantity's unit.",
                    "Profiles")
        page.add("</section>")

    for sw in res.sweeps:
        _sweep_section(page, sw, anchors[id(sw)], per_sweep[id(sw)], batch=res.kind == "batch")

    page.add('<section id="software"><h2>Software and reproducibility</h2>', _versions_block(res))
    files = sorted(set(res.files), key=_natural_key)
    page.add('<p>Files read for this report: ' + ", ".join(f"<code>{_e(f, 300)}</code>" for f in files[:60])
             + (" &hellip;" if len(files) > 60 else "") + ". The full posteriors are in "
             + ("<code>results.nc</code> (summaries) and, if kept, <code>posteriors/</code>"
                if res.kind == "batch" else "<code>posterior.nc</code> beside each <code>summary.json</code>")
             + ".</p></section>")
    page.add(f'<section class="safety" id="safety"><h2>Safety</h2><p>{_e(SAFETY_NOTE)}</p></section>')
    page.add("</main>")
    page.add(f"<footer>bayesprobe {_e(__version__)} report &middot; no network resources are used; figures are "
             "embedded. Printing: one sweep per page.</footer>")
    return page.html(title)


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
    from .io import atomic_write_text
    res = find_results(results_dir)
    text = _render(res)
    target = Path(out) if out is not None else Path(results_dir) / REPORT_NAME
    if target.is_dir():
        raise InputError(f"--out {str(target)!r} is a folder; give the name of the HTML file to write")
    target.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(target, text)
    return target
