"""The report's per-fit blocks: model comparison, sampler diagnostics, distortions, priors and
settings, software versions."""
from __future__ import annotations

import json

from ..checks import PARETO_K_LIMIT
from .formatting import (_dict, _e, _flatten, _list, _n, _name_cell, _num, _symbol, _unit, _value, _yesno)
from .reading import _Results


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
                     else '<span class="na">reference</span>' if "elpd_diff_vs_maxwellian" not in m else _n(None))
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


def _range_cells(e: dict) -> str:
    """median and [lower, upper] of a distortions entry ({"median", "lower", "upper"})."""
    e = _dict(e)
    return (f'<td class="num">{_n(e.get("median"))}</td>'
            f'<td class="num">[{_n(e.get("lower"))}, {_n(e.get("upper"))}]</td>')


def _selection_table(sel: dict) -> str:
    """``auto``: each distortion fitted alone against the undistorted model."""
    rows = []
    for name, c in list(_dict(sel.get("candidates")).items())[:20]:
        c = _dict(c)
        rows.append(f'<tr><th scope="row">{_e(name, 60)}</th><td class="num">{_n(c.get("elpd_diff"), 4)} &plusmn; '
                    f'{_n(c.get("se_diff"), 3)}</td><td>{_yesno(c.get("supported"))}</td>'
                    f'<td>{_yesno(c.get("converged"))}</td></tr>')
    rule = f'<p class="small">Rule: {_e(sel["rule"], 600)}.</p>' if isinstance(sel.get("rule"), str) else ""
    if not rows:
        return rule
    return ('<div class="scroll"><table class="distortions"><caption>Distortions tried one at a time '
            '(<code>--distortions auto</code>)</caption><thead><tr><th>distortion</th>'
            '<th class="num">&Delta;elpd<sub>loo</sub> vs undistorted &plusmn; SE</th><th>kept</th>'
            '<th>converged</th></tr></thead><tbody>' + "".join(rows) + "</tbody></table></div>" + rule)


def _distortions_block(s: dict) -> str:
    """The ``distortions`` block of a summary: what was modelled, the note, a branch shift
    (hysteresis), flagged outliers and the ``auto`` selection. Empty when nothing was modelled."""
    rec = _dict(s.get("distortions"))
    if not rec:
        return ""
    descriptions = _dict(rec.get("descriptions"))
    enabled = [n for n in _list(rec.get("enabled")) if isinstance(n, str)][:20]
    items = "".join(f"<li><code>{_e(n, 60)}</code>: {_e(descriptions.get(n, ''), 300)}</li>" for n in enabled)
    parts = [f"<p>Modelled as nuisance parameters:</p><ul>{items}</ul>" if items else
             "<p>No distortion was modelled.</p>"]
    if isinstance(rec.get("note"), str) and rec["note"]:
        parts.append(f'<p class="reasoning">{_e(rec["note"])}</p>')
    hyst = _dict(rec.get("hysteresis"))
    if hyst:
        parts.append('<div class="scroll"><table class="distortions"><caption>Rising and falling bias '
                     f'({_e(_pct_text(hyst.get("credible_level")), 20)} interval)</caption><thead><tr><th>quantity</th>'
                     '<th class="num">median</th><th class="num">interval</th></tr></thead><tbody>'
                     f'<tr><th scope="row">{_symbol("V_shift")} [V]</th>{_range_cells(hyst.get("V_shift_V"))}</tr>'
                     f'<tr><th scope="row">{_symbol("I_cap")} [A]</th>{_range_cells(hyst.get("I_cap_A"))}</tr>'
                     f'</tbody></table></div><p class="small">The branch shift interval '
                     f'{"excludes" if hyst.get("shift_excludes_zero") is True else "includes"} zero.</p>')
    outl = _dict(rec.get("outliers"))
    if outl:
        volts = ", ".join(_n(v) for v in _list(outl.get("voltage_V"))[:30])
        more = " &hellip;" if len(_list(outl.get("voltage_V"))) > 30 else ""
        parts.append(f'<p>Outliers: {_n(outl.get("n_flagged"))} point(s) flagged (fitted {_symbol("nu")} = '
                     f'{_n(outl.get("nu_median"), 3)}; rule: {_e(outl.get("rule", ""), 300)})'
                     + (f"; at bias [V]: {volts}{more}" if volts else "") + ".</p>")
    sel = _dict(rec.get("selection"))
    if sel:
        parts.append(_selection_table(sel))
    return "".join(parts)


def _pct_text(level) -> str:
    x = _num(level)
    return "?" if x is None else f"{100 * x:g} %"
