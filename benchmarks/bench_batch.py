"""Benchmark: batch throughput on 1 vs 2 workers, and parent memory while streaming 10 000 sweeps.

Run on a quiet machine:  python benchmarks/bench_batch.py [--sweeps 8] [--points 200] [--big 10000]
                             [--engine mcmc|fast|auto] [--warm 40]

1. Throughput: the same simulated sweeps (one multi-sweep .npz) fitted for real by
   ``bayesprobe.batch.fit_many`` on a local process pool of 1 and of 2 workers;
   prints sweeps/s and the scaling efficiency (rate_2 / (2 rate_1)), and with
   ``--engine auto`` how many sweeps fell back from importance sampling to emcee.
1b. Warm start (``--warm K``): a smoothly drifting simulated time series of K sweeps,
   fitted cold and with runs of K/4 sweeps (``warm_start``) on 2 workers; prints the speed-up and the
   largest change of a median in posterior sds.
2. Parent memory: a generated ``--big``-sweep .npz streamed through ``fit_many``
   in a fresh process. FITTING IS REPLACED BY A STUB here (a worker function that
   returns a fixed small record at once), because fitting 10 000 sweeps for real
   takes hours; what is measured is the parent: reading, dispatch, one atomic
   record per sweep and the final tables. Reported: tracemalloc peak of Python and
   NumPy allocations during the run, and the growth of the parent's peak RSS over
   its size after imports, next to the size of the input arrays.
"""
import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
import zipfile
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import numpy as np  # noqa: E402

import bayesprobe as bp  # noqa: E402
from bayesprobe.fitting import make_config  # noqa: E402

CONFIG = make_config(probe=bp.Probe("planar", radius=2e-3), ion_collection="thin-sheath")


def write_multi_npz(path: Path, k: int, n: int, seed: int = 0, chunk: int = 500):
    """A k-sweep .npz (shared voltage, current (k, n), position (k,)), written chunk by chunk."""
    rng = np.random.default_rng(seed)
    truth = {"n_e": 1e16, "T_e": 3.0, "V_p": 12.0}
    base = bp.simulate(truth, config=CONFIG, n_points=n, seed=seed).sweep
    V = base.voltage
    clean = bp.probe_current(V, truth, CONFIG)
    sd = np.sqrt((1e-3 * clean.max()) ** 2 + (0.01 * clean) ** 2)
    fmt = np.lib.format
    with zipfile.ZipFile(path, "w", zipfile.ZIP_STORED, allowZip64=True) as zf:
        for name, arr in (("voltage", V), ("position", np.linspace(0.0, 0.1, k))):
            with zf.open(f"{name}.npy", "w") as fp:
                fmt.write_array(fp, np.ascontiguousarray(arr))
        with zf.open("current.npy", "w", force_zip64=True) as fp:
            fmt.write_array_header_1_0(fp, {"descr": fmt.dtype_to_descr(np.dtype(float)), "fortran_order": False,
                                            "shape": (k, n)})
            for j in range(0, k, chunk):
                m = min(chunk, k - j)
                fp.write((clean + sd * rng.standard_normal((m, n))).astype(float).tobytes())


def write_series_npz(path: Path, k: int, n: int, seed: int = 0):
    """A k-sweep synthetic time series: T_e, n_e and V_p drift smoothly from sweep to sweep."""
    V = np.linspace(-45.0, 18.0, n)
    t = np.arange(k)
    cur = np.stack([bp.simulate({"T_e": 3.0 + 0.5 * np.sin(j / 9), "n_e": 1e16 * (1 + 0.3 * np.sin(j / 13)),
                                 "V_p": 12.0 + 0.8 * np.sin(j / 11)}, config=CONFIG, voltage=V, noise_rel=0.01,
                                seed=seed + j).sweep.current for j in t])
    np.savez(path, voltage=V, current=cur, time=t * 1e-3)


def _engines(out: Path):
    import csv
    with open(out / "results.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    return rows, sum(r["engine"] == "mcmc" for r in rows)


def stub_runner(task):
    """STUB standing in for the fit (memory benchmark only): a fixed small record, no fitting."""
    from bayesprobe.batch.records import make_record as _record
    s = task["sweep"]
    summary = {"model": "stub", "credible_level": 0.9, "parameters": {},
               "diagnostics": {"converged": True}, "sweep": {"n_points": s.n_points}}
    return _record(task["meta"], task["seed"], "ok", "", summary), None


def rss_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0      # Linux: KiB


def throughput(args):
    from bayesprobe.batch import fit_many
    sampler = bp.SamplerSettings(max_steps=args.max_steps)
    with tempfile.TemporaryDirectory() as d:
        src = Path(d) / "sweeps.npz"
        write_multi_npz(src, args.sweeps, args.points, seed=3)
        rates, tables = {}, {}
        for w in (1, 2):
            out = Path(d) / f"out{w}"
            c0 = resource.getrusage(resource.RUSAGE_CHILDREN)
            t0 = time.perf_counter()
            s = fit_many([src], out_dir=out, config=CONFIG, workers=w, sampler=sampler, progress=False,
                         figures=False, engine=args.engine)
            wall = time.perf_counter() - t0
            c1 = resource.getrusage(resource.RUSAGE_CHILDREN)
            cpu = (c1.ru_utime - c0.ru_utime) + (c1.ru_stime - c0.ru_stime)
            rates[w] = args.sweeps / wall
            tables[w] = (out / "results.csv").read_bytes()
            print(f"  {w} worker(s): {wall:7.1f} s for {args.sweeps} sweeps = {rates[w]:.3f} sweeps/s; worker CPU "
                  f"{cpu:.1f} s = {cpu / wall:.2f} cores busy on average "
                  f"({s.n_ok} converged, {s.n_not_converged} not, {s.n_failed} failed)")
        print(f"  speed-up 2 vs 1: {rates[2] / rates[1]:.2f}x, scaling efficiency {rates[2] / (2 * rates[1]):.0%}; "
              f"tables identical: {tables[1] == tables[2]}")
        if args.engine != "mcmc":
            _, fallbacks = _engines(Path(d) / "out2")
            print(f"  engine {args.engine}: {fallbacks} of {args.sweeps} sweeps fell back to emcee "
                  f"({fallbacks / args.sweeps:.0%})")
        print("  (on a busy machine 'cores busy' below the worker count shows the CPU share other jobs took)")


def warm(args):
    from bayesprobe.batch import fit_many
    with tempfile.TemporaryDirectory() as d:
        src = Path(d) / "series.npz"
        write_series_npz(src, args.warm, args.points, seed=7)
        walls, rows = {}, {}
        # runs of a quarter of the series: both workers stay busy in the warm case too
        for label, ws in (("cold", 0), ("warm", max(2, args.warm // 4))):
            out = Path(d) / label
            t0 = time.perf_counter()
            fit_many([src], out_dir=out, config=CONFIG, workers=2, progress=False, figures=False,
                     engine=args.engine, warm_start=ws)
            walls[label] = time.perf_counter() - t0
            rows[label], fb = _engines(out)
            note = f" ({fb} fell back to emcee)" if args.engine != "mcmc" else ""
            print(f"  {label:4s} (warm_start={ws:2d}): {walls[label]:6.1f} s = {args.warm / walls[label]:.2f} sweeps/s"
                  + note)
        worst = 0.0
        for a, b in zip(rows["cold"], rows["warm"]):
            for p in ("T_e", "n_e", "V_p"):
                width = float(a[f"{p}_ci_high"]) - float(a[f"{p}_ci_low"])      # 90 % interval ~ 3.29 sd
                worst = max(worst, abs(float(a[f"{p}_median"]) - float(b[f"{p}_median"])) / (width / 3.29))
        print(f"  warm-start speed-up {walls['cold'] / walls['warm']:.2f}x; largest change of a median "
              f"(T_e, n_e, V_p) {worst:.3f} posterior sd")


def memory_child(args):
    """Runs in a fresh process: parent memory while streaming the big file through the stub."""
    import tracemalloc

    from bayesprobe.batch import fit_many
    src, out = Path(args.child[0]), Path(args.child[1])
    # warm-up on 10 sweeps so that module imports (h5py, xarray backends, ...) are not counted below
    write_multi_npz(out.parent / "warm.npz", 10, 50, seed=1)
    fit_many([out.parent / "warm.npz"], out_dir=out.parent / "warm", config=CONFIG, workers=args.workers,
             progress=False, figures=False, _runner=stub_runner)
    base = rss_mib()
    tracemalloc.start()
    t0 = time.perf_counter()
    s = fit_many([src], out_dir=out, config=CONFIG, workers=args.workers, progress=False, figures=False,
                 _runner=stub_runner)
    wall = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(json.dumps({"sweeps": s.n_sweeps, "ok": s.n_ok, "wall_s": wall, "tracemalloc_peak_mib": peak / 2**20,
                      "rss_after_imports_mib": base, "rss_peak_mib": rss_mib()}))


def memory(args):
    with tempfile.TemporaryDirectory() as d:
        src = Path(d) / "big.npz"
        t0 = time.perf_counter()
        write_multi_npz(src, args.big, args.points, seed=5)
        data_mib = args.big * args.points * 8 / 2**20
        print(f"  generated {args.big} sweeps x {args.points} points ({data_mib:.1f} MiB of current) "
              f"in {time.perf_counter() - t0:.1f} s")
        r = subprocess.run([sys.executable, __file__, "--workers", str(args.workers), "--child", str(src),
                            str(Path(d) / "out")], capture_output=True, text=True, check=True)
        m = json.loads(r.stdout.strip().splitlines()[-1])
        print(f"  [fits replaced by a STUB worker] {m['sweeps']} sweeps through the parent in {m['wall_s']:.1f} s "
              f"({m['sweeps'] / m['wall_s']:.0f} sweeps/s: read, dispatch, atomic record, tables)")
        print(f"  parent tracemalloc peak: {m['tracemalloc_peak_mib']:.1f} MiB "
              f"(input arrays: {data_mib:.1f} MiB)")
        print(f"  parent peak RSS: {m['rss_peak_mib']:.0f} MiB, {m['rss_after_imports_mib']:.0f} MiB after imports "
              f"(+{m['rss_peak_mib'] - m['rss_after_imports_mib']:.0f} MiB)")


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--sweeps", type=int, default=8, help="sweeps fitted for the throughput part")
    ap.add_argument("--points", type=int, default=200)
    ap.add_argument("--max-steps", type=int, default=20000)
    ap.add_argument("--big", type=int, default=10000, help="sweeps streamed for the memory part")
    ap.add_argument("--workers", type=int, default=2, help="workers of the memory part")
    ap.add_argument("--engine", default="mcmc", choices=["mcmc", "fast", "auto"])
    ap.add_argument("--warm", type=int, default=0, help="sweeps of the warm-start comparison (0: skip)")
    ap.add_argument("--skip-throughput", action="store_true")
    ap.add_argument("--skip-memory", action="store_true")
    ap.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        memory_child(args)
        return
    print(f"cores: {os.cpu_count()}, load average: {os.getloadavg()[0]:.1f}")
    if not args.skip_throughput:
        print(f"throughput ({args.points}-point planar sweeps, real fits):")
        throughput(args)
    if args.warm:
        print(f"warm start ({args.warm}-sweep drifting time series, {args.points} points, engine {args.engine}):")
        warm(args)
    if not args.skip_memory:
        print(f"parent memory ({args.big}-sweep .npz):")
        memory(args)


if __name__ == "__main__":
    main()
