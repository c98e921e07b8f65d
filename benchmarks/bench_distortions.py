"""Benchmark: a fit with RF fluctuation + series resistance + leakage against the plain fit, 1000 points.

Target (issue): the distortion-aware fit converges in under 4x the time of the plain fit.

Run:  python benchmarks/bench_distortions.py [--repeats 3] [--engine mcmc|auto]
The sweep is synthetic (our own invented scenario): a 2 mm planar probe in argon, T_e = 3 eV,
n = 1e16 m^-3, V_p = 12 V, V_rf = 3 V, R_series = 0.5 T_e / I_es, small leakage; 1000 points.
Times are CPU seconds (time.process_time) per fit, medians over the repeats; also the per-call cost
of the vectorised log-posterior for 32 parameter sets.
"""
import argparse
import statistics
import time

import numpy as np

import bayesprobe as bp
from bayesprobe.inference.posterior import LogPosterior, default_parameters
from bayesprobe.physics.electrons import electron_saturation_current


def scenario():
    probe = bp.Probe("planar", radius=2e-3)
    cfg = bp.ModelConfig(probe=probe, ion="Ar", ion_collection="thin-sheath", quasi_neutral=True)
    T_e, n = 3.0, 1e16
    I_es = electron_saturation_current(n, T_e, probe.area)
    truth = {"n_e": n, "T_e": T_e, "V_p": 12.0, "V_rf": 3.0, "R_series": 0.5 * T_e / I_es,
             "G_leak": 2e-6, "I_offset": 1e-5}
    full = cfg.with_(rf_fluctuation=True, series_resistance=True, leakage=True)
    sim = bp.simulate(truth, config=full, n_points=1000, noise_rel=0.01, seed=7)
    return cfg, full, sim


def per_call(cfg, sim, k=32, repeats=50):
    V, I = sim.sweep.voltage, sim.sweep.current
    params = default_parameters(cfg, V, I)
    lp = LogPosterior(V, I, cfg, params)
    values = {n: sim.truth.get(n, 0.0) for n in params.names}
    values.update({"sigma_floor": 1e-6, "sigma_rel": 0.01})
    z = params.to_z(values)
    Z = z + 0.01 * np.random.default_rng(0).standard_normal((k, z.size))
    lp(Z)
    t = time.process_time()
    for _ in range(repeats):
        lp(Z)
    return (time.process_time() - t) / repeats


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--engine", default="mcmc", choices=["mcmc", "auto"])
    args = ap.parse_args()
    cfg, full, sim = scenario()
    t_plain, t_full = per_call(cfg, sim), per_call(full, sim)
    print(f"log-posterior, 32 sets x 1000 points: plain {1e3 * t_plain:.2f} ms, "
          f"RF+R+leak {1e3 * t_full:.2f} ms, ratio {t_full / t_plain:.1f}")
    times = {}
    for label, dist in (("plain", None), ("rf+resistance+leakage", "rf,resistance,leakage")):
        ts = []
        for k in range(args.repeats):
            t = time.process_time()
            r = bp.fit(sim.sweep, config=cfg, seed=k, progress=False, engine=args.engine, distortions=dist)
            ts.append(time.process_time() - t)
            d = r.diagnostics
            tau = d.get("tau_max")
            print(f"{label:<22} run {k}: {ts[-1]:.1f} s CPU, engine {d['engine']}, converged {r.converged}, "
                  f"steps {d['n_steps']}, tau {tau if tau is None else round(tau, 1)}, "
                  f"T_e {r.parameter_summary()['T_e']['median']:.3f} eV (truth {sim.truth['T_e']})")
        times[label] = statistics.median(ts)
    ratio = times["rf+resistance+leakage"] / times["plain"]
    print(f"median CPU: plain {times['plain']:.1f} s, RF+R+leak {times['rf+resistance+leakage']:.1f} s, "
          f"ratio {ratio:.2f} (target < 4)")


if __name__ == "__main__":
    main()
