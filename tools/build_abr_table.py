#!/usr/bin/env python
"""Build the radial cold-ion (Allen-Boyd-Reynolds) collection table.

Model
-----
Cold ions fall radially from rest towards an absorbing cylinder or sphere,
electrons are Boltzmann. With rho = r / lambda_D (lambda_D the bulk electron
Debye length) and eta = e (V_plasma - V(r)) / kT_e >= 0, Poisson's equation
reads

    (1/rho^k) d/drho (rho^k d eta/drho) = J / (rho^k sqrt(eta)) - exp(-eta)

with k = 1 for a cylinder and k = 2 for a sphere, and J the normalised ion
current:

    cylinder: J = (I/L) / (2 pi n0 e lambda_D sqrt(2 kT_e / M))
    sphere:   J = I / (4 pi n0 e lambda_D^2 sqrt(2 kT_e / M)).

The ion density J / (rho^k sqrt(eta)) follows from flux conservation with
ion speed sqrt(2 e (V_plasma - V) / M). Far from the probe the plasma is
quasi-neutral, rho^k = J exp(eta) / sqrt(eta) on the eta < 1/2 branch, whose
turning point rho_s^k = J sqrt(2 e) at eta = 1/2 is the Bohm point.

Numerical method
----------------
For each J of a log-uniform grid the profile is integrated inward in
t = ln(rho), where the equation becomes

    d^2 eta/dt^2 = -(k - 1) d eta/dt + rho^(2-k) J / sqrt(eta) - rho^2 exp(-eta),

with scipy.integrate.solve_ivp (Radau IIA, analytic Jacobian). The start is on
the quasi-neutral branch at rho_0 = max(60, 4 rho_s) with the quasi-neutral
slope d eta/dt = -2 k eta / (1 - 2 eta); eta_0 includes two fixed-point
corrections for the Laplacian of the quasi-neutral profile, which removes most
of the small plasma-frequency oscillation the bare quasi-neutral start would
excite (the answer does not depend on it; the step count does).

Every profile is monotone inside the Bohm point, so the radius rho(eta; J) at
which each eta of the output grid is reached is found by root-finding on the
dense output. A probe of radius xi = rho(eta_p; J) at bias eta_p then collects

    i = I / (A_p n0 e sqrt(kT_e / M)) = sqrt(2) J / xi^k,

A_p = 2 pi r_p L (cylinder side) or 4 pi r_p^2 (sphere). For each eta of the
grid, ln i is interpolated in ln xi across the J grid with a cubic spline and
evaluated on a uniform ln xi grid. The script reports (i) the change when every
second J is dropped, an upper bound on the J-direction interpolation error, and
(ii) the error of bilinear interpolation in (ln xi, ln eta, ln i) at the cell
centres, which is what bayesprobe.physics.abr does at run time.

Output: bayesprobe/physics/data/abr_table.npz with arrays ``log_xi``,
``log_eta``, ``log_i_cylindrical``, ``log_i_spherical`` (natural logs) and
``meta`` (strings describing the generation).

Usage: python tools/build_abr_table.py [--workers N] [--output PATH]
"""
from __future__ import annotations

import argparse
import datetime
import math
import os
import sys
import time
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import scipy
from scipy.integrate import solve_ivp
from scipy.interpolate import CubicSpline
from scipy.optimize import brentq

GEOMETRY_K = {"cylindrical": 1, "spherical": 2}

# Output grid (uniform in ln xi and ln eta).
XI_MIN, XI_MAX, N_XI = 0.05, 1000.0, 100
ETA_MIN, ETA_MAX, N_ETA = 0.5, 200.0, 80

# J grid: wide enough that for every eta of the output grid the radii
# rho(eta; J) span [XI_MIN, XI_MAX] (checked below).
J_RANGE = {"cylindrical": (3e-3, 1e3), "spherical": (1e-4, 1e6)}
J_PER_DECADE = 24

RTOL = 1e-10
ATOL = (1e-13, 1e-8)          # (eta, d eta / d ln rho)
RHO_START_MIN = 60.0
RHO_START_BOHM_FACTOR = 4.0
RHO_STOP = 0.01 * XI_MIN       # integrate well past the smallest xi
ETA_STOP = 1.2 * ETA_MAX       # ... or until eta is past the largest eta
TINY = 1e-300
SQRT_2E = math.sqrt(2.0 * math.e)


def bohm_radius(J: float, k: int) -> float:
    """rho_s with rho_s^k = J sqrt(2e): turning point of the quasi-neutral branch."""
    return (J * SQRT_2E) ** (1.0 / k)


def quasineutral_eta(J: float, k: int, rho: float, laplacian: float = 0.0) -> float:
    """eta on the eta < 1/2 branch of J/(rho^k sqrt(eta)) - exp(-eta) = laplacian."""
    def f(x):          # x = ln eta
        eta = math.exp(x)
        return J / (rho ** k * math.exp(0.5 * x)) - math.exp(-eta) - laplacian
    target = k * math.log(rho) - math.log(J)
    lo = -2.0 * target - 5.0        # ion density far above electron density here
    hi = math.log(0.5)
    while f(lo) <= 0.0:
        lo -= 5.0
    if f(hi) >= 0.0:
        raise ValueError(f"no quasi-neutral solution at rho={rho} for J={J}")
    return math.exp(brentq(f, lo, hi, xtol=1e-15, rtol=1e-15, maxiter=500))


def initial_state(J: float, k: int, rho0: float, corrections: int = 2):
    """(eta, d eta/d ln rho) at rho0 on the (Laplacian-corrected) quasi-neutral branch."""
    eta = quasineutral_eta(J, k, rho0)
    for _ in range(corrections):
        # Laplacian of the quasi-neutral profile, in t = ln rho:
        # eta_t = -2k eta/(1 - 2 eta), eta_tt = 4 k^2 eta / (1 - 2 eta)^3.
        eta_t = -2.0 * k * eta / (1.0 - 2.0 * eta)
        eta_tt = 4.0 * k * k * eta / (1.0 - 2.0 * eta) ** 3
        lap = (eta_tt + (k - 1) * eta_t) / rho0 ** 2
        eta = quasineutral_eta(J, k, rho0, lap)
    return eta, -2.0 * k * eta / (1.0 - 2.0 * eta)


def solve_profile(J: float, k: int, rtol: float = RTOL, atol=ATOL,
                  rho_stop: float = RHO_STOP, eta_stop: float = ETA_STOP):
    """Integrate the potential profile for normalised current J inward in ln rho."""
    rho0 = max(RHO_START_MIN, RHO_START_BOHM_FACTOR * bohm_radius(J, k))
    eta0, g0 = initial_state(J, k, rho0)
    km1 = float(k - 1)
    p = 2 - k

    def rhs(t, y):
        eta = y[0] if y[0] > TINY else TINY
        rho = math.exp(t)
        return np.array([y[1], -km1 * y[1] + rho ** p * J / math.sqrt(eta)
                         - rho * rho * math.exp(-eta)])

    def jac(t, y):
        eta = y[0] if y[0] > TINY else TINY
        rho = math.exp(t)
        d = -0.5 * rho ** p * J * eta ** -1.5 + rho * rho * math.exp(-eta)
        return np.array([[0.0, 1.0], [d, -km1]])

    def past_eta_stop(t, y):
        return y[0] - eta_stop
    past_eta_stop.terminal = True

    sol = solve_ivp(rhs, (math.log(rho0), math.log(rho_stop)), [eta0, g0],
                    method="Radau", jac=jac, rtol=rtol, atol=list(atol),
                    events=past_eta_stop, dense_output=True)
    if sol.status < 0:
        raise RuntimeError(f"integration failed for J={J}, k={k}: {sol.message}")
    return sol


def log_radius_at(sol, eta_grid: np.ndarray) -> np.ndarray:
    """ln rho where the profile first reaches each eta (NaN if it never does)."""
    t, eta = sol.t, sol.y[0]
    out = np.full(eta_grid.shape, np.nan)
    # Only the part inside the Bohm point is used (eta >= 1/2 there, monotone).
    for j, target in enumerate(eta_grid):
        idx = np.flatnonzero(eta >= target)
        if idx.size == 0:
            continue
        n = idx[0]
        if n == 0:
            raise RuntimeError("profile starts above a requested eta")
        out[j] = brentq(lambda tt: sol.sol(tt)[0] - target, t[n], t[n - 1],
                        xtol=1e-13, rtol=1e-15)
    return out


def _job(args):
    geometry, J, log_eta = args
    k = GEOMETRY_K[geometry]
    sol = solve_profile(J, k)
    # Monotonicity check on the part of the profile that is used.
    eta = sol.y[0]
    used = eta >= 0.9 * np.exp(log_eta[0])
    if np.any(np.diff(eta[used]) <= 0.0):
        raise RuntimeError(f"non-monotone profile for J={J}, {geometry}")
    return geometry, J, log_radius_at(sol, np.exp(log_eta)), sol.t.size


def j_grid(geometry: str) -> np.ndarray:
    lo, hi = J_RANGE[geometry]
    n = int(round(J_PER_DECADE * math.log10(hi / lo))) + 1
    return np.geomspace(lo, hi, n)


def assemble(k: int, J: np.ndarray, log_rho: np.ndarray, log_xi: np.ndarray,
             log_eta: np.ndarray) -> np.ndarray:
    """ln i on the (ln xi, ln eta) grid from the per-J radii log_rho[m, j]."""
    out = np.empty((log_xi.size, log_eta.size))
    for j in range(log_eta.size):
        x = log_rho[:, j]
        ok = np.isfinite(x)
        x = x[ok]
        y = 0.5 * math.log(2.0) + np.log(J[ok]) - k * x
        if np.any(np.diff(x) <= 0.0):
            raise RuntimeError(f"xi(J) not increasing at eta={math.exp(log_eta[j]):.4g}")
        if x[0] > log_xi[0] or x[-1] < log_xi[-1]:
            raise RuntimeError(
                f"J grid does not cover xi in [{math.exp(log_xi[0])}, {math.exp(log_xi[-1])}] "
                f"at eta={math.exp(log_eta[j]):.4g}: covers [{math.exp(x[0]):.4g}, "
                f"{math.exp(x[-1]):.4g}]")
        out[:, j] = CubicSpline(x, y)(log_xi)
    return out


def bilinear_midpoint_error(log_xi, log_eta, table, log_i_mid):
    """Max |bilinear - reference| in ln i at cell centres (reference on midpoints)."""
    lin = 0.25 * (table[:-1, :-1] + table[1:, :-1] + table[:-1, 1:] + table[1:, 1:])
    return float(np.max(np.abs(lin - log_i_mid)))


def main(argv=None):
    here = os.path.dirname(os.path.abspath(__file__))
    default_out = os.path.join(here, os.pardir, "bayesprobe", "physics", "data", "abr_table.npz")
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--workers", type=int, default=min(2, os.cpu_count() or 1))
    ap.add_argument("--output", default=os.path.normpath(default_out))
    args = ap.parse_args(argv)

    log_xi = np.linspace(math.log(XI_MIN), math.log(XI_MAX), N_XI)
    log_eta = np.linspace(math.log(ETA_MIN), math.log(ETA_MAX), N_ETA)
    # Cell centres, used only for the bilinear-error report.
    log_xi_mid = 0.5 * (log_xi[1:] + log_xi[:-1])
    log_eta_mid = 0.5 * (log_eta[1:] + log_eta[:-1])
    log_eta_all = np.concatenate([log_eta, log_eta_mid])

    tasks = [(g, float(J), log_eta_all) for g in GEOMETRY_K for J in j_grid(g)]
    # Expensive (large-J) solves first, for load balance.
    tasks.sort(key=lambda a: -bohm_radius(a[1], GEOMETRY_K[a[0]]))
    t0 = time.time()
    results = {}
    steps = 0
    if args.workers > 1:
        with ProcessPoolExecutor(max_workers=args.workers) as pool:
            for g, J, lr, n in pool.map(_job, tasks, chunksize=1):
                results[(g, J)] = lr
                steps += n
    else:
        for task in tasks:
            g, J, lr, n = _job(task)
            results[(g, J)] = lr
            steps += n
    elapsed = time.time() - t0
    print(f"{len(tasks)} profiles, {steps} accepted steps, {elapsed:.1f} s", file=sys.stderr)

    tables = {}
    ne = log_eta.size
    for g, k in GEOMETRY_K.items():
        J = j_grid(g)
        lr = np.array([results[(g, float(x))] for x in J])
        table = assemble(k, J, lr[:, :ne], log_xi, log_eta)
        half = assemble(k, J[::2], lr[::2, :ne], log_xi, log_eta)
        mid = assemble(k, J, lr[:, ne:], log_xi_mid, log_eta_mid)
        err_j = float(np.max(np.abs(half - table)))
        err_bl = bilinear_midpoint_error(log_xi, log_eta, table, mid)
        print(f"{g}: J-spline change with half the J points: max |d ln i| = {err_j:.2e}; "
              f"bilinear error at cell centres: max |d ln i| = {err_bl:.2e}", file=sys.stderr)
        tables[g] = (table, err_j, err_bl)

    meta = np.array([
        "radial cold-ion collection (Allen-Boyd-Reynolds model), normalised current "
        "i = I / (A_p n0 e sqrt(kTe/M)) on a uniform (ln xi, ln eta) grid",
        "xi = r_p / lambda_De, eta = e (V_plasma - V_probe) / kTe, natural logs",
        "solver: scipy.integrate.solve_ivp Radau, analytic Jacobian, "
        f"rtol={RTOL:g}, atol={ATOL[0]:g} (eta), {ATOL[1]:g} (d eta/d ln rho)",
        f"start: Laplacian-corrected quasi-neutral branch at rho=max({RHO_START_MIN:g}, "
        f"{RHO_START_BOHM_FACTOR:g} rho_Bohm)",
        f"J grid: {J_PER_DECADE} per decade, cylindrical {J_RANGE['cylindrical']}, "
        f"spherical {J_RANGE['spherical']}; cubic spline of ln i in ln xi at each eta",
        "J-spline error bound (max |d ln i|, half J grid): "
        f"cylindrical {tables['cylindrical'][1]:.1e}, spherical {tables['spherical'][1]:.1e}",
        "bilinear error at cell centres (max |d ln i|): "
        f"cylindrical {tables['cylindrical'][2]:.1e}, spherical {tables['spherical'][2]:.1e}",
        f"built {datetime.datetime.now(datetime.timezone.utc).strftime('%Y-%m-%d %H:%M UTC')} "
        f"with numpy {np.__version__}, scipy {scipy.__version__}, python {sys.version.split()[0]}",
    ])
    os.makedirs(os.path.dirname(os.path.abspath(args.output)), exist_ok=True)
    np.savez_compressed(
        args.output,
        log_xi=log_xi,
        log_eta=log_eta,
        log_i_cylindrical=tables["cylindrical"][0],
        log_i_spherical=tables["spherical"][0],
        meta=meta,
    )
    print(f"wrote {args.output} ({os.path.getsize(args.output) / 1024:.0f} kB)", file=sys.stderr)


if __name__ == "__main__":
    main()
