"""Timing of the vectorised forward model (a plain script, not a test).

Evaluates ``probe_current`` for 64 parameter sets x 1000 bias points, for every probe
geometry and ion-collection theory available, and prints the median time per call
(ms) and per parameter set (us).

    python benchmarks/bench_model.py [--sets 64] [--points 1000] [--repeats 25]

No Python loop runs over points or parameter sets: one call receives parameter
arrays of shape (k,) and voltages of shape (n,) and works on (k, n) arrays
throughout (see ``bayesprobe.model.probe_current``). The only Python loops below are
over configurations and timing repeats. ``check_no_python_loop`` confirms this by
timing: with a Python loop over sets (or points), k sets would cost about k times one
set; vectorised, the fixed call overhead is shared, so t(k sets) / (k t(1 set)) << 1.
"""
from __future__ import annotations

import argparse
import importlib.util
import platform
import statistics
import timeit

import numpy as np

from bayesprobe.model import ModelConfig, probe_current
from bayesprobe.physics.geometry import Probe

PROBES = {
    "planar": Probe("planar", radius=2e-3),
    "cylindrical": Probe("cylindrical", radius=5e-5, length=5e-3),
    "spherical": Probe("spherical", radius=1e-3),
}


def theories_for(geometry: str, have_abr: bool) -> list[str]:
    if geometry == "planar":
        return ["thin-sheath", "auto"]          # auto is thin-sheath for a planar probe
    out = ["thin-sheath", "oml"]
    if have_abr:
        out += ["abr", "auto"]
    return out


def parameter_sets(k: int, electrons: str, seed: int = 1) -> dict:
    rng = np.random.default_rng(seed)
    p = {"n_e": 10 ** rng.uniform(15, 18, k), "V_p": rng.uniform(5, 20, k)}
    p["n_i"] = p["n_e"] * rng.uniform(0.9, 1.1, k)
    if electrons == "maxwellian":
        p["T_e"] = rng.uniform(1, 8, k)
    else:
        p["T_e_cold"] = rng.uniform(1, 4, k)
        p["T_e_hot"] = rng.uniform(6, 20, k)
        p["hot_fraction"] = rng.uniform(0, 0.3, k)
    return p


def time_calls(V, params, cfg, repeats: int) -> list[float]:
    """Wall times (s) of ``repeats`` single probe_current calls (after one warm-up call)."""
    probe_current(V, params, cfg)                       # warm-up (lazy imports, caches)
    return timeit.Timer(lambda: probe_current(V, params, cfg)).repeat(repeat=repeats, number=1)


def time_call(V, params, cfg, repeats: int) -> float:
    """Median wall time (s) of one probe_current call over ``repeats`` runs."""
    return statistics.median(time_calls(V, params, cfg, repeats))


def check_no_python_loop(cfg, V, k: int, repeats: int) -> tuple[float, float]:
    """(t(k sets, 1 point) / (k t(1 set, 1 point)), t(1 set, n points) / (n t(1 set, 1 point))).

    Both are << 1 when the work is vectorised (the per-call overhead is paid once);
    a Python loop over sets or points would make the corresponding ratio about 1.
    """
    many = parameter_sets(k, cfg.electrons)
    one = {name: v[:1] for name, v in many.items()}
    t_one = time_call(V[:1], one, cfg, repeats)
    t_sets = time_call(V[:1], many, cfg, repeats)
    t_points = time_call(V, one, cfg, repeats)
    return t_sets / (k * t_one), t_points / (V.size * t_one)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sets", type=int, default=64)
    ap.add_argument("--points", type=int, default=1000)
    ap.add_argument("--repeats", type=int, default=25)
    args = ap.parse_args(argv)

    have_abr = importlib.util.find_spec("bayesprobe.physics.abr") is not None
    V = np.linspace(-60.0, 40.0, args.points)
    print(f"python {platform.python_version()}, numpy {np.__version__}, {platform.machine()}; "
          f"{args.sets} sets x {args.points} points, median of {args.repeats}"
          + ("" if have_abr else "; ABR not available (abr/auto skipped for cylinder, sphere)"))
    print("median (and minimum, less sensitive to a loaded machine) over the repeats")
    print(f"{'geometry':<12} {'ions':<12} {'electrons':<14} {'ms/call':>9} {'us/set':>9} {'min ms':>8}")
    for geometry, probe in PROBES.items():
        for theory in theories_for(geometry, have_abr):
            for electrons in ("maxwellian", "bi-maxwellian"):
                cfg = ModelConfig(probe=probe, ion="Ar", ion_collection=theory, electrons=electrons)
                params = parameter_sets(args.sets, electrons)
                times = time_calls(V, params, cfg, args.repeats)
                t = statistics.median(times)
                print(f"{geometry:<12} {theory:<12} {electrons:<14} {1e3 * t:9.3f} {1e6 * t / args.sets:9.2f} "
                      f"{1e3 * min(times):8.3f}")

    for geometry, theory in (("cylindrical", "oml"), ("planar", "thin-sheath")):
        cfg = ModelConfig(probe=PROBES[geometry], ion="Ar", ion_collection=theory)
        r_sets, r_points = check_no_python_loop(cfg, V, args.sets, args.repeats)
        print(f"loop check ({geometry}, {theory}): t({args.sets} sets)/({args.sets} t(1 set)) = {r_sets:.4f}, "
              f"t({args.points} pts)/({args.points} t(1 pt)) = {r_points:.4f}  (about 1 would mean a Python loop)")


if __name__ == "__main__":
    main()
