"""Benchmark: a 1000-point single-temperature sweep from file to converged posterior and written summary.

Run on a quiet machine:  python benchmarks/bench_fit.py [--repeats 5] [--geometry cylindrical]
Prints the median wall time and the split between model evaluation, sampler overhead,
convergence diagnostics, MAP search and posterior processing.
"""
import argparse
import os
import statistics
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import bayesprobe as bp  # noqa: E402
from bayesprobe.io import load_sweep, write_sweep_csv  # noqa: E402


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--geometry", default="cylindrical", choices=["cylindrical", "planar"])
    ap.add_argument("--ion-collection", default=None)
    ap.add_argument("--points", type=int, default=1000)
    args = ap.parse_args()
    if args.geometry == "cylindrical":
        probe = bp.Probe("cylindrical", radius=50e-6, length=5e-3)
        theory = args.ion_collection or "auto"
    else:
        probe = bp.Probe("planar", radius=2e-3)
        theory = args.ion_collection or "thin-sheath"
    cfg = bp.ModelConfig(probe=probe, ion="Ar", ion_collection=theory)
    rows = []
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "sweep.csv"
        sim = bp.simulate({"n_e": 1e16, "T_e": 3.0, "V_p": 12.0}, config=cfg, n_points=args.points,
                          noise_rel=0.01, seed=1)
        write_sweep_csv(path, sim.sweep)
        for k in range(args.repeats):
            t0 = time.perf_counter()
            c0 = time.process_time()
            sweep = load_sweep(path)
            res = bp.fit(sweep, config=cfg, seed=k, progress=False)
            res.to_json(Path(d) / "summary.json")
            wall = time.perf_counter() - t0
            cpu = time.process_time() - c0
            t = res.diagnostics["timings_s"]
            rows.append({"wall": wall, "cpu": cpu, "map": t["map"], "model": t["model_s"],
                         "sampler_overhead": t["sampling_s"] - t["model_s"], "diagnostics": t["diagnostics_s"],
                         "posterior": t["posterior_processing"], "steps": res.diagnostics["n_steps"],
                         "converged": res.converged, "tau": res.diagnostics["tau_max"]})
            print(f"run {k}: wall {wall:.2f} s, cpu {cpu:.2f} s, steps {rows[-1]['steps']}, "
                  f"tau {rows[-1]['tau']:.1f}, converged {res.converged}")
    med = {k: statistics.median(r[k] for r in rows) for k in rows[0] if k != "converged"}
    print(f"\n{args.points}-point {args.geometry} ({theory}) sweep, median of {args.repeats}:")
    for k in ("wall", "cpu", "map", "model", "sampler_overhead", "diagnostics", "posterior", "steps", "tau"):
        print(f"  {k:<17}{med[k]:.3f}")


if __name__ == "__main__":
    main()
