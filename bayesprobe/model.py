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

from .quantities import DISTORTIONS
from .physics.constants import ion_mass as _ion_mass
from .physics.distortions import (_rf_electron_current, _rf_electron_current_with_slope, _solve_series,
                                  hermite_series_current, series_nodes)
from .physics.electron_models import ELECTRON_MODELS as _ELECTRON_MODELS, electron_model
from .physics.electrons import _electron_current, _electron_current_with_slope
from .physics.geometry import Probe
from .physics.ions import (ION_THEORIES, _ion_current, _oml_with_slope, _thin_sheath_with_slope,
                           bohm_factor as _bohm_factor)

__all__ = ["ModelConfig", "ELECTRON_MODELS", "probe_current", "floating_potential",
           "plasma_parameter_names", "effective_temperature", "distortion_parameter_names",
           "measured_floating_potential", "DISTORTION_SWITCHES"]

ELECTRON_MODELS = tuple(_ELECTRON_MODELS)
#: ModelConfig switch -> the nuisance parameters it adds
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
    electrons : {"maxwellian", "bi-maxwellian"}
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
    T_i: float = 0.026
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
    def electron_model(self):
        """The electron model object (:mod:`bayesprobe.physics.electron_models`)."""
        return electron_model(self.electrons)

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
        if self.ion_collection not in ION_THEORIES:
            raise ValueError(f"ion_collection must be one of {', '.join(ION_THEORIES)}, got {self.ion_collection!r}")
        if self.ion_collection in ("oml", "abr") and self.probe.geometry == "planar":
            raise ValueError(f"ion_collection {self.ion_collection!r} needs a cylindrical or spherical probe; "
                             "use thin-sheath or auto for planar probes")
        if self.electrons not in ELECTRON_MODELS:
            raise ValueError(f"electrons must be one of {', '.join(ELECTRON_MODELS)}, got {self.electrons!r}")
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
        return _plasma_current(V, params, config)
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
        I = _plasma_from_columns(V, cols, config)
    if config.leakage:
        I = I + _column(params, "G_leak") * V_applied + _column(params, "I_offset")
    if config.hysteresis:
        I = I + _column(params, "I_cap") * ramp
    return I


#: below this many points per parameter set the interpolated series solve is not worth its nodes
_INTERPOLATE_MIN_POINTS = 50


def _series_current(V, R, cols: dict, config: ModelConfig, solver: str = "newton"):
    """The current through the sheath in series with R: I = f(V - I R) for every set and point.

    ``"newton"``: :func:`bayesprobe.physics.distortions._solve_series` on every element.
    ``"interpolate"``: the sheath-voltage range of each row is bounded from the characteristic at
    the two ends of the sweep, the characteristic and its slope are evaluated once at the nodes of
    :func:`~bayesprobe.physics.distortions.series_nodes` between them, and every point is
    interpolated on the parametric curve (:func:`~bayesprobe.physics.distortions.hermite_series_current`).
    Used for parameter arrays, at least 50 points and ion currents smooth away from V_p
    (thin-sheath, OML; the ABR table has kinks at unknown voltages, where Newton is used).
    """
    if solver not in ("newton", "interpolate"):
        raise ValueError(f"series_solver must be 'newton' or 'interpolate', got {solver!r}")
    shape = np.broadcast_shapes(V.shape, np.shape(R), *(np.shape(c) for c in cols.values()))

    def plasma_at(v, flat=None):
        # (current, slope); flat: indices into the broadcast grid, so the solver can iterate on a subset
        if flat is None:
            return _plasma_and_slope(v, cols, config)
        return _plasma_and_slope(v, _subset(cols, shape, flat), config)

    if solver == "newton" or len(shape) != 2 or shape[-1] < _INTERPOLATE_MIN_POINTS or _ion_kinks(config):
        return _solve_series(plasma_at, V, R)
    V2 = np.broadcast_to(V, shape)
    ends = np.stack([V2.min(axis=-1), V2.max(axis=-1)], axis=-1)             # (k, 2)
    # the sheath voltage at an end lies between V and V - f(V) R (the root of I = f(V - I R) lies
    # between 0 and f(V)), so these bounds enclose the sheath voltages of the whole sweep
    f_ends = _plasma_from_columns(ends, cols, config)
    v_lo = ends[:, :1] - np.maximum(f_ends[:, :1], 0.0) * R
    v_hi = ends[:, 1:] - np.minimum(f_ends[:, 1:], 0.0) * R
    V_p = cols["V_p"]
    if config.electrons == "maxwellian":
        T_min = T_max = cols["T_e"]
    else:
        T_min, T_max = cols["T_e_cold"], cols["T_e_hot"]
    A = cols["V_rf"] if config.rf_fluctuation else 0.0
    nodes = series_nodes(v_lo, v_hi, V_p, T_min, A, T_max, config.T_i)
    f_nodes, slope_nodes = _plasma_and_slope(nodes, cols, config)
    return hermite_series_current(V, np.broadcast_to(R, (shape[0], 1)), nodes,
                                  np.broadcast_to(f_nodes, nodes.shape), np.broadcast_to(slope_nodes, nodes.shape))


def _ion_kinks(config: ModelConfig) -> bool:
    """True when the ion current has slope discontinuities away from V_p (ABR table rows and the
    table edge; the crossing of OML and ABR under ``auto``)."""
    return config.ion_collection == "abr" or (config.ion_collection == "auto" and config.probe.geometry != "planar")


def _columns(params: Mapping, config: ModelConfig) -> dict:
    names = ["n_e", "V_p", *config.electron_model.parameter_names]
    cols = {n: _column(params, n) for n in names}
    cols["n_i"] = _column(params, "n_i") if ("n_i" in params and not config.quasi_neutral) else cols["n_e"]
    if config.rf_fluctuation:
        cols["V_rf"] = _column(params, "V_rf")
    return cols


def _plasma_and_slope(V, cols: dict, config: ModelConfig, ion_step: float = 1e-5):
    """Plasma characteristic and its slope dI/dV (A/V): analytic for the electrons and for
    thin-sheath and OML ions, a forward difference of ``ion_step`` volts for the ABR table."""
    n_e, n_i, V_p = cols["n_e"], cols["n_i"], cols["V_p"]
    V_rf = cols.get("V_rf") if config.rf_fluctuation else None
    probe, sx = config.probe, config.electron_sheath_expansion
    if config.electrons == "maxwellian":
        T_e = cols["T_e"]
        a = T_h = None
        T_s = T_e
    else:
        T_e, T_h, a = cols["T_e_cold"], cols["T_e_hot"], cols["hot_fraction"]
        T_s = 1.0 / ((1.0 - a) / T_e + a / T_h)
    if V_rf is None:
        I_e, dI_e = _electron_current_with_slope(V, V_p, n_e, T_e, probe, a, T_h, sx)
    else:
        I_e, dI_e = _rf_electron_current_with_slope(V, V_p, n_e, T_e, V_rf, probe, a, T_h, sx)
    theory = config.ion_collection
    if theory == "thin-sheath" or (theory == "auto" and probe.geometry == "planar"):
        I_i, dI_i = _thin_sheath_with_slope(V, V_p, n_i, T_s, probe, config.ion_mass_kg, n_e, config.T_i,
                                            config.bohm_factor, config.sheath_expansion)
    elif theory == "oml":
        I_i, dI_i = _oml_with_slope(V, V_p, n_i, probe, config.ion_mass_kg, config.T_i)
    else:
        args = (n_i, T_s, probe, config.ion_mass_kg, theory, n_e, config.T_i, config.bohm_factor,
                config.sheath_expansion)
        I_i = _ion_current(V, V_p, *args)
        dI_i = (_ion_current(V + ion_step, V_p, *args) - I_i) / ion_step
    return I_e - I_i, dI_e - dI_i


def _subset(cols: dict, shape, flat) -> dict:
    """Parameter columns gathered at flat indices of the broadcast grid (1-D, one per element)."""
    idx = np.unravel_index(flat, shape)
    out = {}
    for n, c in cols.items():
        c = np.asarray(c)
        if c.size == 1:
            out[n] = c.reshape(())
            continue
        c = c.reshape((1,) * (len(shape) - c.ndim) + c.shape)
        out[n] = c[tuple(i if d > 1 else 0 for i, d in zip(idx, c.shape))]
    return out


def _plasma_current(V, params: Mapping, config: ModelConfig):
    return _plasma_from_columns(V, _columns(params, config), config)


def _plasma_from_columns(V, cols: dict, config: ModelConfig):
    """Plasma characteristic from parameter arrays already shaped to broadcast with V."""
    n_e, n_i, V_p = cols["n_e"], cols["n_i"], cols["V_p"]
    V_rf = cols.get("V_rf") if config.rf_fluctuation else None
    probe = config.probe
    if config.electrons == "maxwellian":
        T_e = cols["T_e"]
        if V_rf is None:
            I_e = _electron_current(V, V_p, n_e, T_e, probe, sheath_expansion=config.electron_sheath_expansion)
        else:
            I_e = _rf_electron_current(V, V_p, n_e, T_e, V_rf, probe, sheath_expansion=config.electron_sheath_expansion)
        T_s = T_e
    else:
        T_c, T_h, a = cols["T_e_cold"], cols["T_e_hot"], cols["hot_fraction"]
        if V_rf is None:
            I_e = _electron_current(V, V_p, n_e, T_c, probe, a, T_h, config.electron_sheath_expansion)
        else:
            I_e = _rf_electron_current(V, V_p, n_e, T_c, V_rf, probe, a, T_h, config.electron_sheath_expansion)
        T_s = 1.0 / ((1.0 - a) / T_c + a / T_h)        # screening temperature for the Bohm speed
    I_i = _ion_current(V, V_p, n_i, T_s, probe, config.ion_mass_kg, config.ion_collection, n_e, config.T_i,
                       config.bohm_factor, config.sheath_expansion)
    return I_e - I_i


def effective_temperature(params: Mapping, config: ModelConfig):
    """Two thirds of the mean electron energy, in eV (equals T_e for a Maxwellian)."""
    return config.electron_model.effective_temperature(params)


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
    V_p = np.atleast_1d(np.asarray(params["V_p"], float))
    T_max = config.electron_model.hottest_temperature(params)
    T_max = np.broadcast_to(np.atleast_1d(T_max), V_p.shape)
    lo = V_p - 80.0 * T_max
    hi = V_p.copy()
    single = {k: np.atleast_1d(np.asarray(v, float)) for k, v in params.items()}

    def current_at(v):
        # evaluate one voltage per parameter set: diagonal of the (k, k) problem, done as (k, 1)
        return probe_current(np.zeros(1), {k: x for k, x in single.items()} | {"V_p": V_p - v}, config,
                             validate=False)[..., 0]

    f_lo = current_at(lo)
    f_hi = current_at(hi)
    ok = (f_lo < 0) & (f_hi > 0)
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        f_mid = current_at(mid)
        neg = f_mid < 0
        lo = np.where(neg, mid, lo)
        hi = np.where(neg, hi, mid)
    out = np.where(ok, 0.5 * (lo + hi), np.nan)
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
    V_p = np.atleast_1d(np.asarray(params["V_p"], float))
    T_max = config.electron_model.hottest_temperature(params)
    T_max = np.broadcast_to(np.atleast_1d(T_max), V_p.shape)
    single = {k: np.atleast_1d(np.asarray(v, float)) for k, v in params.items()}

    mean_branch = (np.zeros(1), np.zeros(1)) if config.hysteresis else None

    def current_at(v):
        return probe_current(v[:, None], single, config, validate=False, branches=mean_branch)[:, 0]

    lo = V_p - 80.0 * T_max
    hi = V_p + 10.0 * T_max
    with np.errstate(over="ignore", invalid="ignore"):
        ok = (current_at(lo) < 0) & (current_at(hi) > 0)
        for _ in range(iterations):
            mid = 0.5 * (lo + hi)
            neg = current_at(mid) < 0
            lo = np.where(neg, mid, lo)
            hi = np.where(neg, hi, mid)
    out = np.where(ok, 0.5 * (lo + hi), np.nan)
    return out if np.ndim(params["V_p"]) else out[0]
