"""Benchmark: MAP + importance sampling against the MCMC driver on a 1000-point single-temperature sweep.

Run on a quiet machine:  python benchmarks/bench_importance.py [--repeats 5] [--emcee-repeats 5]

For a cylindrical probe ("auto" ion collection) and a planar one ("thin-sheath"), prints
the median CPU time (time.process_time) over the repeats of

* the start (classical analysis + starting points) and ``find_map``,
* ``importance_sample`` (default settings, and with 2000 first-round proposals),
* the post-processing every engine needs (derived quantities, pointwise log-likelihood
  and a replicated sweep for the stored draws),

with k-hat, the importance-sampling ESS and acceptance, and the CPU time of the same
sweep through ``bayesprobe.fit`` (emcee) for the speed ratio.
"""
import argparse
import os
import statistics
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import numpy as np  # noqa: E402

import bayesprobe as bp  # noqa: E402
from bayesprobe.derived import derived_quantities  # noqa: E402
from bayesprobe.fitting import _classical, _starts  # noqa: E402
from bayesprobe.inference.importance import ImportanceSettings, importance_sample  # noqa: E402
from bayesprobe.inference.optimize import find_map  # noqa: E402
from bayesprobe.inference.posterior import LogPosterior, default_parameters  # noqa: E402


def fast_once(sim, cfg, seed, settings):
    V, I = sim.sweep.voltage, sim.sweep.current
    c0 = time.process_time()
    cls = _classical(V, I, cfg)
    params = default_parameters(cfg, V, I)
    logpost = LogPosterior(V, I, cfg, params)
    starts = _starts(params, cls, V, I, cfg)
    mp = find_map(logpost, starts)
    c1 = time.process_time()
    run = importance_sample(logpost, mp.z, mp.cov, settings=settings, seed=seed)
    c2 = time.process_time()
    phys = params.to_physical(run.draws)
    derived_quantities(phys, cfg)
    logpost.pointwise_loglik(run.draws)
    logpost.posterior_predictive(run.draws, np.random.default_rng(seed))
    c3 = time.process_time()
    return {"map": c1 - c0, "is": c2 - c1, "core": c2 - c0, "post": c3 - c2, "khat": run.khat, "ess": run.ess,
            "accepted": run.accepted, "n_eval": run.n_evaluations, "model": run.timings["model_s"]}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--emcee-repeats", type=int, default=5)
    ap.add_argument("--points", type=int, default=1000)
    args = ap.parse_args()
    cases = {"cylindrical (auto)": bp.ModelConfig(probe=bp.Probe("cylindrical", radius=50e-6, length=5e-3),
                                                  ion="Ar", ion_collection="auto"),
             "planar (thin-sheath)": bp.ModelConfig(probe=bp.Probe("planar", radius=2e-3), ion="Ar",
                                                    ion_collection="thin-sheath")}
    variants = {"default (4000 proposals)": ImportanceSettings(),
                "2000 proposals": ImportanceSettings(n_proposals=2000)}
    for label, cfg in cases.items():
        sim = bp.simulate({"n_e": 1e16, "T_e": 3.0, "V_p": 12.0}, config=cfg, n_points=args.points,
                          noise_rel=0.01, seed=1)
        fast_once(sim, cfg, 0, ImportanceSettings())            # warm caches and imports
        print(f"\n{args.points}-point {label} sweep, median CPU seconds of {args.repeats} runs")
        core_default = None
        for vname, settings in variants.items():
            rows = [fast_once(sim, cfg, k, settings) for k in range(args.repeats)]
            med = {k: statistics.median(r[k] for r in rows) for k in ("map", "is", "core", "post", "model", "khat",
                                                                       "ess", "n_eval")}
            acc = sum(r["accepted"] for r in rows)
            if core_default is None:
                core_default = med["core"] + med["post"]
            print(f"  fast engine, {vname}: MAP+start {med['map']:.3f}  IS {med['is']:.3f} (model {med['model']:.3f}, "
                  f"{med['n_eval']:.0f} evaluations)  MAP+IS {med['core']:.3f}  post-processing {med['post']:.3f}")
            print(f"      k-hat median {med['khat']:.3f} (max {max(r['khat'] for r in rows):.3f}), IS ESS median "
                  f"{med['ess']:.0f} (min {min(r['ess'] for r in rows):.0f}), accepted {acc}/{len(rows)}")
        cpu = []
        for k in range(args.emcee_repeats):
            c0 = time.process_time()
            res = bp.fit(sim.sweep, config=cfg, seed=k, progress=False)
            cpu.append(time.process_time() - c0)
            if not res.converged:
                print(f"  (emcee run {k} not converged: {res.diagnostics['unmet']})")
        emcee_med = statistics.median(cpu)
        print(f"  emcee through bayesprobe.fit: CPU median {emcee_med:.2f} s over {len(cpu)} runs; "
              f"speed ratio (fit / fast MAP+IS+post-processing, default settings) "
              f"{emcee_med / core_default:.1f}x")


if __name__ == "__main__":
    main()
