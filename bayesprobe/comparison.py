"""Choosing between electron models by PSIS-LOO (Vehtari, Gelman & Gabry 2017).

The rule: keep the simpler (single-temperature) model unless the richer one's
expected log predictive density is higher by more than 4 *and* by more than twice
the standard error of the difference. Pareto k > 0.7 at any point makes LOO
unreliable there and is reported as a warning.
"""
from __future__ import annotations

import numpy as np

from .inference.arviz_adapter import compare, loo
from .physics.electron_models import ELECTRON_MODELS

__all__ = ["compare_models", "SELECTION_RULE", "ELPD_MIN", "SE_MULTIPLE", "loo_difference", "richer_supported"]

ELPD_MIN = 4.0
SE_MULTIPLE = 2.0
SELECTION_RULE = (f"the two-temperature model is selected only if its elpd_loo exceeds the "
                  f"single-temperature model's by more than {ELPD_MIN:g} and by more than "
                  f"{SE_MULTIPLE:g} standard errors of the difference; otherwise the simpler model is kept")
#: electron model names, simplest first: the first is kept unless a richer one earns its place
ORDER = tuple(sorted(ELECTRON_MODELS, key=lambda n: ELECTRON_MODELS[n].complexity))


def loo_difference(simple, rich) -> dict:
    """PSIS-LOO of two fits of the same sweep and the difference rich - simple with its standard error."""
    lo_s, lo_r = loo(simple.idata), loo(rich.idata)
    d = np.asarray(lo_r.loo_i) - np.asarray(lo_s.loo_i)
    k_hat = np.asarray(lo_r.pareto_k)
    return {"elpd_loo": float(lo_r.elpd_loo), "se": float(lo_r.se), "elpd_loo_plain": float(lo_s.elpd_loo),
            "elpd_diff": float(np.sum(d)), "se_diff": float(np.sqrt(d.size * np.var(d))),
            "pareto_k_max": float(np.max(k_hat)), "n_pareto_k_above_0.7": int(np.sum(k_hat > 0.7))}


def richer_supported(diff: float, se_diff: float) -> bool:
    """The selection rule: the richer model wins only if diff > ELPD_MIN and diff > SE_MULTIPLE * se."""
    return bool(diff > ELPD_MIN and diff > SE_MULTIPLE * se_diff)


def compare_models(results: dict):
    """Compare fitted FitResults (keys: electron model names); return the selected one.

    The selected result carries ``comparison`` (for summary.json) and the other
    results in ``alternatives``.
    """
    loos = {k: loo(r.idata) for k, r in results.items()}
    table = compare({k: r.idata for k, r in results.items()})
    models = {}
    warnings = []
    for k, lo in loos.items():
        k_hat = np.asarray(lo.pareto_k)
        n_bad = int(np.sum(k_hat > 0.7))
        models[k] = {"elpd_loo": float(lo.elpd_loo), "se": float(lo.se), "p_loo": float(lo.p_loo),
                     "weight": float(table.loc[k, "weight"]), "pareto_k_max": float(np.max(k_hat)),
                     "n_pareto_k_above_0.7": n_bad}
        if n_bad:
            warnings.append(f"{k}: {n_bad} point(s) with Pareto k > 0.7, LOO unreliable there")
        if not results[k].converged:
            warnings.append(f"{k}: the fit did not meet the convergence criteria within its step budget "
                            f"({'; '.join(results[k].diagnostics.get('unmet', []))}); its elpd_loo is approximate")
        models[k]["converged"] = bool(results[k].converged)
    simple, rich = ORDER[0], ORDER[-1]
    selected = simple
    reasoning = ""
    if simple in loos and rich in loos:
        # difference and its standard error from the pointwise elpd values
        d = np.asarray(loos[rich].loo_i) - np.asarray(loos[simple].loo_i)
        diff = float(np.sum(d))
        se_diff = float(np.sqrt(d.size * np.var(d)))
        models[rich][f"elpd_diff_vs_{simple}"] = diff
        models[rich]["se_diff"] = se_diff
        if diff > ELPD_MIN and diff > SE_MULTIPLE * se_diff:
            selected = rich
            reasoning = (f"A two-temperature electron distribution is supported: leave-one-out cross-validation "
                         f"(PSIS-LOO) favours it by {diff:.1f} in expected log predictive density "
                         f"(standard error of the difference {se_diff:.1f}), which exceeds both "
                         f"{ELPD_MIN:g} and {SE_MULTIPLE:g} standard errors.")
        else:
            reasoning = (f"A single Maxwellian electron temperature is retained: the two-temperature model "
                         f"changes the expected log predictive density by {diff:+.1f} "
                         f"(standard error {se_diff:.1f}), which does not exceed both {ELPD_MIN:g} "
                         f"and {SE_MULTIPLE:g} standard errors, so the hot population is not resolved by these data.")
    comparison = {"selected": selected, "method": "PSIS-LOO", "rule": SELECTION_RULE,
                  "reasoning": reasoning, "warnings": warnings, "models": models}
    chosen = results[selected]
    chosen.comparison = comparison
    chosen.alternatives = {k: r for k, r in results.items() if k != selected}
    return chosen
