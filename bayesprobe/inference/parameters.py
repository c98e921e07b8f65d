"""One description per fitted parameter: name, unit, label, prior, transform.

The sampler works in coordinates ``z``: ``z = ln(x)`` for positive scale
parameters (densities, temperatures, noise levels), ``z = logit(x)`` for
fractions, and ``z = x`` for potentials. A prior is stated in physical units and
evaluated in ``z`` (with the Jacobian), so a log-uniform prior on x is flat in z.

Default priors (all weakly informative and physically bounded; override with a
dict or a TOML table ``[prior.NAME]`` holding ``kind`` and its numbers):

=================  =============  ==========================================
parameter          kind           default support
=================  =============  ==========================================
n_e, n_i           log-uniform    1e12 .. 1e21 m^-3
T_e, T_e_cold      log-uniform    0.1 .. 100 eV
T_e_hot            log-uniform    0.5 .. 300 eV (and T_e_hot >= 1.5 T_e_cold)
hot_fraction       beta(1, 4)     0 .. 0.5, sampled as logit (density 4 at 0: "no hot
                                  population" is allowed without a hard boundary; the hot
                                  group is the minority, which with the temperature
                                  ordering removes the mirror-image solution)
V_p                uniform        V_min .. V_max + (V_max - V_min)/2 of the sweep
sigma_floor        log-uniform    1e-7 .. 1 times max|I| of the sweep
sigma_rel          log-uniform    1e-4 .. 1
=================  =============  ==========================================

Distortion (nuisance) parameters and the fitted Student-t degrees of freedom have their
defaults and sources in :func:`bayesprobe.inference.posterior.default_parameters`.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Mapping

import numpy as np

__all__ = ["Prior", "Parameter", "ParameterSet", "PRIOR_KINDS", "TRANSFORMS"]

PRIOR_KINDS = ("uniform", "log-uniform", "normal", "log-normal", "beta", "gamma")
TRANSFORMS = ("identity", "log", "logit")


def _num(d, k):
    try:
        v = float(d[k])
    except (TypeError, ValueError):
        raise ValueError(f"prior field {k!r} must be a number, got {d[k]!r}") from None
    if not math.isfinite(v):
        raise ValueError(f"prior field {k!r} must be finite")
    return v


@dataclass(frozen=True)
class Prior:
    """A prior in physical units.

    ``uniform``/``log-uniform`` use ``lower`` and ``upper``; ``normal`` uses
    ``mean`` and ``sd`` (on x); ``log-normal`` uses ``mean`` and ``sd`` of ln x;
    ``beta`` uses ``a`` and ``b`` (for fractions in (0, 1)); ``gamma`` uses shape ``a``
    and rate ``b`` (density x^(a-1) e^(-b x), x > 0). ``lower``/``upper`` also
    truncate normal and gamma priors when given.
    """

    kind: str
    lower: float | None = None
    upper: float | None = None
    mean: float | None = None
    sd: float | None = None
    a: float | None = None
    b: float | None = None

    def __post_init__(self):
        if self.kind not in PRIOR_KINDS:
            raise ValueError(f"prior kind must be one of {', '.join(PRIOR_KINDS)}, got {self.kind!r}")
        if self.kind in ("uniform", "log-uniform"):
            if self.lower is None or self.upper is None or not self.upper > self.lower:
                raise ValueError(f"a {self.kind} prior needs lower < upper, got {self.lower!r}, {self.upper!r}")
            if self.kind == "log-uniform" and self.lower <= 0:
                raise ValueError("a log-uniform prior needs a positive lower bound")
        elif self.kind in ("beta", "gamma"):
            if self.a is None or self.b is None or not (self.a > 0 and self.b > 0):
                raise ValueError(f"a {self.kind} prior needs positive a and b")
        else:
            if self.mean is None or self.sd is None or not self.sd > 0:
                raise ValueError(f"a {self.kind} prior needs mean and a positive sd")

    def to_dict(self) -> dict:
        return {k: getattr(self, k) for k in ("kind", "lower", "upper", "mean", "sd", "a", "b")
                if getattr(self, k) is not None}

    @classmethod
    def from_dict(cls, d: Mapping) -> "Prior":
        fields = ("lower", "upper", "mean", "sd", "a", "b")
        unknown = set(d) - {"kind", *fields}
        if unknown:
            raise ValueError(f"unknown prior field(s) {sorted(unknown)}; use kind, lower, upper, mean, sd, a, b")
        if "kind" not in d:
            raise ValueError("a prior needs a 'kind' (" + ", ".join(PRIOR_KINDS) + ")")
        return cls(str(d["kind"]), **{k: _num(d, k) for k in fields if k in d})


@dataclass(frozen=True)
class Parameter:
    """A fitted parameter: the single source of its name, unit, label, prior and transform.

    ``transform`` is ``identity``, ``log`` or ``logit``; ``log=True`` is shorthand for
    ``transform="log"``.
    """

    name: str
    unit: str
    label: str
    prior: Prior
    log: bool = False
    description: str = ""
    transform: str | None = None

    def __post_init__(self):
        t = self.transform or ("log" if self.log else "identity")
        if t not in TRANSFORMS:
            raise ValueError(f"transform must be one of {', '.join(TRANSFORMS)}, got {t!r}")
        object.__setattr__(self, "transform", t)
        object.__setattr__(self, "log", t == "log")
        if self.prior.kind == "beta" and t != "logit":
            raise ValueError(f"{self.name}: a beta prior needs the logit transform")

    def to_z(self, x):
        x = np.asarray(x, float)
        if self.transform == "log":
            return np.log(x)
        if self.transform == "logit":
            return np.log(x) - np.log1p(-x)
        return x

    def from_z(self, z):
        if self.transform == "log":
            return np.exp(z)
        if self.transform == "logit":
            return 1.0 / (1.0 + np.exp(-z))
        return z

    def z_bounds(self) -> tuple[float, float]:
        lo, hi = self.prior.lower, self.prior.upper
        if self.transform == "logit":
            lo = lo if lo is not None and lo > 0 else None
            hi = hi if hi is not None and hi < 1 else None
            return (float(self.to_z(lo)) if lo is not None else -np.inf,
                    float(self.to_z(hi)) if hi is not None else np.inf)
        if self.transform == "log":
            return (math.log(lo) if lo is not None and lo > 0 else -np.inf,
                    math.log(hi) if hi is not None else np.inf)
        return (lo if lo is not None else -np.inf, hi if hi is not None else np.inf)

    def _log_jacobian(self, z, x):
        """log |dx/dz|."""
        if self.transform == "log":
            return z
        if self.transform == "logit":
            return np.log(x) + np.log1p(-x)
        return np.zeros_like(z)

    def log_prior_z(self, z):
        """Log prior density in z coordinates (up to a constant), -inf outside the support."""
        z = np.asarray(z, float)
        lo, hi = self.z_bounds()
        inside = (z >= lo) & (z <= hi)
        p = self.prior
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            x = self.from_z(z)
            jac = self._log_jacobian(z, x)
            if p.kind == "uniform":
                val = jac
            elif p.kind == "log-uniform":
                val = jac - np.log(np.abs(x))
            elif p.kind == "normal":
                val = -0.5 * ((x - p.mean) / p.sd) ** 2 + jac
            elif p.kind == "log-normal":
                lx = np.log(x)
                val = -0.5 * ((lx - p.mean) / p.sd) ** 2 - lx + jac
            elif p.kind == "gamma":
                val = (p.a - 1) * np.log(x) - p.b * x + jac
            else:  # beta
                val = (p.a - 1) * np.log(x) + (p.b - 1) * np.log1p(-x) + jac
            return np.where(inside & np.isfinite(val), val, -np.inf)

    def with_prior(self, prior: Prior) -> "Parameter":
        return replace(self, prior=prior)


class ParameterSet:
    """An ordered collection of :class:`Parameter` with vectorised transforms."""

    def __init__(self, params):
        self.params = tuple(params)
        self.names = tuple(p.name for p in self.params)
        if len(set(self.names)) != len(self.names):
            raise ValueError("duplicate parameter names")
        self.index = {n: i for i, n in enumerate(self.names)}
        bounds = np.array([p.z_bounds() for p in self.params])
        self.z_lower, self.z_upper = bounds[:, 0], bounds[:, 1]
        flat = {("uniform", "identity"), ("log-uniform", "log")}
        self._shaped = [i for i, p in enumerate(self.params) if (p.prior.kind, p.transform) not in flat]

    def __len__(self):
        return len(self.params)

    def __iter__(self):
        return iter(self.params)

    def __getitem__(self, name) -> Parameter:
        return self.params[self.index[name]]

    @property
    def ndim(self) -> int:
        return len(self.params)

    def to_physical(self, Z) -> dict:
        """(k, d) z-array -> dict name -> (k,) physical values."""
        Z = np.atleast_2d(Z)
        return {p.name: p.from_z(Z[:, i]) for i, p in enumerate(self.params)}

    def to_z(self, values: Mapping) -> np.ndarray:
        return np.array([p.to_z(values[p.name]) for p in self.params], dtype=float)

    def log_prior(self, Z) -> np.ndarray:
        Z = np.atleast_2d(Z)
        inside = np.all((Z >= self.z_lower) & (Z <= self.z_upper), axis=1)
        total = np.where(inside, 0.0, -np.inf)
        for i in self._shaped:           # only priors that are not flat in z need evaluating
            total = total + self.params[i].log_prior_z(Z[:, i])
        return total

    def with_priors(self, overrides: Mapping | None) -> "ParameterSet":
        if not overrides:
            return self
        unknown = set(overrides) - set(self.names)
        if unknown:
            raise ValueError(f"prior given for unknown parameter(s) {sorted(unknown)}; "
                             f"this model has {', '.join(self.names)}")
        new = []
        for p in self.params:
            if p.name in overrides:
                o = overrides[p.name]
                prior = o if isinstance(o, Prior) else Prior.from_dict(o)
                new.append(replace(p, prior=prior))
            else:
                new.append(p)
        return ParameterSet(new)

    def describe(self) -> dict:
        return {p.name: {"unit": p.unit, "transform": p.transform,
                         "prior": p.prior.to_dict(), "description": p.description} for p in self.params}
