"""Maximum a posteriori point and the local (Laplace) covariance in sampler coordinates."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize

__all__ = ["MapResult", "find_map", "approximate_map", "laplace_covariance"]


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


def _bounds(logpost, d, margin):
    params = getattr(logpost, "parameters", None)
    if params is None:
        return np.full(d, -np.inf), np.full(d, np.inf)
    lo, hi = np.asarray(params.z_lower, float), np.asarray(params.z_upper, float)
    return lo + margin, hi - margin


def _step_scale(logpost, z):
    """Per-coordinate scale of the difference steps: max(|z|, 1), but at most the prior's own
    width in z (its sd for a normal prior, else the bounded range).

    Sampler coordinates are mostly O(1) (logs, volts), but an identity-transformed parameter in
    SI units is not: a leakage conductance of ~1e-6 S with a prior sd of ~1e-5 S. A step of
    1e-4 x max(|z|, 1) = 1e-4 S there spans the whole posterior and makes the curvature (and the
    Laplace proposal built on it) meaningless.
    """
    z = np.asarray(z, float)
    scale = np.maximum(np.abs(z), 1.0)
    params = getattr(logpost, "parameters", None)
    if params is None:
        return scale
    span = np.asarray(params.z_upper, float) - np.asarray(params.z_lower, float)
    for i, p in enumerate(params):
        prior = p.prior
        width = span[i] if np.isfinite(span[i]) else np.inf
        if prior.kind == "normal" and p.transform == "identity" or prior.kind == "log-normal" and p.transform == "log":
            width = min(width, float(prior.sd))
        if np.isfinite(width) and width > 0:
            scale[i] = min(scale[i], width)
    return scale


def _value_and_gradient(logpost, z, h):
    """log-posterior and its central-difference gradient from one vectorised call of 2d+1 rows.

    Where one side of a difference is not finite (a prior bound), the one-sided difference
    is used; where neither is, that component is 0.
    """
    d = z.size
    E = np.diag(h)
    v = logpost(np.vstack([z[None, :], z + E, z - E]))
    f0, fp, fm = v[0], v[1:d + 1], v[d + 1:]
    with np.errstate(invalid="ignore"):
        g = np.where(np.isfinite(fp) & np.isfinite(fm), (fp - fm) / (2 * h),
                     np.where(np.isfinite(fp), (fp - f0) / h, np.where(np.isfinite(fm), (f0 - fm) / h, 0.0)))
    return f0, g


def _fisher_scoring(logpost, z0, *, maxiter: int = 100, ftol: float = 1e-2, free=None):
    """Levenberg-Marquardt-damped Fisher scoring on the log-posterior, inside the prior box.

    Each iteration takes the gradient g and the expected information A (likelihood
    information plus prior curvature, :meth:`LogPosterior.score_and_information`; one
    vectorised call of 2d+1 rows) and tries the step (A + lambda diag A)^-1 g (K. Levenberg,
    Q. Appl. Math. 2, 164 (1944); D. W. Marquardt, J. SIAM 11, 431 (1963)), one row per try.
    The step uses the curvature of the whole parameter set, so strongly correlated parameters
    (a series resistance against T_e: correlation -0.9) cost no extra iterations, where
    L-BFGS-B in diagonally scaled coordinates needed ~170. The damping follows the ratio rho
    of the actual to the predicted gain (Nielsen's rule, H. B. Nielsen, "Damping parameter in
    Marquardt's method", IMM-REP-1999-05, DTU; from memory): lambda *= max(1/3, 1 - (2 rho - 1)^3)
    after a climbing step; after a failed try lambda grows by a factor that doubles each time.
    It starts at 1, so the first steps from a poor start are short. Only the ``free``
    coordinates move (default all). Stops when an accepted step gains less than ``ftol`` in
    log-posterior: the L-BFGS-B and Newton steps that follow finish the optimum. Returns (z,
    log-posterior, information, rows evaluated); (z0, None, None, rows) when the log-posterior
    has no information method (or none at z0).
    """
    info = getattr(logpost, "score_and_information", None)
    d = z0.size
    if info is None:
        return z0, None, None, 0
    h = 1e-6 * _step_scale(logpost, z0)
    lo, hi = _bounds(logpost, d, 2 * h)
    z = np.clip(np.asarray(z0, float), lo, hi)
    free = np.ones(d, bool) if free is None else np.asarray(free, bool)
    rows = 2 * int(free.sum()) + 1
    out = info(z, h, free)
    n_eval = rows
    if out is None:
        return z0, None, None, n_eval
    f, g, A = out
    lam, grow = 1.0, 2.0
    for _ in range(maxiter):
        scale = np.diag(A).copy()
        scale = np.where(np.isfinite(scale) & (scale > 0), scale, 1.0)
        climbed = False
        for _ in range(30):
            try:
                step = np.zeros(d)
                M = (A + lam * np.diag(scale))[np.ix_(free, free)]
                c = np.linalg.cholesky(M)
                step[free] = np.linalg.solve(c.T, np.linalg.solve(c, g[free]))
            except np.linalg.LinAlgError:
                lam *= grow
                grow *= 2.0
                continue
            z_new = np.clip(z + step, lo, hi)
            step = z_new - z
            predicted = float(g @ step - 0.5 * step @ A @ step)
            f_new = float(logpost(z_new[None, :])[0])
            n_eval += 1
            if np.isfinite(f_new) and f_new > f and predicted > 0:
                rho = (f_new - f) / predicted
                lam *= max(1.0 / 3.0, 1.0 - (2.0 * rho - 1.0) ** 3)
                grow = 2.0
                climbed = True
                break
            lam *= grow
            grow *= 2.0
        if not climbed:
            break
        h = 1e-6 * _step_scale(logpost, z_new)
        out = info(z_new, h, free)
        n_eval += rows
        if out is None:
            break
        gain = f_new - f
        z, (f, g, A) = z_new, out
        if gain < ftol:
            break
    return z, f, A, n_eval


def _quasi_newton(logpost, z0, maxiter, information=None):
    """L-BFGS-B on -log p with vectorised central-difference gradients, inside the prior box.

    The coordinates are scaled by the Laplace widths at the start (u = (z - z0) / s), so the
    optimiser sees a problem of unit scale in every direction; the correlations are left to
    its curvature memory. ``information`` (the expected information at z0, from
    :func:`_fisher_scoring`) gives the widths without a finite-difference Hessian.
    """
    d = z0.size
    if information is not None:
        H0, n0 = -np.asarray(information, float), 0
    else:
        H0, _, n0 = _hessian_and_gradient(logpost, z0)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = 1.0 / np.sqrt(np.abs(np.diag(H0)))
    s = np.where(np.isfinite(s) & (s > 0), s, 0.1)
    s = np.minimum(s, 1.0)
    h = 1e-6 * _step_scale(logpost, z0)
    lo, hi = _bounds(logpost, d, 2 * h)
    n_eval = [n0]

    def fun(u):
        n_eval[0] += 2 * d + 1
        f, g = _value_and_gradient(logpost, z0 + s * u, h)
        if not np.isfinite(f):
            return 1e300, np.zeros(d)
        return -f, -g * s

    ulo, uhi = (lo - z0) / s, (hi - z0) / s
    bounds = [(None if not np.isfinite(a) else a, None if not np.isfinite(b) else b) for a, b in zip(ulo, uhi)]
    r = optimize.minimize(fun, np.clip(np.zeros(d), ulo, uhi), jac=True, method="L-BFGS-B", bounds=bounds,
                          options={"maxiter": maxiter, "ftol": 1e-12, "gtol": 1e-6, "maxcor": 20})
    return z0 + s * r.x, r.fun, n_eval[0]


def _newton_polish(logpost, z, f, *, steps=4):
    """Newton steps with the finite-difference Hessian, each kept only if it climbs.

    Stops when the predicted gain g^T A^-1 g / 2 (A = -Hessian) is below 1e-7, when a step
    does not climb, or after ``steps`` steps. Returns the point, its log-posterior, the
    number of rows evaluated and the Hessian *at that point* (None if the last step moved
    it), so the Laplace covariance need not be recomputed.
    """
    n_eval = 0
    lo, hi = _bounds(logpost, z.size, 0.0)
    H_here = None
    for _ in range(steps):
        H, g, n = _hessian_and_gradient(logpost, z)
        n_eval += n
        H_here = H
        A = -0.5 * (H + H.T)
        if not (np.all(np.isfinite(A)) and np.all(np.isfinite(g))):
            break
        try:
            c = np.linalg.cholesky(A)
        except np.linalg.LinAlgError:
            break
        step = np.linalg.solve(c.T, np.linalg.solve(c, g))
        if 0.5 * float(g @ step) < 1e-7:
            break
        z_new = np.clip(z + step, lo, hi)
        f_new = float(logpost(z_new[None, :])[0])
        n_eval += 1
        if not (np.isfinite(f_new) and f_new > f):
            break
        z, f, H_here = z_new, f_new, None
    return z, f, n_eval, H_here


def _scoring_phases(logpost, z):
    """Fisher scoring with the noise parameters (``logpost.noise_mask``) held at their start, then
    with all free. Far from the optimum the residuals are large and a free noise model inflates,
    flattening the posterior into spurious optima (seen on two-temperature sweeps), so the curve
    comes first. Returns (z, log-posterior or None, information, rows evaluated)."""
    n_eval = 0
    noise = getattr(logpost, "noise_mask", None)
    if noise is not None and np.any(noise):
        z, _, _, n_eval = _fisher_scoring(logpost, z, free=~noise)
    z, f, A, n = _fisher_scoring(logpost, z)
    return z, f, A, n_eval + n


def approximate_map(logpost, starts) -> np.ndarray:
    """A point near the posterior maximum, cheaply: Fisher scoring (noise model held, then free)
    from the best of ``starts``, without the L-BFGS-B and Newton refinement or a covariance. For
    seeding another optimisation (a distorted model from the plain one); falls back to
    :func:`find_map` when the log-posterior has no information method."""
    starts = np.array([_clip_inside(logpost, np.asarray(z0, float)) for z0 in np.atleast_2d(starts)])
    values = logpost(starts)
    if not np.any(np.isfinite(values)):
        raise RuntimeError("no starting point has a finite posterior density")
    z = starts[int(np.nanargmax(np.where(np.isfinite(values), values, np.nan)))]
    z, f, _, _ = _scoring_phases(logpost, z)
    if f is None:
        return find_map(logpost, starts, n_local=1).z
    return z


def find_map(logpost, starts, *, maxiter: int = 4000, n_local: int = 2, method: str = "quasi-newton") -> MapResult:
    """Maximise the log-posterior from the ``n_local`` best of ``starts`` (an (m, d) array in z).

    ``method="quasi-newton"`` (default): from each start, Levenberg-Marquardt-damped Fisher
    scoring (:func:`_fisher_scoring`), first with the noise parameters held fixed
    (``logpost.noise_mask``), then with all free; from the best of those, L-BFGS-B with
    central-difference gradients, each gradient one vectorised call of 2d+1 rows, inside the
    prior bounds, scaled by the information (usually a handful of iterations: it confirms the
    optimum); then Newton steps with the finite-difference Hessian. Without an information
    method (fitted Student-t degrees of freedom) L-BFGS-B runs from every start. ``method="nelder-mead"``: the
    derivative-free route (Nelder-Mead, then a Powell polish), 2-7x slower on probe sweeps but
    indifferent to kinks in the model.
    """
    if method not in ("quasi-newton", "nelder-mead"):
        raise ValueError(f"method must be 'quasi-newton' or 'nelder-mead', got {method!r}")
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
    if method == "quasi-newton":
        candidates = []
        for i in order:
            z_fs, f_fs, A, n = _scoring_phases(logpost, starts[i])
            n_eval += n
            candidates.append((z_fs, f_fs, A))
        if all(c[1] is not None for c in candidates):
            candidates = [max(candidates, key=lambda c: c[1])]   # L-BFGS-B finishes the best only
        for z_fs, _, A in candidates:
            x, fun, n = _quasi_newton(logpost, z_fs, maxiter, information=A)
            n_eval += n
            if best is None or fun < best[1]:
                best = (x, fun)
    else:
        for i in order:
            r = optimize.minimize(neg, starts[i], method="Nelder-Mead",
                                  options={"maxiter": maxiter, "xatol": 1e-6, "fatol": 1e-6, "adaptive": True})
            n_eval += r.nfev
            if best is None or r.fun < best[1]:
                best = (r.x, r.fun)
    if method == "quasi-newton":
        z, f, n, H = _newton_polish(logpost, best[0], -best[1])
        n_eval += n
        best = (z, -f)
    else:
        H = None
        r2 = optimize.minimize(neg, best[0], method="Powell",
                               options={"maxiter": maxiter, "xtol": 1e-8, "ftol": 1e-10})
        n_eval += r2.nfev
        if r2.fun < best[1]:
            best = (r2.x, r2.fun)
    z = best[0]
    cov, ok = laplace_covariance(logpost, z, hessian=H)
    return MapResult(z=z, log_posterior=-best[1], cov=cov, hessian_ok=ok, n_evaluations=n_eval)


def _hessian_and_gradient(logpost, z, *, rel_step: float = 1e-4):
    """Central-difference Hessian and gradient of the log-posterior at ``z``.

    All 4 d(d+1)/2 + 1 points go to the vectorised log-posterior in one call; the
    diagonal stencil (z +- 2h e_i) gives the gradient too. Near a prior bound the
    stencil is moved a few steps inside it. Returns (H, g, rows evaluated).
    """
    z = np.asarray(z, float)
    d = z.size
    h = rel_step * _step_scale(logpost, z)
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
    g = np.zeros(d)
    k = 1
    with np.errstate(invalid="ignore"):
        for i, j in pairs:
            fpp, fpm, fmp, fmm = vals[k:k + 4]
            k += 4
            H[i, j] = H[j, i] = (fpp - fpm - fmp + fmm) / (4 * h[i] * h[j])
            if i == j:
                g[i] = (fpp - fmm) / (4 * h[i])
    return H, g, len(pts)


def laplace_covariance(logpost, z, *, rel_step: float = 1e-4, hessian=None):
    """Inverse of the negative Hessian of the log-posterior at ``z`` (central differences).

    All 2d^2+1 evaluation points are sent to the (vectorised) log-posterior in one
    call (skipped when ``hessian`` at ``z`` is given). Returns (cov, ok); when the
    Hessian is not positive definite the eigenvalues are clipped and ``ok`` is False.
    """
    z = np.asarray(z, float)
    d = z.size
    params = getattr(logpost, "parameters", None)
    H = _hessian_and_gradient(logpost, z, rel_step=rel_step)[0] if hessian is None else np.asarray(hessian, float)
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
