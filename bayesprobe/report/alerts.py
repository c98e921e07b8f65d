"""The warnings of the report: the scientific checks of each fit and the folder's own problems.

The rules live in :mod:`bayesprobe.checks` (the same list a :class:`~bayesprobe.FitResult`
writes into ``summary.json`` under ``warnings``). The report applies them to the numbers it
shows, read from the file, so an edited or older summary is judged by what it holds; a
stored warning whose code this version does not know (written by a newer one) is shown as
stored. Messages are untrusted text: escaped, with quantity names shown by their registry
labels.
"""
from __future__ import annotations

from dataclasses import dataclass

from ..checks import CODES, PARETO_K_LIMIT, summary_warnings
from .formatting import _e, _labelled
from .reading import MAX_SECTIONS, _Results, _Sweep

#: warnings listed one by one in the box at the top (all are counted)
MAX_LISTED_WARNINGS = 60
_ORDER = {"problem": 0, "caution": 1, "note": 2}


@dataclass
class _Warning:
    level: str        # problem | caution | note
    sweep: str        # label ('' for the whole folder)
    anchor: str       # section id ('' if none)
    html: str


def _warning_html(w: dict) -> str:
    hint = f'<span class="hint">try: {_labelled(w["hint"], 400)}</span>' if w.get("hint") else ""
    return _labelled(w["message"], 800) + hint


def fit_warnings(summary: dict) -> list[dict]:
    """The checks of one summary: recomputed from its numbers, plus stored ones of unknown codes."""
    out = summary_warnings(summary)
    out += [w for w in summary.get("warnings", []) if w["code"] not in CODES]
    return out


def _sweep_warnings(sw: _Sweep, anchor: str) -> list[_Warning]:
    W = []
    if sw.status == "failed":
        W.append(_Warning("problem", sw.label, anchor, "the fit failed" + (f": {_e(sw.reason)}" if sw.reason else "")))
    if sw.summary:
        for w in fit_warnings(sw.summary):
            level = w["level"] if w["level"] in _ORDER else "caution"
            W.append(_Warning(level, sw.label, anchor, _warning_html(w)))
    return W


def _folder_warnings(res: _Results) -> list[_Warning]:
    """Unreadable files, batch rows without a section of their own, sections left out."""
    out = [_Warning("problem", sw, "", _e(msg)) for sw, msg in res.problems]
    if res.kind == "batch":
        listed = {sw.label for sw in res.sweeps}
        for sid, st, reason in res.batch_problem_rows:
            if sid in listed:
                continue
            if st == "failed":
                out.append(_Warning("problem", sid, "", "the fit failed" + (f": {_e(reason)}" if reason else "")))
            elif st == "not-converged":
                out.append(_Warning("problem", sid, "", "<strong>not converged</strong> within the step budget"))
            else:
                out.append(_Warning("caution", sid, "", f"status {_e(st, 40)!s}"))
    if res.truncated_sections:
        out.append(_Warning("note", "", "", f"{res.truncated_sections} sweep(s) have no section of their own "
                                            f"(only the first {MAX_SECTIONS} are shown in detail)"))
    return out


def collect_warnings(res: _Results, anchors: dict) -> tuple[list, dict]:
    """(every warning, per-sweep warnings by id(sweep))."""
    per_sweep = {id(sw): _sweep_warnings(sw, anchors[id(sw)]) for sw in res.sweeps}
    folder = _folder_warnings(res)
    everything = folder[:len(res.problems)] + [w for sw in res.sweeps for w in per_sweep[id(sw)]] \
        + folder[len(res.problems):]
    return everything, per_sweep


def _warnings_box(all_w: list, res: _Results) -> str:
    counts = {lvl: sum(1 for w in all_w if w.level == lvl) for lvl in _ORDER}
    if not all_w:
        what = "every fit converged" if res.sweeps else "no sweep is recorded"
        return ('<section class="alerts clean" id="warnings"><h2>Warnings: none</h2>'
                f"<p>{what}; no point has Pareto k above {PARETO_K_LIMIT:g}; no distortion, input problem or prior-"
                "bound hit was recorded.</p></section>")
    cls = "grave" if counts["problem"] else "some"
    parts = [f'<section class="alerts {cls}" id="warnings"><h2>Warnings: '
             f'{counts["problem"]} problem(s), {counts["caution"]} caution(s), {counts["note"]} note(s)</h2><ul>']
    for w in sorted(all_w, key=lambda w: _ORDER[w.level])[:MAX_LISTED_WARNINGS]:
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


def _sweep_alerts(warnings: list) -> str:
    """The warnings of one sweep, at the top of its section."""
    if not warnings:
        return ""
    grave = any(w.level == "problem" for w in warnings)
    return (f'<div class="alerts {"grave" if grave else "some"}"><ul>'
            + "".join(f'<li><span class="lvl {w.level}">{w.level}</span> {w.html}</li>' for w in warnings)
            + "</ul></div>")
