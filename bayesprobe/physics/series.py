"""Series (circuit) resistance: the measured current solves I = f(V - I R).

A resistance R between the bias source and the probe surface (sense resistor,
cable, RF chokes, the plasma's own return path) means the sheath sees
V_s = V - I R, so the measured current solves the implicit equation
``I = f(V - I R)`` with f the plasma characteristic (Godyak & Demidov 2011;
Hutchinson 2002 ch. 3). f is increasing in V, so g(I) = I - f(V - I R) is strictly
increasing and has one root, bracketed by 0 and f(V). :func:`series_resistance_current`
solves it for all walkers and points at once by Newton steps with the analytic slope
of the characteristic (bisection whenever a step leaves the bracket), iterating only on
the elements not yet converged, and takes one last Newton step on each converged element. A
Newton step is used only strictly inside the bracket and when it at least halves the step
before the last (the safeguard of Numerical Recipes' ``rtsafe``): a flat saturation branch
next to the steep exponential otherwise makes Newton cycle between the two. For a pure
exponential f = a exp(V/T) the root is I = (T/R) W(R a exp(V/T) / T) with Lambert's W, which
the tests use as the outside check.

The likelihood uses a cheaper route with no iteration (:func:`hermite_series_current`): with
the sheath at v the applied bias is W(v) = v + R f(v) and the current f(v), a parametric form
of the measured characteristic. f and f' are evaluated once at about 200 sheath-voltage nodes
per parameter set (:func:`series_nodes`: spaced 0.15 T_e around the knee, geometrically graded
towards V_p, V_p +- V_rf and the ends of the range), and every point is interpolated on (W, f)
by a monotone cubic Hermite step (slopes dI/dW = f'/(1 + R f') limited as Fritsch & Carlson
1980). Against the Newton solution its error is below 1e-4 of max |I| for thin-sheath and OML
ions (tests/test_series_solvers.py); the ABR table's kinks at unknown voltages keep Newton
there.

:func:`series_current` is the driver :func:`bayesprobe.probe_current` uses: it picks the
solver and hands it the characteristic of the model and its parameter columns.
"""
from __future__ import annotations

import numpy as np

from ._checks import finite as _finite
from ._checks import positive as _positive

__all__ = ["series_current", "series_resistance_current", "series_nodes", "hermite_series_current",
           "SERIES_SOLVERS", "SERIES_RTOL", "SERIES_NODE_SPACING", "INTERPOLATE_MIN_POINTS"]

#: the two ways of solving the series equation (see :func:`series_current`)
SERIES_SOLVERS = ("newton", "interpolate")
#: below this many points per parameter set the interpolated series solve is not worth its nodes
INTERPOLATE_MIN_POINTS = 50

#: series-resistance solve: stop when |I - f(V - I R)| <= SERIES_RTOL * max(|I|, 1e-6 max_row |I|), then take
#: one last Newton step. With the exact slope that step leaves an error of order (residual)^2, far below
#: 1e-10 |I|; the residual tolerance itself is 1e-4 of the smallest proportional noise a sweep shows (1 %),
#: and because the last step is always taken, elements stopping one iteration earlier or later differ by
#: that quadratic remainder only, so the log-posterior stays smooth for finite-difference derivatives.
SERIES_RTOL = 1e-6


def series_resistance_current(f, V, R, *, fprime=None, rtol: float = SERIES_RTOL, max_iter: int = 60,
                              step: float = 1e-6):
    """Solve I = f(V - I R) for every element at once; returns I with the broadcast shape.

    Parameters
    ----------
    f : callable
        The plasma characteristic, increasing in its argument and elementwise: ``f(v)``
        returns the current at every voltage of any array ``v`` (its own parameters
        scalars; :func:`bayesprobe.probe_current` handles parameter arrays).
    V : array_like
        Applied bias (V).
    R : array_like
        Series resistance (ohm), >= 0, broadcast against ``V`` (e.g. shape (k, 1)).
    fprime : callable, optional
        df/dv; without it the slope is a forward difference with ``step`` (V).
    rtol : float
        Residual tolerance relative to max(|I|, 1e-6 max_row |I|) (an absolute floor near
        the floating potential where I passes through zero); a final Newton step follows.
    """
    _finite("V", V)
    _positive("R", R, allow_zero=True)
    if fprime is None:
        def both(v, flat):
            fv = f(v)
            return fv, (f(v + step) - fv) / step
    else:
        def both(v, flat):
            return f(v), fprime(v)
    return _solve_series(both, np.asarray(V, float), np.asarray(R, float), rtol, max_iter)


def _solve_series(f, V, R, rtol=SERIES_RTOL, max_iter=60):
    """Safeguarded Newton iteration on g(I) = I - f(V - I R), g'(I) = 1 + R f'(V - I R) >= 1.

    ``f(v, flat)`` returns the characteristic and its slope at voltages ``v`` for the
    elements ``flat`` (indices into the broadcast grid of V and R; ``None`` = the whole
    grid), so after the first step the iteration runs on the elements not yet converged
    only. The start is one Newton step from I = 0; a step leaving the bracket
    [min(0, f(V)), max(0, f(V))] (shrunk as the signs of g are seen) is replaced by
    bisection. Converged elements take one last Newton step.
    """
    V, R = np.broadcast_arrays(np.asarray(V, float), np.asarray(R, float))
    shape = V.shape
    f0, s0 = f(V, None)
    f0 = np.broadcast_to(f0, shape)
    lo = np.minimum(f0, 0.0)
    hi = np.maximum(f0, 0.0)
    I = np.clip(f0 / (1.0 + R * np.maximum(s0, 0.0)), lo, hi)          # one Newton step from I = 0
    Ig = np.abs(f0)
    row = np.max(Ig, axis=-1, keepdims=True) if Ig.ndim else Ig
    floor = 1e-6 * row                                                   # absolute floor where I passes through 0
    dx_old = hi - lo                                                     # the step before the last (rtsafe)
    active = None                                                        # None: every element (no gathers)
    Vf, Rf = V, R
    for _ in range(max_iter):
        if active is None:
            Ia, Ra, fa, sa = I, R, *f(V - I * R, None)
            lo_a, hi_a, fl, dxo = lo, hi, floor, dx_old
        else:
            Ia, Ra = I[active], Rf[active]
            fa, sa = f(Vf[active] - Ia * Ra, active)
            lo_a, hi_a, fl, dxo = lo[active], hi[active], floor[active], dx_old[active]
        g = Ia - fa
        lo_a = np.where(g < 0, Ia, lo_a)
        hi_a = np.where(g > 0, Ia, hi_a)
        step = g / (1.0 + Ra * np.maximum(sa, 0.0))
        newton = Ia - step
        # Newton only strictly inside the bracket and at least halving the step before the last
        # (Numerical Recipes' rtsafe): a flat saturation branch next to the steep exponential
        # otherwise sends Newton back and forth between the two ends of the bracket
        tol = rtol * np.maximum(np.abs(Ia), fl) + 1e-300
        done = np.abs(g) <= tol
        inside = np.isfinite(newton) & (newton > lo_a) & (newton < hi_a) & (done | (2.0 * np.abs(step) <= np.abs(dxo)))
        I_new = np.where(inside, newton, np.where(done, Ia, 0.5 * (lo_a + hi_a)))
        dx_new = np.abs(I_new - Ia)
        done |= hi_a - lo_a <= tol
        if active is None:
            I = np.array(np.broadcast_to(I_new, shape)).ravel()
            lo = np.array(np.broadcast_to(lo_a, shape)).ravel()
            hi = np.array(np.broadcast_to(hi_a, shape)).ravel()
            floor = np.array(np.broadcast_to(fl, shape)).ravel()
            dx_old = np.array(np.broadcast_to(np.maximum(dxo, dx_new), shape)).ravel()
            dx_last = np.array(np.broadcast_to(dx_new, shape)).ravel()
            Vf, Rf = V.ravel(), R.ravel()
            active = np.flatnonzero(~np.broadcast_to(done, shape))
        else:
            dx_old[active] = dx_last[active]
            dx_last[active] = dx_new
            I[active], lo[active], hi[active] = I_new, lo_a, hi_a
            active = active[~done]
        if active.size == 0:
            break
    return I.reshape(shape)



#: core node spacing, in units of the smallest electron temperature of the row (see
#: :func:`series_nodes`); the cubic Hermite error on an exponential is h^4/384 = 1.3e-6 relative
SERIES_NODE_SPACING = 0.15
#: the core reaches this many temperatures below V_p - V_rf and this many above V_p + V_rf
_CORE_BELOW, _CORE_ABOVE = 8.0, 3.0
#: from the core down to 20 temperatures below V_p - V_rf (the electron current there is e^-20 =
#: 2e-9 of its saturation value) the spacing grows geometrically with the distance from V_p by
#: this ratio (0.4-1 T_e: Hermite error (h/T_e)^4/384 times an electron current below e^-8 I_es)
_MID_BELOW, _MID_RATIO = 20.0, 1.05
#: geometric growth of the node spacing beyond (spacing / distance from V_p)
_TAIL_RATIO = 1.1
#: extra nodes on both sides of each break point (V_p and, with RF, V_p +- V_rf), in temperatures:
#: the ion and electron Child-law terms grow as |V - V_p|^(3/4) and the phase average changes
#: its form at V_p +- V_rf, so the interpolant is refined geometrically towards them
_GRADED = np.array([1e-6, 1e-5, 1e-4, 3e-4, 1e-3, 2e-3, 4e-3, 0.01, 0.02, 0.04, 0.08])
#: above V_p the ions are repelled as exp(-(V - V_p)/T_i): nodes at these multiples of T_i
_ION_GRADED = np.array([0.25, 0.5, 1.0, 2.0, 3.0, 4.0, 6.0, 9.0, 14.0])


def _break_coefficients(with_rf: bool):
    """(a, t) with the break-point nodes at V_p + a A + t T: a pair 1e-9 T either side of V_p (each
    side of the knee gets its own slope), the graded nodes on both sides of V_p and, with RF, of
    V_p +- A."""
    g = np.concatenate([[1e-9], _GRADED])
    t = [-g, g]
    a = [np.zeros(g.size), np.zeros(g.size)]
    if with_rf:
        for side in (-1.0, 1.0):
            t += [np.zeros(1), -_GRADED, _GRADED]
            a += [np.full(1, side), np.full(_GRADED.size, side), np.full(_GRADED.size, side)]
    return np.concatenate(a), np.concatenate(t)


_BREAKS, _BREAKS_RF = _break_coefficients(False), _break_coefficients(True)


def series_nodes(v_lo, v_hi, V_p, T_min, A=0.0, T_max=None, T_i=None) -> np.ndarray:
    """Sheath-voltage nodes for :func:`hermite_series_current`, one sorted row per parameter set.

    All arguments have shape (k, 1) (or broadcast to it): the sheath-voltage range of the
    sweep [v_lo, v_hi], the plasma potential, the smallest electron temperature (eV) and the
    RF amplitude A (V); ``T_i`` (eV) the ion temperature. Nodes: a core from V_p - A - 8 T_min
    to V_p + A + 3 T_min spaced ``SERIES_NODE_SPACING`` T_min; down to V_p - A - 20 T_min spacings
    growing geometrically with the distance from V_p (ratio 1.05), beyond that and above the core
    ratio 1.1; the break points V_p and V_p +- A with geometrically graded nodes on
    both sides (down to 1e-6 T_min; a pair 1e-9 T_min either side of V_p gives each side of
    the knee its own slope); nodes 0.25-14 T_i above V_p; both ends. With a hotter group
    (``T_max`` > T_min, two-temperature electrons) a second core
    spaced ``SERIES_NODE_SPACING`` T_max continues down to V_p - A - 20 T_max. Nodes outside
    [v_lo, v_hi] are moved onto the ends (zero-length intervals), so the node set of a row
    depends on its own parameters only, whatever the other rows need.
    """
    T_max = T_min if T_max is None else T_max
    v_lo, v_hi, V_p, T, A, T_hot = np.broadcast_arrays(*(np.asarray(x, float)
                                                         for x in (v_lo, v_hi, V_p, T_min, A, T_max)))
    h = SERIES_NODE_SPACING * T
    core_lo = V_p - A - _CORE_BELOW * T
    core_hi = V_p + A + _CORE_ABOVE * T
    n_core = int(np.ceil(np.max((np.minimum(core_hi, v_hi) - np.maximum(core_lo, v_lo)) / h))) + 1
    n_core = max(n_core, 1)
    start = np.maximum(core_lo, v_lo)
    start = core_lo + np.floor((start - core_lo) / h) * h          # on the row's own lattice
    core = np.minimum(start + h * np.arange(n_core), core_hi)
    d_mid = A + _CORE_BELOW * T
    n_mid = int(np.ceil(np.log((A + _MID_BELOW * T) / d_mid).max() / np.log(_MID_RATIO)))
    extra = [np.maximum(V_p - d_mid * _MID_RATIO ** np.arange(1, n_mid + 1), V_p - A - _MID_BELOW * T)]
    core_lo = V_p - A - _MID_BELOW * T
    if np.any(T_hot > T):
        h_hot = SERIES_NODE_SPACING * T_hot
        hot_lo = V_p - A - _MID_BELOW * T_hot
        n_hot = int(np.ceil(np.max((core_lo - np.maximum(hot_lo, v_lo)) / h_hot))) + 1
        extra.append(np.maximum(core_lo - h_hot * np.arange(1, max(n_hot, 1) + 1), hot_lo))
        core_lo = np.minimum(core_lo, hot_lo)
    d_below = V_p - core_lo                                         # distances from V_p at the core ends
    d_above = core_hi - V_p
    n_below = int(np.ceil(np.max(np.log(np.maximum((V_p - v_lo) / d_below, 1.0)) / np.log(_TAIL_RATIO)))) + 1
    n_above = int(np.ceil(np.max(np.log(np.maximum((v_hi - V_p) / d_above, 1.0)) / np.log(_TAIL_RATIO)))) + 1
    below = V_p - d_below * _TAIL_RATIO ** np.arange(1, n_below + 1)
    above = V_p + d_above * _TAIL_RATIO ** np.arange(1, n_above + 1)
    # break points as V_p + a A + t T (+ T_i multiples): one broadcast instead of a dozen arrays
    with_rf = bool(np.any(A > 0))
    a_coef, t_coef = _BREAKS_RF if with_rf else _BREAKS
    breaks = [V_p + A * a_coef + T * t_coef]
    if T_i is not None:
        breaks.append(V_p + np.asarray(T_i, float) * _ION_GRADED)
    nodes = np.concatenate([v_lo, v_hi, core, below, above] + extra + breaks, axis=-1)
    return np.sort(np.clip(nodes, v_lo, v_hi), axis=-1)


def hermite_series_current(V, R, nodes, f_nodes, slope_nodes) -> np.ndarray:
    """The series-resistance current at applied voltages ``V`` from the characteristic at ``nodes``.

    With the sheath at voltage v the applied voltage is W(v) = v + R f(v) and the current f(v):
    a parametric form of the measured characteristic I(W) that needs no solve. W is increasing
    (dW/dv = 1 + R f' >= 1), so each V lies in one interval [W_j, W_j+1] of every row, found by
    one sorted search over all rows at once. I there is the cubic Hermite interpolant of the
    values f_j and slopes dI/dW = f'_j / (1 + R f'_j), limited to keep the interpolant
    monotone (continuous with a continuous slope in V). Shapes: V (k, n) or (n,), R (k, 1),
    the node arrays (k, M), whose first and last nodes enclose the sheath voltages of the
    smallest and largest V of the row.
    """
    W = nodes + R * f_nodes
    D = slope_nodes / (1.0 + R * np.maximum(slope_nodes, 0.0))
    k, M = W.shape
    # Fritsch-Carlson limiter (SIAM J. Numer. Anal. 17, 238 (1980)): I(W) is increasing, and a
    # node slope above 3x either neighbouring secant would make the cubic overshoot. It matters
    # only next to V_p, where the Child-law terms grow as |V - V_p|^(3/4) (an unbounded slope);
    # on smooth stretches the exact slopes are far inside the limit. Zero-length intervals
    # (nodes moved onto the ends) do not limit.
    dW = np.diff(W, axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        sec = np.where(dW > 0, np.diff(f_nodes, axis=-1) / dW, np.inf)
    inf = np.full((k, 1), np.inf)
    cap = 3.0 * np.maximum(np.minimum(np.concatenate([inf, sec], axis=-1), np.concatenate([sec, inf], axis=-1)), 0.0)
    D = np.clip(D, 0.0, cap)
    V_in = np.asarray(V, float)
    V = np.broadcast_to(V_in, (k, V_in.shape[-1]))
    # each interval's cubic in t = (V - W_j)/(W_j+1 - W_j): c0 + t (c1 + t (c2 + t c3))
    f0, f1 = f_nodes[:, :-1], f_nodes[:, 1:]
    m0, m1 = dW * D[:, :-1], dW * D[:, 1:]
    df = f1 - f0
    with np.errstate(divide="ignore"):
        inv = np.where(dW > 0, 1.0 / dW, 0.0)             # zero-length interval: t = 0, value f_j
    table = [W[:, :-1], inv, f0, m0, 3.0 * df - 2.0 * m0 - m1, m0 + m1 - 2.0 * df]
    n = V.shape[-1]
    if V_in.ndim == 1 and np.all(V_in[1:] >= V_in[:-1]):
        # one sorted sweep for every row: place the k M nodes among the n points (cheap), then the
        # number of nodes at or below each point is a running count
        pos = np.searchsorted(V_in, W, side="left") + (n + 1) * np.arange(k)[:, None]
        j = np.cumsum(np.bincount(pos.ravel(), minlength=k * (n + 1)).reshape(k, n + 1), axis=1)[:, :n] - 1
    else:
        # one search over all rows, each row's values mapped into its own unit interval [2r, 2r + 1]
        lo = W[:, :1]
        span = W[:, -1:] - lo
        span = np.where(span > 0, span, 1.0)
        row = 2.0 * np.arange(k)[:, None]
        j = np.searchsorted(((W - lo) / span + row).ravel(), ((V - lo) / span + row).ravel(), side="right") - 1
        j = j.reshape(V.shape) - M * np.arange(k)[:, None]
    j = np.clip(j, 0, M - 2) + (M - 1) * np.arange(k)[:, None]
    w0, inv, c0, c1, c2, c3 = (np.take(col, j) for col in table)     # take: ~4x faster than fancy indexing
    t = np.clip((V - w0) * inv, 0.0, 1.0)
    return c0 + t * (c1 + t * (c2 + t * c3))



def series_current(V, R, characteristic, cols: dict, *, solver: str = "newton", smooth: bool = True,
                   T_min=None, T_max=None, A=0.0, T_i=None):
    """The current through the sheath in series with R: I = f(V - I R) for every set and point.

    Parameters
    ----------
    V : ndarray
        Sheath-side bias (V), shape (n,) or (k, n).
    R : ndarray
        Series resistance (ohm), shape (k, 1) or scalar.
    characteristic : callable
        ``characteristic(v, cols, slope=False)``: the plasma characteristic f at ``v`` for the
        parameter columns ``cols`` (with ``slope=True`` the pair (f, df/dv)).
    cols : dict
        Parameter columns (name -> array broadcasting against V, e.g. shape (k, 1)).
    solver : {"newton", "interpolate"}
        ``"newton"``: :func:`_solve_series` on every element. ``"interpolate"``: the sheath-voltage
        range of each row is bounded from the characteristic at the two ends of the sweep, the
        characteristic and its slope are evaluated once at the nodes of :func:`series_nodes`
        between them, and every point is interpolated on the parametric curve
        (:func:`hermite_series_current`). Used for parameter arrays, at least
        ``INTERPOLATE_MIN_POINTS`` points and a characteristic smooth away from V_p and V_p +- A
        (``smooth``); Newton otherwise.
    smooth : bool
        False when the characteristic has slope kinks at unknown voltages (the ABR table).
    T_min, T_max, A, T_i :
        Node placement (:func:`series_nodes`): the smallest and largest electron temperatures
        (eV, columns), the RF amplitude (V) and the ion temperature (eV).
    """
    if solver not in SERIES_SOLVERS:
        raise ValueError(f"series_solver must be 'newton' or 'interpolate', got {solver!r}")
    shape = np.broadcast_shapes(V.shape, np.shape(R), *(np.shape(c) for c in cols.values()))

    def plasma_at(v, flat=None):
        # (current, slope); flat: indices into the broadcast grid, so the solver can iterate on a subset
        return characteristic(v, cols if flat is None else _subset(cols, shape, flat), slope=True)

    if solver == "newton" or len(shape) != 2 or shape[-1] < INTERPOLATE_MIN_POINTS or not smooth:
        return _solve_series(plasma_at, V, R)
    V2 = np.broadcast_to(V, shape)
    ends = np.stack([V2.min(axis=-1), V2.max(axis=-1)], axis=-1)             # (k, 2)
    # the sheath voltage at an end lies between V and V - f(V) R (the root of I = f(V - I R) lies
    # between 0 and f(V)), so these bounds enclose the sheath voltages of the whole sweep
    f_ends = characteristic(ends, cols)
    v_lo = ends[:, :1] - np.maximum(f_ends[:, :1], 0.0) * R
    v_hi = ends[:, 1:] - np.minimum(f_ends[:, 1:], 0.0) * R
    nodes = series_nodes(v_lo, v_hi, cols["V_p"], T_min, A, T_max, T_i)
    f_nodes, slope_nodes = characteristic(nodes, cols, slope=True)
    return hermite_series_current(V, np.broadcast_to(R, (shape[0], 1)), nodes,
                                  np.broadcast_to(f_nodes, nodes.shape), np.broadcast_to(slope_nodes, nodes.shape))


def _subset(cols: dict, shape, flat) -> dict:
    """Parameter columns gathered at flat indices of the broadcast grid (1-D, one per element)."""
    idx = np.unravel_index(flat, shape)
    out = {}
    for n, c in cols.items():
        c = np.asarray(c)
        if c.size == 1:
            out[n] = c.reshape(())
            continue
        c = c.reshape((1,) * (len(shape) - c.ndim) + c.shape)
        out[n] = c[tuple(i if d > 1 else 0 for i, d in zip(idx, c.shape))]
    return out
