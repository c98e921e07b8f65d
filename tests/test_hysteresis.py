"""Up/down sweep hysteresis: branch detection, the two-branch model, and its calibration.

Oracles:
* Branch detection: the rising/falling labels of a triangular and a sinusoidal sweep are known
  by construction; the relative sweep rate of a sinusoid V = A sin(w t) sampled uniformly in time
  is cos(w t) / <|cos|> with <|cos|> = 2/pi (calculus).
* Model: the rising branch with shift d is the undistorted characteristic at V - d/2 (definition
  of a pure voltage shift); the displacement current of a capacitance C is C dV/dt (circuit
  theory), checked against a sinusoidal sweep with known C and frequency.
* Calibration, as for the other distortions: the count of 90 % intervals covering the truth is
  Binomial(N, 0.9); accepted inside its central 99 % band (scipy.stats.binom). The plain model
  (directions ignored) is the negative control: it misses the true V_p in most sweeps, because the
  two knees blur into one that starts below the mean. Clean two-direction sweeps: the T_e interval
  widens by at most 25 % when the hysteresis terms are switched on.
Sweeps: tests/cases/hysteresis.py (synthetic).
"""
import json

import numpy as np
import pytest
from scipy.stats import binom

import bayesprobe as bp
from bayesprobe.io import load_sweep, sweep_from_arrays, write_sweep_csv
from bayesprobe.sweep import detect_branches
from cases.hysteresis import covers, make_case, run_case


def band(n, p=0.9, mass=0.99):
    return int(binom.ppf((1 - mass) / 2, n, p)), int(binom.ppf(1 - (1 - mass) / 2, n, p))


# ----------------------------------------------------------------------------- detection

def test_triangle_labels_and_ramp():
    v = np.r_[np.linspace(-10, 10, 60), np.linspace(10, -10, 60)[1:]]
    direction, ramp = detect_branches(v)
    assert np.all(direction[:60] == 1) and np.all(direction[60:] == -1)
    assert np.allclose(ramp[1:59], 1.0, rtol=0.02) and np.allclose(ramp[61:-1], -1.0, rtol=0.02)


def test_sinusoid_ramp_is_cosine_over_its_mean():
    t = np.arange(400) / 400.0                      # two periods, uniform sampling in time
    w = 2 * np.pi * 2
    v = 20 * np.sin(w * t)
    direction, ramp = detect_branches(v)
    expect = np.cos(w * t) / (2 / np.pi)            # <|cos|> = 2/pi over whole periods
    assert np.allclose(ramp[1:-1], expect[1:-1], atol=0.01)
    assert np.all(direction[np.cos(w * t) > 0.1] == 1) and np.all(direction[np.cos(w * t) < -0.1] == -1)


@pytest.mark.parametrize("v", [np.linspace(-10, 10, 100), np.linspace(10, -10, 100),
                               np.random.default_rng(1).permutation(np.linspace(-10, 10, 100)),
                               np.linspace(-10, 10, 100) + np.random.default_rng(2).normal(0, 0.5, 100)],
                         ids=["rising", "falling", "shuffled", "jittering"])
def test_one_direction_or_disorder_is_not_a_loop(v):
    assert detect_branches(v) is None


def test_reader_keeps_directions_and_writer_keeps_order(tmp_path):
    cfg, sim = make_case(0)
    path = write_sweep_csv(tmp_path / "loop.csv", sim.sweep)
    back = load_sweep(path)
    assert np.array_equal(back.voltage, sim.sweep.voltage)
    assert np.array_equal(back.direction, sim.sweep.direction)
    assert np.allclose(back.ramp, sim.sweep.ramp)
    assert any("both sweep directions" in n for n in back.notes)
    # the sign convention is detected on the joined sweep as before
    flipped = sweep_from_arrays(*[-x if k else x for k, x in enumerate(sim.sweep.in_record_order())])
    assert flipped.sign_flipped and np.array_equal(flipped.direction, sim.sweep.direction)


# ----------------------------------------------------------------------------- model

def _plain():
    return bp.ModelConfig(probe=bp.Probe("planar", radius=2e-3), ion_collection="thin-sheath", quasi_neutral=True)


def test_shift_is_a_pure_voltage_shift_and_zero_terms_are_plain():
    cfg = _plain()
    V = np.linspace(-30, 20, 200)
    p = {"n_e": 1e16, "T_e": 3.0, "V_p": 8.0}
    up = (np.ones(V.size), np.zeros(V.size))
    down = (-np.ones(V.size), np.zeros(V.size))
    h = cfg.with_(hysteresis=True)
    d = 1.7
    assert np.allclose(bp.probe_current(V, p | {"V_shift": d, "I_cap": 0.0}, h, branches=up),
                       bp.probe_current(V - d / 2, p, cfg), rtol=1e-12, atol=0)
    assert np.allclose(bp.probe_current(V, p | {"V_shift": d, "I_cap": 0.0}, h, branches=down),
                       bp.probe_current(V + d / 2, p, cfg), rtol=1e-12, atol=0)
    assert np.array_equal(bp.probe_current(V, p | {"V_shift": 0.0, "I_cap": 0.0}, h, branches=up),
                          bp.probe_current(V, p, cfg))


def test_shift_acts_at_the_sheath_and_leakage_at_the_applied_bias():
    """With series resistance, RF and leakage on, the rising branch is the distorted model at V - d/2 except
    for the leakage line, which sees the applied bias (the composition stated in bayesprobe.model)."""
    cfg = _plain().with_(series_resistance=True, rf_fluctuation=True, leakage=True)
    V = np.linspace(-40, 20, 300)
    p = {"n_e": np.array([1e16, 2e16]), "T_e": np.array([3.0, 2.0]), "V_p": np.array([10.0, 9.0]),
         "R_series": np.array([50.0, 100.0]), "V_rf": np.array([1.0, 2.0]), "G_leak": np.array([1e-6, 0.0]),
         "I_offset": np.array([1e-6, 0.0])}
    d = 1.3
    up = (np.ones(V.size), np.zeros(V.size))
    got = bp.probe_current(V, p | {"V_shift": np.full(2, d), "I_cap": np.zeros(2)}, cfg.with_(hysteresis=True),
                           branches=up)
    expect = bp.probe_current(V - d / 2, p, cfg) + p["G_leak"][:, None] * d / 2
    assert np.allclose(got, expect, rtol=1e-12, atol=1e-18)


def test_displacement_current_is_C_dV_dt():
    """A 100 pF stray capacitance under a 1 kHz, 20 V sinusoidal sweep: I = C dV/dt (circuit theory)."""
    cfg = _plain()
    C, f, A = 100e-12, 1e3, 20.0
    t = np.arange(1000) / (1000 * f)                 # one period, uniform sampling
    v = A * np.sin(2 * np.pi * f * t) - 5.0
    direction, ramp = detect_branches(v)
    mean_rate = A * 2 * np.pi * f * (2 / np.pi)      # <|dV/dt|> of a sinusoid
    p = {"n_e": 1e16, "T_e": 3.0, "V_p": 8.0}
    h = cfg.with_(hysteresis=True)
    I = bp.probe_current(v, p | {"V_shift": 0.0, "I_cap": C * mean_rate}, h, branches=(direction, ramp))
    expect = bp.probe_current(v, p, cfg) + C * A * 2 * np.pi * f * np.cos(2 * np.pi * f * t)
    assert np.allclose(I[1:-1], expect[1:-1], rtol=0, atol=2e-3 * C * A * 2 * np.pi * f)


def test_hysteresis_needs_both_directions():
    sim = bp.simulate({"n_e": 1e16, "T_e": 3.0, "V_p": 8.0}, config=_plain(), n_points=200)
    with pytest.raises(ValueError, match="rising and falling bias"):
        bp.fit(sim.sweep, config=_plain(), distortions="hysteresis", engine="fast")
    with pytest.raises(ValueError, match="both_directions"):
        bp.simulate({"V_shift": 1.0}, config=_plain().with_(hysteresis=True))


def test_cli_simulate_and_fit_a_loop(tmp_path, capsys):
    from bayesprobe.cli import main
    out = tmp_path / "loop.csv"
    assert main(["simulate", "--out", str(out), "--geometry", "planar", "--radius", "2e-3", "--ion-collection",
                 "thin-sheath", "--T-e", "3", "--V-p", "8", "--points", "300", "--branch-shift", "2",
                 "--displacement-current", "1e-5", "--seed", "3"]) == 0
    truth = json.loads((tmp_path / "loop.truth.json").read_text())
    assert truth["parameters"]["V_shift"] == 2.0 and truth["model"]["hysteresis"] is True
    res = tmp_path / "res"
    assert main(["fit", str(out), "--out", str(res), "--geometry", "planar", "--radius", "2e-3", "--ion-collection",
                 "thin-sheath", "--distortions", "hysteresis", "--engine", "auto", "--no-figures", "--quiet"]) == 0
    summary = json.loads((res / "summary.json").read_text())
    h = summary["distortions"]["hysteresis"]
    assert h["V_shift_V"]["lower"] < 2.0 < h["V_shift_V"]["upper"] or abs(h["V_shift_V"]["median"] - 2.0) < 0.05
    assert h["shift_excludes_zero"]
    # one-direction file with hysteresis asked for: one line, exit 2, nothing written
    plain = tmp_path / "plain.csv"
    assert main(["simulate", "--out", str(plain), "--points", "200"]) == 0
    capsys.readouterr()
    assert main(["fit", str(plain), "--out", str(tmp_path / "r2"), "--distortions", "hysteresis",
                 "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "rising and falling bias" in err[0]
    assert not (tmp_path / "r2").exists()


# ----------------------------------------------------------------------------- calibration

def check_loops(indices):
    results = [run_case(i) for i in indices]
    n = len(results)
    lo, hi = band(n)
    cover = {q: sum(covers(r["aware"], q, r["truth"]) for r in results) for q in ("T_e", "n_e", "V_p", "V_shift")}
    missed = sum(not covers(r["plain"], "V_p", r["truth"]) for r in results)
    print("hysteresis aware coverage", cover, "of", n, "; plain model misses V_p in", missed)
    assert all(r["aware"]["converged"] for r in results)
    for q, h in cover.items():
        assert lo <= h <= hi, f"{q} covered in {h}/{n}, 99 % band [{lo}, {hi}]"
    assert missed > n / 2


def check_clean(indices):
    ratios = []
    for i in indices:
        r = run_case(i, clean=True)
        ratios.append((r["aware"]["T_e"][2] - r["aware"]["T_e"][0]) / (r["plain"]["T_e"][2] - r["plain"]["T_e"][0]))
    print("hysteresis clean-sweep T_e width ratio aware/plain", np.round(ratios, 3))
    assert max(ratios) <= 1.25, ratios


def test_loops_small_set():
    check_loops(range(4))


def test_clean_loops_small_set():
    check_clean(range(3))


@pytest.mark.slow
def test_loops_forty():
    check_loops(range(100, 140))


@pytest.mark.slow
def test_loops_hundred_twenty_aware_only():
    """A larger set for the aware model alone (120 sweeps, band [99, 116]).

    Measured: on sweeps 100-139 both engines cover T_e, n_e and V_p in 33/40 (inside the band, at its
    low side: the same 40 data sets for both engines); on these 120 other sweeps the fast engine covers
    T_e / n_e / V_p in 107 / 108 / 111 (standardised errors with sd 1.02 / 1.04 / 0.97, mean within
    0.15 of zero), so the low count on the 40 is the data, not a bias.
    """
    import bayesprobe as bp
    n = 0
    cover = {q: 0 for q in ("T_e", "n_e", "V_p")}
    for i in range(300, 420):
        cfg, sim = make_case(i)
        ps = bp.fit(sim.sweep, config=cfg, distortions="hysteresis", engine="auto", seed=i,
                    progress=False).parameter_summary()
        for q in cover:
            cover[q] += ps[q]["ci_low"] <= sim.truth[q] <= ps[q]["ci_high"]
        n += 1
    lo, hi = band(n)
    print("hysteresis aware coverage (120)", cover)
    for q, h in cover.items():
        assert lo <= h <= hi, f"{q} covered in {h}/{n}, 99 % band [{lo}, {hi}]"


@pytest.mark.slow
def test_clean_loops_ten():
    check_clean(range(200, 210))


@pytest.mark.slow
def test_auto_finds_hysteresis_on_a_loop():
    """``distortions="auto"`` on a two-direction sweep with hysteresis keeps exactly the hysteresis terms
    (PSIS-LOO rule of bayesprobe.comparison) and says so in the note. Measured on case 1: elpd difference
    1315 (se 20) for hysteresis; rf 0.1, resistance -0.1, leakage -1.6, outliers -13.5. About 3.5 min (the
    misspecified candidates fall back to emcee)."""
    cfg, sim = make_case(1)
    res = bp.fit(sim.sweep, config=cfg, distortions="auto", engine="auto", seed=1, progress=False)
    sel = res.distortions["selection"]
    assert sel["found"] == ["hysteresis"]
    assert "hysteresis" in res.distortions["note"]
    e = res.parameter_summary()["V_shift"]
    assert e["ci_low"] <= sim.truth["V_shift"] <= e["ci_high"]
