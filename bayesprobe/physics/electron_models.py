"""Electron models as strategy objects: one class per electron energy distribution.

Everything outside the physics layer asks the model object, never compares model names:
which parameters it has (``parameter_names``), which of them are temperatures, whether it
has two temperatures, and its screening, effective and hottest temperatures. The currents
themselves live in :mod:`bayesprobe.physics.electrons`.

Adding a model: one subclass here registered in :data:`ELECTRON_MODELS`, its parameters in
:mod:`bayesprobe.quantities`, its current in :mod:`bayesprobe.physics.electrons`, and tests.
"""
from __future__ import annotations

from abc import ABC, abstractmethod
from typing import Mapping

import numpy as np

__all__ = ["ElectronModel", "Maxwellian", "BiMaxwellian", "ELECTRON_MODELS", "electron_model"]


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

    @abstractmethod
    def screening_temperature(self, params: Mapping):
        """Temperature (eV) that sets the Debye length and the Bohm speed."""

    @abstractmethod
    def effective_temperature(self, params: Mapping):
        """Two thirds of the mean electron energy (eV)."""

    @abstractmethod
    def hottest_temperature(self, params: Mapping):
        """The largest temperature of the distribution (eV): sets search brackets."""

    def __repr__(self):
        return f"{type(self).__name__}()"


class Maxwellian(ElectronModel):
    name = "maxwellian"
    parameter_names = ("T_e",)
    temperature_names = ("T_e",)
    two_temperature = False
    complexity = 0

    def screening_temperature(self, params):
        return np.asarray(params["T_e"], float)

    effective_temperature = screening_temperature
    hottest_temperature = screening_temperature


class BiMaxwellian(ElectronModel):
    """A cold and a hot Maxwellian group; ``hot_fraction`` = n_hot / n_e."""

    name = "bi-maxwellian"
    parameter_names = ("T_e_cold", "T_e_hot", "hot_fraction")
    temperature_names = ("T_e_cold", "T_e_hot", "hot_fraction")
    two_temperature = True
    complexity = 1

    def screening_temperature(self, params):
        """Harmonic, density-weighted mean of the group temperatures."""
        a = np.asarray(params["hot_fraction"], float)
        return 1.0 / ((1.0 - a) / np.asarray(params["T_e_cold"], float) + a / np.asarray(params["T_e_hot"], float))

    def effective_temperature(self, params):
        a = np.asarray(params["hot_fraction"], float)
        return (1 - a) * np.asarray(params["T_e_cold"], float) + a * np.asarray(params["T_e_hot"], float)

    def hottest_temperature(self, params):
        return np.asarray(params["T_e_hot"], float)


#: name -> model object, in comparison order (simplest first)
ELECTRON_MODELS: dict[str, ElectronModel] = {m.name: m for m in (Maxwellian(), BiMaxwellian())}


def electron_model(name) -> ElectronModel:
    """The model object of ``name`` (an :class:`ElectronModel` is returned as it is)."""
    if isinstance(name, ElectronModel):
        return name
    try:
        return ELECTRON_MODELS[name]
    except (KeyError, TypeError):
        raise ValueError(f"electron model must be one of {', '.join(ELECTRON_MODELS)}, got {name!r}") from None
