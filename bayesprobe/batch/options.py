"""The options of a batch, checked in one place before any work, and what they become: the
settings recorded in ``batch.json`` (a resume must repeat them) and the options of every fit task.

:func:`check_options` is the single place where batch options are validated; a shared value
object for fit options can replace its fit-option part without touching the runner.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from ._messages import fail
from .executors import EXECUTORS

SIGNS = ("auto", "electron-positive", "ion-positive")


@dataclass(frozen=True)
class BatchOptions:
    """Checked batch options (see :func:`bayesprobe.batch.fit_many` for their meaning)."""

    config: object
    model: str
    credible_level: float
    seed: int
    priors: dict | None
    student_nu: float | None
    sampler: object
    engine: str
    warm_start: int
    keep_posteriors: bool
    reading: dict           # reader options: columns, sign, max_points

    def manifest(self, table_hash: str | None) -> dict:
        """The settings a resume must repeat (written to ``batch.json``)."""
        r = self.reading
        return {"model": self.model, "credible_level": self.credible_level, "seed": self.seed,
                "config": self.config.to_dict(), "priors": self.priors, "student_nu": self.student_nu,
                "sampler": asdict(self.sampler), "sign": r["sign"], "voltage_column": r["voltage_column"],
                "current_column": r["current_column"], "sweep_column": r["sweep_column"],
                "sweep_table_sha256": table_hash, "engine": self.engine,
                **({"warm_start": self.warm_start} if self.warm_start else {})}

    def fit_task(self, sweep, config, seed: int, meta: dict) -> dict:
        """The worker task fitting ``sweep`` with ``config`` and its own ``seed``."""
        return {"sweep": sweep, "config": config, "model": self.model, "credible_level": self.credible_level,
                "priors": self.priors, "student_nu": self.student_nu, "seed": seed, "sampler": self.sampler,
                "keep_posterior": self.keep_posteriors, "engine": self.engine, "meta": meta}


def _is_int(x) -> bool:
    return not isinstance(x, bool) and isinstance(x, (int, np.integer))


def check_options(*, model, credible_level, seed, workers, executor, dask, student_nu, engine, warm_start, sign,
                  priors, config, sampler, keep_posteriors, reading) -> BatchOptions:
    """Validate the options of :func:`~bayesprobe.batch.fit_many`; InputError names the first bad one."""
    from .. import fitting
    from ..inference.sampler import SamplerSettings
    from ..model import ModelConfig

    if model not in fitting.MODEL_CHOICES:
        raise fail(f"model must be one of {', '.join(fitting.MODEL_CHOICES)}, got {model!r}")
    if not (isinstance(credible_level, (int, float)) and 0 < credible_level < 1):
        raise fail(f"credible_level must lie strictly between 0 and 1, got {credible_level!r}")
    if not _is_int(seed) or seed < 0:
        raise fail(f"seed must be a non-negative integer, got {seed!r}")
    if workers is not None and (not _is_int(workers) or workers < 1):
        raise fail(f"workers must be a positive integer, got {workers!r}")
    _check_executor(executor, dask, workers)
    if student_nu is not None and not (isinstance(student_nu, (int, float)) and np.isfinite(student_nu)
                                       and student_nu > 0):
        raise fail(f"student_nu must be a positive number, got {student_nu!r}")
    engines = getattr(fitting, "ENGINES", ("mcmc",))
    if engine not in engines:
        raise fail(f"engine must be one of {', '.join(engines)}, got {engine!r}")
    if not _is_int(warm_start) or warm_start < 0:
        raise fail(f"warm_start must be a non-negative integer (sweeps per warm-start run), got {warm_start!r}")
    if sign not in SIGNS:
        raise fail(f"sign must be 'auto', 'electron-positive' or 'ion-positive', got {sign!r}")
    if priors is not None and not (isinstance(priors, dict) and all(isinstance(v, dict) for v in priors.values())):
        raise fail("priors must be a dict like {'T_e': {'kind': 'log-uniform', 'lower': 0.1, 'upper': 50}}")
    config = config if config is not None else fitting.make_config()
    if not isinstance(config, ModelConfig):
        raise fail("config must be a bayesprobe.ModelConfig (see bayesprobe.fitting.make_config)")
    return BatchOptions(config=config, model=model, credible_level=float(credible_level), seed=int(seed),
                        priors=priors, student_nu=student_nu, sampler=sampler or SamplerSettings(), engine=engine,
                        warm_start=int(warm_start) if warm_start > 1 else 0, keep_posteriors=bool(keep_posteriors),
                        reading=reading)


def _check_executor(executor, dask, workers):
    if executor is not None and executor not in EXECUTORS:
        raise fail(f"executor must be one of {', '.join(EXECUTORS)}, got {executor!r}")
    if dask is not None and executor in ("processes", "serial"):
        raise fail(f"a Dask target (dask={dask!r}) needs executor='dask' or no executor option")
    if executor == "serial" and workers is not None and workers > 1:
        raise fail(f"the serial executor runs one sweep at a time in this process; drop workers={workers!r} "
                   "or use executor='processes'")
