"""Physical constants (CODATA, via :mod:`scipy.constants`) and the ion table.

Ion masses are built from standard atomic weights: a singly charged ion has the
mass of its neutral parent minus one electron mass.

References
----------
* CODATA recommended values, as shipped by ``scipy.constants``.
* IUPAC Commission on Isotopic Abundances and Atomic Weights, standard atomic
  weights (abridged/conventional values). Argon uses 39.948, the value
  tabulated until 2011; IUPAC now gives the interval [39.792, 39.963] with
  conventional value 39.95 (a 0.005 % difference, far below any probe error).
* Hydrogen and deuterium use nuclide masses (AME/CODATA): 1H = 1.00782503207 u,
  2H = 2.01410177812 u, because laboratory hydrogen plasmas are isotopically pure
  enough that the nuclide mass is the better choice than the terrestrial
  average 1.008.
"""
from __future__ import annotations

import numpy as np
from scipy import constants as _c

__all__ = [
    "E_CHARGE", "M_E", "M_U", "M_P", "EPS0", "K_B",
    "ION_TABLE", "ion_mass", "known_ions",
]

E_CHARGE = _c.e                      # C
M_E = _c.m_e                         # kg
M_U = _c.physical_constants["atomic mass constant"][0]  # kg
M_P = _c.m_p                         # kg
EPS0 = _c.epsilon_0                  # F/m
K_B = _c.k                           # J/K

# Neutral parent mass in unified atomic mass units (u), per ion name.
# Molecular ions: sum of standard atomic weights of the atoms.
_NEUTRAL_MASS_U = {
    "H": 1.00782503207,      # 1H nuclide mass
    "D": 2.01410177812,      # 2H nuclide mass
    "H2": 2 * 1.00782503207,
    "D2": 2 * 2.01410177812,
    "He": 4.002602,
    "Ne": 20.1797,
    "Ar": 39.948,
    "Kr": 83.798,
    "Xe": 131.293,
    "N": 14.007,
    "O": 15.999,
    "N2": 2 * 14.007,
    "O2": 2 * 15.999,
}

#: ion name -> ion mass in kg (singly charged: neutral mass minus one electron)
ION_TABLE = {name: m * M_U - M_E for name, m in _NEUTRAL_MASS_U.items()}

_ALIASES = {name.lower(): name for name in ION_TABLE}
_ALIASES.update({"argon": "Ar", "helium": "He", "neon": "Ne", "krypton": "Kr",
                 "xenon": "Xe", "hydrogen": "H", "deuterium": "D",
                 "nitrogen": "N2", "oxygen": "O2"})


def known_ions() -> list[str]:
    """Names accepted by :func:`ion_mass` (case-insensitive)."""
    return sorted(ION_TABLE)


def ion_mass(ion: str | float | None = None, *, amu: float | None = None) -> float:
    """Ion mass in kg.

    Parameters
    ----------
    ion : str or float
        Name from the built-in table (``"Ar"``, ``"he"``, ``"N2"``, ``"argon"``, ...;
        the ``+`` of ``"Ar+"`` is accepted) or a number, taken as the ion mass in u.
    amu : float, optional
        Ion mass in unified atomic mass units; used instead of ``ion``.

    Raises
    ------
    ValueError
        Unknown name (the message lists the known ones) or a non-positive mass.
    """
    if amu is None and isinstance(ion, (int, float, np.floating, np.integer)) and not isinstance(ion, bool):
        amu = float(ion)
    if amu is not None:
        amu = float(amu)
        if not np.isfinite(amu) or amu <= 0:
            raise ValueError(f"ion mass must be a positive number of atomic mass units, got {amu!r}")
        if amu < 0.9:
            raise ValueError(f"ion mass {amu} u is lighter than a proton; give the mass in atomic mass units (u)")
        return amu * M_U
    if not isinstance(ion, str):
        raise ValueError(f"ion must be a name or a mass in u, got {ion!r}")
    key = ion.strip().rstrip("+").lower()
    if key not in _ALIASES:
        raise ValueError(f"unknown ion {ion!r}; known ions: {', '.join(known_ions())} "
                         "(or give the mass in u with --ion-mass)")
    return ION_TABLE[_ALIASES[key]]
