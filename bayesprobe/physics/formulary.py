"""Plasma-formulary quantities in SI units (temperatures in eV).

All functions broadcast over numpy arrays.

References
----------
* J. D. Huba, *NRL Plasma Formulary* (Naval Research Laboratory, 2007 and later
  editions): Debye length, plasma frequencies, thermal and ion-sound speeds.
  The SI definitions below are the formulary's; the tests compare them with its
  numeric (cgs/eV) forms.
* M. A. Lieberman & A. J. Lichtenberg, *Principles of Plasma Discharges and
  Materials Processing*, 2nd ed. (Wiley, 2005), ch. 6: Bohm criterion, presheath,
  Child-law sheath.
"""
from __future__ import annotations

import numpy as np

from .constants import E_CHARGE, EPS0, M_E

__all__ = [
    "debye_length", "electron_plasma_frequency", "ion_plasma_frequency",
    "bohm_speed", "electron_thermal_speed", "electron_mean_speed",
    "child_sheath_thickness", "screening_temperature", "maxwellian_eedf",
    "random_electron_current_density",
]


def _check_positive(name, x):
    x = np.asarray(x, dtype=float)
    if np.any(~np.isfinite(x)) or np.any(x <= 0):
        raise ValueError(f"{name} must be positive and finite")
    return x


def debye_length(n_e, T_e):
    """Electron Debye length sqrt(eps0 T_e / (n_e e)) in m (T_e in eV, n_e in m^-3)."""
    n_e = _check_positive("n_e", n_e)
    T_e = _check_positive("T_e", T_e)
    return _debye_length(n_e, T_e)


def _debye_length(n_e, T_e):
    """Unchecked :func:`debye_length` (the hot path)."""
    return np.sqrt(EPS0 * T_e / (n_e * E_CHARGE))


def electron_plasma_frequency(n_e):
    """Electron plasma (angular) frequency sqrt(n e^2/(eps0 m_e)) in rad/s."""
    n_e = _check_positive("n_e", n_e)
    return np.sqrt(n_e * E_CHARGE**2 / (EPS0 * M_E))


def ion_plasma_frequency(n_i, ion_mass, Z=1):
    """Ion plasma (angular) frequency sqrt(n_i Z^2 e^2/(eps0 M)) in rad/s."""
    n_i = _check_positive("n_i", n_i)
    ion_mass = _check_positive("ion_mass", ion_mass)
    return np.sqrt(n_i * (Z * E_CHARGE) ** 2 / (EPS0 * ion_mass))


def bohm_speed(T_e, ion_mass, T_i=0.0, gamma_i=1.0):
    """Bohm (ion-sound) speed sqrt(e (T_e + gamma_i T_i) / M) in m/s, temperatures in eV."""
    T_e = _check_positive("T_e", T_e)
    ion_mass = _check_positive("ion_mass", ion_mass)
    T_i = np.asarray(T_i, float)
    if np.any(~np.isfinite(T_i)) or np.any(T_i < 0):
        raise ValueError("T_i must be non-negative and finite")
    return np.sqrt(E_CHARGE * (T_e + gamma_i * T_i) / ion_mass)


def electron_thermal_speed(T_e):
    """sqrt(e T_e / m_e) in m/s: the formulary's thermal speed (not the mean speed)."""
    T_e = _check_positive("T_e", T_e)
    return np.sqrt(E_CHARGE * T_e / M_E)


def electron_mean_speed(T_e):
    """Mean speed of a Maxwellian, sqrt(8 e T_e / (pi m_e)), in m/s."""
    T_e = _check_positive("T_e", T_e)
    return np.sqrt(8 * E_CHARGE * T_e / (np.pi * M_E))


def random_electron_current_density(n_e, T_e):
    """Random electron current density e n sqrt(e T_e/(2 pi m_e)) = e n v_mean / 4, in A/m^2."""
    return E_CHARGE * np.asarray(n_e, float) * np.sqrt(E_CHARGE * np.asarray(T_e, float) / (2 * np.pi * M_E))


def child_sheath_thickness(V0, n_e, T_e):
    """Child-law sheath thickness for a drop V0 (V) across the sheath, in m.

    Equating the Bohm flux at the sheath edge (density n_e exp(-1/2)) with the
    space-charge-limited current gives s = (sqrt(2)/3) lambda_Ds (2 V0/T_e)^(3/4)
    with lambda_Ds = lambda_D exp(1/4) the Debye length at the sheath edge,
    i.e. s = 1.0180 lambda_D (V0/T_e)^(3/4). (Lieberman & Lichtenberg 2005, ch. 6;
    coefficient re-derived.) Negative V0 are treated as zero.
    """
    _check_positive("n_e", n_e)
    _check_positive("T_e", T_e)
    V0 = np.clip(np.asarray(V0, float), 0.0, None)
    lam = EPS0 * np.asarray(T_e, float) / (np.asarray(n_e, float) * E_CHARGE)
    lam = np.sqrt(lam)
    return (np.sqrt(2.0) / 3.0) * np.exp(0.25) * lam * (2.0 * V0 / T_e) ** 0.75


def screening_temperature(T_cold, T_hot, hot_fraction):
    """Harmonic, density-weighted ('screening') temperature [(1-a)/T_c + a/T_h]^-1 in eV.

    This is the temperature entering the Bohm speed when several Maxwellian
    electron groups are present (Lieberman & Lichtenberg 2005, ch. 6, the
    multi-component Bohm criterion).
    """
    a = np.asarray(hot_fraction, float)
    if np.any(~np.isfinite(a)) or np.any((a < 0) | (a > 1)):
        raise ValueError("hot_fraction must lie in [0, 1]")
    T_cold = _check_positive("T_cold", T_cold)
    T_hot = _check_positive("T_hot", T_hot)
    return 1.0 / ((1.0 - a) / T_cold + a / T_hot)


def maxwellian_eedf(energy, n_e, T_e):
    """Electron energy distribution g(eps) of a Maxwellian, in m^-3 eV^-1.

    g(eps) = n_e (2/sqrt(pi)) T_e^(-3/2) sqrt(eps) exp(-eps/T_e), normalised so that
    the integral over eps (eV) equals n_e.
    """
    eps = np.clip(np.asarray(energy, float), 0.0, None)
    T = _check_positive("T_e", T_e)
    n_e = np.asarray(n_e, float)
    if np.any(~np.isfinite(n_e)) or np.any(n_e < 0):
        raise ValueError("n_e must be non-negative and finite")
    return np.asarray(n_e, float) * 2.0 / np.sqrt(np.pi) * T ** -1.5 * np.sqrt(eps) * np.exp(-eps / T)
