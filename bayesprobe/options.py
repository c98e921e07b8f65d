"""``FitOptions``: every option of :func:`bayesprobe.fit` as one frozen, validated value.

:func:`bayesprobe.fit` builds one from its keywords (``fit(sweep, options=FitOptions(...))``
gives it directly); the command line and :func:`bayesprobe.batch.fit_many` can build the
same object from a plain mapping (:meth:`FitOptions.from_mapping`) and so share its
checks and their one-line messages (``ValueError``). The physics of the model (probe,
ion, ion collection, distortion switches) is one option, ``config``, itself a validated
:class:`~bayesprobe.model.ModelConfig` (see :func:`bayesprobe.fitting.make_config`).
"""
from __future__ import annotations

from dataclasses import asdict, dataclass, fields, replace
from typing import Mapping

import numpy as np

from .distortion_choice import apply_distortions, parse_distortions
from .inference.engines import EngineSettings, get_engine
from .inference.importance import ImportanceSettings
from .inference.parameters import Prior
from .inference.sampler import SamplerSettings
from .model import ModelConfig
from .physics.electron_models import ELECTRON_MODELS, electron_model

__all__ = ["FitOptions", "MODEL_CHOICES", "SIGNS"]

#: option value that fits every electron model and keeps the one PSIS-LOO supports
_SELECT = "auto"
#: values of ``model``: the electron models, simplest first, and ``auto``
MODEL_CHOICES = tuple(sorted(ELECTRON_MODELS, key=lambda n: ELECTRON_MODELS[n].complexity)) + (_SELECT,)
#: values of ``sign`` (the current convention of arrays; a Sweep carries its own)
SIGNS = ("auto", "electron-positive", "ion-positive")
#: extra keys :meth:`FitOptions.from_mapping` understands besides the field names
_SHORTHANDS = ("max_steps",)


@dataclass(frozen=True)
class FitOptions:
    """Options of one fit (defaults as in :func:`bayesprobe.fit`; see its docstring for their meaning).

    ``distortions`` is stored parsed: a tuple of distortion names, or ``"auto"``. ``sampler``
    and ``importance`` are the settings of the two engines (``None`` gives the defaults).
    ``config`` ``None`` means :func:`bayesprobe.fitting.make_config` with its defaults.
    """

    model: str = "maxwellian"
    credible_level: float = 0.9
    priors: Mapping | None = None
    student_nu: float | str | None = None
    distortions: tuple | str | None = ()
    engine: str = "mcmc"
    seed: int | None = 0
    sampler: SamplerSettings | None = None
    importance: ImportanceSettings | None = None
    progress: bool | None = None
    start: object = None
    config: ModelConfig | None = None
    sign: str = "auto"

    def __post_init__(self):
        for check in (_check_level, _check_model, _check_nu, _check_distortions, _check_engine, _check_seed,
                      _check_settings, _check_priors, _check_progress, _check_start, _check_config, _check_sign):
            for name, value in check(self).items():
                object.__setattr__(self, name, value)

    # ------------------------------------------------------------------ building

    @classmethod
    def from_mapping(cls, mapping: Mapping) -> "FitOptions":
        """Options from a plain mapping of field names (as from a command line or a batch call).

        Besides the field names, ``max_steps`` sets the step budget of the default (or given)
        sampler settings. Unknown keys are an error.
        """
        if not isinstance(mapping, Mapping):
            raise ValueError(f"fit options must be a mapping of option names to values, got {type(mapping).__name__}")
        names = [f.name for f in fields(cls)]
        unknown = [k for k in mapping if k not in names and k not in _SHORTHANDS]
        if unknown:
            raise ValueError(f"unknown fit option(s) {', '.join(repr(k) for k in unknown)}; "
                             f"use any of {', '.join(names + list(_SHORTHANDS))}")
        kw = {k: v for k, v in mapping.items() if k in names}
        if "max_steps" in mapping:
            steps = mapping["max_steps"]
            if isinstance(steps, bool) or not isinstance(steps, (int, np.integer)) or steps < 1:
                raise ValueError(f"max_steps must be a positive integer, got {steps!r}")
            kw["sampler"] = replace(kw.get("sampler") or SamplerSettings(), max_steps=int(steps))
        return cls(**kw)

    def with_(self, **changes) -> "FitOptions":
        """A copy with ``changes`` (validated again)."""
        return replace(self, **changes)

    # ------------------------------------------------------------------ reading

    @property
    def electron_models(self) -> tuple:
        """The electron model objects to fit, simplest first (all of them for ``model="auto"``)."""
        if self.selects_model:
            return tuple(sorted(ELECTRON_MODELS.values(), key=lambda m: m.complexity))
        return (electron_model(self.model),)

    @property
    def selects_model(self) -> bool:
        """True when the electron model is chosen by PSIS-LOO among all of them."""
        return self.model == _SELECT

    @property
    def selects_distortions(self) -> bool:
        """True when the distortions are chosen by PSIS-LOO (``distortions="auto"``)."""
        return self.distortions == _SELECT

    @property
    def engine_settings(self) -> EngineSettings:
        return EngineSettings(sampler=self.sampler, importance=self.importance, progress=self.progress)

    def record(self) -> dict:
        """JSON-ready record of the options that decide the numbers (for manifests)."""
        return {"model": self.model, "credible_level": float(self.credible_level),
                "seed": None if self.seed is None else int(self.seed),
                "priors": None if self.priors is None else {k: (v.to_dict() if isinstance(v, Prior) else dict(v))
                                                            for k, v in self.priors.items()},
                "student_nu": self.student_nu,
                "distortions": self.distortions if self.selects_distortions else list(self.distortions),
                "engine": self.engine, "sampler": asdict(self.sampler), "importance": asdict(self.importance),
                "config": None if self.config is None else self.config.to_dict(), "sign": self.sign}


# ---------------------------------------------------------------------- checks
# each returns the normalised values to store (possibly none) or raises a one-line ValueError

def _check_level(o):
    c = o.credible_level
    if isinstance(c, bool) or not (isinstance(c, (int, float, np.integer, np.floating)) and 0 < c < 1):
        raise ValueError(f"credible_level must lie strictly between 0 and 1, got {c!r}")
    return {}


def _check_model(o):
    if not isinstance(o.model, str) or o.model not in MODEL_CHOICES:
        raise ValueError(f"model must be one of {', '.join(MODEL_CHOICES)}, got {o.model!r}")
    return {}


def _check_nu(o):
    nu = o.student_nu
    if nu is not None and not (isinstance(nu, str) and nu == "fit") and not (
            isinstance(nu, (int, float, np.integer, np.floating)) and not isinstance(nu, bool)
            and np.isfinite(nu) and nu > 0):
        raise ValueError(f"student_nu must be a positive number or 'fit', got {nu!r}")
    return {}


def _check_distortions(o):
    wanted = parse_distortions(o.distortions)
    if wanted != _SELECT and "outliers" in wanted:
        apply_distortions(("outliers",), ModelConfig(), o.student_nu)     # the student_nu conflict
    return {"distortions": wanted}


def _check_engine(o):
    get_engine(o.engine)                 # the registry's one message for an unknown name
    return {}


def _check_seed(o):
    s = o.seed
    if s is not None and (isinstance(s, bool) or not isinstance(s, (int, np.integer)) or s < 0):
        raise ValueError(f"seed must be a non-negative integer (or None for a fresh random seed), got {s!r}")
    return {}


def _check_settings(o):
    sampler = SamplerSettings() if o.sampler is None else o.sampler
    importance = ImportanceSettings() if o.importance is None else o.importance
    if not isinstance(sampler, SamplerSettings):
        raise ValueError(f"sampler must be a bayesprobe.SamplerSettings, got {type(sampler).__name__}")
    if not isinstance(importance, ImportanceSettings):
        raise ValueError(f"importance must be a bayesprobe.inference.importance.ImportanceSettings, "
                         f"got {type(importance).__name__}")
    return {"sampler": sampler, "importance": importance}


def _check_priors(o):
    p = o.priors
    if p is None:
        return {}
    if not isinstance(p, Mapping) or not all(isinstance(v, (Mapping, Prior)) for v in p.values()):
        raise ValueError("priors must be a dict like {'T_e': {'kind': 'log-uniform', 'lower': 0.1, 'upper': 50}}")
    return {"priors": dict(p)}


def _check_progress(o):
    if o.progress is not None and not isinstance(o.progress, (bool, np.bool_, int)):
        raise ValueError(f"progress must be True, False or None (a bar when writing to a terminal), "
                         f"got {o.progress!r}")
    return {}


def _check_start(o):
    from .result import FitResult
    if o.start is not None and not isinstance(o.start, (FitResult, Mapping)):
        raise ValueError(f"start must be a FitResult or a dict of parameter values, got {type(o.start).__name__}")
    return {}


def _check_config(o):
    if o.config is not None and not isinstance(o.config, ModelConfig):
        raise ValueError("config must be a bayesprobe.ModelConfig (see bayesprobe.fitting.make_config)")
    return {}


def _check_sign(o):
    if not isinstance(o.sign, str) or o.sign not in SIGNS:
        raise ValueError(f"sign must be 'auto', 'electron-positive' or 'ion-positive', got {o.sign!r}")
    return {}
