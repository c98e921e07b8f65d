"""Maximum a posteriori point and the local (Laplace) covariance in sampler coordinates."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize

__all__ = ["MapResult", "find_map", "laplace_covariance"]


@dataclass
class MapResult:
    z: np.ndarray
    log_posterior: float
    cov: np.ndarray
    hessian_ok: bool
    n_evaluations: int


def _clip_inside(logpost, z):
    lo, hi = logpost.parameters.z_lower, logpost.parameters.z_upper
    span = np.where(np.isfinite(hi - lo), hi - lo, 1.0)
    return np.clip(z, lo + 1e-6 * span, hi - 1e-6 * span)


def find_map(logpost, starts, *, maxiter: int = 4000, n_local: int = 2) -> MapResult:
    """Maximise the log-posterior: Nelder-Mead from the ``n_local`` best of ``starts``,
    then a Powell polish of the best optimum.

    ``starts`` is an array (m, d) of starting points in z coordinates.
    """
    starts = np.atleast_2d(starts)
    best = None
    n_eval = 0

    def neg(z):
        v = logpost(z[None, :])[0]
        return 1e300 if not np.isfinite(v) else -v

    starts = np.array([_clip_inside(logpost, np.asarray(z0, float)) for z0 in starts])
    values = logpost(starts)                       # one vectorised call for all starts
    order = [i for i in np.argsort(-values) if np.isfinite(values[i])][:n_local]
    if not order:
        raise RuntimeError("no starting point has a finite posterior density")
    for i in order:
        r = optimize.minimize(neg, starts[i], method="Nelder-Mead",
                              options={"maxiter": maxiter, "xatol": 1e-6, "fatol": 1e-6, "adaptive": True})
        n_eval += r.nfev
        if best is None or r.fun < best[1]:
            best = (r.x, r.fun)
    r2 = optimize.minimize(neg, best[0], method="Powell", options={"maxiter": maxiter, "xtol": 1e-8, "ftol": 1e-10})
    n_eval += r2.nfev
    if r2.fun < best[1]:
        best = (r2.x, r2.fun)
    z = best[0]
    cov, ok = laplace_covariance(logpost, z)
    return MapResult(z=z, log_posterior=-best[1], cov=cov, hessian_ok=ok, n_evaluations=n_eval)


def laplace_covariance(logpost, z, *, rel_step: float = 1e-4):
    """Inverse of the negative Hessian of the log-posterior at ``z`` (central differences).

    All 2d^2+1 evaluation points are sent to the (vectorised) log-posterior in one
    call. Returns (cov, ok); when the Hessian is not positive definite the
    eigenvalues are clipped and ``ok`` is False.
    """
    z = np.asarray(z, float)
    d = z.size
    h = rel_step * np.maximum(np.abs(z), 1.0)
    params = getattr(logpost, "parameters", None)
    if params is not None:
        # an optimum on (or next to) a prior bound: take the curvature a few steps inside it
        lo, hi = params.z_lower, params.z_upper
        inner_lo = np.where(np.isfinite(lo), lo + 3 * h, -np.inf)
        inner_hi = np.where(np.isfinite(hi), hi - 3 * h, np.inf)
        z = np.where(inner_lo < inner_hi, np.clip(z, inner_lo, inner_hi), z)
    pts = [z]
    pairs = []
    for i in range(d):
        for j in range(i, d):
            for si, sj in ((1, 1), (1, -1), (-1, 1), (-1, -1)):
                p = z.copy()
                p[i] += si * h[i]
                p[j] += sj * h[j]
                pts.append(p)
            pairs.append((i, j))
    vals = logpost(np.array(pts))
    H = np.zeros((d, d))
    k = 1
    with np.errstate(invalid="ignore"):
        for i, j in pairs:
            fpp, fpm, fmp, fmm = vals[k:k + 4]
            k += 4
            H[i, j] = H[j, i] = (fpp - fpm - fmp + fmm) / (4 * h[i] * h[j])
    neg_h = -H
    ok = bool(np.all(np.isfinite(neg_h)))
    if not ok:
        # unusable curvature: fall back to a width of a tenth of the prior range (or 1 in z)
        neg_h = np.where(np.isfinite(neg_h), neg_h, 0.0)
        if params is not None:
            span = np.where(np.isfinite(params.z_upper - params.z_lower), params.z_upper - params.z_lower, 10.0)
        else:
            span = np.full(d, 10.0)
        fallback = 1.0 / (0.1 * span) ** 2
        neg_h += np.diag(np.where(np.diag(neg_h) > 0, 0.0, fallback))
    w, v = np.linalg.eigh(0.5 * (neg_h + neg_h.T))
    if np.any(w <= 0):
        ok = False
    # no direction wider than a tenth of the widest prior range (flat directions at a bound)
    if params is not None and np.any(np.isfinite(params.z_upper - params.z_lower)):
        widest = float(np.max((params.z_upper - params.z_lower)[np.isfinite(params.z_upper - params.z_lower)]))
    else:
        widest = 10.0
    w = np.maximum(w, 1.0 / (0.1 * widest) ** 2)
    cov = (v / w) @ v.T
    return cov, ok
