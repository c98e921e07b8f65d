"""Ion current to a negatively biased probe, for several collection theories.

All functions are pure and vectorised (parameters of shape ``(k, 1)`` with
voltages of shape ``(n,)`` give ``(k, n)``). They return the ion current as a
positive magnitude; the total probe current is I = I_e - I_i. SI units,
temperatures in eV.

Each theory is also a strategy object in :data:`ION_THEORIES` (name -> :class:`IonTheory`;
``ModelConfig.ion_theory``): ``current(..., slope=False)`` gives the current and, on request,
its slope dI/dV from one body; ``kinks`` says whether the current has slope kinks away from
V_p (the interpolated series-resistance solve then uses Newton); ``check(probe)`` refuses a
probe the theory does not apply to; ``resolve(probe)`` is the theory that applies (``auto``
on a planar probe is ``thin-sheath``). Adding a theory: one subclass registered in
:data:`ION_THEORIES`, and tests.

Theories and where they hold (xi = r_p / lambda_D):

``thin-sheath``
    Bohm flux through the sheath edge, I = f_B e n_i A_s sqrt(e T_e/M), with
    f_B = exp(-1/2) = 0.6065 (Boltzmann electrons across a T_e/2 presheath; the
    often-quoted 0.61; 0.5 selectable, the isothermal-fluid value). The sheath
    edge area A_s grows with the Child-law sheath thickness s: disc
    pi (r_p + s)^2, cylinder 2 pi (r_p + s) L, sphere 4 pi (r_p + s)^2. Valid for
    xi >> 1 and s << r_p (roughly xi >~ 50 for a cylinder).
    Sources: Lieberman & Lichtenberg (2005) ch. 6; Hutchinson (2002) ch. 3.
``oml``
    Orbital-motion-limited collection of Maxwellian ions of temperature T_i:
    cylinder I = I_th [2 sqrt(chi/pi) + e^chi erfc(sqrt chi)], sphere
    I = I_th (1 + chi), chi = (V_p - V)/T_i, I_th = e n_i A sqrt(e T_i/(2 pi M)).
    For a cylinder at chi >> 1 this tends to the cold-ion result
    A n e (sqrt 2/pi) sqrt(e (V_p - V)/M), independent of T_i. Valid for thin
    probes in collisionless plasmas, xi <~ 1 with cold ions (up to xi ~ 3-5 for
    T_i/T_e >~ 0.1); it is then the upper bound on the collected current.
    For a sphere the result depends on T_i and holds only for xi << 1.
    Source: Mott-Smith & Langmuir, Phys. Rev. 28, 727 (1926).
``abr``
    Radial cold-ion collection (Allen, Boyd & Reynolds, Proc. Phys. Soc. B 70,
    297 (1957); cylinder form from F. F. Chen, "Electric Probes" (1965)):
    every ion that enters the sheath is collected; the self-consistent potential
    is precomputed in :mod:`bayesprobe.physics.abr`. Valid for moderate to thick
    sheaths when ion orbits do not matter (collisional presheath, xi >~ 5); tends
    to the thin-sheath limit slowly as xi grows.
``auto``
    planar: ``thin-sheath``; cylinder and sphere: the smaller of the OML and ABR
    currents at each point. This is our heuristic: OML is the collisionless upper
    bound at small xi, and ABR approaches the thin-sheath limit at large xi, so the
    minimum follows whichever limit applies and is continuous in the parameters
    (no hard switch for the sampler to trip over).

Above V_p the ions are repelled; every theory multiplies its value at V_p by
exp(-(V - V_p)/T_i) there, so the current stays continuous.
"""
from __future__ import annotations

import numpy as np

from ._checks import finite as _finite, positive as _positive
from .constants import E_CHARGE
from .formulary import _debye_length
from .electrons import _attracted, _attracted_slope
from .geometry import Probe

__all__ = ["ION_THEORIES", "IonTheory", "ion_theory", "BOHM_FACTORS", "bohm_factor", "ion_current",
           "thin_sheath_ion_current", "oml_ion_current", "abr_ion_current"]

#: named sheath-edge density factors n_s/n_0
BOHM_FACTORS = {"boltzmann": float(np.exp(-0.5)), "0.61": 0.61, "fluid": 0.5}

_CHILD = np.sqrt(2.0) / 3.0 * np.exp(0.25) * 2.0 ** 0.75   # s = _CHILD lambda_D (V0/T_e)^(3/4) = 1.0180 ...


def bohm_factor(value) -> float:
    """Resolve a sheath-edge factor: a name from :data:`BOHM_FACTORS` or a number in (0, 1]."""
    if isinstance(value, str):
        if value not in BOHM_FACTORS:
            raise ValueError(f"bohm_factor must be one of {', '.join(BOHM_FACTORS)} or a number, got {value!r}")
        return BOHM_FACTORS[value]
    value = float(value)
    if not 0 < value <= 1:
        raise ValueError(f"bohm_factor must lie in (0, 1], got {value}")
    return value


def _repelled(V, V_p, T_i):
    """exp(-(V - V_p)/T_i) above V_p, 1 below."""
    return np.exp(np.minimum(V_p - V, 0.0) / T_i)


def _check(V, V_p, n_i, T_e, probe, ion_mass, T_i, n_e=None):
    _finite("V", V)
    _finite("V_p", V_p)
    _positive("n_i", n_i, allow_zero=True)
    if T_e is not None:
        _positive("T_e", T_e)
    if n_e is not None:
        _positive("n_e", n_e)
    _positive("ion_mass", ion_mass)
    _positive("T_i", T_i)
    if not isinstance(probe, Probe):
        raise ValueError("probe must be a bayesprobe.Probe")


def thin_sheath_ion_current(V, V_p, n_i, T_e, probe: Probe, ion_mass, *, n_e=None, T_i=0.026,
                            bohm_factor=float(np.exp(-0.5)), sheath_expansion=True):
    """Bohm-flux ion current with optional Child-law sheath expansion, in A.

    ``T_e`` is the temperature setting the Bohm speed (the screening temperature
    for several electron groups); ``n_e`` (default ``n_i``) sets the Debye length.
    """
    _check(V, V_p, n_i, T_e, probe, ion_mass, T_i, n_e)
    _positive("bohm_factor", bohm_factor)
    return _thin_sheath(V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i, bohm_factor, sheath_expansion)


def _thin_sheath(V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i, bohm_factor, sheath_expansion, slope=False):
    """Unchecked thin-sheath ion current; with ``slope``, (current, dI/dV).

    Below V_p the Child-law edge grows as s proportional to (V_p - V)^(3/4), so
    ds/dV = -3 s / (4 (V_p - V)) (unbounded at V_p-, where it is finite only through
    V_p - V > 0); above V_p the repelled factor gives -I / T_i.
    """
    I_B = bohm_factor * E_CHARGE * n_i * probe.area * np.sqrt(E_CHARGE * T_e / ion_mass)
    rep = _repelled(V, V_p, T_i)
    if not sheath_expansion:
        I = I_B * rep
        return (I, np.where(V > V_p, -I / T_i, 0.0)) if slope else I
    n_for_debye = n_i if n_e is None else n_e
    lam = _debye_length(n_for_debye, T_e)
    gap = np.maximum(V_p - V, 0.0)
    u = np.sqrt(gap / T_e)
    s = (_CHILD / probe.radius) * lam * (u * np.sqrt(u))  # s/r_p, (V0/T_e)^(3/4) via two roots
    ratio = 1.0 + s
    cylinder = probe.geometry == "cylindrical"
    I = I_B * (ratio if cylinder else ratio * ratio) * rep
    if not slope:
        return I
    with np.errstate(divide="ignore", invalid="ignore"):
        ds = np.where(gap > 0, -0.75 * s / gap, 0.0)
    d_area = (1.0 if cylinder else 2.0 * ratio) * ds
    return I, I_B * d_area * rep - np.where(V > V_p, I / T_i, 0.0)


def oml_ion_current(V, V_p, n_i, probe: Probe, ion_mass, *, T_i=0.026):
    """Orbital-motion-limited ion current of Maxwellian ions (temperature T_i, eV), in A."""
    if isinstance(probe, Probe) and probe.geometry == "planar":
        raise ValueError("OML ion collection applies to cylindrical and spherical probes, not planar")
    _check(V, V_p, n_i, None, probe, ion_mass, T_i)
    return _oml(V, V_p, n_i, probe, ion_mass, T_i)


def _oml(V, V_p, n_i, probe, ion_mass, T_i, slope=False):
    """Unchecked OML ion current; with ``slope``, (current, dI/dV): d/dV = -(I_th / T_i) d/dchi,
    chi = (V_p - V)/T_i."""
    I_th = E_CHARGE * n_i * probe.area * np.sqrt(E_CHARGE * T_i / (2.0 * np.pi * ion_mass))
    chi = (V_p - V) / T_i
    # attracted branch below V_p, Boltzmann fall-off above; both are 1 at V_p
    rep = np.exp(np.minimum(chi, 0.0))
    I = I_th * (rep + _attracted(chi, probe.geometry) - 1.0)
    if not slope:
        return I
    d_chi = np.where(chi < 0, rep, 0.0) + _attracted_slope(chi, probe.geometry)
    return I, -(I_th / T_i) * d_chi


def abr_ion_current(V, V_p, n_i, T_e, probe: Probe, ion_mass, *, n_e=None, T_i=0.026):
    """Radial cold-ion (ABR) ion current from the precomputed table, in A."""
    if isinstance(probe, Probe) and probe.geometry == "planar":
        raise ValueError("ABR ion collection applies to cylindrical and spherical probes, not planar")
    _check(V, V_p, n_i, T_e, probe, ion_mass, T_i, n_e)
    return _abr(V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i)


def _abr(V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i):
    from .abr import abr_current  # table loaded lazily

    n_for_debye = n_i if n_e is None else n_e
    lam = _debye_length(n_for_debye, T_e)
    xi = probe.radius / lam
    eta = np.maximum(V_p - V, 0.0) / T_e
    i_norm = abr_current(xi, eta, probe.geometry)
    return i_norm * E_CHARGE * n_i * probe.area * np.sqrt(E_CHARGE * T_e / ion_mass) * _repelled(V, V_p, T_i)


def ion_current(V, V_p, n_i, T_e, probe: Probe, ion_mass, *, theory="auto", n_e=None, T_i=0.026,
                bohm_factor=float(np.exp(-0.5)), sheath_expansion=True):
    """Ion current (positive magnitude, A) for the chosen collection ``theory``.

    Parameters
    ----------
    V : array_like
        Probe bias (V).
    V_p, n_i, T_e : array_like
        Plasma potential (V), ion density (m^-3), electron (screening) temperature (eV).
    probe : Probe
    ion_mass : float
        Ion mass in kg (see :func:`bayesprobe.physics.constants.ion_mass`).
    theory : {"thin-sheath", "oml", "abr", "auto"}
    n_e : array_like, optional
        Electron density for the Debye length (default ``n_i``).
    T_i : float
        Ion temperature in eV (OML, and the fall-off above V_p).
    bohm_factor : float
        Sheath-edge density factor for ``thin-sheath``.
    sheath_expansion : bool
        Child-law growth of the sheath-edge area for ``thin-sheath``.
    """
    if theory not in ION_THEORIES:
        raise ValueError(f"ion collection theory must be one of {', '.join(ION_THEORIES)}, got {theory!r}")
    if isinstance(probe, Probe) and probe.geometry == "planar" and not ION_THEORIES[theory].planar:
        raise ValueError(f"{theory} ion collection applies to cylindrical and spherical probes, not planar")
    _check(V, V_p, n_i, T_e, probe, ion_mass, T_i, n_e)
    _positive("bohm_factor", bohm_factor)
    return _ion_current(V, V_p, n_i, T_e, probe, ion_mass, theory, n_e, T_i, bohm_factor, sheath_expansion)


def _ion_current(V, V_p, n_i, T_e, probe, ion_mass, theory, n_e, T_i, bohm_factor, sheath_expansion,
                 slope=False):
    """Unchecked ion current of the theory named ``theory`` (or (current, dI/dV) with ``slope``)."""
    return ION_THEORIES[theory].resolve(probe).current(V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i, bohm_factor,
                                                       sheath_expansion, slope=slope)


# ---------------------------------------------------------------------------------------------
# The theories as strategy objects: ModelConfig.ion_theory, looked up from its ion_collection name
# ---------------------------------------------------------------------------------------------
class IonTheory:
    """Interface of an ion-collection theory.

    ``current(V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i, bohm_factor, sheath_expansion, *,
    slope=False)`` returns the ion current (positive magnitude, A), or with ``slope=True`` the
    pair (current, dI/dV); unchecked (the hot path). ``T_e`` is the screening temperature.
    """

    #: name used in options, files and summaries
    name: str = ""
    #: False when the theory needs a cylindrical or spherical probe
    planar: bool = True
    #: True when the current has slope kinks away from V_p (the interpolated series-resistance
    #: solve then falls back to Newton)
    kinks: bool = False
    #: True when the theory includes orbital-motion-limited collection (OML; ``auto`` on
    #: cylinders and spheres), whose cylinder current squared is linear in the bias
    orbital: bool = False
    #: True for the Bohm flux through the sheath edge (thin-sheath theory)
    bohm_flux: bool = False

    def current(self, V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i, bohm_factor, sheath_expansion, *,
                slope=False):
        raise TypeError(f"{type(self).__name__} must define current()")

    def check(self, probe: Probe) -> None:
        """Raise ValueError when the theory does not apply to ``probe``."""
        if probe.geometry == "planar" and not self.planar:
            raise ValueError(f"ion_collection {self.name!r} needs a cylindrical or spherical probe; "
                             "use thin-sheath or auto for planar probes")

    def resolve(self, probe: Probe) -> "IonTheory":
        """The theory that actually applies to ``probe`` (itself, except for ``auto``)."""
        return self

    def __repr__(self):
        return f"{type(self).__name__}()"


class ThinSheath(IonTheory):
    name = "thin-sheath"
    bohm_flux = True

    def current(self, V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i, bohm_factor, sheath_expansion, *,
                slope=False):
        return _thin_sheath(V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i, bohm_factor, sheath_expansion, slope)


class OML(IonTheory):
    name = "oml"
    planar = False
    orbital = True

    def current(self, V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i, bohm_factor, sheath_expansion, *,
                slope=False):
        return _oml(V, V_p, n_i, probe, ion_mass, T_i, slope)


class _Tabulated(IonTheory):
    """A theory without an analytic slope: dI/dV is a forward difference of ``SLOPE_STEP`` volts."""

    planar = False
    #: the table rows and its edge are slope kinks at voltages that depend on the parameters
    kinks = True
    SLOPE_STEP = 1e-5

    def current(self, V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i, bohm_factor, sheath_expansion, *,
                slope=False):
        args = (V_p, n_i, T_e, probe, ion_mass, n_e, T_i)
        I = self._value(V, *args)
        if not slope:
            return I
        return I, (self._value(V + self.SLOPE_STEP, *args) - I) / self.SLOPE_STEP


class ABR(_Tabulated):
    name = "abr"

    @staticmethod
    def _value(V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i):
        return _abr(V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i)


class Auto(_Tabulated):
    """planar: thin-sheath; cylinder and sphere: the smaller of OML and ABR (module docstring)."""

    name = "auto"
    planar = True
    orbital = True

    @staticmethod
    def _value(V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i):
        return np.minimum(_oml(V, V_p, n_i, probe, ion_mass, T_i), _abr(V, V_p, n_i, T_e, probe, ion_mass, n_e, T_i))

    def resolve(self, probe):
        return ION_THEORIES["thin-sheath"] if probe.geometry == "planar" else self


#: name -> theory object (usable as a sequence of names: ``in``, ``', '.join``)
ION_THEORIES: dict[str, IonTheory] = {t.name: t for t in (ThinSheath(), OML(), ABR(), Auto())}


def ion_theory(name) -> IonTheory:
    """The theory object of ``name`` (an :class:`IonTheory` is returned as it is)."""
    if isinstance(name, IonTheory):
        return name
    try:
        return ION_THEORIES[name]
    except (KeyError, TypeError):
        raise ValueError(f"ion collection theory must be one of {', '.join(ION_THEORIES)}, got {name!r}") from None
