"""Benchmark: the fast engine (MAP + importance sampling) against emcee on a 1000-point single-T sweep.

Run on a quiet machine:  python benchmarks/bench_importance.py [--repeats 7] [--emcee-repeats 3]

For a cylindrical probe ("auto" ion collection), a cylindrical probe with OML ions and a
planar one ("thin-sheath"), prints median CPU seconds (time.process_time) over the repeats
(different seeds, same sweep) of

* ``bayesprobe.fit(..., engine="fast")`` end to end (classical start, MAP, importance
  sampling, derived quantities, pointwise log-likelihood, replicated sweeps, result object),
* its parts (wall-clock timings the fit records: MAP, importance sampling, post-processing),
* k-hat, importance-sampling ESS, accepted runs,
* ``bayesprobe.fit(..., engine="mcmc")`` for the speed ratio.
"""
import argparse
import os
import statistics
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import bayesprobe as bp  # noqa: E402


def cpu_fit(sim, cfg, seed, engine):
    c0 = time.process_time()
    res = bp.fit(sim.sweep, config=cfg, seed=seed, progress=False, engine=engine)
    return time.process_time() - c0, res


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=7)
    ap.add_argument("--emcee-repeats", type=int, default=3)
    ap.add_argument("--points", type=int, default=1000)
    args = ap.parse_args()
    cases = {"cylindrical (auto)": bp.ModelConfig(probe=bp.Probe("cylindrical", radius=50e-6, length=5e-3),
                                                  ion="Ar", ion_collection="auto"),
             "cylindrical (oml)": bp.ModelConfig(probe=bp.Probe("cylindrical", radius=50e-6, length=5e-3),
                                                 ion="Ar", ion_collection="oml"),
             "planar (thin-sheath)": bp.ModelConfig(probe=bp.Probe("planar", radius=2e-3), ion="Ar",
                                                    ion_collection="thin-sheath")}
    for label, cfg in cases.items():
        sim = bp.simulate({"n_e": 1e16, "T_e": 3.0, "V_p": 12.0}, config=cfg, n_points=args.points,
                          noise_rel=0.01, seed=1)
        cpu_fit(sim, cfg, 0, "fast")                      # warm caches and imports
        rows = []
        for k in range(args.repeats):
            cpu, res = cpu_fit(sim, cfg, k, "fast")
            d = res.diagnostics
            t = d["timings_s"]
            rows.append({"cpu": cpu, "map": t["map"], "is": t["importance"]["total_s"],
                         "post": t["posterior_processing"], "khat": d["khat"], "ess": d["is_ess"],
                         "engine": d["engine"], "n_eval": d["is_n_evaluations"]})
        med = {k: statistics.median(r[k] for r in rows) for k in ("cpu", "map", "is", "post", "khat", "ess", "n_eval")}
        acc = sum(r["engine"] == "importance" for r in rows)
        print(f"\n{args.points}-point {label} sweep, {args.repeats} fast fits")
        print(f"  fit(engine='fast') CPU median {med['cpu']:.3f} s (min {min(r['cpu'] for r in rows):.3f}); "
              f"parts (wall): MAP {med['map']:.3f}, IS {med['is']:.3f} ({med['n_eval']:.0f} evaluations), "
              f"MAP+IS {med['map'] + med['is']:.3f}, post-processing {med['post']:.3f}")
        print(f"  k-hat median {med['khat']:.3f} (max {max(r['khat'] for r in rows):.3f}); IS ESS median "
              f"{med['ess']:.0f} (min {min(r['ess'] for r in rows):.0f}); importance result accepted {acc}/{len(rows)}")
        cpu = []
        for k in range(args.emcee_repeats):
            c, res = cpu_fit(sim, cfg, k, "mcmc")
            cpu.append(c)
            if not res.converged:
                print(f"  (emcee run {k} not converged: {res.diagnostics['unmet']})")
        emcee_med = statistics.median(cpu)
        print(f"  fit(engine='mcmc') CPU median {emcee_med:.2f} s over {len(cpu)} runs; "
              f"speed ratio mcmc / fast {emcee_med / med['cpu']:.1f}x")


if __name__ == "__main__":
    main()
