"""Electron models as strategy objects: one class per electron energy distribution.

Everything outside the physics layer asks the model object, never compares model names:
which parameters it has (``parameter_names``), which of them are temperatures, whether it
has two temperatures, its screening, effective, coldest and hottest temperatures, and its
current (and, on request, the slope dI/dV of that current) from one body:
``model.current(V, cols, probe, sheath_expansion=..., slope=False)``. The formulas of one
Maxwellian group live in :mod:`bayesprobe.physics.electrons`; a model made of Maxwellian groups
only says what its groups are (:meth:`ElectronModel.groups`). The RF phase average wraps any
model (:class:`bayesprobe.physics.distortions.RFAveraged`).

Adding a model: one subclass (``groups``, or ``current`` for a distribution that is not a sum
of Maxwellians) registered with :func:`register_electron_model`, its parameters in
:mod:`bayesprobe.quantities` (priors, units, labels), and tests.
"""
from __future__ import annotations

from abc import ABC, abstractmethod
from types import MappingProxyType
from typing import Mapping

import numpy as np

from .electrons import _maxwellian, _sum_groups, maxwellian_groups

__all__ = ["ElectronModel", "Maxwellian", "BiMaxwellian", "ELECTRON_MODELS", "electron_model",
           "register_electron_model"]


class ElectronModel(ABC):
    """Interface of an electron model (see the module docstring)."""

    #: name used in options, files and summaries
    name: str = ""
    #: fitted parameters of the distribution besides n_e and V_p, in canonical order
    parameter_names: tuple[str, ...] = ()
    #: the temperature-like parameters (shown together in tables and figures)
    temperature_names: tuple[str, ...] = ()
    #: True when the model has a second (hot) electron group
    two_temperature: bool = False
    #: rank in model comparison: simpler models first (a richer one must earn its place)
    complexity: int = 0
    #: True when the current has slope kinks away from V_p (the interpolated series-resistance
    #: solve then falls back to Newton)
    kinks: bool = False
    #: default truth values of the model's own parameters for synthetic sweeps
    default_truth: Mapping[str, float] = MappingProxyType({})

    def groups(self, cols: Mapping):
        """The Maxwellian groups ``((density, temperature), ...)`` the distribution is made of, from
        the parameter columns; None for a distribution that is not a sum of Maxwellians (it then
        overrides :meth:`current`)."""
        return None

    def current(self, V, cols: Mapping, probe, *, sheath_expansion=False, slope=False):
        """Electron current (A, positive) at bias ``V`` for the parameter columns ``cols`` (``n_e``,
        ``V_p`` and the model's own parameters, broadcasting against ``V``); with ``slope=True`` the
        pair (current, dI/dV in A/V). Unchecked (the hot path). Default: the sum of the groups."""
        groups = self.groups(cols)
        if groups is None:
            raise TypeError(f"{type(self).__name__} must define groups() or current()")
        return _sum_groups(_maxwellian, V, cols["V_p"], groups, probe, sheath_expansion, slope)

    @abstractmethod
    def screening_temperature(self, params: Mapping):
        """Temperature (eV) that sets the Debye length and the Bohm speed."""

    @abstractmethod
    def effective_temperature(self, params: Mapping):
        """Two thirds of the mean electron energy (eV)."""

    @abstractmethod
    def hottest_temperature(self, params: Mapping):
        """The largest temperature of the distribution (eV): sets search brackets."""

    def coldest_temperature(self, params: Mapping):
        """The temperature of the coldest group (eV): sets the finest voltage scale (default the
        screening temperature)."""
        return self.screening_temperature(params)

    def __repr__(self):
        return f"{type(self).__name__}()"


class Maxwellian(ElectronModel):
    name = "maxwellian"
    parameter_names = ("T_e",)
    temperature_names = ("T_e",)
    two_temperature = False
    complexity = 0
    default_truth = MappingProxyType({"T_e": 3.0})

    def groups(self, cols):
        return maxwellian_groups(cols["n_e"], cols["T_e"])

    def screening_temperature(self, params):
        return np.asarray(params["T_e"], float)

    effective_temperature = screening_temperature
    hottest_temperature = screening_temperature
    coldest_temperature = screening_temperature


class BiMaxwellian(ElectronModel):
    """A cold and a hot Maxwellian group; ``hot_fraction`` = n_hot / n_e."""

    name = "bi-maxwellian"
    parameter_names = ("T_e_cold", "T_e_hot", "hot_fraction")
    temperature_names = ("T_e_cold", "T_e_hot", "hot_fraction")
    two_temperature = True
    complexity = 1
    default_truth = MappingProxyType({"T_e_cold": 2.0, "T_e_hot": 10.0, "hot_fraction": 0.05})

    def groups(self, cols):
        """Cold group (1 - a) n_e at ``T_e_cold``, hot group a n_e at ``T_e_hot``."""
        return maxwellian_groups(cols["n_e"], cols["T_e_cold"], cols["hot_fraction"], cols["T_e_hot"])

    def screening_temperature(self, params):
        """Harmonic, density-weighted mean of the group temperatures."""
        a = np.asarray(params["hot_fraction"], float)
        return 1.0 / ((1.0 - a) / np.asarray(params["T_e_cold"], float) + a / np.asarray(params["T_e_hot"], float))

    def effective_temperature(self, params):
        a = np.asarray(params["hot_fraction"], float)
        return (1 - a) * np.asarray(params["T_e_cold"], float) + a * np.asarray(params["T_e_hot"], float)

    def hottest_temperature(self, params):
        return np.asarray(params["T_e_hot"], float)

    def coldest_temperature(self, params):
        return np.asarray(params["T_e_cold"], float)


#: name -> model object, in comparison order (simplest first)
ELECTRON_MODELS: dict[str, ElectronModel] = {m.name: m for m in (Maxwellian(), BiMaxwellian())}


def register_electron_model(model: ElectronModel) -> ElectronModel:
    """Add ``model`` to :data:`ELECTRON_MODELS` under ``model.name`` (a name may be registered once)."""
    if not isinstance(model, ElectronModel):
        raise ValueError("an electron model must be an ElectronModel instance")
    if not model.name or model.name in ELECTRON_MODELS:
        raise ValueError(f"electron model name {model.name!r} is empty or already registered")
    ELECTRON_MODELS[model.name] = model
    return model


def electron_model(name) -> ElectronModel:
    """The model object of ``name`` (an :class:`ElectronModel` is returned as it is)."""
    if isinstance(name, ElectronModel):
        return name
    try:
        return ELECTRON_MODELS[name]
    except (KeyError, TypeError):
        raise ValueError(f"electron model must be one of {', '.join(ELECTRON_MODELS)}, got {name!r}") from None
