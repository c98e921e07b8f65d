"""The MCMC driver: independent emcee ensembles run until the convergence criteria hold.

Convergence criteria (all must hold, checked as the chains grow by at least 25 % at a time):

1. every ensemble's kept chain is at least ``min_tau_multiple`` (default 50)
   integrated autocorrelation times long (emcee's estimator, Goodman & Weare 2010;
   Foreman-Mackey et al. 2013), and the largest tau changed by less than
   ``tau_rel_change`` (20 %) since the previous check;
2. rank-normalised split R-hat (Vehtari et al. 2021, Bayesian Analysis 16, 667)
   is at most ``rhat_max`` (1.01), computed across the independent ensembles: each
   ensemble contributes one chain, its walkers interleaved step by step. (The
   walkers of one ensemble are coupled through the moves, so they are not
   independent chains, and R-hat over them would not test anything.)
3. the bulk effective sample size of every parameter is at least ``ess_min``
   (1000), taking the smaller of arviz's multi-chain estimate over walkers and
   the autocorrelation estimate n_kept * n_walkers * n_ensembles / tau.

Before counting starts, a warm-up of ``warmup_steps`` (discarded) lets the
ensembles settle; walkers stranded far below the others are moved onto copies
of good walkers then (never afterwards). The first ``burn_fraction`` of every
counted chain is also discarded at each check. When the
step budget ``max_steps`` is exhausted the result says ``converged = False``
instead of pretending.
"""
from __future__ import annotations

import sys
import time
from dataclasses import dataclass, field

import emcee
import numpy as np

from .arviz_adapter import ess_bulk, rhat_rank

__all__ = ["SamplerSettings", "SamplerRun", "run_ensembles", "start_positions"]


@dataclass(frozen=True)
class SamplerSettings:
    n_ensembles: int = 2
    n_walkers: int | None = None        # default max(4 d, 24), even
    warmup_steps: int = 100
    initial_steps: int = 500
    max_steps: int = 20000
    burn_fraction: float = 0.2
    min_tau_multiple: float = 50.0
    tau_rel_change: float = 0.2
    rhat_max: float = 1.01
    ess_min: float = 1000.0
    start_scale: float = 1.5            # dispersion of starts, in Laplace sds

    def walkers_for(self, ndim: int) -> int:
        w = self.n_walkers or max(4 * ndim, 24)
        return w + (w % 2)


@dataclass
class SamplerRun:
    """Kept draws and diagnostics. ``chains`` has shape (ensemble, step, walker, d)."""

    chains: np.ndarray
    log_prob: np.ndarray
    tau: np.ndarray
    rhat: np.ndarray
    ess: np.ndarray
    converged: bool
    n_steps: int
    burn: int
    acceptance: float
    reasons: list = field(default_factory=list)
    timings: dict = field(default_factory=dict)
    history: list = field(default_factory=list)
    rescued_walkers: int = 0

    @property
    def flat(self) -> np.ndarray:
        """All kept draws, shape (ensemble * step * walker, d)."""
        return self.chains.reshape(-1, self.chains.shape[-1])


def start_positions(logpost, center, cov, n, rng: np.random.Generator, scale: float = 1.5):
    """n starting points from N(center, scale^2 cov) inside the typical set of the approximation.

    Points whose log-posterior falls further below the optimum than a Gaussian's
    0.999 chi-square quantile allows (scaled by ``scale``^2) are redrawn: where the
    Laplace approximation is poor (a flat direction at a boundary), this keeps
    walkers from starting stranded in regions they would take thousands of steps
    to leave.
    """
    from scipy.stats import chi2
    d = center.size
    out = np.empty((0, d))
    # jitter relative to each variance: an absolute 1e-12 would be wider than the posterior of a
    # parameter in SI units (a leakage conductance with sd ~1e-8 S)
    cov = np.asarray(cov, float)
    L = np.linalg.cholesky(cov + 1e-12 * np.diag(np.maximum(np.diag(cov), 1e-300)))
    lp0 = float(logpost(center[None, :])[0])
    allowed = 0.5 * chi2.ppf(0.999, d) * scale**2 + 1.0
    for attempt in range(60):
        s = scale if attempt < 10 else scale * 0.7 ** (attempt - 9)
        cand = center + s * rng.standard_normal((2 * n, d)) @ L.T
        lp = logpost(cand)
        good = cand[np.isfinite(lp) & (lp >= lp0 - allowed)]
        out = np.vstack([out, good])
        if len(out) >= n:
            return out[:n]
    raise RuntimeError("could not find starting points with finite posterior density around the optimum")


def _rescue_stragglers(state: emcee.State, rng: np.random.Generator, ndim: int):
    """Warm-up only: move walkers stranded far below the ensemble onto copies of good walkers.

    Stranded walkers are those whose log-posterior lies more than max(10, 2 d) below
    the ensemble median. This happens before any draw is kept, so it changes where
    the chains start, not what they converge to.
    """
    lp = state.log_prob
    med = np.median(lp)
    bad = lp < med - max(10.0, 2.0 * ndim)
    if not np.any(bad):
        return state, 0
    good_idx = np.flatnonzero(~bad)
    coords = state.coords.copy()
    log_prob = lp.copy()
    spread = np.std(coords[good_idx], axis=0) * 1e-3
    for i in np.flatnonzero(bad):
        j = rng.choice(good_idx)
        coords[i] = coords[j] + spread * rng.standard_normal(ndim)
        log_prob[i] = np.nan                      # recomputed by emcee
    return emcee.State(coords, log_prob=None, random_state=state.random_state), int(bad.sum())


class _Timed:
    """Wraps the log-posterior to count time spent in the model."""

    def __init__(self, f):
        self.f = f
        self.seconds = 0.0
        self.calls = 0

    def __call__(self, Z):
        t = time.perf_counter()
        out = self.f(Z)
        self.seconds += time.perf_counter() - t
        self.calls += 1
        return out


def _diagnostics(chains, settings):
    """tau (per ensemble, per param), rhat and ess for kept chains (E, S, W, d)."""
    E, S, W, d = chains.shape
    taus = np.empty((E, d))
    for e in range(E):
        with np.errstate(invalid="ignore", divide="ignore"):
            taus[e] = emcee.autocorr.integrated_time(chains[e], tol=0, quiet=True)
    # a walker that never moved in the kept chain makes the estimate undefined: treat it as
    # "as long as the chain" so the convergence criteria fail and sampling continues
    taus = np.where(np.isfinite(taus), taus, float(S))
    rhat = np.empty(d)
    ess = np.empty(d)
    n_total = E * S * W
    for j in range(d):
        per_ens = chains[:, :, :, j].reshape(E, S * W)           # step-major interleave
        rhat[j] = rhat_rank(per_ens)
        per_walker = chains[:, :, :, j].transpose(0, 2, 1).reshape(E * W, S)
        ess[j] = min(ess_bulk(per_walker), n_total / np.max(taus[:, j]))
    return taus, rhat, ess


def run_ensembles(logpost, center, cov, *, settings: SamplerSettings = SamplerSettings(),
                  seed: int | np.random.SeedSequence | None = 0, progress: bool | None = None) -> SamplerRun:
    """Run ``settings.n_ensembles`` independent emcee ensembles from dispersed starts until converged."""
    ss = seed if isinstance(seed, np.random.SeedSequence) else np.random.SeedSequence(seed)
    child = ss.spawn(settings.n_ensembles)
    d = center.size
    timed = _Timed(logpost)
    samplers, states = _ensembles(logpost, timed, center, cov, settings, child)
    bar = _progress_bar(progress, settings)
    t0 = time.perf_counter()
    rescued = _warm_up(samplers, states, child, settings, d, bar)
    t_diag = 0.0
    n_steps = 0
    target = settings.initial_steps
    history = []
    while True:
        for e, sampler in enumerate(samplers):
            states[e] = sampler.run_mcmc(states[e], target - n_steps, progress=False)
            if bar is not None:
                bar.update(target - n_steps)
        n_steps = target
        td = time.perf_counter()
        check = _check(samplers, n_steps, settings, history[-1]["tau_max"] if history else None)
        t_diag += time.perf_counter() - td
        history.append(check.record)
        if not check.reasons or n_steps >= settings.max_steps:
            break
        # next check: long enough to meet the tau criterion if tau is right (10 % margin), and at
        # least 25 % longer than now so that tau is re-estimated on a materially longer chain
        needed = int(np.ceil(settings.min_tau_multiple * check.tau_max / (1 - settings.burn_fraction) * 1.1))
        target = min(settings.max_steps, max(int(1.25 * n_steps), needed))
    if bar is not None:
        bar.close()
    burn = int(settings.burn_fraction * n_steps)
    chains = np.stack([s.get_chain(discard=burn) for s in samplers])
    log_prob = np.stack([s.get_log_prob(discard=burn) for s in samplers])
    acc = float(np.mean([np.mean(s.acceptance_fraction) for s in samplers]))
    total = time.perf_counter() - t0
    return SamplerRun(chains=chains, log_prob=log_prob, tau=np.max(check.taus, axis=0), rhat=check.rhat,
                      ess=check.ess, converged=not check.reasons, n_steps=n_steps, burn=burn, acceptance=acc,
                      reasons=check.reasons,
                      timings={"sampling_s": total - t_diag, "model_s": timed.seconds,
                               "diagnostics_s": t_diag, "model_calls": timed.calls},
                      history=history, rescued_walkers=rescued)


def _ensembles(logpost, timed, center, cov, settings, child):
    """One emcee sampler per ensemble with its starting state (walkers around the optimum)."""
    d = center.size
    W = settings.walkers_for(d)
    samplers, states = [], []
    for e in range(settings.n_ensembles):
        rng = np.random.default_rng(child[e])
        p0 = start_positions(logpost, center, cov, W, rng, settings.start_scale)
        rs = np.random.RandomState(rng.integers(2**32 - 1))
        sampler = emcee.EnsembleSampler(W, d, timed, vectorize=True,
                                        moves=[(emcee.moves.DEMove(), 0.9), (emcee.moves.StretchMove(), 0.1)])
        samplers.append(sampler)
        states.append(emcee.State(p0, random_state=rs.get_state()))
    return samplers, states


def _progress_bar(progress, settings):
    if progress is None:
        progress = sys.stderr.isatty()
    if not progress:
        return None
    from tqdm.auto import tqdm
    return tqdm(total=(settings.max_steps + settings.warmup_steps) * settings.n_ensembles, desc="sampling",
                unit="step", leave=False, file=sys.stderr)


def _warm_up(samplers, states, child, settings, d, bar) -> int:
    """Discarded warm-up: let the ensembles find the bulk, rescue stranded walkers twice.
    Updates ``states`` in place; returns the number of rescued walkers."""
    rescued = 0
    for e, sampler in enumerate(samplers):
        rng = np.random.default_rng(child[e].spawn(1)[0])
        for _ in range(2):
            states[e] = sampler.run_mcmc(states[e], settings.warmup_steps // 2, progress=False)
            states[e], k = _rescue_stragglers(states[e], rng, d)
            rescued += k
        sampler.reset()
        if bar is not None:
            bar.update(settings.warmup_steps)
    return rescued


@dataclass
class _Check:
    """Convergence check of the kept chains at one length."""

    taus: np.ndarray
    rhat: np.ndarray
    ess: np.ndarray
    tau_max: float
    reasons: list
    record: dict


def _check(samplers, n_steps, settings, prev_tau) -> _Check:
    """The convergence criteria (module docstring) on the chains after burn-in; ``prev_tau``: the
    largest tau at the previous check (None at the first)."""
    burn = int(settings.burn_fraction * n_steps)
    chains = np.stack([s.get_chain(discard=burn) for s in samplers])
    taus, rhat, ess = _diagnostics(chains, settings)
    tau_max = float(np.max(taus))
    kept = n_steps - burn
    reasons = []
    if kept < settings.min_tau_multiple * tau_max:
        reasons.append(f"chain {kept} steps < {settings.min_tau_multiple:g} x tau ({tau_max:.1f})")
    if prev_tau is not None and abs(tau_max - prev_tau) > settings.tau_rel_change * prev_tau:
        reasons.append(f"tau still changing ({prev_tau:.1f} -> {tau_max:.1f})")
    if prev_tau is None:
        reasons.append("tau not yet checked at two lengths")
    if np.max(rhat) > settings.rhat_max:
        reasons.append(f"R-hat {np.max(rhat):.4f} > {settings.rhat_max}")
    if np.min(ess) < settings.ess_min:
        reasons.append(f"bulk ESS {np.min(ess):.0f} < {settings.ess_min:g}")
    record = {"steps": n_steps, "tau_max": tau_max, "rhat_max": float(np.max(rhat)),
              "ess_min": float(np.min(ess)), "unmet": list(reasons)}
    return _Check(taus=taus, rhat=rhat, ess=ess, tau_max=tau_max, reasons=reasons, record=record)
