"""Fingerprint of fit results on fixed simulated sweeps: run it before and after a refactor.

    python tools/fingerprint_fits.py before.json        # on the old checkout
    python tools/fingerprint_fits.py after.json         # on the new one
    python tools/fingerprint_fits.py --compare before.json after.json

Every fit uses the public API only (simulate, fit), so the script runs unchanged on any
checkout since the API appeared (point PYTHONPATH at the checkout to fingerprint; the
script takes its cases from this checkout's tests/cases). The sweeps are the first sweeps of
the calibration set (tests/cases/calibration.py), plus two-temperature and distorted cases; each is fitted with fixed seeds by both engines. ``--compare`` prints the largest
relative difference of every summarised number (expect exactly 0 for a pure refactor).
"""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path


import bayesprobe as bp

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from cases.calibration import random_case as calibration_case  # noqa: E402  (public API only)


def cases(n_calibration: int):
    for i in range(n_calibration):
        cfg, sim = calibration_case(i)
        yield f"cal{i}", cfg, sim, {}
    two = bp.ModelConfig(electrons="bi-maxwellian")
    sim = bp.simulate({"n_e": 3e16, "T_e_cold": 1.5, "T_e_hot": 8.0, "hot_fraction": 0.08, "V_p": 6.0},
                      config=two, n_points=500, seed=7)
    yield "two-temperature", two.with_(electrons="maxwellian"), sim, {"model": "auto"}
    rf = bp.ModelConfig(rf_fluctuation=True)
    sim = bp.simulate({"n_e": 1e16, "T_e": 3.0, "V_p": 5.0, "V_rf": 3.0}, config=rf, n_points=400, seed=11)
    yield "rf", rf.undistorted(), sim, {"distortions": "rf"}


def fingerprint(n_calibration: int) -> dict:
    out = {}
    for name, cfg, sim, extra in cases(n_calibration):
        for engine in ("fast", "mcmc"):
            res = bp.fit(sim.sweep, config=cfg, seed=5, progress=False, engine=engine, **extra)
            s = res.summary()
            out[f"{name}/{engine}"] = {
                "model": s["model"],
                "parameters": {k: {f: v[f] for f in ("mean", "sd", "median", "ci_low", "ci_high")}
                               for k, v in s["parameters"].items()},
                "classical": s["classical"],
                "engine": s["diagnostics"].get("engine"),
                "converged": s["diagnostics"].get("converged"),
            }
            print(name, engine, s["model"], file=sys.stderr)
    return out


def _numbers(obj, prefix=""):
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _numbers(v, f"{prefix}/{k}")
    elif isinstance(obj, (int, float)) and not isinstance(obj, bool):
        yield prefix, float(obj)


def compare(a_path, b_path) -> int:
    a, b = (json.load(open(p)) for p in (a_path, b_path))
    na, nb = dict(_numbers(a)), dict(_numbers(b))
    missing = sorted(set(na) ^ set(nb))
    worst, where = 0.0, None
    for k in set(na) & set(nb):
        x, y = na[k], nb[k]
        d = abs(x - y) / max(abs(x), abs(y), 1e-300) if x != y else 0.0
        if d > worst:
            worst, where = d, k
    strings = [k for k in a if a[k].get("model") != b.get(k, {}).get("model")
               or a[k].get("engine") != b.get(k, {}).get("engine")]
    print(f"{len(set(na) & set(nb))} numbers compared; largest relative difference {worst:.3g}"
          + (f" at {where}" if where else "") + f"; {len(missing)} present on one side only"
          + f"; {len(strings)} fits with another model or engine")
    return 0 if worst == 0 and not missing and not strings else 1


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("paths", nargs="+")
    ap.add_argument("--compare", action="store_true")
    ap.add_argument("--sweeps", type=int, default=8, help="calibration-set sweeps (default 8)")
    args = ap.parse_args(argv)
    if args.compare:
        return compare(*args.paths)
    with open(args.paths[0], "w") as fh:
        json.dump(fingerprint(args.sweeps), fh, indent=1, allow_nan=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
