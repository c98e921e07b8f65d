"""Executors of a batch are interchangeable: the serial in-process executor (for debugging) and the
local process pool give the same records for the same seed, because every sweep's seed comes from
the global seed and its id and nothing else. (Common practice, no source: determinism as the oracle,
with a negative control - another global seed must change the records.)
"""
import json
import os
import pickle
import warnings

import numpy as np
import pytest

import bayesprobe as bp
from bayesprobe.batch import _record, fit_many, run_task
from bayesprobe.errors import InputError
from bayesprobe.fitting import make_config

CONFIG = make_config(probe=bp.Probe("planar", radius=2e-3), ion_collection="thin-sheath")
#: fields of a record that measure wall-clock time (they differ between any two runs)
TIMING_KEYS = ("timings_s",)


@pytest.fixture(scope="module")
def series(tmp_path_factory):
    """Three sweeps of a drifting series in one .npz, and one unusable file beside it."""
    d = tmp_path_factory.mktemp("executors_in")
    V = np.linspace(-40.0, 16.0, 150)
    I = np.stack([bp.simulate({"T_e": 2.5 + 0.3 * k, "n_e": 1e16 * (1 + 0.1 * k), "V_p": 10.0}, config=CONFIG,
                              voltage=V, noise_rel=0.01, seed=k).sweep.current for k in range(3)])
    np.savez(d / "series.npz", voltage=V, current=I, time=np.arange(3) * 1e-3)
    (d / "broken.csv").write_text("voltage,current\n1,2\n")
    return d


def _records(out):
    def strip(x):
        if isinstance(x, dict):
            return {k: strip(v) for k, v in x.items() if k not in TIMING_KEYS}
        if isinstance(x, list):
            return [strip(v) for v in x]
        return x
    return {p.stem: strip(json.loads(p.read_text())) for p in sorted((out / "sweeps").glob("*.json"))}


def _batch(inputs, out, **kw):
    return fit_many([inputs], out_dir=out, config=CONFIG, engine="fast", progress=False, figures=False, **kw)


@pytest.mark.parametrize("warm_start", [0, 2])
def test_serial_and_process_pool_give_identical_records(series, tmp_path, warm_start):
    s_pool = _batch(series, tmp_path / "pool", workers=2, warm_start=warm_start)
    s_serial = _batch(series, tmp_path / "serial", executor="serial", warm_start=warm_start)
    assert s_pool.executor.startswith("process pool, 2") and s_serial.executor == "serial, in-process"
    pool, serial = _records(tmp_path / "pool"), _records(tmp_path / "serial")
    assert sorted(pool) == ["broken", "series-0", "series-1", "series-2"]
    assert sum(r["status"] != "failed" for r in pool.values()) == 3      # real fits, not three failures
    assert serial == pool
    assert (tmp_path / "serial" / "results.csv").read_bytes() == (tmp_path / "pool" / "results.csv").read_bytes()
    assert (s_serial.n_sweeps, s_serial.n_failed, s_serial.n_fitted_now, s_serial.exit_status) == \
        (s_pool.n_sweeps, s_pool.n_failed, s_pool.n_fitted_now, s_pool.exit_status)
    # negative control: another global seed gives other draws, so the comparison above can fail
    _batch(series, tmp_path / "other-seed", executor="serial", seed=1, warm_start=warm_start)
    other = _records(tmp_path / "other-seed")
    assert other["series-0"]["summary"]["parameters"] != pool["series-0"]["summary"]["parameters"]


def _pid_runner(task):
    """Stand-in worker: records the process it ran in."""
    return _record(task["meta"], task["seed"], "ok", f"pid={os.getpid()}"), None


def _raising_runner(task):
    """Stand-in worker that raises on sweep series-1 (as a bug in the fit would)."""
    if task["meta"]["sweep_id"] == "series-1":
        raise RuntimeError("boom")
    return _record(task["meta"], task["seed"], "ok", ""), None


def _reasons(out):
    return {sid: r["reason"] for sid, r in _records(out).items()}


def test_serial_runs_in_this_process_and_the_pool_does_not(series, tmp_path):
    fit_many([series / "series.npz"], out_dir=tmp_path / "s", config=CONFIG, executor="serial", progress=False,
             figures=False, _runner=_pid_runner)
    fit_many([series / "series.npz"], out_dir=tmp_path / "p", config=CONFIG, workers=1, progress=False,
             figures=False, _runner=_pid_runner)
    assert set(_reasons(tmp_path / "s").values()) == {f"pid={os.getpid()}"}
    assert f"pid={os.getpid()}" not in _reasons(tmp_path / "p").values()


def test_a_raising_task_is_recorded_the_same_way_by_both_executors(series, tmp_path):
    for name, kw in (("s", {"executor": "serial"}), ("p", {"workers": 2})):
        s = fit_many([series / "series.npz"], out_dir=tmp_path / name, config=CONFIG, progress=False, figures=False,
                     _runner=_raising_runner, **kw)
        assert (s.n_failed, s.exit_status) == (1, 4)
    assert _reasons(tmp_path / "s") == _reasons(tmp_path / "p")
    assert _reasons(tmp_path / "s")["series-1"] == "the worker running this sweep failed: RuntimeError: boom"


@pytest.mark.parametrize("bad, message", [
    ({"executor": "threads"}, "executor must be one of processes, serial, dask"),
    ({"executor": "serial", "dask": "local"}, "needs executor='dask'"),
    ({"executor": "processes", "dask": "tcp://127.0.0.1:1"}, "needs executor='dask'"),
    ({"executor": "serial", "workers": 2}, "drop workers=2"),
])
def test_executor_options_are_checked_before_any_work(series, tmp_path, bad, message):
    with pytest.raises(InputError, match=message):
        fit_many([series], out_dir=tmp_path / "o", config=CONFIG, progress=False, **bad)
    assert not (tmp_path / "o").exists()


@pytest.mark.parametrize("bad", [{"model": "kappa"}, {"credible_level": 1.5}, {"engine": "nuts"}, {"seed": -1},
                                 {"seed": 2.5}, {"student_nu": -2.0}, {"sign": "up"}, {"priors": [1, 2]},
                                 {"sampler": {"max_steps": 10}}, {"config": "argon"}])
def test_fit_options_of_a_batch_get_the_messages_of_fit(series, tmp_path, bad):
    """The options a batch passes to every fit are checked once, before any work, by FitOptions:
    the same one-line message as bayesprobe.fit gives (oracle: FitOptions itself)."""
    from bayesprobe.options import FitOptions
    with pytest.raises(ValueError) as expected:
        FitOptions(**bad)
    with pytest.raises(InputError) as got:
        fit_many([series], out_dir=tmp_path / "o", **{"config": CONFIG, **bad}, progress=False)
    assert str(got.value) == str(expected.value) and "\n" not in str(got.value)
    assert not (tmp_path / "o").exists()


@pytest.mark.parametrize("bad, message", [
    ({"seed": None}, r"seed must be a non-negative integer in a batch .*got None"),
    ({"student_nu": "fit"}, r"student_nu must be a positive number in a batch .*got 'fit'"),
    ({"warm_start": -1}, "warm_start must be a non-negative integer"),
    ({"workers": 0}, "workers must be a positive integer"),
])
def test_batch_only_rules(series, tmp_path, bad, message):
    """Rules of a batch that a single fit does not have: every sweep's seed is derived from the
    global one, and nu is fixed (one Student-t likelihood for every sweep)."""
    with pytest.raises(InputError, match=message):
        fit_many([series], out_dir=tmp_path / "o", config=CONFIG, progress=False, **bad)
    assert not (tmp_path / "o").exists()


def test_not_converged_sweeps_are_recorded_not_warned(series, tmp_path):
    """fit() warns when a result did not converge; a batch worker records the status instead and
    shows nothing. With every warning an error, the serial executor (in this process) still records
    "not-converged" (a warning escaping the worker would have made it "failed"); 60 steps cannot
    reach the sampler's criteria."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = fit_many([series / "series.npz"], out_dir=tmp_path / "o", config=CONFIG, executor="serial",
                     progress=False, figures=False, sampler=bp.SamplerSettings(initial_steps=60, max_steps=60))
    records = _records(tmp_path / "o")
    assert sorted(records) == ["series-0", "series-1", "series-2"]
    assert {r["status"] for r in records.values()} == {"not-converged"}
    assert all(r["reason"].startswith("not converged: ") for r in records.values())
    assert (s.n_not_converged, s.n_failed, s.exit_status) == (3, 0, 3)


def test_the_worker_task_is_sent_by_reference():
    """Worker processes (and Dask workers) receive run_task pickled by its module path."""
    import bayesprobe.batch.worker as worker
    assert pickle.loads(pickle.dumps(run_task)) is run_task is worker.run_task
    assert f"{run_task.__module__}.{run_task.__qualname__}" == "bayesprobe.batch.worker.run_task"
