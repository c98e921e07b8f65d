"""Batch fitting: streaming readers, safe file names, crash safety, executor-independent results.

Exactness, not statistics: every sweep's seed is derived from the global seed and its id, so the
tables of the same batch must be identical byte for byte whatever the executor, the worker count,
or an interruption in the middle. The sampler runs with a short step budget (the CLI's
``--max-steps 500``): the fits then end as "not-converged", which is recorded like any result and
keeps the suite fast; one separate test checks a converged batch end to end.
"""
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import bayesprobe as bp
from bayesprobe.batch import (BatchSummary, file_id_for, fit_many, iter_sweeps, load_sweep_table,
                              sweep_seed)
from bayesprobe.errors import InputError
from bayesprobe.fitting import make_config
from bayesprobe.io import sanitise_id, write_sweep_csv

CONFIG = make_config(probe=bp.Probe("planar", radius=2e-3), ion_collection="thin-sheath")
SHORT = bp.SamplerSettings(max_steps=500)
#: the same batch through the command line (planar 2 mm disc, thin-sheath ions, argon)
CLI_OPTIONS = ["--geometry", "planar", "--radius", "2mm", "--ion-collection", "thin-sheath", "--max-steps", "500",
               "--quiet"]
GOOD = {"a", "multi-0", "multi-1", file_id_for("../x")}
BAD = {"badnum": "is not a number", "empty": "is empty", "flat": "never crosses zero",
       "garbage": "not a text file", "trunc": "could not be read", file_id_for("a/b"): "never crosses zero"}


def _sim(seed, n=150, voltage=None, **truth):
    t = {"T_e": 2.0 + 0.4 * (seed % 4), "n_e": 1e16 * (1 + 0.2 * (seed % 3)), "V_p": 10.0}
    t.update(truth)
    return bp.simulate(t, config=CONFIG, n_points=n, voltage=voltage, seed=seed).sweep


def _write_id_csv(path, sweeps, extra_header="", extra=lambda k: ""):
    with open(path, "w") as f:
        f.write("sweep_id,voltage_V,current_A" + extra_header + "\n")
        for k, (sid, s) in enumerate(sweeps):
            for v, i in zip(s.voltage, s.current):
                f.write(f"{sid},{float(v)!r},{float(i)!r}{extra(k)}\n")


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    """Four good sweeps in three kinds of file, and six unusable sweeps mixed in (one under a hostile id)."""
    d = tmp_path_factory.mktemp("batch_in")
    write_sweep_csv(d / "a.csv", _sim(1))
    V = _sim(2).voltage
    I = np.stack([_sim(10 + j, voltage=V).current for j in range(2)])
    np.savez(d / "multi.npz", voltage=V, current=I, position=np.array([0.01, 0.02]))
    flat = _sim(4)
    flat.current = np.abs(flat.current) + 1e-3
    _write_id_csv(d / "ids.csv", [("../x", _sim(3)), ("a/b", flat)], ",time", lambda k: f",{1.5 + k}")
    # unusable: a non-number, an empty file, a sweep that never crosses zero, binary junk, a truncated archive
    lines = (d / "a.csv").read_text().splitlines()
    lines[20] = "-40.0,abc"
    (d / "badnum.csv").write_text("\n".join(lines) + "\n")
    (d / "empty.csv").write_text("")
    s = _sim(5)
    write_sweep_csv(d / "flat.csv", (s.voltage, np.abs(s.current) + 1e-3))
    (d / "garbage.csv").write_bytes(b"\x00\x01\x02binary\xff" * 50)
    (d / "trunc.npz").write_bytes((d / "multi.npz").read_bytes()[:300])
    return d


def _run(inputs, out, **kw):
    kw.setdefault("workers", 2)
    return fit_many([str(inputs)], out_dir=out, config=CONFIG, sampler=SHORT, progress=False, **kw)


@pytest.fixture(scope="module")
def reference(inputs, tmp_path_factory):
    out = tmp_path_factory.mktemp("ref") / "out"
    summary = _run(inputs, out, workers=2)
    return out, summary


def _csv_rows(path):
    import csv
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def _assert_same_tables(a: Path, b: Path):
    import xarray as xr
    assert (a / "results.csv").read_bytes() == (b / "results.csv").read_bytes()
    with xr.open_dataset(a / "results.nc") as x, xr.open_dataset(b / "results.nc") as y:
        xr.testing.assert_identical(x.load(), y.load())


# ---------------------------------------------------------------------------- reading

def test_multi_sweep_npz_and_csv_read_exactly(tmp_path):
    V = np.linspace(-40, 20, 60)
    I = np.stack([_sim(j, voltage=V).current for j in range(3)])
    np.savez(tmp_path / "shared.npz", voltage=V, current=I, position=np.array([0.0, 0.5, 1.0]),
             time=np.array([1.0, 2.0, 3.0]))
    Vk = np.stack([V + 0.1 * j for j in range(2)])
    np.savez_compressed(tmp_path / "perrow.npz", voltage=Vk, current=I[:2])
    np.save(tmp_path / "stack.npy", np.stack([np.stack([V, I[j]]) for j in range(2)]))   # (k, 2, n)
    sweeps = [("s1", _sim(7, n=40)), ("s2", _sim(8, n=50))]
    _write_id_csv(tmp_path / "multi.csv", sweeps, ",position", lambda k: f",{0.25 * k}")

    items = list(iter_sweeps([tmp_path]))
    by_id = {it.sweep_id: it for it in items}
    assert [it.sweep_id for it in items] == ["s1", "s2", "perrow-0", "perrow-1",
                                             "shared-0", "shared-1", "shared-2", "stack-0", "stack-1"]
    for j in range(3):
        it = by_id[f"shared-{j}"]
        s = it.load()
        assert it.coords == {"position": [0.0, 0.5, 1.0][j], "time": [1.0, 2.0, 3.0][j]}
        assert it.index == j and s.sweep_id == f"shared-{j}"
        np.testing.assert_array_equal(s.voltage, V)
        np.testing.assert_array_equal(s.current, I[j])
    for j in range(2):
        s = by_id[f"perrow-{j}"].load()
        np.testing.assert_array_equal(s.voltage, Vk[j])
        np.testing.assert_array_equal(s.current, I[j])
        s = by_id[f"stack-{j}"].load()
        np.testing.assert_array_equal(s.current, I[j])
    for k, (sid, sw) in enumerate(sweeps):
        it = by_id[sid]
        s = it.load()
        assert it.label == sid and it.coords == {"position": 0.25 * k}
        np.testing.assert_array_equal(s.voltage, sw.voltage)
        np.testing.assert_array_equal(s.current, sw.current)


def test_csv_problems_are_per_sweep(tmp_path):
    """A bad value spoils its own sweep only; split blocks and reused ids are named."""
    a, b = _sim(1, n=40), _sim(2, n=40)
    rows = ["sweep_id,voltage_V,current_A"]
    rows += [f"A,{float(v)!r},{float(i)!r}" for v, i in zip(a.voltage, a.current)]
    rows += [f"B,{float(v)!r},{float(i)!r}" for v, i in zip(b.voltage, b.current)]
    rows[45] = "B,-30.0,oops"
    rows.append(f"A,{float(a.voltage[0])!r},{float(a.current[0])!r}")
    (tmp_path / "m.csv").write_text("\n".join(rows) + "\n")
    write_sweep_csv(tmp_path / "A.csv", a)       # the id "A" again, from another file
    items = list(iter_sweeps([tmp_path / "m.csv", tmp_path / "A.csv"]))
    assert [it.label for it in items] == ["A", "B", "A", "A"]
    assert items[0].load().n_points == 40
    with pytest.raises(InputError, match=r"line 46.*'oops' is not a number"):
        items[1].load()
    assert ".dup-" in items[2].sweep_id and ".dup-" in items[3].sweep_id
    assert items[2].sweep_id != items[3].sweep_id
    with pytest.raises(InputError, match="not together"):
        items[2].load()
    with pytest.raises(InputError, match="already used by"):
        items[3].load()


def test_multi_sweep_csv_reads_as_the_single_sweep_reader(tmp_path):
    """Each sweep of a multi-sweep table has exactly the numbers load_sweep reads from the same rows
    written alone (Python float repr reads back exactly); decimal commas with semicolons are read as
    in single-sweep files; counting sweeps needs no numbers."""
    from bayesprobe.batch.readers import count_sweeps, reading_options
    from bayesprobe.io import load_sweep
    sweeps = [("a", _sim(1, n=40)), ("b", _sim(2, n=45)), ("c", _sim(3, n=50))]
    rows = ["# exported by hand", "sweep;bias;current [mA];time;position"]
    for k, (sid, s) in enumerate(sweeps):
        for j, (v, i) in enumerate(zip(s.voltage, s.current)):
            if j == 10:
                rows += ["", "# pause"]
            rows.append(f"{sid};{float(v)!r};{float(i) * 1e3!r};{2.5 * k!r};{0.1 * j!r}".replace(".", ","))
    (tmp_path / "m.csv").write_text("\n".join(rows) + "\n")
    items = list(iter_sweeps([tmp_path / "m.csv"]))
    assert [it.label for it in items] == ["a", "b", "c"] and [it.index for it in items] == [0, 1, 2]
    assert [it.coords for it in items] == [{"time": 0.0}, {"time": 2.5}, {"time": 5.0}]   # position varies
    assert count_sweeps([tmp_path / "m.csv"], reading_options()) == 3
    for it, (sid, s) in zip(items, sweeps):
        one = tmp_path / f"one-{sid}.csv"
        one.write_text("bias;current [mA]\n" + "\n".join(
            f"{float(v)!r};{float(i) * 1e3!r}".replace(".", ",") for v, i in zip(s.voltage, s.current)) + "\n")
        got, ref = it.load(), load_sweep(one)
        np.testing.assert_array_equal(got.voltage, ref.voltage)
        np.testing.assert_array_equal(got.current, ref.current)
        assert "decimal commas read as decimal points" in got.notes


def test_ragged_rows_and_long_sweeps_spoil_their_own_sweep(tmp_path):
    """A row with more or fewer fields than the header, or too many rows, fails its sweep only."""
    a, b, c = _sim(1, n=40), _sim(2, n=40), _sim(3, n=60)
    rows = ["sweep_id,voltage_V,current_A"]
    for sid, s in (("A", a), ("B", b), ("C", c)):
        rows += [f"{sid},{float(v)!r},{float(i)!r}" for v, i in zip(s.voltage, s.current)]
    rows[5] += ",7"
    rows[50] = "B,1.0"
    (tmp_path / "m.csv").write_text("\n".join(rows) + "\n")
    items = list(iter_sweeps([tmp_path / "m.csv"], max_points=50))
    with pytest.raises(InputError, match=r"line 6 has 4 fields but the header has 3; make every row match"):
        items[0].load()
    with pytest.raises(InputError, match=r"line 51 has 2 fields but the header has 3"):
        items[1].load()
    with pytest.raises(InputError, match=r"sweep 'C' has more than 50 rows, the limit for one sweep"):
        items[2].load()
    ok = list(iter_sweeps([tmp_path / "m.csv"]))[2].load()
    np.testing.assert_array_equal(ok.current, c.current)


def test_hostile_ids_give_safe_distinct_file_names(tmp_path):
    ids = ["../x", "a/b", "a_b", "..", "", "/etc/passwd", "CON", "x" * 300, "tab\there", "ü", "x"]
    fids = [file_id_for(s) for s in ids]
    assert len(set(f.casefold() for f in fids)) == len(ids)        # distinct, even case-insensitively
    for f in fids:
        assert f == sanitise_id(f) and "/" not in f and "\\" not in f and ".." not in f and len(f) <= 64
        assert not f.startswith(".")
        assert (tmp_path / "sweeps" / f"{f}.json").resolve().parent == (tmp_path / "sweeps").resolve()
    assert file_id_for("x") == "x" and file_id_for("shot_12") == "shot_12"   # safe ids are kept


def test_seed_is_stable_and_per_sweep():
    """Pinned value: it must not depend on Python's per-process hash seed (pytest runs get a random one),
    and a change of the formula would silently change every resumed result."""
    assert sweep_seed(7, "shot-3") == 413892056286161321
    seeds = {sweep_seed(s, i) for s in (0, 1) for i in ("a", "b", "c")}
    assert len(seeds) == 6 and all(0 <= s < 2**64 for s in seeds)


# ---------------------------------------------------------------------------- the reference batch

def test_corrupt_files_do_not_stop_the_batch(reference, inputs):
    out, summary = reference
    rows = {r["sweep_id"]: r for r in _csv_rows(out / "results.csv")}
    assert set(rows) == GOOD | set(BAD)
    for sid in GOOD:
        r = rows[sid]
        assert r["status"] in ("ok", "not-converged") and r["reason"].count("\n") == 0
        for p in ("T_e", "n_e", "n_i", "V_f", "V_p"):
            lo, med, hi = (float(r[f"{p}_{k}"]) for k in ("ci_low", "median", "ci_high"))
            assert lo < med < hi
    for sid, fragment in BAD.items():
        assert rows[sid]["status"] == "failed"
        assert fragment in rows[sid]["reason"] and "\n" not in rows[sid]["reason"]
        assert rows[sid]["T_e_median"] == ""
    assert summary.n_failed == len(BAD) and summary.exit_status == 4
    assert summary.n_sweeps == len(GOOD) + len(BAD) and summary.n_fitted_now == len(GOOD)
    # coordinates and labels: position from the .npz, time from the CSV, original ids kept as labels
    assert float(rows["multi-1"]["position"]) == 0.02 and rows["multi-1"]["time"] == ""
    assert float(rows[file_id_for("a/b")]["time"]) == 2.5 and rows[file_id_for("a/b")]["label"] == "a/b"
    # hostile ids stayed inside OUT/sweeps
    files = sorted(p.name for p in (out / "sweeps").iterdir())
    assert files == sorted(f"{s}.json" for s in GOOD | set(BAD))
    assert not any(p.name in ("x.json", "b.json") for p in out.parent.rglob("*.json") if p.parent != out / "sweeps")
    assert (out / "profiles.png").stat().st_size > 0


def test_results_netcdf_matches_csv(reference):
    import xarray as xr
    out, _ = reference
    rows = _csv_rows(out / "results.csv")
    with xr.open_dataset(out / "results.nc") as ds:
        assert list(ds["sweep"].values) == [r["sweep_id"] for r in rows]
        assert ds["T_e"].attrs["units"] == "eV" and ds["n_e"].attrs["units"] == "m^-3"
        for r, te, pos, status in zip(rows, ds["T_e"].values, ds["position"].values, ds["status"].values):
            assert status == r["status"]
            assert (np.isnan(te) and r["T_e_median"] == "") or te == float(r["T_e_median"])
            assert (np.isnan(pos) and r["position"] == "") or pos == float(r["position"])


def test_one_and_two_workers_give_identical_tables(reference, inputs, tmp_path):
    ref_out, _ = reference
    summary = _run(inputs, tmp_path / "one", workers=1)
    assert summary.executor.startswith("process pool, 1")
    _assert_same_tables(ref_out, tmp_path / "one")


def test_sigkill_midway_then_resume_equals_uninterrupted(reference, inputs, tmp_path):
    ref_out, _ = reference
    out = tmp_path / "killed"
    cmd = [sys.executable, "-m", "bayesprobe", "batch", str(inputs), "--out", str(out), "--workers", "2",
           *CLI_OPTIONS]
    log = open(tmp_path / "killed-run.log", "wb")
    proc = subprocess.Popen(cmd, start_new_session=True, stdout=log, stderr=log)
    deadline = time.monotonic() + 120
    good_done = set()
    try:
        while not good_done:
            assert proc.poll() is None, "the batch ended before it could be killed"
            assert time.monotonic() < deadline, "no sweep finished within 120 s"
            time.sleep(0.05)
            good_done = {p.stem for p in (out / "sweeps").glob("*.json")} & GOOD if (out / "sweeps").exists() \
                else set()
    finally:
        os.killpg(proc.pid, signal.SIGKILL)     # the parent and its workers, like a crash of the job
        proc.wait()
        log.close()
    before = {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in (out / "sweeps").glob("*.json")}
    assert 0 < len(good_done) < len(GOOD), "the kill must fall in the middle of the batch"
    assert not (out / "results.csv").exists()
    (out / "sweeps" / ".stale.json.x.tmp").write_text("{half")       # as a kill during a write leaves behind

    res = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    assert res.returncode == 4, res.stderr        # some sweeps failed (the corrupt files)
    _assert_same_tables(ref_out, out)
    ids = [r["sweep_id"] for r in _csv_rows(out / "results.csv")]
    assert sorted(ids) == sorted(GOOD | set(BAD)) and len(ids) == len(set(ids))     # none lost, none twice
    assert sorted(p.name for p in (out / "sweeps").iterdir()) == sorted(f"{s}.json" for s in ids)
    after = {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in (out / "sweeps").glob("*.json")}
    assert all(after[k] == v for k, v in before.items())     # finished sweeps were not fitted again


def test_dask_local_cluster_equals_process_pool(reference, inputs, tmp_path):
    pytest.importorskip("dask.distributed")
    ref_out, _ = reference
    summary = _run(inputs, tmp_path / "dask", dask="local", workers=2)
    assert summary.executor.startswith("dask")
    _assert_same_tables(ref_out, tmp_path / "dask")


# ---------------------------------------------------------------------------- options and plumbing

def test_resume_with_other_settings_is_refused(tmp_path):
    (tmp_path / "in").mkdir()
    (tmp_path / "in" / "bad.csv").write_text("voltage,current\n1,2\n")
    out = tmp_path / "out"
    s = fit_many([tmp_path / "in"], out_dir=out, config=CONFIG, sampler=SHORT, workers=1, progress=False,
                 figures=False)
    assert s.n_failed == 1 and s.exit_status == 4 and s.n_fitted_now == 0
    with pytest.raises(InputError, match=r"other settings \(seed\)"):
        fit_many([tmp_path / "in"], out_dir=out, config=CONFIG, sampler=SHORT, workers=1, seed=1, progress=False)
    for bad in ({"workers": 0}, {"model": "kappa"}, {"credible_level": 1.0}, {"seed": -1}):
        with pytest.raises(InputError):
            fit_many([tmp_path / "in"], out_dir=tmp_path / "x", config=CONFIG, progress=False, **bad)
    with pytest.raises(InputError, match="not found"):
        fit_many([tmp_path / "nothing-here"], out_dir=tmp_path / "y", progress=False)
    with pytest.raises(InputError, match="matches no files"):
        fit_many([str(tmp_path / "in" / "*.npz")], out_dir=tmp_path / "y", progress=False)


def test_cli_exit_status_for_unusable_input_and_failures(tmp_path, capsys):
    from bayesprobe.cli import main
    assert main(["batch", str(tmp_path / "missing"), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "not found" in err
    (tmp_path / "junk.npz").write_bytes(b"PK\x03\x04 not really")
    assert main(["batch", str(tmp_path / "junk.npz"), "--out", str(tmp_path / "o"), "--quiet", "--workers", "1"]) == 4
    assert "Traceback" not in capsys.readouterr().err
    assert _csv_rows(tmp_path / "o" / "results.csv")[0]["status"] == "failed"
    assert main(["batch", str(tmp_path / "junk.npz"), "--out", str(tmp_path / "o"), "--workers", "0"]) == 2


def test_exit_status_rules():
    assert BatchSummary(Path("."), n_sweeps=3, n_ok=3).exit_status == 0
    assert BatchSummary(Path("."), n_sweeps=3, n_ok=2, n_not_converged=1).exit_status == 3
    assert BatchSummary(Path("."), n_sweeps=3, n_ok=1, n_not_converged=1, n_failed=1).exit_status == 4


def test_dask_missing_gives_actionable_message(tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)       # import now fails as if not installed
    write_sweep_csv(tmp_path / "a.csv", _sim(1, n=40))
    with pytest.raises(InputError, match=r"pip install 'bayesprobe\[dask\]'"):
        fit_many([tmp_path / "a.csv"], out_dir=tmp_path / "o", dask="local", progress=False)


def _config_echo(task):
    """Stand-in worker for the settings-table plumbing test: reports the configuration it was given."""
    from bayesprobe.batch.records import make_record as _record
    config = task["options"].config
    return _record(task["meta"], task["seed"], "failed",
                   f"echo radius={config.probe.radius!r} geometry={config.probe.geometry} "
                   f"ion_mass={config.ion_mass_kg!r}"), None


def test_sweep_table_sets_per_sweep_probe(tmp_path):
    sweeps = [(sid, _sim(j, n=40)) for j, sid in enumerate(("s1", "s2", "s3"))]
    _write_id_csv(tmp_path / "m.csv", sweeps)
    (tmp_path / "table.csv").write_text("sweep_id,radius,ion\ns1,0.001,\ns3,,He\n")
    table = load_sweep_table(tmp_path / "table.csv", CONFIG)
    assert table["s1"].probe.radius == 1e-3 and table["s1"].probe.geometry == "planar"
    assert table["s3"].probe == CONFIG.probe and table["s3"].ion == "He"
    fit_many([tmp_path / "m.csv"], out_dir=tmp_path / "o", config=CONFIG, sweep_table=tmp_path / "table.csv",
             workers=1, progress=False, figures=False, _runner=_config_echo)
    reasons = {r["sweep_id"]: r["reason"] for r in _csv_rows(tmp_path / "o" / "results.csv")}
    assert "radius=0.001 " in reasons["s1"] and "radius=0.002 " in reasons["s2"]
    assert reasons["s2"].split("ion_mass=")[1] == repr(CONFIG.ion_mass_kg)
    assert reasons["s3"].split("ion_mass=")[1] != repr(CONFIG.ion_mass_kg)
    (tmp_path / "bad.csv").write_text("sweep_id,radius,colour\ns1,0.001,red\n")
    with pytest.raises(InputError, match="unknown column"):
        load_sweep_table(tmp_path / "bad.csv", CONFIG)
    (tmp_path / "bad2.csv").write_text("sweep_id,radius\ns1,-3\n")
    with pytest.raises(InputError, match="must be positive"):
        load_sweep_table(tmp_path / "bad2.csv", CONFIG)


def test_sweep_table_messages_name_file_lines(tmp_path):
    """Messages count every line of the file (comments and blank lines too); tab-separated rows may end
    in empty cells, which keep the batch-wide value."""
    (tmp_path / "t.tsv").write_text("# per-sweep probes\nsweep_id\tradius\tion\ns1\t0.001\t\n\ns2\t\tHe\n")
    table = load_sweep_table(tmp_path / "t.tsv", CONFIG)
    assert table["s1"].probe.radius == 1e-3 and table["s1"].ion == CONFIG.ion and table["s2"].ion == "He"
    (tmp_path / "bad.csv").write_text("# c\nsweep_id,radius\ns1,0.001\n\n# x\ns2,abc\n")
    with pytest.raises(InputError, match=r"sweep table '.*bad.csv': line 6: radius 'abc' is not a number"):
        load_sweep_table(tmp_path / "bad.csv", CONFIG)
    (tmp_path / "bad2.csv").write_text("sweep_id,radius\ns1,0.001\n\ns2,0.002,9\n")
    with pytest.raises(InputError, match=r"line 4 has 3 fields but the header has 2"):
        load_sweep_table(tmp_path / "bad2.csv", CONFIG)
    (tmp_path / "bad3.csv").write_text("sweep_id,radius\n\n,0.001\n")
    with pytest.raises(InputError, match=r"line 3 has no sweep_id"):
        load_sweep_table(tmp_path / "bad3.csv", CONFIG)
    (tmp_path / "bad4.csv").write_bytes(b"sweep_id,ion\ns1,\xb5\n")
    with pytest.raises(InputError, match=r"is not UTF-8 text"):
        load_sweep_table(tmp_path / "bad4.csv", CONFIG)


def _dies_on_s3(task):
    """Stand-in worker: the process dies (as in a crash or an out-of-memory kill) on sweep s3 only."""
    from bayesprobe.batch.records import make_record as _record
    if task["meta"]["sweep_id"] == "s3":
        os._exit(1)
    time.sleep(0.05)
    return _record(task["meta"], task["seed"], "ok", ""), None


def test_a_sweep_that_kills_its_worker_is_isolated_and_recorded(tmp_path):
    _write_id_csv(tmp_path / "m.csv", [(f"s{j}", _sim(j, n=40)) for j in range(6)])
    s = fit_many([tmp_path / "m.csv"], out_dir=tmp_path / "o", config=CONFIG, workers=2, progress=False,
                 figures=False, _runner=_dies_on_s3)
    rows = {r["sweep_id"]: r for r in _csv_rows(tmp_path / "o" / "results.csv")}
    assert sorted(rows) == [f"s{j}" for j in range(6)]
    assert rows["s3"]["status"] == "failed" and "worker process died" in rows["s3"]["reason"]
    assert all(rows[f"s{j}"]["status"] == "ok" for j in range(6) if j != 3)
    assert s.n_failed == 1 and s.exit_status == 4


def test_non_finite_coordinates_become_missing(tmp_path):
    V = np.linspace(-40, 20, 60)
    I = np.stack([_sim(j, voltage=V).current for j in range(3)])
    np.savez(tmp_path / "c.npz", voltage=V, current=I, position=np.array([0.5, np.nan, np.inf]))
    fit_many([tmp_path / "c.npz"], out_dir=tmp_path / "o", config=CONFIG, workers=1, progress=False,
             _runner=_dies_on_s3)
    assert [r["position"] for r in _csv_rows(tmp_path / "o" / "results.csv")] == ["0.5", "", ""]
    rec = json.loads((tmp_path / "o" / "sweeps" / "c-1.json").read_text())
    assert rec["coords"] == {"position": None}


def test_converged_batch_exit_zero_with_posteriors(tmp_path):
    """The ordinary path: default convergence criteria met, status ok, posterior kept on request."""
    write_sweep_csv(tmp_path / "one.csv", _sim(21))
    s = fit_many([tmp_path / "one.csv"], out_dir=tmp_path / "o", config=CONFIG, workers=1, progress=False,
                 keep_posteriors=True, figures=False)
    assert (s.n_ok, s.exit_status) == (1, 0), _csv_rows(tmp_path / "o" / "results.csv")[0]["reason"]
    rec = json.loads((tmp_path / "o" / "sweeps" / "one.json").read_text())
    assert rec["status"] == "ok" and rec["summary"]["diagnostics"]["converged"] is True
    assert rec["seed"] == sweep_seed(0, "one") == rec["summary"]["seed"]
    from bayesprobe.inference.arviz_adapter import az
    idata = az.from_netcdf(tmp_path / "o" / "posteriors" / "one.nc")
    assert "T_e" in idata.posterior


# ---------------------------------------------------------------------------- warm starts

def _series(n, points=200, seed=0):
    """A synthetic time series: T_e, n_e and V_p drift smoothly from sweep to sweep."""
    V = np.linspace(-40.0, 16.0, points)
    I = np.stack([bp.simulate({"T_e": 2.5 + 0.3 * np.sin(k / 3), "n_e": 1e16 * (1 + 0.2 * np.sin(k / 4)),
                               "V_p": 10.0 + 0.4 * np.sin(k / 5)}, config=CONFIG, voltage=V, noise_rel=0.01,
                              seed=seed + k).sweep.current for k in range(n)])
    return V, I


def test_warm_start_runs_are_fixed_by_input_order(tmp_path):
    """Runs of --warm-start sweeps are cut from the input order, not from what the workers happen to
    take: one and two workers give identical tables, and a resumed batch whose interrupted run
    lost a sweep refits that run whole and gets the same tables again, without rewriting the
    records that were kept. (Common practice, no source: determinism as an oracle.)"""
    V, I = _series(5)
    np.savez(tmp_path / "series.npz", voltage=V, current=I, time=np.arange(5) * 1e-3)
    kw = dict(engine="fast", warm_start=2)
    _run(tmp_path / "series.npz", tmp_path / "one", workers=1, **kw)
    _run(tmp_path / "series.npz", tmp_path / "two", workers=2, **kw)
    _assert_same_tables(tmp_path / "one", tmp_path / "two")
    recs = {p.stem: json.loads(p.read_text()) for p in (tmp_path / "one" / "sweeps").glob("*.json")}
    warm = {r["index"]: r["summary"]["diagnostics"]["warm_start"] for r in recs.values()}
    assert warm == {0: False, 1: True, 2: False, 3: True, 4: False}      # runs [0, 1], [2, 3], [4]
    # an interruption that lost sweep 3: its run [2, 3] is fitted whole again, sweep 2 is not rewritten
    by_index = {r["index"]: sid for sid, r in recs.items()}
    sweeps = tmp_path / "one" / "sweeps"
    (sweeps / f"{by_index[3]}.json").unlink()
    kept = {p.name: p.stat().st_mtime_ns for p in sweeps.glob("*.json")}
    _run(tmp_path / "series.npz", tmp_path / "one", workers=1, **kw)
    _assert_same_tables(tmp_path / "one", tmp_path / "two")
    assert all((sweeps / k).stat().st_mtime_ns == v for k, v in kept.items())
    # resuming with another run length is refused
    with pytest.raises(InputError, match="warm_start"):
        _run(tmp_path / "series.npz", tmp_path / "one", workers=1, engine="fast", warm_start=3)


def test_warm_start_changes_no_result_beyond_monte_carlo_error():
    """emcee from the neighbour's optimum vs from a cold start, on 6 sweeps of a smoothly varying
    series: medians and interval ends agree within Monte-Carlo error (the engine-comparison
    oracle of test_calibration: quantile MC sd from the ESS, exceedance count and systematic
    shift both checked)."""
    from cases.calibration import engines_disagree, fit_record
    V, I = _series(6, points=300, seed=50)
    cold, warm, prev = [], [], None
    for k in range(6):
        c = bp.fit(V, I[k], config=CONFIG, seed=k, progress=False)
        w = bp.fit(V, I[k], config=CONFIG, seed=k, progress=False, start=prev)
        assert c.converged and w.converged
        assert w.diagnostics["warm_start"] == (k > 0)
        cold.append(fit_record(c))
        warm.append(fit_record(w))
        prev = w
    assert not engines_disagree(warm, cold)


def test_warm_start_that_does_not_fit_the_model_is_ignored():
    """A start that does not describe the fitted model's parameters (a partial dict, a result of
    another electron model) is not used: the fit runs cold and says so."""
    V, I = _series(1)
    res = bp.fit(V, I[0], config=CONFIG, seed=0, progress=False, engine="fast", start={"T_e": 3.0})
    assert res.diagnostics["warm_start"] is False
    res2 = bp.fit(V, I[0], config=CONFIG, seed=0, progress=False, engine="fast", start=res)
    assert res2.diagnostics["warm_start"] is True
    with pytest.warns(bp.ConvergenceWarning, match="did not converge"):       # SHORT: a 500-step budget
        other = bp.fit(V, I[0], config=CONFIG, model="bi-maxwellian", seed=0, progress=False,
                       engine="fast", sampler=SHORT, start=res)
    assert other.diagnostics["warm_start"] is False


def test_warm_start_runs_never_cross_a_file():
    """Runs are cut at the run length and at every change of input file (a scan in one file and a
    time series in the next are not one sequence)."""
    from bayesprobe.batch import SweepItem
    from bayesprobe.batch.tasks import warm_groups as _warm_groups
    items = [SweepItem(f"{f}-{k}", f"{f}-{k}", f"{f} [sweep {k}]", k, path=f) for f, n in (("a", 5), ("b", 2))
             for k in range(n)]
    runs = [[i.sweep_id for i in g] for g in _warm_groups(iter(items), 2)]
    assert runs == [["a-0", "a-1"], ["a-2", "a-3"], ["a-4"], ["b-0", "b-1"]]
    assert [len(g) for g in _warm_groups(iter(items), 0)] == [1] * 7
