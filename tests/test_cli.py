"""The command line: contract options, exit codes, one-line errors, nothing half-written.

The expectations come from the project's outside contract (shared CONTRACT.md): exit status
0 success, 2 unusable input or options (one line on stderr, no traceback, nothing written),
3 not converged (results written, converged false). Common practice, no source.
"""
import json
import subprocess
import sys

import numpy as np
import pytest

from bayesprobe.cli import main


def run_cli(*args):
    """Run the real console entry point in a subprocess (catches tracebacks, exit codes)."""
    p = subprocess.run([sys.executable, "-m", "bayesprobe", *map(str, args)], capture_output=True, text=True,
                       timeout=600)
    return p.returncode, p.stdout, p.stderr


def write_csv(path, V, I, header="voltage_V,current_A"):
    path.write_text(header + "\n" + "\n".join(f"{float(v)!r},{float(i)!r}" for v, i in zip(V, I)) + "\n")
    return path


@pytest.fixture(scope="module")
def sweep_file(tmp_path_factory):
    d = tmp_path_factory.mktemp("sim")
    code, out, err = run_cli("simulate", "--out", d / "s.csv", "--points", 300, "--seed", 4)
    assert code == 0, err
    return d / "s.csv"


def test_help_and_version():
    code, out, err = run_cli("--help")
    assert code == 0 and "fit" in out and "simulate" in out
    code, out, err = run_cli("fit", "--help")
    for opt in ("--geometry", "--radius", "--length", "--area", "--ion", "--ion-mass", "--ion-collection",
                "--model", "--credible-level", "--seed", "--out"):
        assert opt in out


def test_simulate_writes_sweep_and_truth(sweep_file):
    truth = json.loads(sweep_file.with_name("s.truth.json").read_text())
    assert truth["synthetic"] is True
    assert truth["parameters"]["T_e"] == 3.0
    lines = sweep_file.read_text().splitlines()
    assert sum(1 for ln in lines if ln and not ln.startswith("#")) == 301


def test_simulate_npz(tmp_path):
    code, out, err = run_cli("simulate", "--out", tmp_path / "x.npz", "--geometry", "planar", "--radius", "2mm",
                             "--ion", "He", "--T-e", "5")
    assert code == 0, err
    data = np.load(tmp_path / "x.npz", allow_pickle=False)
    assert data["voltage"].shape == data["current"].shape


@pytest.mark.parametrize("args,phrase", [
    (["fit", "{missing}", "--out", "{out}"], "not found"),
    (["fit", "{sweep}", "--out", "{out}", "--ion", "Unobtainium"], "unknown ion"),
    (["fit", "{sweep}", "--out", "{out}", "--radius", "-1"], "--radius"),
    (["fit", "{sweep}", "--out", "{out}", "--credible-level", "1.5"], "credible-level"),
    (["fit", "{sweep}", "--out", "{out}", "--geometry", "planar", "--ion-collection", "oml"], "planar"),
    (["fit", "{sweep}", "--out", "{out}", "--model", "tri-maxwellian"], "model"),
    (["fit", "{sweep}"], "--out"),
    (["fit", "{sweep}", "--out", "{out}", "--priors", "{badprior}"], "TOML"),
    (["fit", "{sweep}", "--out", "{out}", "--priors", "{unknownprior}"], "unknown parameter"),
    (["fit", "{empty}", "--out", "{out}"], "empty"),
    (["fit", "{onecol}", "--out", "{out}"], "column"),
    (["fit", "{text}", "--out", "{out}"], "number"),
    (["fit", "{few}", "--out", "{out}"], "points"),
    (["fit", "{noretard}", "--out", "{out}"], "zero"),
    (["fit", "{narrow}", "--out", "{out}"], "narrow"),
])
def test_bad_input_one_line_exit_2_nothing_written(tmp_path, sweep_file, args, phrase):
    V = np.linspace(-30, 10, 200)
    I = 1e-3 * np.exp(np.minimum(V - 5, 0) / 2) - 1e-5           # common practice, no source
    files = {
        "missing": tmp_path / "nope.csv",
        "sweep": sweep_file,
        "out": tmp_path / "out",
        "badprior": tmp_path / "bad.toml",
        "unknownprior": tmp_path / "unknown.toml",
        "empty": tmp_path / "empty.csv",
        "onecol": tmp_path / "one.csv",
        "text": tmp_path / "text.csv",
        "few": write_csv(tmp_path / "few.csv", V[:10], I[:10]),
        "noretard": write_csv(tmp_path / "noretard.csv", V, np.full_like(V, -1e-5) - 1e-7 * np.arange(V.size)),
        "narrow": write_csv(tmp_path / "narrow.csv", np.linspace(0, 0.5, 100), np.linspace(-1e-5, 1e-3, 100)),
    }
    files["badprior"].write_text("[prior.T_e\nkind=")
    files["unknownprior"].write_text('[prior.T_x]\nkind = "log-uniform"\nlower = 1\nupper = 2\n')
    files["empty"].write_text("")
    files["onecol"].write_text("voltage\n" + "\n".join(str(v) for v in V) + "\n")
    files["text"].write_text("voltage,current\n" + "\n".join(f"{v},abc" for v in V) + "\n")
    files["out"].mkdir()
    (files["out"] / "keep.txt").write_text("existing")
    before = sorted(p.name for p in tmp_path.iterdir())
    code, out, err = run_cli(*[a.format(**files) for a in args])
    assert code == 2, (code, err)
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    assert phrase.lower() in err.lower(), err
    assert sorted(p.name for p in (files["out"]).iterdir()) == ["keep.txt"]
    assert sorted(p.name for p in tmp_path.iterdir()) == before


def test_fit_writes_contract_files(tmp_path, sweep_file):
    out = tmp_path / "res"
    code, stdout, err = run_cli("fit", sweep_file, "--out", out, "--seed", "3", "--quiet")
    assert code == 0, err
    s = json.loads((out / "summary.json").read_text())
    assert s["schema"] == "bayesprobe.summary/1"
    assert s["model"] == "maxwellian"
    assert s["credible_level"] == 0.9
    for name, unit in (("T_e", "eV"), ("n_e", "m^-3"), ("n_i", "m^-3"), ("V_f", "V"), ("V_p", "V")):
        p = s["parameters"][name]
        assert p["unit"] == unit
        assert p["ci_low"] <= p["median"] <= p["ci_high"]
    assert s["diagnostics"]["converged"] is True
    assert s["diagnostics"]["r_hat_max"] <= 1.01
    assert s["diagnostics"]["ess_bulk_min"] >= 1000
    assert set(s["classical"]) >= {"T_e", "n_e", "n_i", "V_f", "V_p"}
    assert "V_p" in s["correlations"]["T_e"]
    for f in ("posterior.nc", "parameters.csv", "fit.png", "corner.png", "trace.png", "eedf.png"):
        assert (out / f).stat().st_size > 0, f
    from bayesprobe.inference.arviz_adapter import load_inference_data
    idata = load_inference_data(out / "posterior.nc")
    for group in ("posterior", "sample_stats", "log_likelihood", "observed_data", "posterior_predictive"):
        assert group in idata.groups()
    # reproducible bit for bit
    out2 = tmp_path / "res2"
    code, _, err = run_cli("fit", sweep_file, "--out", out2, "--seed", "3", "--quiet", "--no-figures")
    s2 = json.loads((out2 / "summary.json").read_text())
    assert s2["parameters"] == s["parameters"]


def test_not_converged_exit_3_results_written(tmp_path, sweep_file):
    out = tmp_path / "short"
    code, stdout, err = run_cli("fit", sweep_file, "--out", out, "--max-steps", "100", "--quiet", "--no-figures")
    assert code == 3, err
    s = json.loads((out / "summary.json").read_text())
    assert s["diagnostics"]["converged"] is False
    assert s["diagnostics"]["unmet"]
    # said once, by the command's own line (fit()'s ConvergenceWarning is not shown as well)
    assert "ConvergenceWarning" not in err and err.count("did not converge") == 1, err


def test_main_returns_code_without_exiting(tmp_path, capsys):
    assert main(["fit", str(tmp_path / "none.csv"), "--out", str(tmp_path / "o")]) == 2
    assert "not found" in capsys.readouterr().err


def test_fast_engine_records_itself_and_agrees_with_mcmc(tmp_path, sweep_file):
    """--engine fast: importance sampling accepted on a clean sweep (Pareto k-hat below its threshold),
    engine recorded in summary.json, and medians equal to the MCMC run's within 5 combined Monte-Carlo
    standard errors: a median's MC sd is about 1.25 sd/sqrt(ESS) (asymptotic variance of the sample
    median of a normal), so with ESS >= 1000 for both runs 5 * sqrt(2) * 1.25 / sqrt(1000) = 0.28 sd."""
    code, _, err = run_cli("fit", sweep_file, "--out", tmp_path / "fast", "--engine", "fast", "--quiet",
                           "--no-figures", "--seed", "3")
    assert code == 0, err
    s = json.loads((tmp_path / "fast" / "summary.json").read_text())
    d = s["diagnostics"]
    assert d["engine"] == "importance" and d["engine_requested"] == "fast"
    assert d["khat"] < d["criteria"]["khat_max"]
    assert d["ess_bulk_min"] >= 1000
    code, _, err = run_cli("fit", sweep_file, "--out", tmp_path / "mcmc", "--quiet", "--no-figures", "--seed", "3")
    m = json.loads((tmp_path / "mcmc" / "summary.json").read_text())
    for name in ("T_e", "n_e", "n_i", "V_p", "V_f"):
        a, b = s["parameters"][name], m["parameters"][name]
        assert abs(a["median"] - b["median"]) < 0.28 * b["sd"], (name, a, b)


def test_fit_prints_its_warnings_one_line_each(tmp_path):
    """A sweep simulated with a 0.4 V branch shift, fitted with the hysteresis model: the shift is
    reported as a caution on stderr (one line, with its code) and stored in summary.json."""
    sweep = tmp_path / "hyst.csv"
    code, _, err = run_cli("simulate", "--out", sweep, "--branch-shift", "0.4", "--points", 300, "--seed", 5)
    assert code == 0, err
    code, out, err = run_cli("fit", sweep, "--out", tmp_path / "res", "--engine", "fast", "--no-figures",
                             "--distortions", "hysteresis", "--quiet")
    assert code == 0, err
    s = json.loads((tmp_path / "res" / "summary.json").read_text())
    stored = [w for w in s["warnings"] if w["code"] == "hysteresis-shift"]
    assert len(stored) == 1 and stored[0]["level"] == "caution"
    lines = [ln for ln in err.splitlines() if "[hysteresis-shift]" in ln]
    assert len(lines) == 1 and lines[0].startswith("caution [hysteresis-shift]: ") and stored[0]["message"] in lines[0]
    assert out == ""                                 # --quiet: no table; notes are not printed either


def test_option_choices_follow_the_registries():
    """The parser's lists of ion theories and electron models are the physics registries' names
    (the parser keeps literal lists so that --help needs no numerical import; this keeps them in
    step). Common practice, no source."""
    from bayesprobe.cli import build_parser
    from bayesprobe.physics.electron_models import ELECTRON_MODELS
    from bayesprobe.physics.ions import ION_THEORIES

    def choices(command, option):
        sub = next(a for a in build_parser()._actions if a.dest == "command").choices[command]
        return list(next(a for a in sub._actions if option in a.option_strings).choices)

    for command in ("fit", "batch"):
        assert choices(command, "--ion-collection") == list(ION_THEORIES)
        assert choices(command, "--model") == [*ELECTRON_MODELS, "auto"]
    assert choices("simulate", "--model") == list(ELECTRON_MODELS)
    from bayesprobe.model import DEFAULT_ION_TEMPERATURE
    assert build_parser().parse_args(["fit", "x.csv", "--out", "o"]).ion_temperature == DEFAULT_ION_TEMPERATURE
    assert build_parser().parse_args(["batch", "x.npz", "--out", "o", "--serial"]).serial
