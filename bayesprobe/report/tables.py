"""The report's tables of numbers: main results, batch rows, every quantity, correlations.

Numbers come from the checked summary (:mod:`bayesprobe.schema`) and results.csv; labels and
HTML markup from the quantity registry; descriptions and units from the file where present.
"""
from __future__ import annotations

from ..quantities import description_of, main_names, unit_of
from ..schema import results_columns
from .formatting import (_dict, _e, _interval, _list, _n, _name_cell, _num, _pct, _sig_digits,
                         _status_badge, _symbol, _unit)
from .reading import _Results


def _description(s: dict, name: str):
    """A quantity's description: the file's ``quantities`` block (plain text), else the registry."""
    d = _dict(_dict(s.get("quantities")).get(name)).get("description")
    return d if isinstance(d, str) and d else description_of(name)


def _main_names(summary: dict) -> list[str]:
    params = _dict(summary.get("parameters"))
    return list(main_names(params))


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


def _batch_table(res: _Results, units: dict, anchors_by_label: dict) -> str:
    cols = results_columns(res.batch_header)
    params, coords = cols["parameters"], cols["coords"]
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
        desc = _description(s, name) or _dict(priors.get(name)).get("description")
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
