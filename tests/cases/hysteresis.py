"""Synthetic sweeps recorded with rising and falling bias, for the hysteresis tests (our own invented scenario).

Planar probes (thin-sheath ions) in argon or helium; T_e 1.5-5 eV, n 3e15-5e16 m^-3, a triangular
sweep of 200 points up and 200 down, 1 % proportional noise plus the simulator's floor. The branches
differ by a voltage shift V_shift = +-(0.5-1.5) T_e (contamination layer) and a displacement current
I_cap = +-(0.3-1) I_is (stray capacitance; I_is the ion saturation current at the lowest bias), sizes
chosen so that the difference matters; ``clean`` sweeps have neither (both directions still recorded).
"""
import warnings

import numpy as np

import bayesprobe as bp


def make_case(i: int, *, clean: bool = False):
    """(plain config, simulated two-direction sweep) for case ``i``."""
    rng = np.random.default_rng(7700 + i)
    probe = bp.Probe("planar", radius=float(rng.uniform(1.5e-3, 3e-3)))
    gas = ("Ar", "He")[i % 2]
    cfg = bp.ModelConfig(probe=probe, ion=gas, ion_collection="thin-sheath", quasi_neutral=True)
    T_e = float(rng.uniform(1.5, 5.0))
    n = float(np.exp(rng.uniform(np.log(3e15), np.log(5e16))))
    V_p = float(rng.uniform(5.0, 15.0))
    truth = {"n_e": n, "T_e": T_e, "V_p": V_p}
    v_min, v_max = V_p - 12 * T_e - 15, V_p + 3 * T_e
    I_is = -float(bp.probe_current(np.array([v_min]), truth, cfg)[0])
    shift = float(rng.choice([-1, 1]) * rng.uniform(0.5, 1.5) * T_e)
    cap = float(rng.choice([-1, 1]) * rng.uniform(0.3, 1.0) * I_is)
    seed = int(rng.integers(2**31))
    if not clean:
        truth.update({"V_shift": shift, "I_cap": cap})
    sim = bp.simulate(truth, config=cfg.with_(hysteresis=not clean) if not clean else cfg,
                      v_min=v_min, v_max=v_max, n_points=400, noise_rel=0.01, seed=seed, both_directions=True)
    return cfg, sim


def run_case(i: int, *, clean: bool = False, engine: str = "auto", max_steps: int = 12000):
    """Plain fit (directions ignored) and hysteresis-aware fit; intervals of T_e, n_e, V_p, V_shift."""
    from bayesprobe.inference.sampler import SamplerSettings
    cfg, sim = make_case(i, clean=clean)
    settings = SamplerSettings(max_steps=max_steps)
    out = {"i": i, "truth": sim.truth}
    for label, dist in (("plain", None), ("aware", "hysteresis")):
        with warnings.catch_warnings():      # converged is recorded (and checked by the tests)
            warnings.simplefilter("ignore", bp.ConvergenceWarning)
            res = bp.fit(sim.sweep, config=cfg, seed=i, progress=False, engine=engine, sampler=settings,
                         distortions=dist)
        ps = res.parameter_summary()
        out[label] = {"converged": res.converged, "engine": res.diagnostics["engine"],
                      **{n: (ps[n]["ci_low"], ps[n]["median"], ps[n]["ci_high"])
                         for n in ("T_e", "n_e", "V_p", "V_shift", "I_cap") if n in ps}}
    return out


def covers(entry, name, truth):
    lo, _, hi = entry[name]
    return lo <= truth[name] <= hi
