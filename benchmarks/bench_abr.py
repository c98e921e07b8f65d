"""Timing of the radial cold-ion table look-up (a plain script, not a test).

Evaluates ``abr_current`` on (sets x points) arrays in the three shapes a
sampler produces, and prints the minimum and median time per call (ms):

* radius per parameter set, bias per point and set: xi (k, 1), eta (k, n);
* radius per parameter set, one bias vector:        xi (k, 1), eta (n,);
* both full:                                        xi (k, n), eta (k, n).

The first two take the "few radii" branch (interpolate in ln xi once per
radius, then in ln eta per point); the third the general bilinear branch.

    python benchmarks/bench_abr.py [--sets 64] [--points 1000] [--repeats 30]

Measured on the development VM (2 shared cores, numpy 2.4, Python 3.11),
k = 64, n = 1000, minimum of 30 repeats:

=====================================  ==============  ============
shape                                   default malloc  tuned malloc
=====================================  ==============  ============
xi (64,1), eta (64,1000)                0.5-1.3 ms      0.51 ms
xi (64,1), eta (1000,)                  0.32-0.37 ms    0.32 ms
xi (64,1000), eta (64,1000)             2.5 ms          1.13 ms
=====================================  ==============  ============

The spread in the first column is page faults: glibc hands the freed
temporaries (0.5-2 MB each) back to the system after each call and the next
call faults them in again; with MALLOC_MMAP_THRESHOLD_=16777216
MALLOC_TRIM_THRESHOLD_=134217728 in the environment (second column) only the
arithmetic remains. The first call also loads the table (a few ms).
"""
from __future__ import annotations

import argparse
import platform
import statistics
import time
import timeit

import numpy as np

from bayesprobe.physics.abr import abr_current


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sets", type=int, default=64)
    ap.add_argument("--points", type=int, default=1000)
    ap.add_argument("--repeats", type=int, default=30)
    args = ap.parse_args(argv)
    k, n = args.sets, args.points

    t0 = time.perf_counter()
    abr_current(1.0, 1.0, "cylindrical")
    print(f"first call (loads the table): {(time.perf_counter() - t0) * 1e3:.2f} ms")

    rng = np.random.default_rng(1)
    xi = np.exp(rng.uniform(np.log(0.1), np.log(500.0), (k, 1)))
    eta = np.exp(rng.uniform(np.log(0.3), np.log(300.0), (k, n)))
    cases = {
        f"xi ({k},1), eta ({k},{n})": (xi, eta),
        f"xi ({k},1), eta ({n},)": (xi, eta[0]),
        f"xi ({k},{n}), eta ({k},{n})": (np.broadcast_to(xi, (k, n)).copy(), eta),
    }
    print(f"numpy {np.__version__}, python {platform.python_version()}, {platform.machine()}")
    for geometry in ("cylindrical", "spherical"):
        for name, (x, e) in cases.items():
            number = 20
            times = [t / number * 1e3 for t in timeit.repeat(
                lambda: abr_current(x, e, geometry), number=number, repeat=args.repeats)]
            print(f"{geometry:12s} {name:28s} min {min(times):.3f} ms   "
                  f"median {statistics.median(times):.3f} ms")


if __name__ == "__main__":
    main()
