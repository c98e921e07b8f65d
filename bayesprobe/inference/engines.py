"""Sampling engines behind one interface, and the registry of their option names.

An engine turns a vectorised log-posterior in the sampler coordinates ``z``, its
optimum and the Laplace covariance there into posterior draws::

    result = engine.run(logpost, start, covariance, seed, settings)

``result`` is an :class:`EngineResult`: the draws in ``z`` (chain-major, shape
``(n, d)``), the log-posterior at each draw, the number of independent chains they
form, and one :class:`Diagnostics` whose :meth:`Diagnostics.to_dict` is the
``diagnostics`` block of ``summary.json``.

Engines
-------
:class:`EmceeEngine`
    independent emcee ensembles until converged (:mod:`bayesprobe.inference.sampler`),
    thinned evenly to about :data:`N_STORED_DRAWS` draws; one chain per ensemble.
:class:`ImportanceEngine`
    PSIS-checked importance sampling from the Laplace approximation
    (:mod:`bayesprobe.inference.importance`); one chain of resampled draws.
:class:`AutoEngine`
    ``AutoEngine(primary, fallback)``: the primary's draws when it accepts them (for
    importance sampling: Pareto k-hat <= ``khat_max`` (0.5) and ESS >= ``ess_min``
    (1000)), otherwise the fallback run from the same optimum; the primary's check
    and why it was not used stay in the diagnostics.

Registry: :data:`ENGINES` maps the option values ``"mcmc"``, ``"fast"`` and ``"auto"``
to engines; :func:`get_engine` looks a name up with the one error message.
"""
from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, field, replace

import numpy as np

from .importance import ImportanceSettings, importance_sample
from .sampler import SamplerSettings, run_ensembles

__all__ = ["Engine", "EngineResult", "EngineSettings", "Diagnostics", "ImportanceCheck", "SeedStreams",
           "EmceeEngine", "ImportanceEngine", "AutoEngine", "ENGINES", "get_engine", "N_STORED_DRAWS"]

#: posterior draws kept from the MCMC engine (thinned evenly from the converged chains)
N_STORED_DRAWS = 2000


@dataclass(frozen=True)
class SeedStreams:
    """The independent random streams of one fit, spawned from its seed.

    ``sampler`` drives emcee, ``predictive`` the replicated sweeps, ``importance`` the
    importance sampler (the first two are the streams of the MCMC-only seeding).
    """

    sampler: np.random.SeedSequence
    predictive: np.random.SeedSequence
    importance: np.random.SeedSequence

    @classmethod
    def from_seed(cls, seed) -> "SeedStreams":
        """Streams of ``seed`` (an int, None or a SeedStreams, returned as it is)."""
        if isinstance(seed, SeedStreams):
            return seed
        return cls(*np.random.SeedSequence(seed).spawn(3))


@dataclass(frozen=True)
class EngineSettings:
    """Settings of every engine: ``sampler`` (emcee), ``importance`` and the progress bar."""

    sampler: SamplerSettings = SamplerSettings()
    importance: ImportanceSettings = ImportanceSettings()
    progress: bool | None = None

    def sampler_criteria(self) -> dict:
        s = self.sampler
        return {"tau_multiple_min": s.min_tau_multiple, "r_hat_max": s.rhat_max, "ess_bulk_min": s.ess_min}


@dataclass(frozen=True)
class ImportanceCheck:
    """Outcome of the importance sampler's acceptance check (kept also when it fell back)."""

    khat: float
    ess: float
    rounds: int
    n_evaluations: int
    khat_max: float
    ess_min: float
    fallback_reason: str | None = None


@dataclass(frozen=True)
class Diagnostics:
    """Everything a fit reports about how its draws were obtained (``summary.json`` ``diagnostics``).

    The engine fills the sampling part; :meth:`EngineResult.quantity_diagnostics` adds the
    effective sample sizes and R-hat of every reported quantity, and the fit adds the
    optimiser's part (``map_hessian_ok``, ``warm_start``, ``map_s``) and its own timing.
    """

    engine: str
    converged: bool
    unmet: list
    n_draws: int
    criteria: dict
    history: list
    engine_timings: dict
    tau_max: float | None = None
    tau: dict = field(default_factory=dict)
    n_steps: int = 0
    burn_in: int = 0
    thin: int = 1
    n_ensembles: int = 0
    n_walkers: int = 0
    acceptance: float | None = None
    importance: ImportanceCheck | None = None
    ess_bulk: dict = field(default_factory=dict)
    r_hat: dict = field(default_factory=dict)
    ess_bulk_min: float | None = None
    r_hat_max: float | None = None
    engine_requested: str | None = None
    map_hessian_ok: bool | None = None
    warm_start: bool = False
    map_s: float = 0.0
    posterior_s: float = 0.0

    def to_dict(self) -> dict:
        """The ``diagnostics`` block of ``summary.json`` (keys and order as written since schema 1)."""
        out = {"r_hat_max": self.r_hat_max, "ess_bulk_min": self.ess_bulk_min, "n_draws": self.n_draws,
               "converged": self.converged, "engine": self.engine, "engine_requested": self.engine_requested,
               "criteria": dict(self.criteria), "unmet": self.unmet, "ess_bulk": self.ess_bulk,
               "r_hat": self.r_hat, "map_hessian_ok": self.map_hessian_ok, "warm_start": self.warm_start,
               "tau_max": self.tau_max, "tau": self.tau, "n_steps": self.n_steps, "burn_in": self.burn_in,
               "thin": self.thin, "n_ensembles": self.n_ensembles, "n_walkers": self.n_walkers,
               "acceptance": self.acceptance, "history": self.history,
               "timings_s": {"map": self.map_s, **self.engine_timings, "posterior_processing": self.posterior_s}}
        c = self.importance
        if c is not None:
            out.update({"khat": c.khat, "is_ess": c.ess, "is_rounds": c.rounds, "is_n_evaluations": c.n_evaluations,
                        "fallback_reason": c.fallback_reason})
            out["criteria"].update({"khat_max": c.khat_max, "is_ess_min": c.ess_min})
        return out


@dataclass
class EngineResult(ABC):
    """Draws of one engine run: ``draws`` (n, d) in z, chain-major; ``log_prob`` (n,); ``n_chains``
    independent chains of n / n_chains draws each; the engine's :class:`Diagnostics`."""

    draws: np.ndarray
    log_prob: np.ndarray
    n_chains: int
    diagnostics: Diagnostics

    @property
    @abstractmethod
    def accepted(self) -> bool:
        """False when the engine's own check says its draws must not be reported (then a
        fallback engine is used)."""

    @property
    def rejection(self) -> str:
        """Why the draws were not accepted ('' when they were)."""
        return "" if self.accepted else "; ".join(self.diagnostics.unmet)

    def per_chain(self, x):
        """Per-draw values (n, ...) -> (chain, draw, ...)."""
        x = np.asarray(x)
        return x.reshape(self.n_chains, -1, *x.shape[1:])

    @abstractmethod
    def quantity_diagnostics(self, quantities: dict, parameter_names) -> Diagnostics:
        """The diagnostics with ESS and R-hat of every quantity (``{name: (chain, draw) array}``);
        ``parameter_names`` name the columns of ``draws``."""


@dataclass
class ChainResult(EngineResult):
    """Draws of :class:`EmceeEngine` (keeps the run for the per-parameter diagnostics)."""

    run: object = None
    sampler: SamplerSettings = SamplerSettings()

    @property
    def accepted(self) -> bool:
        return True

    def quantity_diagnostics(self, quantities, parameter_names) -> Diagnostics:
        from .arviz_adapter import ess_bulk, rhat_rank
        ess_all, rhat_all = {}, {}
        for n, x in quantities.items():
            if np.all(np.isfinite(x)) and np.ptp(x) > 0:
                ess_all[n] = ess_bulk(x)
                rhat_all[n] = rhat_rank(x)
        # sampled parameters: the run's own diagnostics over the full kept chains
        for j, n in enumerate(parameter_names):
            ess_all[n] = float(self.run.ess[j])
            rhat_all[n] = float(self.run.rhat[j])
        reported = [n for n in quantities if n in ess_all]
        ess_min = float(min(ess_all[n] for n in reported))
        rhat_max = float(max(rhat_all[n] for n in reported))
        s = self.sampler
        converged = bool(self.run.converged and ess_min >= s.ess_min and rhat_max <= s.rhat_max)
        unmet = list(self.run.reasons)
        if self.run.converged and not converged:
            unmet.append(f"derived quantities: ESS {ess_min:.0f}, R-hat {rhat_max:.4f}")
        return replace(self.diagnostics, ess_bulk=ess_all, r_hat=rhat_all, ess_bulk_min=ess_min, r_hat_max=rhat_max,
                       converged=converged, unmet=unmet,
                       tau={n: float(t) for n, t in zip(parameter_names, self.run.tau)})


@dataclass
class WeightedResult(EngineResult):
    """Draws of :class:`ImportanceEngine`: resampled draws sharing one importance-sampling ESS."""

    run: object = None

    @property
    def accepted(self) -> bool:
        return bool(self.run.accepted)

    def quantity_diagnostics(self, quantities, parameter_names) -> Diagnostics:
        # all quantities share the importance weights: one ESS for everything, no R-hat
        ess = float(self.run.ess)
        return replace(self.diagnostics, ess_bulk={n: ess for n in quantities}, r_hat={}, ess_bulk_min=ess,
                       r_hat_max=None)


class Engine(ABC):
    """Interface of a sampling engine (see the module docstring)."""

    #: the engine that produced the draws, as written in ``diagnostics["engine"]``
    name: str = ""

    @abstractmethod
    def run(self, logpost, start, covariance, seed, settings: EngineSettings) -> EngineResult:
        """Draws from ``logpost`` ((k, d) -> (k,), -inf outside the support) starting at the optimum
        ``start`` (d,) with the Laplace ``covariance`` (d, d); ``seed``: an int or :class:`SeedStreams`."""


class EmceeEngine(Engine):
    """Independent emcee ensembles until converged, thinned evenly to about ``n_stored_draws``."""

    name = "mcmc"

    def __init__(self, n_stored_draws: int = N_STORED_DRAWS):
        self.n_stored_draws = int(n_stored_draws)

    def __repr__(self):
        return f"EmceeEngine(n_stored_draws={self.n_stored_draws})"

    def run(self, logpost, start, covariance, seed, settings: EngineSettings) -> ChainResult:
        seeds = SeedStreams.from_seed(seed)
        run = run_ensembles(logpost, start, covariance, settings=settings.sampler, seed=seeds.sampler,
                            progress=settings.progress)
        # thin evenly to about n_stored_draws draws, chain = independent ensemble
        E, S, W, d = run.chains.shape
        thin = max(1, int(S * W * E / self.n_stored_draws))
        Z = run.chains[:, ::thin]                           # (E, S', W, d)
        diag = Diagnostics(
            engine=self.name, converged=bool(run.converged), unmet=list(run.reasons), n_draws=int(E * Z.shape[1] * W),
            criteria=settings.sampler_criteria(), history=run.history, engine_timings=dict(run.timings),
            tau_max=float(np.max(run.tau)),
            n_steps=int(run.n_steps), burn_in=int(run.burn), thin=int(thin), n_ensembles=int(E), n_walkers=int(W),
            acceptance=run.acceptance)
        return ChainResult(draws=Z.reshape(-1, d), log_prob=run.log_prob[:, ::thin].reshape(-1), n_chains=E,
                           diagnostics=diag, run=run, sampler=settings.sampler)


class ImportanceEngine(Engine):
    """Importance sampling from the Laplace approximation, checked by Pareto smoothing."""

    name = "importance"

    def __repr__(self):
        return "ImportanceEngine()"

    def run(self, logpost, start, covariance, seed, settings: EngineSettings) -> WeightedResult:
        seeds = SeedStreams.from_seed(seed)
        s = settings.importance
        run = importance_sample(logpost, start, covariance, settings=s, seed=seeds.importance)
        check = ImportanceCheck(khat=float(run.khat), ess=float(run.ess), rounds=run.n_rounds,
                                n_evaluations=int(run.n_evaluations), khat_max=s.khat_max, ess_min=s.ess_min)
        diag = Diagnostics(engine=self.name, converged=bool(run.accepted), unmet=list(run.reasons),
                           n_draws=int(run.draws.shape[0]), criteria=settings.sampler_criteria(),
                           history=run.history, engine_timings={"importance": run.timings}, importance=check)
        return WeightedResult(draws=run.draws, log_prob=run.log_prob, n_chains=1, diagnostics=diag, run=run)


class AutoEngine(Engine):
    """``primary``'s draws when its own check accepts them, else ``fallback`` from the same optimum."""

    def __init__(self, primary: Engine, fallback: Engine):
        self.primary, self.fallback = primary, fallback

    def __repr__(self):
        return f"AutoEngine({self.primary!r}, {self.fallback!r})"

    @property
    def name(self):
        return self.primary.name

    def run(self, logpost, start, covariance, seed, settings: EngineSettings) -> EngineResult:
        seeds = SeedStreams.from_seed(seed)
        first = self.primary.run(logpost, start, covariance, seeds, settings)
        if first.accepted:
            return first
        second = self.fallback.run(logpost, start, covariance, seeds, settings)
        check = first.diagnostics.importance
        if check is not None:
            second.diagnostics = replace(second.diagnostics,
                                         importance=replace(check, fallback_reason=first.rejection))
        return second


#: option value -> engine ("fast" and "auto" are the same rule)
ENGINES: dict[str, Engine] = {
    "mcmc": EmceeEngine(),
    "fast": AutoEngine(ImportanceEngine(), EmceeEngine()),
    "auto": AutoEngine(ImportanceEngine(), EmceeEngine()),
}


def get_engine(name) -> Engine:
    """The engine registered as ``name``."""
    try:
        return ENGINES[name]
    except (KeyError, TypeError):
        raise ValueError(f"engine must be one of {', '.join(ENGINES)}, got {name!r}") from None
