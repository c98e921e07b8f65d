"""Benchmark: time of the two-temperature fit relative to the single-temperature fit on the same sweep.

Run:  python benchmarks/bench_two_temperature.py [--repeats 3]
Uses the bundled demo sweep with a hot tail (r080mm) and a single-temperature one (r040mm).
"""
import argparse
import statistics
import time

import bayesprobe as bp
from bayesprobe.demo import demo_files
from bayesprobe.fitting import make_config


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    scenario, folder = demo_files()
    cfg = make_config(probe=bp.Probe.from_dict(scenario["probe"]), ion=scenario["ion"], ion_collection="auto")
    for sweep_id in ("r080mm", "r040mm"):
        sweep = bp.load_sweep(folder / f"{sweep_id}.csv")
        times = {}
        for model in ("maxwellian", "bi-maxwellian"):
            ts = []
            for k in range(args.repeats):
                t = time.process_time()
                r = bp.fit(sweep, config=cfg, model=model, seed=k, progress=False)
                ts.append(time.process_time() - t)
                print(f"{sweep_id} {model:<14} run {k}: {ts[-1]:.1f} s CPU, converged {r.converged}, "
                      f"steps {r.diagnostics['n_steps']}, tau {r.diagnostics['tau_max']:.1f}")
            times[model] = statistics.median(ts)
        print(f"{sweep_id}: median CPU maxwellian {times['maxwellian']:.1f} s, bi-maxwellian "
              f"{times['bi-maxwellian']:.1f} s, ratio {times['bi-maxwellian'] / times['maxwellian']:.2f}\n")


if __name__ == "__main__":
    main()
