"""The options of a batch, checked before any work, and what they become: the settings recorded
in ``batch.json`` (a resume must repeat them) and the options of every fit task.

The options of the fits are one :class:`~bayesprobe.options.FitOptions`, checked by it with the
messages :func:`bayesprobe.fit` gives; :func:`check_options` adds only the rules of a batch
(workers and executor, warm start, a seed every sweep's seed is derived from, a fixed Student-t
``nu``).
"""
from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from ._messages import fail
from .executors import EXECUTORS


@dataclass(frozen=True)
class BatchOptions:
    """Checked batch options (see :func:`bayesprobe.batch.fit_many` for their meaning).

    ``fit`` holds the options of every fit (config, model, seed, ...); each sweep's task gets a
    copy with its own config and seed.
    """

    fit: object             # FitOptions
    warm_start: int
    keep_posteriors: bool
    reading: dict           # reader options: columns, sign, max_points

    @property
    def config(self):
        return self.fit.config

    @property
    def seed(self) -> int:
        return self.fit.seed

    def manifest(self, table_hash: str | None) -> dict:
        """The settings a resume must repeat (written to ``batch.json``)."""
        f, r = self.fit, self.reading
        return {"model": f.model, "credible_level": float(f.credible_level), "seed": int(f.seed),
                "config": f.config.to_dict(), "priors": _plain_priors(f.priors), "student_nu": f.student_nu,
                "sampler": asdict(f.sampler), "sign": r["sign"], "voltage_column": r["voltage_column"],
                "current_column": r["current_column"], "sweep_column": r["sweep_column"],
                "sweep_table_sha256": table_hash, "engine": f.engine,
                **({"warm_start": self.warm_start} if self.warm_start else {})}

    def fit_task(self, sweep, config, seed: int, meta: dict) -> dict:
        """The worker task fitting ``sweep`` with ``config`` and its own ``seed``."""
        return {"sweep": sweep, "options": self.fit.with_(config=config, seed=seed), "seed": seed,
                "keep_posterior": self.keep_posteriors, "meta": meta}


def _plain_priors(priors):
    """The prior overrides as plain dicts (a ``Prior`` object as its ``to_dict()``)."""
    from ..inference.parameters import Prior
    if priors is None:
        return None
    return {k: v.to_dict() if isinstance(v, Prior) else v for k, v in priors.items()}


def _is_int(x) -> bool:
    return not isinstance(x, bool) and isinstance(x, (int, np.integer))


def check_options(*, model, credible_level, seed, workers, executor, dask, student_nu, engine, warm_start, sign,
                  priors, config, sampler, keep_posteriors, reading) -> BatchOptions:
    """Validate the options of :func:`~bayesprobe.batch.fit_many`; InputError names the first bad one."""
    from .. import fitting
    from ..options import FitOptions

    if workers is not None and (not _is_int(workers) or workers < 1):
        raise fail(f"workers must be a positive integer, got {workers!r}")
    _check_executor(executor, dask, workers)
    if not _is_int(warm_start) or warm_start < 0:
        raise fail(f"warm_start must be a non-negative integer (sweeps per warm-start run), got {warm_start!r}")
    if seed is None:
        raise fail("seed must be a non-negative integer in a batch (every sweep's seed is derived from it; "
                   "None, a fresh random seed, is for single fits), got None")
    if isinstance(student_nu, str):
        raise fail(f"student_nu must be a positive number in a batch (a fitted nu, 'fit', is for single fits), "
                   f"got {student_nu!r}")
    try:
        fit = FitOptions.from_mapping({
            "model": model, "credible_level": credible_level, "seed": seed, "priors": priors,
            "student_nu": student_nu, "engine": engine, "sampler": sampler, "sign": sign, "progress": False,
            "config": config if config is not None else fitting.make_config()})
    except ValueError as exc:
        raise fail(str(exc)) from None
    return BatchOptions(fit=fit, warm_start=int(warm_start) if warm_start > 1 else 0,
                        keep_posteriors=bool(keep_posteriors), reading=reading)


def _check_executor(executor, dask, workers):
    if executor is not None and executor not in EXECUTORS:
        raise fail(f"executor must be one of {', '.join(EXECUTORS)}, got {executor!r}")
    if dask is not None and executor in ("processes", "serial"):
        raise fail(f"a Dask target (dask={dask!r}) needs executor='dask' or no executor option")
    if executor == "serial" and workers is not None and workers > 1:
        raise fail(f"the serial executor runs one sweep at a time in this process; drop workers={workers!r} "
                   "or use executor='processes'")
