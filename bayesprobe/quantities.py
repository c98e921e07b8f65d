"""The quantity registry: every fitted, derived and distortion quantity, described once.

A :class:`Quantity` carries the name used in files and code, its unit, a TeX label (figures),
an HTML label (report), a one-line description, its group, the sampler transform and default
prior rule of a fitted quantity, and two flags: ``main`` (the headline table) and ``table``
(a column of the batch tables). The order of :data:`QUANTITIES` is the order in which every
table, summary and figure lists quantities.

The distortions of the sweep are described here too (:data:`DISTORTIONS`): the user-facing
name, the :class:`~bayesprobe.model.ModelConfig` switch, the nuisance parameters it adds, the
parameter that shows its size, and a description.

Everything else reads these tables: default priors (``inference.posterior``), derived units
(``derived``), the summary and its ``quantities`` block (``result``), figure labels
(``plots``), the report, and the batch columns. A new quantity is one entry here.

Default prior rules take the sweep's scale (:class:`SweepScale`) and are documented in
:mod:`bayesprobe.inference.parameters` and :mod:`bayesprobe.inference.posterior`.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

__all__ = ["Quantity", "Distortion", "SweepScale", "QUANTITIES", "DISTORTIONS", "GROUPS", "quantity",
           "unit_of", "tex_label", "html_label", "description_of", "main_names", "table_names",
           "ordered", "describe"]

#: quantity groups, in display order
GROUPS = ("plasma", "electron-model", "derived", "distortion", "noise", "likelihood")


@dataclass(frozen=True)
class SweepScale:
    """What a default prior may depend on: the voltage range and the largest |I| of the sweep."""

    v_min: float
    v_max: float
    i_max: float

    @classmethod
    def of(cls, voltage, current) -> "SweepScale":
        import numpy as np
        return cls(float(np.min(voltage)), float(np.max(voltage)), float(np.max(np.abs(current))))

    @property
    def span(self) -> float:
        return max(self.v_max - self.v_min, 1e-6)


@dataclass(frozen=True)
class Quantity:
    """One quantity: name, unit, labels, description, group, and (if fitted) transform and prior."""

    name: str
    unit: str
    tex: str
    html: str
    description: str
    group: str
    transform: str | None = None            # "identity" / "log" / "logit" for fitted quantities
    prior: Callable[[SweepScale], object] | None = None   # SweepScale -> inference.parameters.Prior
    main: bool = False                      # shown in the headline table
    table: bool = False                     # a column of the batch tables

    @property
    def fitted(self) -> bool:
        return self.transform is not None

    def default_prior(self, scale: SweepScale):
        if self.prior is None:
            raise ValueError(f"{self.name} is not a fitted quantity")
        return self.prior(scale)


def _p(kind, *args, **kw):
    """A prior rule that ignores the sweep."""
    def rule(scale):
        from .inference.parameters import Prior
        return Prior(kind, *args, **kw)
    return rule


def _scaled(fn):
    def rule(scale):
        from .inference.parameters import Prior
        kind, kw = fn(scale)
        return Prior(kind, **kw)
    return rule


_Q = Quantity
_DENSITY = _p("log-uniform", 1e12, 1e21)
_TEMPERATURE = _p("log-uniform", 0.1, 100.0)

_ENTRIES = (
    # ---- plasma and electron model (fitted)
    _Q("T_e", "eV", r"$T_\mathrm{e}$", "T<sub>e</sub>", "electron temperature", "plasma",
       "log", _TEMPERATURE, main=True, table=True),
    _Q("T_e_cold", "eV", r"$T_\mathrm{e,cold}$", "T<sub>e,cold</sub>", "cold-electron temperature",
       "electron-model", "log", _TEMPERATURE, main=True, table=True),
    _Q("T_e_hot", "eV", r"$T_\mathrm{e,hot}$", "T<sub>e,hot</sub>", "hot-electron temperature",
       "electron-model", "log", _p("log-uniform", 0.5, 300.0), main=True, table=True),
    _Q("hot_fraction", "1", "hot fraction", "hot fraction", "hot electron density / total",
       "electron-model", "logit", _p("beta", upper=0.5, a=1.0, b=4.0), main=True, table=True),
    _Q("T_e_eff", "eV", r"$T_\mathrm{e,eff}$", "T<sub>e,eff</sub>",
       "effective temperature, two thirds of the mean electron energy", "derived", main=True),
    _Q("T_e_screen", "eV", r"$T_\mathrm{e,screen}$", "T<sub>e,screen</sub>",
       "screening temperature (harmonic, density-weighted)", "derived"),
    _Q("n_e", "m^-3", r"$n_\mathrm{e}$", "n<sub>e</sub>", "electron density", "plasma",
       "log", _DENSITY, main=True, table=True),
    _Q("n_i", "m^-3", r"$n_\mathrm{i}$", "n<sub>i</sub>", "ion density", "plasma",
       "log", _DENSITY, main=True, table=True),
    _Q("V_f", "V", r"$V_\mathrm{f}$", "V<sub>f</sub>",
       "floating potential (root of the plasma characteristic, without distortions)", "derived",
       main=True, table=True),
    _Q("V_p", "V", r"$V_\mathrm{p}$", "V<sub>p</sub>", "plasma potential", "plasma", "identity",
       _scaled(lambda s: ("uniform", dict(lower=s.v_min, upper=s.v_max + 0.5 * (s.v_max - s.v_min)))),
       main=True, table=True),
    # ---- derived
    _Q("V_f_measured", "V", r"$V_\mathrm{f,meas}$", "V<sub>f,measured</sub>",
       "zero crossing of the distorted model (what the instrument shows)", "derived", table=True),
    _Q("Vp_minus_Vf_over_Te", "1", r"$(V_\mathrm{p}-V_\mathrm{f})/T_\mathrm{e}$",
       "(V<sub>p</sub> &minus; V<sub>f</sub>)/T<sub>e</sub>",
       "(V_p - V_f) / T_e (T_e_eff for two temperatures)", "derived"),
    _Q("debye_length", "m", r"$\lambda_\mathrm{D}$", "&lambda;<sub>D</sub>",
       "electron Debye length (screening temperature)", "derived"),
    _Q("r_p_over_debye", "1", r"$r_\mathrm{p}/\lambda_\mathrm{D}$", "r<sub>p</sub>/&lambda;<sub>D</sub>",
       "probe radius / Debye length", "derived"),
    _Q("omega_pe", "rad/s", r"$\omega_\mathrm{pe}$", "&omega;<sub>pe</sub>", "electron plasma frequency",
       "derived"),
    _Q("omega_pi", "rad/s", r"$\omega_\mathrm{pi}$", "&omega;<sub>pi</sub>", "ion plasma frequency",
       "derived"),
    _Q("bohm_speed", "m/s", r"$u_\mathrm{B}$", "u<sub>B</sub>", "Bohm speed", "derived"),
    _Q("electron_mean_speed", "m/s", r"$\langle v_\mathrm{e}\rangle$", "&lang;v<sub>e</sub>&rang;",
       "mean speed sqrt(8 e T_e/(pi m_e)) (T_e_eff)", "derived"),
    _Q("n_i_over_n_e", "1", r"$n_\mathrm{i}/n_\mathrm{e}$", "n<sub>i</sub>/n<sub>e</sub>",
       "ion / electron density (consistency check)", "derived"),
    # ---- distortions (nuisance parameters; priors: inference.posterior module docstring)
    _Q("V_rf", "V", r"$V_\mathrm{rf}$", "V<sub>rf</sub>", "amplitude of the plasma-potential oscillation",
       "distortion", "log", _scaled(lambda s: ("log-uniform", dict(lower=1e-3, upper=max(0.5 * s.span, 2e-3)))),
       table=True),
    _Q("R_series", "ohm", r"$R_\mathrm{s}$", "R<sub>series</sub>", "series (circuit) resistance",
       "distortion", "log",
       _scaled(lambda s: ("log-uniform", dict(lower=1e-5 * s.span / s.i_max, upper=s.span / s.i_max))),
       table=True),
    _Q("G_leak", "S", r"$G_\mathrm{leak}$", "G<sub>leak</sub>", "leakage conductance", "distortion",
       "identity", _scaled(lambda s: ("normal", dict(mean=0.0, sd=0.1 * s.i_max / s.span))), table=True),
    _Q("I_offset", "A", r"$I_0$", "I<sub>offset</sub>", "offset current", "distortion", "identity",
       _scaled(lambda s: ("normal", dict(mean=0.0, sd=0.1 * s.i_max))), table=True),
    _Q("V_shift", "V", r"$\Delta V_\mathrm{h}$", "&Delta;V<sub>h</sub>",
       "voltage shift of the rising-bias branch vs the falling one", "distortion", "identity",
       _scaled(lambda s: ("normal", dict(mean=0.0, sd=0.1 * s.span))), table=True),
    _Q("I_cap", "A", r"$I_\mathrm{cap}$", "I<sub>cap</sub>", "displacement current at the mean sweep rate",
       "distortion", "identity", _scaled(lambda s: ("normal", dict(mean=0.0, sd=0.1 * s.i_max))), table=True),
    # ---- noise model and likelihood
    _Q("sigma_floor", "A", r"$\sigma_\mathrm{floor}$", "&sigma;<sub>floor</sub>", "noise floor (sd)", "noise",
       "log", _scaled(lambda s: ("log-uniform", dict(lower=1e-7 * s.i_max, upper=s.i_max)))),
    _Q("sigma_rel", "1", r"$\sigma_\mathrm{rel}$", "&sigma;<sub>rel</sub>", "noise proportional to |I| (sd / |I|)",
       "noise", "log", _p("log-uniform", 1e-4, 1.0)),
    # Student-t degrees of freedom: gamma(2, 0.1) truncated to [1, 1000] (Juarez & Steel 2010, from memory)
    _Q("nu", "1", r"$\nu$", "&nu;", "Student-t degrees of freedom (fitted)", "likelihood", "log",
       _p("gamma", lower=1.0, upper=1000.0, a=2.0, b=0.1)),
)

#: name -> Quantity, in display order
QUANTITIES: dict[str, Quantity] = {q.name: q for q in _ENTRIES}
_ORDER = {n: i for i, n in enumerate(QUANTITIES)}


@dataclass(frozen=True)
class Distortion:
    """A distortion of the sweep: user name, ModelConfig switch, parameters, the parameter that
    shows its size, and a description. ``switch`` is None for a likelihood choice (outliers)."""

    name: str
    switch: str | None
    parameters: tuple[str, ...]
    main_parameter: str
    description: str


#: user-facing distortion name -> Distortion (order: the order of ``--distortions`` lists)
DISTORTIONS: dict[str, Distortion] = {d.name: d for d in (
    Distortion("rf", "rf_fluctuation", ("V_rf",), "V_rf", "RF fluctuation of the plasma potential"),
    Distortion("resistance", "series_resistance", ("R_series",), "R_series", "series (circuit) resistance"),
    Distortion("leakage", "leakage", ("G_leak", "I_offset"), "G_leak", "leakage / offset current"),
    Distortion("hysteresis", "hysteresis", ("V_shift", "I_cap"), "V_shift",
               "up/down sweep hysteresis (branch shift, displacement current)"),
    Distortion("outliers", None, ("nu",), "nu", "outliers (heavy-tailed noise)"),
)}


def quantity(name: str) -> Quantity | None:
    """The registry entry of ``name``, or None for a name the registry does not know."""
    return QUANTITIES.get(name)


def unit_of(name: str, default: str = "") -> str:
    q = QUANTITIES.get(name)
    return q.unit if q else default


def tex_label(name: str) -> str:
    q = QUANTITIES.get(name)
    return q.tex if q else name


def html_label(name: str) -> str | None:
    """HTML label (trusted markup), or None for an unknown name (the caller escapes the raw name)."""
    q = QUANTITIES.get(name)
    return q.html if q else None


def description_of(name: str, default: str | None = None) -> str | None:
    q = QUANTITIES.get(name)
    return q.description if q else default


def ordered(names) -> list[str]:
    """``names`` in registry order; names the registry does not know keep their order, last."""
    names = list(dict.fromkeys(names))
    known = sorted((n for n in names if n in _ORDER), key=_ORDER.__getitem__)
    return known + [n for n in names if n not in _ORDER]


def main_names(present=None) -> tuple[str, ...]:
    """Headline quantities in registry order (only those in ``present`` when given)."""
    names = tuple(n for n, q in QUANTITIES.items() if q.main)
    return names if present is None else tuple(n for n in names if n in present)


def table_names() -> tuple[str, ...]:
    """Quantities that are columns of the batch tables (when present in a sweep)."""
    return tuple(n for n, q in QUANTITIES.items() if q.table)


def describe(names) -> dict:
    """``{name: {unit, label_tex, label_html, description, group}}`` for the names the registry
    knows; written into summary.json so readers of the file need no copy of this table."""
    out = {}
    for n in ordered(names):
        q = QUANTITIES.get(n)
        if q is not None:
            out[n] = {"unit": q.unit, "label_tex": q.tex, "label_html": q.html,
                      "description": q.description, "group": q.group}
    return out
