"""FitResult.save / FitResult.load / pickling: one fit folder, written atomically, read back whole.

The file contract (summary.json schema bayesprobe.summary/1, parameters.csv, posterior.nc,
figures) is the project's own; the checks here are that what is read back gives the same
numbers as what was written (common practice for serialisation, no source)."""
from __future__ import annotations

import csv
import json
import pickle

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402

import bayesprobe as bp  # noqa: E402
from bayesprobe.errors import InputError  # noqa: E402
from bayesprobe.fitting import make_config  # noqa: E402
from bayesprobe.result import FIT_FILES, FitResult  # noqa: E402

PROBE = bp.Probe("cylindrical", radius=5e-5, length=5e-3)


@pytest.fixture(scope="module")
def result():
    """A small real fit (fast engine) of a sweep recorded both ways, with the hysteresis model."""
    config = make_config(probe=PROBE, ion="Ar", ion_collection="oml")
    sim = bp.simulate({"n_e": 1e16, "T_e": 3.0, "V_p": 12.0, "V_shift": 0.3, "I_cap": 0.0},
                      config=config.with_(hysteresis=True), n_points=250, noise_rel=0.01, seed=7,
                      sweep_id="io", both_directions=True)
    return bp.fit(sim.sweep, config=config, seed=2, progress=False, engine="fast", distortions="hysteresis")


@pytest.fixture(scope="module")
def folder(result, tmp_path_factory):
    return result.save(tmp_path_factory.mktemp("io") / "fit")


def test_save_writes_the_fit_folder_and_nothing_else(folder):
    names = sorted(p.name for p in folder.iterdir())
    assert names == sorted(list(FIT_FILES) + ["fit.png", "corner.png", "trace.png", "eedf.png"])
    assert not [p for p in folder.parent.iterdir() if p.name.startswith(".")]     # no staging left


def test_parameters_csv_holds_the_summary_numbers(result, folder):
    ps = result.parameter_summary()
    with open(folder / "parameters.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["parameter"] for r in rows] == list(ps)
    for r in rows:
        e = ps[r["parameter"]]
        assert r["unit"] == e["unit"] and float(r["credible_level"]) == result.credible_level
        for k in ("mean", "sd", "median", "ci_low", "ci_high"):
            assert (r[k] == "" and e[k] is None) or float(r[k]) == e[k]      # repr round-trips exactly


def test_round_trip_gives_the_same_summary_table_and_warnings(result, folder):
    loaded = FitResult.load(folder)
    saved = json.loads((folder / "summary.json").read_text())
    assert loaded.summary() == saved == json.loads(json.dumps(result.summary()))
    assert loaded.table() == result.table()
    assert loaded.warnings() == result.warnings() == saved["warnings"]
    assert loaded.branches is not None and np.array_equal(loaded.branches[0], result.branches[0])
    assert np.array_equal(loaded.voltage, result.voltage) and np.array_equal(loaded.current, result.current)
    for name, x in result.draws.items():
        assert np.array_equal(loaded.draws[name], x), name


def test_loaded_result_draws_its_figures(folder, tmp_path):
    from bayesprobe.plots import save_figures
    paths = save_figures(FitResult.load(folder), tmp_path / "again")
    assert [p.name for p in paths] == ["fit.png", "corner.png", "trace.png", "eedf.png"]
    assert all(p.read_bytes().startswith(b"\x89PNG") for p in paths)


def test_fit_result_pickles(result, folder):
    again = pickle.loads(pickle.dumps(result))
    assert again.summary() == result.summary()
    loaded = FitResult.load(folder)
    assert pickle.loads(pickle.dumps(loaded)).summary() == loaded.summary()


def test_load_refuses_what_is_not_a_fit_folder(folder, tmp_path):
    with pytest.raises(InputError, match="unreadable"):
        FitResult.load(tmp_path)                                   # no summary.json
    (tmp_path / "partial").mkdir()
    (tmp_path / "partial" / "summary.json").write_text((folder / "summary.json").read_text())
    with pytest.raises(InputError, match="posterior.nc"):
        FitResult.load(tmp_path / "partial")
    s = json.loads((folder / "summary.json").read_text())
    s["schema"] = "something.else/9"
    (tmp_path / "partial" / "summary.json").write_text(json.dumps(s))
    with pytest.raises(InputError, match="schema"):
        FitResult.load(tmp_path / "partial")


def test_a_failed_save_leaves_the_folder_as_it_was(result, tmp_path, monkeypatch):
    out = tmp_path / "out"
    out.mkdir()
    (out / "keep.txt").write_text("existing")

    def broken(*args, **kwargs):
        raise RuntimeError("disk full")
    monkeypatch.setattr("bayesprobe.plots.save_figures", broken)
    with pytest.raises(RuntimeError, match="disk full"):
        result.save(out)
    assert sorted(p.name for p in out.iterdir()) == ["keep.txt"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]
