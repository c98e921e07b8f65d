"""Which sweep distortions to model: names, switches, starting values, outlier flags, ``auto``.

The distortions themselves (physics and sources) are in
:mod:`bayesprobe.physics.distortions`; their priors in
:mod:`bayesprobe.inference.posterior`. This module is the glue ``fit`` uses:

* :func:`parse_distortions` turns the user's choice (``"rf,leakage"``, a list,
  ``"auto"``) into names;
* :func:`apply_distortions` switches them on in a :class:`~bayesprobe.model.ModelConfig`
  (``outliers`` is a likelihood choice: Student-t with fitted degrees of freedom);
* :func:`describe_distortions` is the ``distortions`` block of ``summary.json``
  (which are on, and the outlier flag list);
* :func:`select_distortions` is ``auto``: every distortion is fitted alone and
  compared with the plain model by PSIS-LOO with the rule of
  :mod:`bayesprobe.comparison` (difference > 4 and > 2 standard errors); the
  supported ones are switched on together, and a plain-language note says which
  were found and how far they moved T_e and n from the undistorted fit.
"""
from __future__ import annotations

import numpy as np

from .comparison import ELPD_MIN, SE_MULTIPLE, loo_difference, richer_supported
from .model import distortion_parameter_names
from .quantities import DISTORTIONS as _REGISTRY
from .result import summarise_draws

__all__ = ["DISTORTIONS", "parse_distortions", "apply_distortions", "enabled_distortions",
           "describe_distortions", "select_distortions", "OUTLIER_WEIGHT"]

#: user-facing distortion name -> ModelConfig switch (``outliers`` is a likelihood choice)
DISTORTIONS = {name: d.switch for name, d in _REGISTRY.items()}
#: a point is flagged as an outlier when its posterior mean weight (nu + 1)/(nu + r^2) is below this
#: (the data give it less than a tenth of the weight of a typical point; our choice, no source: with a
#: Gaussian bulk the fitted nu is small, and 0.25 would flag ordinary 2.5-sigma points)
OUTLIER_WEIGHT = 0.1


def parse_distortions(value):
    """``None``/"none" -> (); "auto" -> "auto"; "rf,leakage" or a list -> tuple of names."""
    if value is None:
        return ()
    if isinstance(value, str):
        text = value.strip().lower()
        if text in ("", "none"):
            return ()
        if text == "auto":
            return "auto"
        items = [t.strip() for t in text.split(",") if t.strip()]
    else:
        try:
            items = [str(t).strip().lower() for t in value]
        except TypeError:
            raise ValueError(f"distortions must be a name, a comma-separated list or 'auto', got {value!r}") from None
    unknown = [t for t in items if t not in DISTORTIONS]
    if unknown or "auto" in items:
        raise ValueError(f"unknown distortion(s) {', '.join(repr(t) for t in unknown) or repr('auto')}; "
                         f"use any of {', '.join(DISTORTIONS)}, or 'auto' alone, or 'none'")
    return tuple(n for n in DISTORTIONS if n in items)


def apply_distortions(names, config, student_nu):
    """Switch ``names`` on in ``config``; ``outliers`` sets ``student_nu = "fit"``."""
    changes = {DISTORTIONS[n]: True for n in names if DISTORTIONS[n]}
    if "outliers" in names:
        if student_nu not in (None, "fit"):
            raise ValueError(f"the outliers distortion fits the Student-t degrees of freedom; "
                             f"drop the fixed student_nu={student_nu!r} or the outliers distortion")
        student_nu = "fit"
    return (config.with_(**changes) if changes else config), student_nu


def enabled_distortions(config, student_nu) -> list:
    out = [n for n, switch in DISTORTIONS.items() if switch and getattr(config, switch)]
    if student_nu == "fit":
        out.append("outliers")
    return out


def distortion_starts(params, T0: float) -> list:
    """Starting values of the distortion parameters present in ``params``: a base start and
    extra starts with larger distortions (so the optimiser sees both sides)."""
    base, extras = {}, []
    names = set(params.names)
    if "V_rf" in names:
        base["V_rf"] = _inside(params["V_rf"], 0.05 * T0)
        extras.append({"V_rf": _inside(params["V_rf"], 1.0 * T0)})
    if "R_series" in names:
        prior = params["R_series"].prior
        if prior.kind in ("normal", "log-normal"):      # a measured circuit resistance: start on it
            if prior.kind == "normal":
                base["R_series"] = prior.mean if prior.mean > 0 else prior.sd
                extras.append({"R_series": base["R_series"] + 2 * prior.sd})
            else:
                base["R_series"] = float(np.exp(prior.mean))
                extras.append({"R_series": float(np.exp(prior.mean + 2 * prior.sd))})
        else:
            hi = prior.upper or 1.0
            base["R_series"] = _inside(params["R_series"], 1e-3 * hi)
            extras.append({"R_series": _inside(params["R_series"], 0.05 * hi)})
    if "G_leak" in names:
        # the prior centre: 0 by default, the plasma-off line when one was measured
        base.update({n: float(params[n].prior.mean) if params[n].prior.mean is not None else 0.0
                     for n in ("G_leak", "I_offset")})
    if "V_shift" in names:
        base.update({"V_shift": 0.0, "I_cap": 0.0})
    if "nu" in names:
        base["nu"] = 10.0
        extras.append({"nu": 3.0})
    return [base] + extras


def _inside(param, value):
    lo, hi = param.prior.lower, param.prior.upper
    if lo is not None and hi is not None:
        return float(np.exp(np.clip(np.log(value), np.log(lo) + 0.01, np.log(hi) - 0.01))) if lo > 0 \
            else float(np.clip(value, lo, hi))
    return float(value)


def describe_distortions(logpost, Z, phys, voltage, counts=None, credible_level=0.9) -> dict | None:
    """The ``distortions`` block of the summary for one fit (None when nothing is modelled).

    ``Z`` may hold the distinct draws only, with ``counts`` the number of times each occurs;
    ``phys`` holds every draw.
    """
    config = logpost.config
    nu_mode = "fit" if getattr(logpost, "fit_nu", False) else logpost.student_nu
    enabled = enabled_distortions(config, nu_mode)
    if not enabled:
        return None
    rec = {"enabled": enabled,
           "descriptions": {n: _REGISTRY[n].description for n in enabled},
           "parameters": list(distortion_parameter_names(config)) + (["nu"] if nu_mode == "fit" else []),
           "note": ""}
    if nu_mode == "fit":
        c = np.ones(Z.shape[0]) if counts is None else np.asarray(counts, float)
        w = np.zeros(np.asarray(voltage).size)
        for start in range(0, Z.shape[0], 500):          # chunks keep memory flat on long sweeps
            with np.errstate(over="ignore", invalid="ignore"):
                w += c[start:start + 500] @ logpost.outlier_weights(Z[start:start + 500])
        w /= c.sum()
        flagged = np.flatnonzero(w < OUTLIER_WEIGHT)
        rec["outliers"] = {
            "rule": f"posterior mean precision weight (nu + 1)/(nu + r^2) below {OUTLIER_WEIGHT:g}",
            "weight_threshold": OUTLIER_WEIGHT, "n_flagged": int(flagged.size),
            "indices": flagged.tolist(), "voltage_V": np.asarray(voltage)[flagged].tolist(),
            "mean_weight": w[flagged].tolist(), "nu_median": float(np.median(phys["nu"]))}
        rec["note"] = (f"{flagged.size} point(s) flagged as outliers (Student-t, fitted nu = "
                       f"{np.median(phys['nu']):.3g}).")
    if config.hysteresis:
        rec["hysteresis"] = _hysteresis_record(phys, credible_level)
        rec["note"] = (rec["note"] + " " + rec["hysteresis"]["note"]).strip()
    return rec


def _hysteresis_record(phys, level):
    # the same interval rule as every other summary entry
    dv, ic = ([e["ci_low"], e["median"], e["ci_high"]] for e in
              (summarise_draws(phys[n], level) for n in ("V_shift", "I_cap")))
    pct = f"{100 * level:g} %"
    note = (f"Rising- and falling-bias branches are shifted by V_shift = {dv[1]:.3g} V ({pct} interval "
            f"{dv[0]:.3g} to {dv[2]:.3g} V; positive: the rising branch sits at higher bias); displacement "
            f"current at the mean sweep rate I_cap = {ic[1]:.3g} A ({ic[0]:.3g} to {ic[2]:.3g} A).")
    return {"V_shift_V": {"median": float(dv[1]), "lower": float(dv[0]), "upper": float(dv[2])},
            "I_cap_A": {"median": float(ic[1]), "lower": float(ic[0]), "upper": float(ic[2])},
            "credible_level": level,
            "shift_excludes_zero": bool(dv[0] > 0 or dv[2] < 0),
            "note": note}


def _temperature_name(result):
    """The temperature a distortion's effect is reported on: T_e, or the effective
    temperature of a two-temperature model."""
    return "T_e_eff" if result.config.electron_model.two_temperature else "T_e"


def _shift(plain, chosen, name):
    a, b = plain.parameter_summary().get(name), chosen.parameter_summary().get(name)
    if not a or not b or a["median"] is None or b["median"] is None:
        return None
    d = b["median"] - a["median"]
    return {"unit": a["unit"], "plain_median": a["median"], "median": b["median"], "shift": d,
            "shift_relative": d / a["median"] if a["median"] else None,
            "shift_in_plain_sd": d / a["sd"] if a["sd"] else None}


def select_distortions(fit_fn, config, student_nu, *, both_directions=False):
    """``auto``: fit the plain model and each distortion alone, keep those PSIS-LOO supports.

    ``fit_fn(config, student_nu)`` runs one fit; ``hysteresis`` is a candidate only when
    the sweep holds both directions (``both_directions``). Returns the chosen FitResult with
    ``distortions["selection"]`` filled in (candidates, the rule, shifts of T_e and n
    relative to the plain fit, and a plain-language note).
    """
    base = config.undistorted()
    base_nu = None if student_nu == "fit" else student_nu
    plain = fit_fn(base, base_nu)
    candidates, results = {}, {}
    for name in DISTORTIONS:
        if name == "outliers" and base_nu is not None:
            continue                                 # a fixed Student-t likelihood was asked for
        if name == "hysteresis" and not both_directions:
            continue
        cfg, nu = apply_distortions((name,), base, base_nu)
        res = fit_fn(cfg, nu)
        results[name] = res
        cmp = loo_difference(plain, res)
        cmp["supported"] = richer_supported(cmp["elpd_diff"], cmp["se_diff"])
        cmp["converged"] = bool(res.converged)
        candidates[name] = cmp
    found = [n for n in candidates if candidates[n]["supported"]]
    if not found:
        chosen = plain
    elif len(found) == 1:
        chosen = results[found[0]]
    else:
        cfg, nu = apply_distortions(tuple(found), base, base_nu)
        chosen = fit_fn(cfg, nu)
    T = _temperature_name(plain)
    shifts = {n: s for n in (T, "n_e", "n_i") if (s := _shift(plain, chosen, n)) is not None}
    selection = {"method": "PSIS-LOO, each distortion fitted alone against the undistorted model",
                 "rule": (f"a distortion is kept only if its elpd_loo exceeds the undistorted model's by more "
                          f"than {ELPD_MIN:g} and by more than {SE_MULTIPLE:g} standard errors of the difference"),
                 "candidates": candidates, "found": found, "shifts_vs_undistorted": shifts,
                 "note": _note(found, chosen, shifts, T, tried=list(candidates))}
    rec = chosen.distortions or {"enabled": [], "descriptions": {}, "parameters": [], "note": ""}
    rec = dict(rec)
    rec["selection"] = selection
    rec["note"] = selection["note"] + (" " + rec["note"] if rec.get("note") else "")
    chosen.distortions = rec
    return chosen


def _fmt(v, unit):
    return f"{v:.3g} {unit}".strip()


def _note(found, chosen, shifts, T, tried=()):
    if not found:
        names = ", ".join(_REGISTRY[n].description for n in tried) or "none"
        return (f"No distortion is supported by these data: each modelled distortion ({names}) failed to "
                f"improve the leave-one-out predictive density enough, so the undistorted model is kept.")
    ps = chosen.parameter_summary()
    parts = []
    for n in found:
        p = _REGISTRY[n].main_parameter
        e = ps.get(p)
        detail = f" ({p} = {_fmt(e['median'], e['unit'])})" if e and e["median"] is not None else ""
        parts.append(_REGISTRY[n].description + detail)
    text = "Distortions found and modelled: " + "; ".join(parts) + "."
    moves = []
    for name in (T, "n_e", "n_i"):
        s = shifts.get(name)
        if s is None:
            continue
        rel = f"{100 * s['shift_relative']:+.0f} %" if s["shift_relative"] is not None else ""
        sd = f", {s['shift_in_plain_sd']:+.1f} sd of the undistorted fit" if s["shift_in_plain_sd"] is not None else ""
        moves.append(f"{name} from {_fmt(s['plain_median'], s['unit'])} to {_fmt(s['median'], s['unit'])} "
                     f"({rel}{sd})")
    if moves:
        text += " Relative to the undistorted model they moved " + "; ".join(moves) + "."
    return text
