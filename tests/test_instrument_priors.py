"""Priors from circuit measurements: the plasma-off leakage line and a measured circuit resistance.

Oracles: the least-squares line and its standard errors against scipy.stats.linregress (an
independent implementation of ordinary least squares); the Student-t variance (n - 2)/(n - 4)
of the scaled slope (textbook: the variance of Student-t with k degrees of freedom is k/(k - 2));
coverage of the slope's +-1.645 sd interval over simulated vacuum sweeps against the binomial band.
"""
import json

import numpy as np
import pytest
from scipy.stats import binom, linregress

from bayesprobe.cli import main
from bayesprobe.inference.instrument_priors import (circuit_resistance_prior, fit_vacuum_line,
                                                    vacuum_leakage_priors)
from bayesprobe.inference.parameters import Parameter


def test_vacuum_line_matches_linregress():
    rng = np.random.default_rng(11)
    V = np.linspace(-45.0, 20.0, 300)
    I = 2e-7 * V - 3e-6 + 4e-7 * rng.standard_normal(V.size)
    line = fit_vacuum_line(V, I)
    ref = linregress(V, I)
    assert line.G == pytest.approx(ref.slope, rel=1e-10)
    assert line.I_offset == pytest.approx(ref.intercept, rel=1e-10)
    assert line.sd_G == pytest.approx(ref.stderr, rel=1e-10)
    assert line.sd_I_offset == pytest.approx(ref.intercept_stderr, rel=1e-10)
    priors = vacuum_leakage_priors(V, I)
    k = V.size - 2
    assert priors["G_leak"].kind == "normal" and priors["G_leak"].mean == pytest.approx(ref.slope)
    assert priors["G_leak"].sd == pytest.approx(ref.stderr * np.sqrt(k / (k - 2)), rel=1e-10)
    assert priors["I_offset"].sd == pytest.approx(ref.intercept_stderr * np.sqrt(k / (k - 2)), rel=1e-10)


def test_vacuum_line_interval_coverage():
    """The 90 % interval G +- 1.645 sd(prior) covers the true conductance in Binomial(200, 0.9) of 200 sweeps."""
    rng = np.random.default_rng(12)
    V = np.linspace(-30.0, 10.0, 40)
    hits = 0
    for _ in range(200):
        I = 1e-6 * V + 5e-6 + 2e-6 * rng.standard_normal(V.size)
        p = vacuum_leakage_priors(V, I)["G_leak"]
        hits += abs(p.mean - 1e-6) <= 1.645 * p.sd
    lo, hi = binom.ppf(0.005, 200, 0.9), binom.ppf(0.995, 200, 0.9)
    assert lo <= hits <= hi, hits


def test_vacuum_line_rejects_unusable_input():
    with pytest.raises(ValueError, match="at least 5"):
        fit_vacuum_line([1, 2, 3], [0, 0, 0])
    with pytest.raises(ValueError, match="does not vary"):
        fit_vacuum_line(np.ones(10), np.arange(10.0))
    with pytest.raises(ValueError, match="no noise"):
        vacuum_leakage_priors(np.arange(10.0), 2 * np.arange(10.0))


def test_circuit_resistance_prior_is_a_half_normal_at_zero():
    """R = 0 +- s: in ln R the density is proportional to R exp(-R^2 / 2 s^2) (normal times the Jacobian R);
    its mode in ln R is at R = s (common practice, no source: change of variables)."""
    prior = circuit_resistance_prior(0.0, 2.0)
    p = Parameter("R_series", "ohm", "R", prior, transform="log")
    z = np.log(np.array([0.5, 2.0, 8.0]))
    lp = p.log_prior_z(z)
    R = np.exp(z)
    expected = np.log(R) - R ** 2 / 8.0
    assert np.allclose(lp - lp[1], expected - expected[1])
    assert lp[1] > lp[0] and lp[1] > lp[2]
    for bad in ((-1.0, 1.0), (1.0, 0.0), (np.nan, 1.0)):
        with pytest.raises(ValueError):
            circuit_resistance_prior(*bad)


def test_cli_calibration_options_set_priors(tmp_path, capsys):
    """--vacuum-sweep and --circuit-resistance switch the distortions on and record the measured priors
    (a short step budget: the test is about the plumbing, so exit 3, not converged, is accepted)."""
    import bayesprobe as bp
    cfg = bp.ModelConfig(probe=bp.Probe("planar", radius=2e-3), ion="Ar", ion_collection="thin-sheath")
    sim = bp.simulate({"n_e": 1e16, "T_e": 3.0, "V_p": 8.0}, config=cfg, n_points=100, seed=3)
    V = sim.sweep.voltage
    sweep = tmp_path / "s.csv"
    sweep.write_text("voltage_V,current_A\n" + "\n".join(f"{float(v)!r},{float(i)!r}" for v, i in zip(V, sim.sweep.current)))
    rng = np.random.default_rng(5)
    vac = tmp_path / "vac.csv"
    I_vac = 1e-7 * V + 2e-6 + 1e-6 * rng.standard_normal(V.size)
    vac.write_text("voltage_V,current_A\n" + "\n".join(f"{float(v)!r},{float(i)!r}" for v, i in zip(V, I_vac)))
    out = tmp_path / "res"
    code = main(["fit", str(sweep), "--out", str(out), "--geometry", "planar", "--radius", "2mm",
                 "--ion-collection", "thin-sheath", "--quasi-neutral", "--engine", "fast",
                 "--vacuum-sweep", str(vac), "--circuit-resistance", "0:0.2", "--no-figures", "--quiet",
                 "--max-steps", "100"])
    assert code in (0, 3), capsys.readouterr().err
    s = json.loads((out / "summary.json").read_text())
    ref = linregress(V, I_vac)
    assert s["priors"]["G_leak"]["prior"]["mean"] == pytest.approx(ref.slope)
    assert s["priors"]["I_offset"]["prior"]["mean"] == pytest.approx(ref.intercept)
    assert s["priors"]["R_series"]["prior"] == {"kind": "normal", "lower": 0.0, "mean": 0.0, "sd": 0.2}
    assert set(s["distortions"]["enabled"]) == {"resistance", "leakage"}
    capsys.readouterr()
    code = main(["fit", str(sweep), "--out", str(tmp_path / "bad"), "--circuit-resistance", "47"])
    assert code == 2 and "OHMS:SD" in capsys.readouterr().err


def test_auto_candidates_keep_only_their_calibrated_priors():
    """distortions="auto": the resistance candidate gets the R_series prior, the plain and leakage
    candidates do not (they have no such parameter); other overrides pass through."""
    import bayesprobe as bp
    from bayesprobe.fitting import _distortion_priors_for
    priors = {"R_series": circuit_resistance_prior(10.0, 1.0), "T_e": {"kind": "log-uniform", "lower": 0.5,
                                                                         "upper": 20.0}}
    plain = bp.ModelConfig()
    assert set(_distortion_priors_for(priors, plain, None)) == {"T_e"}
    assert set(_distortion_priors_for(priors, plain.with_(series_resistance=True), None)) == {"R_series", "T_e"}
    assert set(_distortion_priors_for(priors, plain.with_(leakage=True), None)) == {"T_e"}


def test_batch_takes_the_circuit_calibration(tmp_path, capsys):
    """batch --circuit-resistance / --vacuum-sweep: one circuit for every sweep; the distortions are
    switched on and every sweep's record carries the measured priors. The plasma-off sweep's sign
    cannot be detected, so batch asks for --sign (one line, exit 2, nothing written)."""
    import bayesprobe as bp
    cfg = bp.ModelConfig(probe=bp.Probe("planar", radius=2e-3), ion="Ar", ion_collection="thin-sheath")
    folder = tmp_path / "sweeps"
    folder.mkdir()
    for j, T in enumerate((2.5, 3.5)):
        sim = bp.simulate({"n_e": 1e16, "T_e": T, "V_p": 8.0}, config=cfg, n_points=100, seed=10 + j)
        (folder / f"s{j}.csv").write_text("voltage_V,current_A\n" + "\n".join(
            f"{float(v)!r},{float(i)!r}" for v, i in zip(sim.sweep.voltage, sim.sweep.current)))
    V = sim.sweep.voltage
    rng = np.random.default_rng(5)
    vac = tmp_path / "vac.csv"
    I_vac = 1e-7 * V + 2e-6 + 1e-6 * rng.standard_normal(V.size)
    vac.write_text("voltage_V,current_A\n" + "\n".join(f"{float(v)!r},{float(i)!r}" for v, i in zip(V, I_vac)))
    common = ["batch", str(folder), "--geometry", "planar", "--radius", "2mm", "--ion-collection", "thin-sheath",
              "--quasi-neutral", "--engine", "fast", "--vacuum-sweep", str(vac), "--circuit-resistance", "0:0.2",
              "--no-figures", "--quiet", "--max-steps", "100", "--workers", "1"]
    bad = tmp_path / "bad"
    assert main(common + ["--out", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "--sign" in err and len(err.strip().splitlines()) == 1 and not bad.exists()
    out = tmp_path / "res"
    code = main(common + ["--out", str(out), "--sign", "electron-positive"])
    assert code in (0, 3), capsys.readouterr().err
    ref = linregress(V, I_vac)
    records = sorted((out / "sweeps").glob("*.json"))
    assert len(records) == 2
    for rec in records:
        s = json.loads(rec.read_text())["summary"]
        assert set(s["distortions"]["enabled"]) == {"resistance", "leakage"}
        priors = s["priors"]
        assert priors["G_leak"]["prior"]["mean"] == pytest.approx(ref.slope)
        assert priors["I_offset"]["prior"]["mean"] == pytest.approx(ref.intercept)
        assert priors["R_series"]["prior"] == {"kind": "normal", "lower": 0.0, "mean": 0.0, "sd": 0.2}
