"""Scientific checks of one fit, as data: what a reader of the numbers should know.

:func:`summary_warnings` reads a summary (the dict of ``summary.json``, see
:meth:`bayesprobe.FitResult.summary`) and returns a list of warnings, each a plain dict::

    {"code": "prior-edge-upper", "level": "caution", "quantity": "T_e",
     "message": "the credible interval of T_e reaches the upper prior bound 10 eV (...)",
     "hint": "widen the prior with --priors, or check that the sweep covers this region"}

``code`` is stable (tests and other programs may switch on it), ``level`` is one of
``problem`` (the numbers should not be used as they are), ``caution`` (use them with
care) and ``note`` (for information); ``message`` is one line of plain text and ``hint``
says what to try. ``quantity`` (a name of :mod:`bayesprobe.quantities`) is present when
the warning is about one quantity. The same list is written into ``summary.json`` under
``warnings``, returned by :meth:`bayesprobe.FitResult.warnings`, printed by
``bayesprobe fit`` and shown by the HTML report.

The rules read only the summary, so they apply equally to a fit in memory, a fit folder
read back from disk and a batch record. Sources of the thresholds are given where they
are defined.
"""
from __future__ import annotations

import math
import re

__all__ = ["summary_warnings", "LEVELS", "CODES", "RATIO_TOLERANCE", "PRIOR_EDGE", "PARETO_K_LIMIT", "RESIDUAL_Z_LIMIT",
           "format_warning"]

#: warning levels, gravest first
LEVELS = ("problem", "caution", "note")
#: n_i/n_e is flagged when its whole credible interval lies outside [1/(1+x), 1+x]
#: (quasi-neutrality of the bulk plasma; the tolerance is common practice, no source)
RATIO_TOLERANCE = 0.10
#: a credible interval that comes within this fraction of the prior range (in the sampled,
#: possibly log, coordinate) of a prior bound is flagged (common practice, no source)
PRIOR_EDGE = 0.01
#: Pareto k above which PSIS-LOO is unreliable at a point (Vehtari, Gelman & Gabry,
#: Statistics and Computing 27, 1413 (2017))
PARETO_K_LIMIT = 0.7
#: longest text taken from the summary into a message (characters)
MAX_TEXT = 400
#: reader notes that mean the data were altered or damaged (a caution); other notes are informational
_DAMAGE_WORDS = re.compile(r"dropp|missing|non-finite|clip|saturat|duplicat|outlier|distort|overflow|"
                           r"truncat|hysteres", re.IGNORECASE)
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f]")

#: every code the rules below can produce, with its level
CODES = {
    "not-converged": "problem", "importance-fallback": "note", "pareto-k": "caution",
    "alternative-not-converged": "caution", "input-note": "note", "sign-flipped": "note",
    "distortion-selection": "note", "outliers-flagged": "caution", "hysteresis-shift": "caution",
    "classical-failed": "caution", "classical-flag": "caution", "density-ratio": "caution",
    "prior-edge-lower": "caution", "prior-edge-upper": "caution", "residuals-correlated": "caution",
}
#: standardised residuals are flagged as correlated when the lag-1 autocorrelation exceeds this many
#: of its standard deviations under independence, 1/sqrt(n) (Bartlett 1946, from memory): for
#: independent noise the chance is about 3e-5 (one-sided normal tail at 4)
RESIDUAL_Z_LIMIT = 4.0


def _num(v):
    """A finite float, or None (booleans and strings are not numbers here)."""
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return None
    x = float(v)
    return x if math.isfinite(x) else None


def _dict(v) -> dict:
    return v if isinstance(v, dict) else {}


def _list(v) -> list:
    return v if isinstance(v, list) else []


def _text(v, limit: int = MAX_TEXT) -> str:
    """One line of text from the summary (control characters hidden, length capped)."""
    s = " ".join(_CONTROL.sub("?", str(v)).split())
    return s if len(s) <= limit else s[: limit - 1] + "\u2026"


def _g(v, digits: int = 4) -> str:
    x = _num(v)
    return "?" if x is None else f"{x:.{digits}g}"


def _w(code, message, hint="", *, level=None, quantity=None) -> dict:
    out = {"code": code, "level": level or CODES[code], "message": _text(message, 2 * MAX_TEXT),
           "hint": _text(hint)}
    if quantity is not None:
        out["quantity"] = quantity
    return out


# ---------------------------------------------------------------------------- the rules

def _convergence(s: dict) -> list:
    d = _dict(s.get("diagnostics"))
    out = []
    if d.get("converged") is not True:
        unmet = "; ".join(_text(u, 200) for u in _list(d.get("unmet"))[:10] if isinstance(u, str))
        crit = _dict(d.get("criteria"))
        out.append(_w("not-converged",
                      "not converged: the sampler stopped at its step budget before the convergence criteria "
                      "were met" + (f" ({unmet})" if unmet else "") +
                      f"; R-hat max {_g(d.get('r_hat_max'))} (limit {_g(crit.get('r_hat_max'))}), bulk ESS min "
                      f"{_g(d.get('ess_bulk_min'))} (limit {_g(crit.get('ess_bulk_min'))})",
                      "treat the intervals as approximate; rerun with a larger step budget (--max-steps)"))
    if isinstance(d.get("fallback_reason"), str) and d["fallback_reason"]:
        out.append(_w("importance-fallback",
                      f"importance sampling was not accepted ({_text(d['fallback_reason'], 300)}); MCMC was used",
                      "nothing to do: the MCMC posterior is the result"))
    return out


def _comparison(s: dict) -> list:
    comp = _dict(s.get("comparison"))
    selected = comp.get("selected")
    out = []
    for model, m in _dict(comp.get("models")).items():
        m = _dict(m)
        n_bad = _num(m.get("n_pareto_k_above_0.7"))
        k_max = _num(m.get("pareto_k_max"))
        if (n_bad or 0) > 0 or (k_max is not None and k_max > PARETO_K_LIMIT):
            chosen = model == selected
            out.append(_w("pareto-k",
                          f"high Pareto k in the {_text(model, 60)} model{' (the selected one)' if chosen else ''}: "
                          f"{_g(n_bad)} point(s) with k > {PARETO_K_LIMIT:g}, max k {_g(k_max, 3)}; PSIS-LOO is "
                          "unreliable at those points, so the model comparison is less certain",
                          "look for outliers or distortions in the residuals (--distortions outliers or auto)",
                          level="problem" if chosen else "caution"))
        if model != selected and m.get("converged") is False:
            out.append(_w("alternative-not-converged",
                          f"the alternative {_text(model, 60)} model did not converge; its elpd_loo in the "
                          "comparison is approximate", "rerun with a larger step budget (--max-steps)"))
    return out


def _input(s: dict) -> list:
    sweep = _dict(s.get("sweep"))
    out = []
    for note in _list(sweep.get("notes"))[:20]:
        serious = isinstance(note, str) and _DAMAGE_WORDS.search(note)
        out.append(_w("input-note", f"input: {_text(note)}",
                      "check the sweep file" if serious else "", level="caution" if serious else "note"))
    if sweep.get("sign_flipped") is True and not any("sign" in str(x) for x in _list(sweep.get("notes"))):
        out.append(_w("sign-flipped", "the current sign of the input was flipped (ion current positive in the file)",
                      "give --sign if the detection is wrong"))
    return out


def _distortions(s: dict) -> list:
    """The modelled distortions: the `auto` selection, flagged outliers, a branch shift."""
    rec = _dict(s.get("distortions"))
    out = []
    sel = _dict(rec.get("selection"))
    if isinstance(sel.get("note"), str) and sel["note"]:
        out.append(_w("distortion-selection", sel["note"],
                      "the selection is in summary.json under distortions.selection"))
    outl = _dict(rec.get("outliers"))
    n = outl.get("n_flagged")
    if isinstance(n, int) and not isinstance(n, bool) and n > 0:
        out.append(_w("outliers-flagged",
                      f"{n} point(s) flagged as outliers (Student-t noise, fitted nu = {_g(outl.get('nu_median'), 3)})",
                      "their voltages are listed under distortions.outliers in summary.json; look at them in the "
                      "residual plot", quantity="nu"))
    hyst = _dict(rec.get("hysteresis"))
    if hyst:
        dv = _dict(hyst.get("V_shift_V"))
        excl = hyst.get("shift_excludes_zero") is True
        out.append(_w("hysteresis-shift",
                      f"rising- and falling-bias branches are shifted by V_shift = {_g(dv.get('median'), 3)} V "
                      f"(interval {_g(dv.get('lower'), 3)} to {_g(dv.get('upper'), 3)} V"
                      + ("; excludes zero)" if excl else "; includes zero)"),
                      "a shift that excludes zero points to a changing probe surface (contamination); clean "
                      "the probe and sweep again" if excl else "", level="caution" if excl else "note",
                      quantity="V_shift"))
    return out


def _classical(s: dict) -> list:
    classical = _dict(s.get("classical"))
    out = []
    if "error" in classical:
        out.append(_w("classical-failed", f"the classical windowed analysis failed: {_text(classical.get('error'))}",
                      "the Bayesian fit does not depend on it; only the comparison column is missing"))
    for flag in _list(classical.get("flags"))[:20]:
        out.append(_w("classical-flag", f"classical analysis flag: {_text(flag, 80)}",
                      "the classical column is a rough comparison; trust the posterior"))
    return out


def _density_ratio(s: dict) -> list:
    ratio = _dict(_dict(s.get("parameters")).get("n_i_over_n_e"))
    lo, hi = _num(ratio.get("ci_low")), _num(ratio.get("ci_high"))
    if lo is None or hi is None or not (hi < 1 / (1 + RATIO_TOLERANCE) or lo > 1 + RATIO_TOLERANCE):
        return []
    return [_w("density-ratio",
               f"n_i_over_n_e lies in [{_g(lo)}, {_g(hi)}], more than {100 * RATIO_TOLERANCE:g} % from 1: the ion "
               "collection theory, the probe area or the ion mass may not suit this sweep (a consistency check, "
               "not an error)", "try another --ion-collection, check --ion and the probe dimensions",
               quantity="n_i_over_n_e")]


def _prior_edges(s: dict) -> list:
    """Parameters whose credible interval reaches a prior bound."""
    out = []
    params = _dict(s.get("parameters"))
    for name, spec in _dict(s.get("priors")).items():
        prior = _dict(_dict(spec).get("prior"))
        e = _dict(params.get(name))
        lower, upper = _num(prior.get("lower")), _num(prior.get("upper"))
        lo, hi = _num(e.get("ci_low")), _num(e.get("ci_high"))
        if None in (lower, upper, lo, hi) or not upper > lower:
            continue
        log = _dict(spec).get("transform") == "log" and lower > 0 and lo > 0
        t = math.log if log else (lambda x: x)
        span = t(upper) - t(lower)
        unit = _text(e.get("unit", ""), 20)
        hint = "widen the prior (--priors), or check that the sweep covers the region that sets it"
        if t(lo) - t(lower) < PRIOR_EDGE * span:
            out.append(_w("prior-edge-lower", f"the credible interval of {_text(name, 60)} reaches the lower prior "
                          f"bound {_g(lower)} {unit} (interval from {_g(lo)}): the data do not bound it from below, "
                          "or the prior is too narrow", hint, quantity=str(name)))
        if t(upper) - t(hi) < PRIOR_EDGE * span:
            out.append(_w("prior-edge-upper", f"the credible interval of {_text(name, 60)} reaches the upper prior "
                          f"bound {_g(upper)} {unit} (interval up to {_g(hi)}): the data do not bound it from above, "
                          "or the prior is too narrow", hint, quantity=str(name)))
    return out


def _residuals(s: dict) -> list:
    res = _dict(s.get("residuals"))
    rho, z = _num(res.get("lag1_autocorrelation")), _num(res.get("lag1_z"))
    if rho is None or z is None or z <= RESIDUAL_Z_LIMIT:
        return []
    return [_w("residuals-correlated",
               f"the residuals are correlated (lag-1 autocorrelation {_g(rho, 2)}, {_g(z, 2)} standard deviations "
               "above independent noise): the model treats the points as independent, so every credible interval "
               "is too narrow and may miss the truth",
               "average or decimate oversampled points, check the digitiser filter and RF pickup; treat the "
               "intervals as lower bounds")]


_RULES = (_convergence, _comparison, _input, _distortions, _classical, _density_ratio, _prior_edges, _residuals)


def summary_warnings(summary: dict) -> list[dict]:
    """Every warning about one fit, from its summary (see the module docstring for the fields)."""
    if not isinstance(summary, dict):
        return []
    out = []
    for rule in _RULES:
        out += rule(summary)
    return out


def format_warning(w: dict) -> str:
    """One line for a terminal: ``warning [code]: message (try: hint)``."""
    hint = f" (try: {w['hint']})" if w.get("hint") else ""
    return f"{w.get('level', 'caution')} [{w.get('code', '?')}]: {w.get('message', '')}{hint}"
