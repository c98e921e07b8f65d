"""Scientific warnings as data (bayesprobe.checks): the rules, their thresholds, and the same list
from FitResult.warnings(), summary.json and the command line."""
from __future__ import annotations

import copy

import pytest

import bayesprobe as bp
from bayesprobe.checks import CODES, LEVELS, PARETO_K_LIMIT, format_warning, summary_warnings
from bayesprobe.fitting import make_config

PROBE = bp.Probe("cylindrical", radius=5e-5, length=5e-3)
CONFIG = make_config(probe=PROBE, ion="Ar", ion_collection="oml")


def _hysteresis_fit(shift, seed):
    sim = bp.simulate({"n_e": 1e16, "T_e": 3.0, "V_p": 12.0, "V_shift": shift, "I_cap": 0.0},
                      config=CONFIG.with_(hysteresis=True), n_points=300, noise_rel=0.01, seed=seed,
                      both_directions=True)
    return bp.fit(sim.sweep, config=CONFIG, seed=3, progress=False, engine="fast", distortions="hysteresis")


@pytest.fixture(scope="module")
def shifted():
    return _hysteresis_fit(0.4, 5)


def _codes(ws):
    return [w["code"] for w in ws]


def test_every_warning_is_one_line_with_a_known_code_and_level(shifted):
    ws = shifted.warnings()
    assert ws == shifted.summary()["warnings"]
    for w in ws:
        assert w["code"] in CODES and w["level"] in LEVELS and isinstance(w["hint"], str)
        assert "\n" not in w["message"] and "\n" not in format_warning(w)


def test_a_simulated_branch_shift_is_flagged_and_none_is_not(shifted):
    """The sweep was simulated with the rising branch 0.4 V above the falling one: the fitted shift
    excludes zero and is a caution. Negative control: the same sweep simulated without a shift gives
    no such caution (the interval includes zero)."""
    w = [w for w in shifted.warnings() if w["code"] == "hysteresis-shift"]
    assert len(w) == 1 and w[0]["level"] == "caution" and "excludes zero" in w[0]["message"]
    plain = [w for w in _hysteresis_fit(0.0, 5).warnings() if w["code"] == "hysteresis-shift"]
    assert len(plain) == 1 and plain[0]["level"] == "note" and "includes zero" in plain[0]["message"]


def test_pareto_k_threshold(shifted):
    """PSIS-LOO is unreliable above k = 0.7 (Vehtari, Gelman & Gabry, Stat. Comput. 27, 1413 (2017));
    the warning is a problem for the selected model, a caution for the other one."""
    assert PARETO_K_LIMIT == 0.7
    s = copy.deepcopy(shifted.summary())

    def with_k(k, selected):
        s["comparison"] = {"selected": selected, "models": {"maxwellian": {"pareto_k_max": k,
                                                                           "n_pareto_k_above_0.7": 0}}}
        return [w for w in summary_warnings(s) if w["code"] == "pareto-k"]
    assert with_k(0.69, "maxwellian") == []
    assert [w["level"] for w in with_k(0.71, "maxwellian")] == ["problem"]
    assert [w["level"] for w in with_k(0.71, "bi-maxwellian")] == ["caution"]


def test_density_ratio_and_prior_edges(shifted):
    """Quasi-neutrality: n_i/n_e within 10 % of 1 passes (common practice, no source); an interval
    touching a prior bound (within 1 % of the range in the sampled coordinate) is flagged."""
    s = copy.deepcopy(shifted.summary())
    s["parameters"]["n_i_over_n_e"].update(ci_low=0.98, ci_high=1.02)
    assert "density-ratio" not in _codes(summary_warnings(s))
    s["parameters"]["n_i_over_n_e"].update(ci_low=1.4, ci_high=1.6)
    assert "density-ratio" in _codes(summary_warnings(s))
    e = s["parameters"]["T_e"]
    s["priors"]["T_e"]["prior"].update(lower=0.1, upper=e["ci_high"] * 1.001)
    edge = [w for w in summary_warnings(s) if w["code"] == "prior-edge-upper"]
    assert len(edge) == 1 and edge[0]["quantity"] == "T_e"
    s["priors"]["T_e"]["prior"]["upper"] = e["ci_high"] * 2.0
    assert "prior-edge-upper" not in _codes(summary_warnings(s))


def test_not_converged_is_a_problem(shifted):
    s = copy.deepcopy(shifted.summary())
    s["diagnostics"].update(converged=False, unmet=["bulk ESS 321 < 1000"])
    w = [w for w in summary_warnings(s) if w["code"] == "not-converged"]
    assert len(w) == 1 and w[0]["level"] == "problem" and "bulk ESS 321 < 1000" in w[0]["message"]
    assert summary_warnings("not a summary") == []
