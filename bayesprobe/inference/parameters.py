"""One description per fitted parameter: name, unit, label, prior, transform.

The sampler works in unconstrained-ish coordinates ``z``: ``z = ln(x)`` for
positive scale parameters (densities, temperatures, noise levels) and ``z = x``
for potentials. A prior is stated in physical units and evaluated in ``z``
(with the Jacobian), so a log-uniform prior on x is flat in z.

Default priors (all weakly informative and physically bounded; override with a
dict or a TOML table ``[prior.NAME]`` holding ``kind`` and its numbers):

=================  =============  ==========================================
parameter          kind           default support
=================  =============  ==========================================
n_e, n_i           log-uniform    1e12 .. 1e21 m^-3
T_e, T_e_cold      log-uniform    0.1 .. 100 eV
T_e_hot            log-uniform    0.5 .. 300 eV (and T_e_hot > T_e_cold)
hot_fraction       log-uniform    1e-4 .. 0.5
V_p                uniform        V_min .. V_max + (V_max - V_min)/2 of the sweep
sigma_floor        log-uniform    1e-7 .. 1 times max|I| of the sweep
sigma_rel          log-uniform    1e-4 .. 1
=================  =============  ==========================================
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Mapping

import numpy as np

__all__ = ["Prior", "Parameter", "ParameterSet", "PRIOR_KINDS"]

PRIOR_KINDS = ("uniform", "log-uniform", "normal", "log-normal")


@dataclass(frozen=True)
class Prior:
    """A prior in physical units.

    ``uniform``/``log-uniform`` use ``lower`` and ``upper``; ``normal`` uses
    ``mean`` and ``sd`` (on x); ``log-normal`` uses ``mean`` and ``sd`` of ln x.
    ``lower``/``upper`` also truncate normal priors when given.
    """

    kind: str
    lower: float | None = None
    upper: float | None = None
    mean: float | None = None
    sd: float | None = None

    def __post_init__(self):
        if self.kind not in PRIOR_KINDS:
            raise ValueError(f"prior kind must be one of {', '.join(PRIOR_KINDS)}, got {self.kind!r}")
        if self.kind in ("uniform", "log-uniform"):
            if self.lower is None or self.upper is None or not self.upper > self.lower:
                raise ValueError(f"a {self.kind} prior needs lower < upper, got {self.lower!r}, {self.upper!r}")
            if self.kind == "log-uniform" and self.lower <= 0:
                raise ValueError("a log-uniform prior needs a positive lower bound")
        else:
            if self.mean is None or self.sd is None or not self.sd > 0:
                raise ValueError(f"a {self.kind} prior needs mean and a positive sd")

    def to_dict(self) -> dict:
        return {k: v for k, v in (("kind", self.kind), ("lower", self.lower), ("upper", self.upper),
                                  ("mean", self.mean), ("sd", self.sd)) if v is not None}

    @classmethod
    def from_dict(cls, d: Mapping) -> "Prior":
        unknown = set(d) - {"kind", "lower", "upper", "mean", "sd"}
        if unknown:
            raise ValueError(f"unknown prior field(s) {sorted(unknown)}; use kind, lower, upper, mean, sd")
        if "kind" not in d:
            raise ValueError("a prior needs a 'kind' (" + ", ".join(PRIOR_KINDS) + ")")
        vals = {}
        for k in ("lower", "upper", "mean", "sd"):
            if k in d:
                try:
                    vals[k] = float(d[k])
                except (TypeError, ValueError):
                    raise ValueError(f"prior field {k!r} must be a number, got {d[k]!r}") from None
                if not math.isfinite(vals[k]):
                    raise ValueError(f"prior field {k!r} must be finite")
        return cls(str(d["kind"]), **vals)


@dataclass(frozen=True)
class Parameter:
    """A fitted parameter: the single source of its name, unit, label, prior and transform."""

    name: str
    unit: str
    label: str
    prior: Prior
    log: bool
    description: str = ""

    def to_z(self, x):
        return np.log(x) if self.log else np.asarray(x, float)

    def from_z(self, z):
        return np.exp(z) if self.log else z

    def z_bounds(self) -> tuple[float, float]:
        lo, hi = self.prior.lower, self.prior.upper
        if self.log:
            return (math.log(lo) if lo is not None and lo > 0 else -np.inf,
                    math.log(hi) if hi is not None else np.inf)
        return (lo if lo is not None else -np.inf, hi if hi is not None else np.inf)

    def log_prior_z(self, z):
        """Log prior density in z coordinates (up to a constant), -inf outside the support."""
        lo, hi = self.z_bounds()
        inside = (z >= lo) & (z <= hi)
        p = self.prior
        if p.kind in ("uniform", "log-uniform"):
            # density in z: flat if the kind matches the transform, else with Jacobian
            if p.kind == "uniform" and self.log:
                val = z                      # x uniform -> p(z) ∝ e^z
            elif p.kind == "log-uniform" and not self.log:
                val = -np.log(np.abs(z) + 1e-300)
            else:
                val = np.zeros_like(z)
        elif p.kind == "normal":
            x = self.from_z(z)
            val = -0.5 * ((x - p.mean) / p.sd) ** 2 + (z if self.log else 0.0)
        else:  # log-normal: normal in ln x
            lx = z if self.log else np.log(np.maximum(z, 1e-300))
            val = -0.5 * ((lx - p.mean) / p.sd) ** 2 - (0.0 if self.log else lx)
        return np.where(inside, val, -np.inf)

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
        self._log = np.array([p.log for p in self.params])
        bounds = np.array([p.z_bounds() for p in self.params])
        self.z_lower, self.z_upper = bounds[:, 0], bounds[:, 1]
        flat = {("uniform", False), ("log-uniform", True)}
        self._shaped = [i for i, p in enumerate(self.params) if (p.prior.kind, p.log) not in flat]

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
        return {p.name: (np.exp(Z[:, i]) if p.log else Z[:, i]) for i, p in enumerate(self.params)}

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
                new.append(p.with_prior(o if isinstance(o, Prior) else Prior.from_dict(o)))
            else:
                new.append(p)
        return ParameterSet(new)

    def describe(self) -> dict:
        return {p.name: {"unit": p.unit, "transform": "log" if p.log else "identity",
                         "prior": p.prior.to_dict(), "description": p.description} for p in self.params}
