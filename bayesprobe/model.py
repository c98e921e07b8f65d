"""The whole I-V characteristic: composes electron and ion currents into one model.

``ModelConfig`` fixes everything that is not inferred (probe, ion, collection theory,
electron model); :func:`probe_current` evaluates the characteristic for ``k``
parameter sets at once; :func:`floating_potential` finds its zero for every set.

Parameter names (physical units):

===============  ======  ==========================================================
``n_e``          m^-3    electron density (total, both groups for bi-Maxwellian)
``n_i``          m^-3    ion density (defaults to ``n_e``: quasi-neutral)
``T_e``          eV      electron temperature (Maxwellian)
``T_e_cold``     eV      cold-group temperature (bi-Maxwellian)
``T_e_hot``      eV      hot-group temperature (bi-Maxwellian)
``hot_fraction`` 1       hot density / total electron density
``V_p``          V       plasma potential
===============  ======  ==========================================================

Distortion (nuisance) parameters, present when the matching ``ModelConfig`` switch is on
(physics and sources in :mod:`bayesprobe.physics.distortions`):

===============  ======  ==========================================================
``V_rf``         V       amplitude of a sinusoidal plasma-potential oscillation
                         (``rf_fluctuation``)
``R_series``     ohm     resistance in series with the probe sheath (``series_resistance``)
``G_leak``       S       leakage conductance in parallel with the probe (``leakage``)
``I_offset``     A       constant current offset (``leakage``)
``V_shift``      V       voltage shift of the rising-bias branch relative to the
                         falling one (``hysteresis``)
``I_cap``        A       displacement current at the mean sweep rate (``hysteresis``)
===============  ======  ==========================================================

The measured current is ``I = f(V - I R_series) + G_leak V + I_offset`` with ``f`` the
plasma characteristic (its electron part phase-averaged over the RF oscillation).
:func:`floating_potential` is the floating potential of the undistorted plasma
characteristic; :func:`measured_floating_potential` is the zero crossing of the full
distorted model (what the instrument shows).

Up/down sweep hysteresis (``hysteresis``; a sweep recorded in both directions)
-------------------------------------------------------------------------------
The two branches share every plasma parameter; what differs between them is

* a voltage shift: a contamination layer on the tip is a leaky capacitor in series
  with the sheath, so the surface potential lags the applied bias and the rising
  branch appears displaced along V relative to the falling one (E. P. Szuszczewicz &
  J. C. Holmes, J. Appl. Phys. 46, 5134 (1975); Hutchinson, *Principles of Plasma
  Diagnostics*, 2nd ed. (2002), ch. 3; from memory). Modelled as the sheath seeing
  ``V - d V_shift / 2`` with ``d = +1`` on the rising branch and ``-1`` on the
  falling one, so ``V_shift > 0`` means the rising branch sits at higher bias and
  ``V_p`` is the mean of the two branches;
* a displacement current through the stray capacitance C of probe and cable,
  ``C dV/dt`` (circuit theory), of opposite sign on the two branches. Written as
  ``I_cap * r`` with ``r`` the sweep rate at each point divided by its mean magnitude
  (``Sweep.ramp``), so ``I_cap = C <|dV/dt|>``.

Leakage is added at the applied bias, the shift acts at the sheath (inside the series
resistance). The per-point ``direction`` and ``ramp`` come with the sweep
(:func:`bayesprobe.sweep.detect_branches`) and are passed as ``branches``.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Mapping

import numpy as np

from .physics.constants import ion_mass as _ion_mass
from .physics.distortions import RFAveraged
from .physics.electron_models import ELECTRON_MODELS as _ELECTRON_MODELS
from .physics.electron_models import ElectronModel, electron_model
from .physics.geometry import Probe
from .physics.ions import ION_THEORIES, IonTheory
from .physics.ions import bohm_factor as _bohm_factor
from .physics.series import series_current
from .quantities import DISTORTIONS

__all__ = ["ModelConfig", "ELECTRON_MODELS", "probe_current", "floating_potential",
           "plasma_parameter_names", "effective_temperature", "distortion_parameter_names",
           "measured_floating_potential", "DISTORTION_SWITCHES"]

#: names of the electron models registered at import (the registry itself:
#: :data:`bayesprobe.physics.electron_models.ELECTRON_MODELS`)
ELECTRON_MODELS = tuple(_ELECTRON_MODELS)
#: ModelConfig switch -> the nuisance parameters it adds
#: default ion temperature in eV: room temperature, for ions that have not been heated
DEFAULT_ION_TEMPERATURE = 0.026

DISTORTION_SWITCHES = {d.switch: d.parameters for d in DISTORTIONS.values() if d.switch is not None}


@dataclass(frozen=True)
class ModelConfig:
    """Everything about the forward model that is fixed during a fit.

    Parameters
    ----------
    probe : Probe
    ion : str or float
        Ion name from the table or mass in u (ignored if ``ion_mass_kg`` is given).
    ion_collection : {"thin-sheath", "oml", "abr", "auto"}
        Name of the ion-collection theory; the object is :attr:`ion_theory`.
    electrons : {"maxwellian", "bi-maxwellian"} or another registered model name
        Name of the electron model; the object is :attr:`electron_model`.
    T_i : float
        Ion temperature in eV (OML ions; fall-off of the ion current above V_p).
    bohm_factor : float or str
        Sheath-edge density factor for thin-sheath ions (default exp(-1/2)).
    sheath_expansion : bool
        Child-law growth of the ion-collecting area (thin-sheath theory).
    electron_sheath_expansion : bool
        Planar probes: electron Child-law growth above V_p (default off).
    quasi_neutral : bool
        If True, n_i is tied to n_e; otherwise both are separate parameters.
    rf_fluctuation : bool
        Phase-average the electron current over a sinusoidal V_p oscillation of
        fitted amplitude ``V_rf`` (ions see the mean potential).
    series_resistance : bool
        Solve I = f(V - I R_series) for a fitted series resistance.
    leakage : bool
        Add a leakage/offset current G_leak V + I_offset.
    hysteresis : bool
        Fit a sweep recorded in both directions with a branch voltage shift
        ``V_shift`` and a displacement current ``I_cap`` (needs ``branches``).
    """

    probe: Probe = field(default_factory=lambda: Probe("cylindrical", radius=50e-6, length=5e-3))
    ion: str | float = "Ar"
    ion_collection: str = "auto"
    electrons: str = "maxwellian"
    T_i: float = DEFAULT_ION_TEMPERATURE
    bohm_factor: float | str = float(np.exp(-0.5))
    sheath_expansion: bool = True
    electron_sheath_expansion: bool = False
    quasi_neutral: bool = False
    ion_mass_kg: float | None = None
    rf_fluctuation: bool = False
    series_resistance: bool = False
    leakage: bool = False
    hysteresis: bool = False

    @property
    def electron_model(self) -> ElectronModel:
        """The electron model object (:mod:`bayesprobe.physics.electron_models`)."""
        return electron_model(self.electrons)

    @property
    def electron_current_model(self) -> ElectronModel:
        """The electron model as the probe sees it: phase-averaged when ``rf_fluctuation`` is on."""
        model = self.electron_model
        return RFAveraged(model) if self.rf_fluctuation else model

    @property
    def ion_theory(self) -> IonTheory:
        """The ion-collection theory object that applies to this probe (``auto`` resolved for planar
        probes; :data:`bayesprobe.physics.ions.ION_THEORIES`)."""
        return ION_THEORIES[self.ion_collection].resolve(self.probe)

    @property
    def distorted(self) -> bool:
        """True when any instrument/plasma distortion is switched on."""
        return bool(self.rf_fluctuation or self.series_resistance or self.leakage or self.hysteresis)

    def undistorted(self) -> "ModelConfig":
        """The same plasma model with every distortion switched off."""
        return replace(self, rf_fluctuation=False, series_resistance=False, leakage=False, hysteresis=False)

    def __post_init__(self):
        if not isinstance(self.probe, Probe):
            raise ValueError("probe must be a bayesprobe.Probe")
        if not isinstance(self.ion_collection, str) or self.ion_collection not in ION_THEORIES:
            raise ValueError(f"ion_collection must be one of {', '.join(ION_THEORIES)}, got {self.ion_collection!r}")
        ION_THEORIES[self.ion_collection].check(self.probe)
        if not isinstance(self.electrons, str) or self.electrons not in _ELECTRON_MODELS:
            raise ValueError(f"electrons must be one of {', '.join(_ELECTRON_MODELS)}, got {self.electrons!r}")
        if not (np.isfinite(self.T_i) and self.T_i > 0):
            raise ValueError(f"T_i must be a positive temperature in eV, got {self.T_i!r}")
        object.__setattr__(self, "bohm_factor", _bohm_factor(self.bohm_factor))
        for switch in DISTORTION_SWITCHES:
            if not isinstance(getattr(self, switch), (bool, np.bool_)):
                raise ValueError(f"{switch} must be True or False, got {getattr(self, switch)!r}")
        if self.ion_mass_kg is None:
            object.__setattr__(self, "ion_mass_kg", _ion_mass(self.ion))
        elif not (np.isfinite(self.ion_mass_kg) and self.ion_mass_kg > 0):
            raise ValueError("ion_mass_kg must be positive")

    def with_(self, **changes) -> "ModelConfig":
        """A copy with some fields changed (``ion_mass_kg`` is recomputed if ``ion`` changes)."""
        if "ion" in changes and "ion_mass_kg" not in changes:
            changes["ion_mass_kg"] = None
        return replace(self, **changes)

    def to_dict(self) -> dict:
        return {"probe": self.probe.to_dict(), "ion": self.ion, "ion_mass_kg": self.ion_mass_kg,
                "ion_collection": self.ion_collection, "electrons": self.electrons,
                "T_i_eV": self.T_i, "bohm_factor": self.bohm_factor,
                "sheath_expansion": self.sheath_expansion,
                "electron_sheath_expansion": self.electron_sheath_expansion,
                "quasi_neutral": self.quasi_neutral,
                "rf_fluctuation": self.rf_fluctuation, "series_resistance": self.series_resistance,
                "leakage": self.leakage, "hysteresis": self.hysteresis}

    @classmethod
    def from_dict(cls, d: Mapping) -> "ModelConfig":
        return cls(probe=Probe.from_dict(d["probe"]), ion=d["ion"], ion_mass_kg=d.get("ion_mass_kg"),
                   ion_collection=d["ion_collection"], electrons=d["electrons"], T_i=d["T_i_eV"],
                   bohm_factor=d["bohm_factor"], sheath_expansion=d["sheath_expansion"],
                   electron_sheath_expansion=d.get("electron_sheath_expansion", False),
                   quasi_neutral=d["quasi_neutral"],
                   rf_fluctuation=bool(d.get("rf_fluctuation", False)),
                   series_resistance=bool(d.get("series_resistance", False)),
                   leakage=bool(d.get("leakage", False)),
                   hysteresis=bool(d.get("hysteresis", False)))


def plasma_parameter_names(config: ModelConfig) -> tuple[str, ...]:
    """Names of the plasma parameters the model needs, in canonical order."""
    names = ["n_e"]
    if not config.quasi_neutral:
        names.append("n_i")
    names += list(config.electron_model.parameter_names)
    names.append("V_p")
    return tuple(names)


def distortion_parameter_names(config: ModelConfig) -> tuple[str, ...]:
    """Names of the distortion (nuisance) parameters switched on in ``config``."""
    return tuple(n for switch, names in DISTORTION_SWITCHES.items() if getattr(config, switch) for n in names)


def _column(params: Mapping, name: str):
    try:
        value = np.asarray(params[name], dtype=float)
    except KeyError:
        raise ValueError(f"missing parameter {name!r}") from None
    return value[..., None] if value.ndim >= 1 else value


def _validate(params: Mapping, config: ModelConfig):
    for name in plasma_parameter_names(config):
        if name == "V_p":
            if name not in params:
                raise ValueError("missing parameter 'V_p'")
            if np.any(~np.isfinite(np.asarray(params["V_p"], float))):
                raise ValueError("V_p must be finite")
            continue
        v = np.asarray(params[name], float) if name in params else None
        if v is None:
            if name == "n_i":
                continue
            raise ValueError(f"missing parameter {name!r}")
        if name == "hot_fraction":
            if np.any(~np.isfinite(v)) or np.any((v < 0) | (v > 1)):
                raise ValueError("hot_fraction must lie in [0, 1]")
        elif np.any(~np.isfinite(v)) or np.any(v <= 0):
            raise ValueError(f"{name} must be positive and finite")
    for name in distortion_parameter_names(config):
        if name not in params:
            raise ValueError(f"missing parameter {name!r} (the {_switch_of(name)} distortion is on)")
        v = np.asarray(params[name], float)
        if np.any(~np.isfinite(v)):
            raise ValueError(f"{name} must be finite")
        if name in ("V_rf", "R_series") and np.any(v < 0):
            raise ValueError(f"{name} must not be negative")


def _switch_of(name):
    return next(s for s, names in DISTORTION_SWITCHES.items() if name in names)


def probe_current(V, params: Mapping, config: ModelConfig, *, validate: bool = True,
                  distorted: bool = True, branches=None, series_solver: str = "newton"):
    """Net probe current I = I_e - I_i (electron current positive), in A.

    Parameters
    ----------
    V : array_like, shape (n,)
        Probe bias in V (shape (k, 1) also works: one voltage per parameter set).
    params : mapping of name -> scalar or array of shape (k,)
        Plasma parameters (see the module docstring); ``n_i`` defaults to ``n_e``;
        the distortion parameters of every switch that is on in ``config``.
    config : ModelConfig
    validate : bool
        Check parameter values (the sampler turns this off on its hot path; its
        prior already keeps parameters in range).
    distorted : bool
        With False, the undistorted plasma characteristic (distortion switches and
        their parameters ignored).
    branches : (direction, ramp), optional
        Per-point sweep direction (+1 rising, -1 falling) and relative sweep rate,
        each shape (n,) like ``V`` (:attr:`bayesprobe.Sweep.branches`); needed when
        ``config.hysteresis`` is on. ``(0, 0)`` gives the mean of the two branches.
    series_solver : {"newton", "interpolate"}
        How the series-resistance equation is solved: ``"newton"`` to a relative residual of
        1e-6 followed by a last Newton step (error ~1e-12); ``"interpolate"`` (the likelihood's
        choice) by cubic Hermite interpolation on the parametric curve (v + R f(v), f(v)) at
        about 200 nodes per parameter set (:func:`_series_current`), 4-7x cheaper on a
        1000-point sweep, error below 1e-4 of max |I| (tests/test_series_solvers.py).

    Returns
    -------
    ndarray
        Shape (n,) for scalar parameters, (k, n) for parameters of shape (k,).
    """
    if not distorted:
        config = config.undistorted()
    if validate:
        _validate(params, config)
    V = np.asarray(V, dtype=float)
    if not config.distorted:
        return _characteristic(V, _columns(params, config), config)
    V_applied = V
    if config.hysteresis:
        if branches is None:
            raise ValueError("the hysteresis distortion needs the sweep direction of every point "
                             "(a sweep recorded with rising and falling bias)")
        direction, ramp = (np.asarray(b, float) for b in branches)
        V = V - 0.5 * direction * _column(params, "V_shift")
    cols = _columns(params, config)
    if config.series_resistance:
        I = _series_current(V, _column(params, "R_series"), cols, config, series_solver)
    else:
        I = _characteristic(V, cols, config)
    if config.leakage:
        I = I + _column(params, "G_leak") * V_applied + _column(params, "I_offset")
    if config.hysteresis:
        I = I + _column(params, "I_cap") * ramp
    return I


def _series_current(V, R, cols: dict, config: ModelConfig, solver: str = "newton"):
    """The current through the sheath in series with R (:func:`bayesprobe.physics.series.series_current`):
    interpolated only when neither the electron model nor the ion theory has slope kinks away from
    V_p (and V_p +- V_rf), Newton otherwise."""
    model = config.electron_model
    smooth = not (model.kinks or config.ion_theory.kinks)
    return series_current(V, R, lambda v, c, slope=False: _characteristic(v, c, config, slope=slope), cols,
                          solver=solver, smooth=smooth, T_min=model.coldest_temperature(cols),
                          T_max=model.hottest_temperature(cols),
                          A=cols["V_rf"] if config.rf_fluctuation else 0.0, T_i=config.T_i)


def _columns(params: Mapping, config: ModelConfig) -> dict:
    names = ["n_e", "V_p", *config.electron_model.parameter_names]
    cols = {n: _column(params, n) for n in names}
    cols["n_i"] = _column(params, "n_i") if ("n_i" in params and not config.quasi_neutral) else cols["n_e"]
    if config.rf_fluctuation:
        cols["V_rf"] = _column(params, "V_rf")
    return cols


def _characteristic(V, cols: dict, config: ModelConfig, *, slope: bool = False):
    """Plasma characteristic I_e - I_i from parameter columns already shaped to broadcast with V;
    with ``slope`` the pair (I, dI/dV in A/V): analytic for the electrons and for thin-sheath and
    OML ions, a forward difference for the tabulated (ABR) ions."""
    T_s = config.electron_model.screening_temperature(cols)       # for the Bohm speed and Debye length
    I_e = config.electron_current_model.current(V, cols, config.probe, slope=slope,
                                                sheath_expansion=config.electron_sheath_expansion)
    I_i = config.ion_theory.current(V, cols["V_p"], cols["n_i"], T_s, config.probe, config.ion_mass_kg,
                                    cols["n_e"], config.T_i, config.bohm_factor, config.sheath_expansion,
                                    slope=slope)
    if slope:
        return I_e[0] - I_i[0], I_e[1] - I_i[1]
    return I_e - I_i


def effective_temperature(params: Mapping, config: ModelConfig):
    """Two thirds of the mean electron energy, in eV (equals T_e for a Maxwellian)."""
    return config.electron_model.effective_temperature(params)


def _bisect(current_at, lo, hi, iterations: int):
    """Vectorised bisection for the zero of an increasing current: one root per parameter set,
    NaN where the current does not go from negative at ``lo`` to positive at ``hi``."""
    with np.errstate(over="ignore", invalid="ignore"):
        ok = (current_at(lo) < 0) & (current_at(hi) > 0)
        for _ in range(iterations):
            mid = 0.5 * (lo + hi)
            neg = current_at(mid) < 0
            lo = np.where(neg, mid, lo)
            hi = np.where(neg, hi, mid)
    return np.where(ok, 0.5 * (lo + hi), np.nan)


def _bracket_scale(params: Mapping, config: ModelConfig):
    """(V_p, hottest temperature) of every parameter set as 1-D arrays."""
    V_p = np.atleast_1d(np.asarray(params["V_p"], float))
    T_max = config.electron_model.hottest_temperature(params)
    return V_p, np.broadcast_to(np.atleast_1d(T_max), V_p.shape)


def floating_potential(params: Mapping, config: ModelConfig, *, iterations: int = 60):
    """Floating potential (V) of every parameter set: the root of the full model I(V) = 0.

    Vectorised bisection on [V_p - 80 T_max, V_p]; the net current is negative at
    the lower end (ion saturation) and positive at V_p for any physical plasma.
    Returns NaN where no sign change exists in that bracket. Distortions are ignored:
    this is the floating potential of the plasma characteristic itself (see
    :func:`measured_floating_potential` for the distorted zero crossing).
    """
    config = config.undistorted()
    _validate(params, config)
    V_p, T_max = _bracket_scale(params, config)
    single = {k: np.atleast_1d(np.asarray(v, float)) for k, v in params.items()}

    def current_at(v):
        # evaluate one voltage per parameter set: diagonal of the (k, k) problem, done as (k, 1)
        return probe_current(np.zeros(1), single | {"V_p": V_p - v}, config, validate=False)[..., 0]

    out = _bisect(current_at, V_p - 80.0 * T_max, V_p.copy(), iterations)
    return out if np.ndim(params["V_p"]) else out[0]


def measured_floating_potential(params: Mapping, config: ModelConfig, *, iterations: int = 60):
    """Zero crossing (V) of the full, distorted model for every parameter set.

    Vectorised bisection on [V_p - 80 T_max, V_p + 10 T_max], each set evaluated at its
    own voltage; NaN where the measured current does not change sign in that bracket
    (e.g. a leakage current larger than the ion saturation current). With hysteresis,
    the zero crossing of the mean of the two branches.
    Equals :func:`floating_potential` when no distortion is on.
    """
    if not config.distorted:
        return floating_potential(params, config, iterations=iterations)
    _validate(params, config)
    V_p, T_max = _bracket_scale(params, config)
    single = {k: np.atleast_1d(np.asarray(v, float)) for k, v in params.items()}
    mean_branch = (np.zeros(1), np.zeros(1)) if config.hysteresis else None

    def current_at(v):
        return probe_current(v[:, None], single, config, validate=False, branches=mean_branch)[:, 0]

    out = _bisect(current_at, V_p - 80.0 * T_max, V_p + 10.0 * T_max, iterations)
    return out if np.ndim(params["V_p"]) else out[0]
