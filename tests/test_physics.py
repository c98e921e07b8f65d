"""Physics of the collection model checked against references outside the project.

Every test names its reference in its docstring:

* CODATA values (via ``scipy.constants``; literal values quoted where stated);
* IUPAC standard atomic weights and AME nuclide masses, through the independent
  ``periodictable`` package;
* NRL Plasma Formulary numeric (cgs/eV) forms;
* textbook formulas (Lieberman & Lichtenberg 2005 = LL05; Hutchinson 2002 = Hut02;
  Mott-Smith & Langmuir 1926 = MSL26) and their analytic limits;
* check values computed independently of this code in the developer physics notes
  (``docs/physics-reference.md``, cited as "notes §x.y"; values flagged [D] there
  were computed with numpy/scipy from the textbook formulas, not with this package).

"from memory" marks a reference that could not be confirmed while writing the test;
"common practice, no source" marks a convention without a citable source.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants as sc
from scipy.integrate import quad
from scipy.special import erfc

import periodictable as pt

from bayesprobe.physics import constants as C
from bayesprobe.physics import formulary as F
from bayesprobe.physics.constants import ION_TABLE, ion_mass, known_ions
from bayesprobe.physics.electrons import (attracted_factor, electron_current,
                                          electron_saturation_current,
                                          maxwellian_electron_current)
from bayesprobe.physics.geometry import Probe
from bayesprobe.physics.ions import (BOHM_FACTORS, ion_current, oml_ion_current,
                                     thin_sheath_ion_current)

E = sc.e
ME = sc.m_e
MP = sc.m_p
EXP_HALF = math.exp(-0.5)

UNIT_PLANE = Probe("planar", area=1.0)          # 1 m^2: currents are current densities


# ---------------------------------------------------------------------------
# 1. constants and ion masses
# ---------------------------------------------------------------------------

def test_constants_are_scipy_codata():
    """Module constants are the CODATA values shipped with scipy.constants.

    Source: CODATA recommended values via ``scipy.constants``.
    """
    assert C.E_CHARGE == sc.e
    assert C.M_E == sc.m_e
    assert C.M_U == sc.physical_constants["atomic mass constant"][0]
    assert C.M_P == sc.m_p
    assert C.EPS0 == sc.epsilon_0


@pytest.mark.parametrize("value, literals, rtol", [
    # e is exact since the 2019 SI redefinition.
    (lambda: C.E_CHARGE, (1.602176634e-19,), 0.0),
    # m_e: CODATA 2018 (from memory) / CODATA 2022 (as printed in the notes §0 for scipy 1.17).
    (lambda: C.M_E, (9.1093837015e-31, 9.1093837139e-31), 3e-9),
    # m_u: CODATA 2018 (from memory) / 2022 (notes §0).
    (lambda: C.M_U, (1.66053906660e-27, 1.66053906892e-27), 3e-9),
    # eps0: CODATA 2018 (from memory) / 2022 (notes §0).
    (lambda: C.EPS0, (8.8541878128e-12, 8.8541878188e-12), 2e-9),
])
def test_constants_match_printed_codata(value, literals, rtol):
    """Constants agree with the printed CODATA 2018 or 2022 values.

    Source: CODATA 2018 values from memory; CODATA 2022 values as printed in the notes §0;
    e exact by the 2019 SI definition.
    """
    v = value()
    assert any(abs(v - lit) <= rtol * abs(lit) for lit in literals), v


def _reference_neutral_mass_u(name: str) -> tuple[float, float]:
    """(neutral parent mass in u, rtol) from ``periodictable``.

    Standard atomic weights (IUPAC) for everything except hydrogen isotopes, which
    the table documents as nuclide masses (1H, 2H from the AME via periodictable).
    The tolerance 1e-4 covers the abridged-vs-conventional spread of standard atomic
    weights (e.g. Ar 39.948 vs 39.95 = 5e-5); nuclide masses are compared to 1e-8.
    """
    formula = pt.formula(name)
    total = 0.0
    hydrogen_only = True
    for atom, count in formula.atoms.items():
        if atom is pt.H:                     # plain "H": use the 1H nuclide
            total += count * pt.H[1].mass
        else:
            total += count * atom.mass
            hydrogen_only = hydrogen_only and atom is pt.D
    return total, (1e-8 if hydrogen_only else 1e-4)


@pytest.mark.parametrize("name", sorted(ION_TABLE))
def test_ion_table_vs_periodictable(name):
    """Each ion mass = neutral (atomic or molecular) mass - one electron mass.

    Sources: IUPAC standard atomic weights and AME nuclide masses (1H, 2H) through the
    ``periodictable`` package; m_u, m_e from CODATA (scipy.constants).
    """
    ref_u, rtol = _reference_neutral_mass_u(name)
    expected = ref_u * sc.physical_constants["atomic mass constant"][0] - sc.m_e
    assert ION_TABLE[name] == pytest.approx(expected, rel=rtol)
    assert ion_mass(name) == ION_TABLE[name]


def test_proton_and_deuteron_masses():
    """H+ and D+ are the bare proton and deuteron: CODATA masses within the atomic binding
    energy (13.6 eV / 938 MeV = 1.5e-8).

    Source: CODATA proton and deuteron masses (scipy.constants).
    """
    assert ion_mass("H") == pytest.approx(sc.m_p, rel=3e-8)
    assert ion_mass("D") == pytest.approx(sc.physical_constants["deuteron mass"][0], rel=3e-8)


def test_ion_mass_aliases_and_amu():
    """Names are case-insensitive, accept a trailing '+', element names; ``amu=`` gives
    amu * m_u exactly (the caller states the ion mass).

    Source: CODATA m_u (scipy.constants); aliasing is common practice, no source.
    """
    ar = ion_mass("Ar")
    assert ion_mass("ar") == ar and ion_mass("Ar+") == ar and ion_mass("argon") == ar
    m_u = sc.physical_constants["atomic mass constant"][0]
    assert ion_mass(amu=39.948) == pytest.approx(39.948 * m_u, rel=1e-15)
    assert ion_mass(amu=4) == pytest.approx(4 * m_u, rel=1e-15)
    assert ion_mass(131.293) == pytest.approx(131.293 * m_u, rel=1e-15)


def test_unknown_ion_lists_known():
    """Unknown ion names raise ValueError listing every known ion.

    Source: common practice, no source.
    """
    with pytest.raises(ValueError) as info:
        ion_mass("Unobtainium")
    msg = str(info.value)
    assert "Unobtainium" in msg
    for name in known_ions():
        assert name in msg


@pytest.mark.parametrize("kwargs", [{"amu": 0.0}, {"amu": -4.0}, {"ion": -40.0}, {"ion": 0}])
def test_nonpositive_mass_rejected(kwargs):
    """Non-positive masses raise ValueError mentioning the mass.

    Source: common practice, no source.
    """
    with pytest.raises(ValueError, match="mass"):
        ion_mass(**kwargs)


# ---------------------------------------------------------------------------
# 2. NRL Plasma Formulary numeric forms
# ---------------------------------------------------------------------------

# (ion, T_e [eV], n [m^-3]); the first three are the worked cases of notes §5.2,
# the rest are added here (hydrogen discharge, xenon thruster plume, ionospheric O+).
NRL_CASES = [("Ar", 2.0, 1e16), ("He", 5.0, 1e17), ("D", 20.0, 1e19),
             ("H", 10.0, 1e18), ("Xe", 0.5, 1e14), ("O", 0.2, 1e11)]
# NRL's three-digit constants agree with exact CODATA to <= 2.7e-3 when mu = M/m_p (notes §5.1).
NRL_RTOL = 3e-3


@pytest.mark.parametrize("ion, Te, n", NRL_CASES)
def test_nrl_numeric_forms(ion, Te, n):
    """Debye length, plasma frequencies, electron thermal speed and ion sound speed
    against the NRL numeric forms (cgs, T in eV, n in cm^-3, mu = M/m_p):
    lambda_D = 7.43e2 Te^1/2 n^-1/2 cm, omega_pe = 5.64e4 n^1/2 rad/s,
    omega_pi = 1.32e3 mu^-1/2 n^1/2 rad/s, v_Te = 4.19e7 Te^1/2 cm/s,
    c_s = 9.79e5 (Te/mu)^1/2 cm/s.

    Source: J. D. Huba, NRL Plasma Formulary (numeric constants as reproduced on the
    Wikipedia "Plasma parameters" page; notes §5.1). Tolerance 3e-3 justified in notes §5.1.
    """
    M = ion_mass(ion)
    mu = M / MP
    n_cc = n * 1e-6
    assert F.debye_length(n, Te) == pytest.approx(7.43e2 * Te**0.5 * n_cc**-0.5 * 1e-2, rel=NRL_RTOL)
    assert F.electron_plasma_frequency(n) == pytest.approx(5.64e4 * n_cc**0.5, rel=NRL_RTOL)
    assert F.ion_plasma_frequency(n, M) == pytest.approx(1.32e3 * mu**-0.5 * n_cc**0.5, rel=NRL_RTOL)
    assert F.electron_thermal_speed(Te) == pytest.approx(4.19e7 * Te**0.5 * 1e-2, rel=NRL_RTOL)
    assert F.bohm_speed(Te, M) == pytest.approx(9.79e5 * (Te / mu) ** 0.5 * 1e-2, rel=NRL_RTOL)


def test_nrl_case1_exact_values():
    """Case 1 (Ar+, 2 eV, 1e16 m^-3) SI values to 6 figures.

    Source: notes §5.2, "scipy exact" column [D] (computed from the SI definitions of the
    NRL formulary with scipy.constants, M = 39.948 u - m_e).
    """
    M = ion_mass("Ar")
    assert F.debye_length(1e16, 2.0) == pytest.approx(1.05132e-4, rel=1e-5)
    assert F.electron_plasma_frequency(1e16) == pytest.approx(5.64146e9, rel=1e-5)
    assert F.ion_plasma_frequency(1e16, M) == pytest.approx(2.09058e7, rel=1e-5)
    assert F.electron_thermal_speed(2.0) == pytest.approx(5.93097e5, rel=1e-5)
    assert F.bohm_speed(2.0, M) == pytest.approx(2.19787e3, rel=1e-5)
    assert F.electron_mean_speed(2.0) == pytest.approx(9.46446e5, rel=1e-5)


def test_debye_scaling_identity():
    """lambda_D(20 eV, 1e19) = lambda_D(2 eV, 1e16)/10, since lambda_D ~ sqrt(Te/n).

    Source: analytic scaling of the NRL/textbook definition (notes §5.2 note on case 3).
    """
    assert F.debye_length(1e19, 20.0) == pytest.approx(F.debye_length(1e16, 2.0) / 10, rel=1e-13)


def test_nrl_mu_convention_matters():
    """Using mu = A_r (instead of M/m_p) would shift c_s by ~0.36 %, outside the tolerance:
    shows the NRL test can discriminate the convention.

    Source: notes §5.1 (m_u/m_p = 0.99277; CODATA via scipy).
    """
    M = ion_mass("Ar")
    wrong = 9.79e5 * (2.0 / 39.948) ** 0.5 * 1e-2
    right = 9.79e5 * (2.0 / (M / MP)) ** 0.5 * 1e-2
    assert abs(right / wrong - 1) > 3e-3
    assert F.bohm_speed(2.0, M) == pytest.approx(right, rel=NRL_RTOL)


# ---------------------------------------------------------------------------
# 3. Bohm flux, sheath-edge factor, saturation-current ratio
# ---------------------------------------------------------------------------

def test_default_bohm_factor_is_boltzmann_presheath():
    """Default sheath-edge factor is exp(-1/2) = 0.6065 (Boltzmann electrons across a
    Te/2 presheath), "often quoted as 0.61".

    Sources: LL05 ch. 6 (from memory); 0.61 rounding: common practice, no source.
    """
    import inspect

    from bayesprobe.model import ModelConfig

    assert BOHM_FACTORS["boltzmann"] == pytest.approx(0.60653066, abs=1e-8)
    assert round(BOHM_FACTORS["boltzmann"], 2) == 0.61
    assert BOHM_FACTORS["fluid"] == 0.5
    for fn in (thin_sheath_ion_current, ion_current):
        assert inspect.signature(fn).parameters["bohm_factor"].default == pytest.approx(EXP_HALF, rel=1e-15)
    assert ModelConfig().bohm_factor == pytest.approx(EXP_HALF, rel=1e-15)


@pytest.mark.parametrize("ion, Te, n, j_is, j_es", [
    ("Ar", 2.0, 1e16, 2.13582, 379.093),
    ("He", 5.0, 1e17, 106.693, 5993.99),
    ("D", 20.0, 1e19, 3.00834e4, 1.19880e6),
])
def test_bohm_and_random_current_densities(ion, Te, n, j_is, j_es):
    """j_is = exp(-1/2) e n sqrt(e Te/M) (planar, no sheath expansion) and
    j_es = e n sqrt(e Te/(2 pi m_e)).

    Sources: formulas LL05 ch. 6 / Hut02 ch. 3 (from memory); numbers notes §5.2 [D].
    """
    M = ion_mass(ion)
    V = np.array([-200.0, -50.0, -1.0])               # all below V_p = 0
    I = thin_sheath_ion_current(V, 0.0, n, Te, UNIT_PLANE, M, sheath_expansion=False)
    np.testing.assert_allclose(I, j_is, rtol=1e-5)     # flat: no V dependence below V_p
    assert electron_saturation_current(n, Te, 1.0) == pytest.approx(j_es, rel=1e-5)
    # fluid factor 0.5 scales it linearly (notes §5.2, j_is 0.5 column)
    I_half = thin_sheath_ion_current(V, 0.0, n, Te, UNIT_PLANE, M, sheath_expansion=False, bohm_factor=0.5)
    np.testing.assert_allclose(I_half, j_is * 0.5 / EXP_HALF, rtol=1e-5)


@pytest.mark.parametrize("ion, ratio", [("Ar", 177.5), ("He", 56.2), ("D", 39.8)])
def test_saturation_ratio_identity(ion, ratio):
    """I_es/I_is = sqrt(M/(2 pi m_e))/exp(-1/2) for the thin-sheath Bohm ion current.

    Source: ratio of (2.2) and (1.1), textbook (LL05 ch. 6, from memory); table notes §2.1 [D].
    """
    M = ion_mass(ion)
    probe = Probe("planar", radius=2e-3)
    I_es = electron_saturation_current(1e17, 3.0, probe.area)
    I_is = thin_sheath_ion_current(np.array([-30.0]), 0.0, 1e17, 3.0, probe, M, sheath_expansion=False)[0]
    assert I_es / I_is == pytest.approx(math.sqrt(M / (2 * math.pi * ME)) / EXP_HALF, rel=1e-12)
    assert round(I_es / I_is, 1) == ratio


def test_sheath_expansion_area_from_child_law():
    """Thin-sheath ions with sheath expansion collect through the sheath-edge area:
    cylinder A (1 + s/r), sphere A (1 + s/r)^2, disc A (1 + s/r)^2, with s from equating
    the Bohm flux e n exp(-1/2) u_B to the Child current (4/9) eps0 sqrt(2e/M) V0^1.5/s^2.

    Source: LL05 ch. 6 (Child law and Bohm flux, from memory); area model notes §1.3.
    """
    M = ion_mass("Ar")
    n, Te, V0 = 1e16, 2.0, 30.0
    u_B = math.sqrt(E * Te / M)
    s = math.sqrt((4 / 9) * sc.epsilon_0 * math.sqrt(2 * E / M) * V0**1.5 / (E * n * EXP_HALF * u_B))
    for geom, kw, power in [("cylindrical", {"length": 5e-3}, 1), ("spherical", {}, 2), ("planar", {}, 2)]:
        probe = Probe(geom, radius=1e-3, **kw)
        V = np.array([-V0])
        with_exp = thin_sheath_ion_current(V, 0.0, n, Te, probe, M, sheath_expansion=True)
        without = thin_sheath_ion_current(V, 0.0, n, Te, probe, M, sheath_expansion=False)
        assert with_exp[0] / without[0] == pytest.approx((1 + s / probe.radius) ** power, rel=1e-9), geom


# ---------------------------------------------------------------------------
# 4. Electron current
# ---------------------------------------------------------------------------

def _oml_cylinder_exact(chi):
    """MSL26 cylinder factor written with erfc (independent of the erfcx form used in the code)."""
    chi = np.asarray(chi, float)
    return 2 * np.sqrt(chi / np.pi) + np.exp(chi) * erfc(np.sqrt(chi))


def test_oml_cylinder_factor_exact_form():
    """Cylinder factor equals 2 sqrt(chi/pi) + exp(chi) erfc(sqrt chi).

    Source: Mott-Smith & Langmuir 1926 (from memory; notes §1.4).
    """
    chi = np.array([0.0, 1e-6, 0.01, 0.3, 1.0, 2.0, 5.0, 10.0, 30.0])
    np.testing.assert_allclose(attracted_factor(chi, "cylindrical"), _oml_cylinder_exact(chi), rtol=1e-12)


@pytest.mark.parametrize("chi, percent", [(2.0, 1.2), (5.0, 0.3), (10.0, 0.1)])
def test_oml_cylinder_large_chi_approximation(chi, percent):
    """(2/sqrt pi) sqrt(1 + chi) over-estimates the exact OML cylinder factor by
    +1.2 % at chi = 2, +0.3 % at 5, +0.1 % at 10.

    Source: approximation MSL26/Hut02 ch. 3 (from memory); error values notes §1.4 [D].
    """
    approx = 2 / math.sqrt(math.pi) * math.sqrt(1 + chi)
    err = 100 * (approx / float(attracted_factor(np.array(chi), "cylindrical")) - 1)
    assert abs(err - percent) <= 0.05 + 1e-9


def test_oml_cylinder_asymptote():
    """The cylinder factor tends to (2/sqrt pi) sqrt(1+chi): relative gap shrinks with chi
    and is below 1e-4 at chi = 1e3.

    Source: asymptotic expansion of erfc (Abramowitz & Stegun 7.1.23, from memory).
    """
    chi = np.array([2.0, 10.0, 100.0, 1000.0])
    gap = 2 / np.sqrt(np.pi) * np.sqrt(1 + chi) / attracted_factor(chi, "cylindrical") - 1
    assert np.all(np.diff(gap) < 0) and np.all(gap > 0)
    assert gap[-1] < 1e-4


@pytest.mark.parametrize("geometry, kw", [("planar", {}), ("cylindrical", {"length": 5e-3}),
                                          ("spherical", {})])
def test_electron_saturation_branch_shapes(geometry, kw):
    """Above V_p: planar flat, sphere I_es (1 + chi), cylinder the MSL26 factor.

    Source: MSL26, Hut02 ch. 3 (from memory).
    """
    probe = Probe(geometry, radius=1e-4, **kw)
    n, Te, Vp = 1e16, 3.0, 10.0
    chi = np.array([0.1, 1.0, 3.0, 10.0])
    I = maxwellian_electron_current(Vp + chi * Te, Vp, n, Te, probe)
    I_es = E * n * probe.area * math.sqrt(E * Te / (2 * math.pi * ME))
    expected = {"planar": np.ones_like(chi), "spherical": 1 + chi,
                "cylindrical": _oml_cylinder_exact(chi)}[geometry]
    np.testing.assert_allclose(I / I_es, expected, rtol=1e-12)


@pytest.mark.parametrize("geometry, kw, slope_continuous", [
    ("planar", {}, False), ("cylindrical", {"length": 5e-3}, True), ("spherical", {}, True)])
def test_electron_current_continuity_at_vp(geometry, kw, slope_continuous):
    """Value continuous at V_p for all shapes; slope continuous (= I_es/Te) for cylinder and
    sphere; planar has a kink (slope 0 above V_p).

    Source: MSL26 limits chi -> 0 of the OML factors (from memory); notes §2.4 [D].
    """
    probe = Probe(geometry, radius=1e-4, **kw)
    n, Te, Vp = 1e16, 3.0, 10.0
    I_es = electron_saturation_current(n, Te, probe.area)
    h = 1e-8 * Te
    I = maxwellian_electron_current(np.array([Vp - h, Vp, Vp + h]), Vp, n, Te, probe)
    np.testing.assert_allclose(I, I_es, rtol=1e-7)
    left = (I[1] - I[0]) / h
    right = (I[2] - I[1]) / h
    assert left == pytest.approx(I_es / Te, rel=1e-6)
    if slope_continuous:
        # cylinder: right slope = 1 - (4/(3 sqrt pi)) sqrt(chi) -> 1, ~8e-5 low at chi = 1e-8
        assert right == pytest.approx(I_es / Te, rel=2e-4)
    else:
        assert right == 0.0


@pytest.mark.parametrize("geometry, kw", [("planar", {}), ("cylindrical", {"length": 5e-3}),
                                          ("spherical", {})])
def test_log_slope_is_inverse_temperature(geometry, kw):
    """d ln I_e / dV = 1/T_e in the retarding region (central differences).

    Source: Boltzmann retardation, Hut02 ch. 3 / LL05 sec. 6.6 (from memory).
    """
    probe = Probe(geometry, radius=1e-4, **kw)
    Te, Vp, h = 2.7, 5.0, 1e-3
    V = np.linspace(Vp - 40, Vp - 0.01, 50)
    lnI = lambda v: np.log(electron_current(v, Vp, 3e16, Te, probe))
    slope = (lnI(V + h) - lnI(V - h)) / (2 * h)
    np.testing.assert_allclose(slope, 1 / Te, rtol=1e-6)


def test_bimaxwellian_limits():
    """Two-temperature electrons: hot_fraction 0 is the Maxwellian exactly; equal
    temperatures give the Maxwellian; a hot group makes the log-slope the density-weighted
    mix of the two inverse temperatures where each dominates.

    Source: definition (2.3), notes §2.2; Hut02 ch. 3 (from memory).
    """
    probe = Probe("cylindrical", radius=5e-5, length=5e-3)
    V = np.linspace(-40, 15, 221)
    maxw = electron_current(V, 5.0, 1e16, 2.0, probe)
    zero_hot = electron_current(V, 5.0, 1e16, 2.0, probe, hot_fraction=0.0, T_hot=10.0)
    assert np.array_equal(zero_hot, maxw)
    equal_T = electron_current(V, 5.0, 1e16, 2.0, probe, hot_fraction=0.3, T_hot=2.0)
    np.testing.assert_allclose(equal_T, maxw, rtol=1e-14)
    # far below V_p a 5 % hot group at 10 eV dominates: log-slope -> 1/10
    bi = lambda v: electron_current(v, 5.0, 1e16, 2.0, probe, hot_fraction=0.05, T_hot=10.0)
    v0, h = -35.0, 1e-3
    slope = (np.log(bi(v0 + h)) - np.log(bi(v0 - h))) / (2 * h)
    assert slope == pytest.approx(1 / 10.0, rel=2e-3)


def test_druyvesteyn_recovers_maxwellian_eedf():
    """The second derivative of the retarding current gives back the Maxwellian EEDF:
    g(U) = (2/(A e)) sqrt(2 m_e U/e) d^2 I_e/dV^2.

    Source: Druyvesteyn formula, LL05 sec. 6.6 and Godyak & Demidov, J. Phys. D 44,
    233001 (2011) (from memory; notes §2.3).
    """
    probe = Probe("planar", radius=2e-3)
    n, Te, Vp, h = 1e16, 3.0, 0.0, 1e-3
    U = np.array([0.5, 1.0, 3.0, 6.0, 12.0])
    V = Vp - U
    I = lambda v: electron_current(v, Vp, n, Te, probe)
    d2 = (I(V + h) - 2 * I(V) + I(V - h)) / h**2
    g = 2 / (probe.area * E) * np.sqrt(2 * ME * U / E) * d2
    np.testing.assert_allclose(g, F.maxwellian_eedf(U, n, Te), rtol=1e-5)


# ---------------------------------------------------------------------------
# 5. OML ions
# ---------------------------------------------------------------------------

WIRE_END = Probe("cylindrical", radius=1e-4, length=1e-2, end_cap=True)
WIRE_SIDE = Probe("cylindrical", radius=1e-4, length=1e-2)


def _cold_oml(V0, n, probe, M):
    return probe.area * n * E * math.sqrt(2) / math.pi * np.sqrt(E * V0 / M)


def test_oml_probe_areas():
    """Wire areas: side 2 pi r L = 6.2832e-6 m^2, with end 6.3146e-6 m^2 (r = 0.1 mm, L = 10 mm).

    Source: geometry; numbers notes §1.4 [D].
    """
    assert WIRE_SIDE.area == pytest.approx(6.2832e-6, rel=1e-5)
    assert WIRE_END.area == pytest.approx(6.3146e-6, rel=1e-5)


def test_oml_cold_ion_check_values():
    """Cold-ion OML cylinder current I = A n e (sqrt 2/pi) sqrt(e (V_p - V)/M): Ar+, n = 1e16,
    area with end -> 2.238e-5 A at 10 V, 3.165e-5 A at 20 V, 4.477e-5 A at 40 V.

    Source: MSL26 cold-ion limit (from memory); check values notes §1.4 [D].
    """
    M = ion_mass("Ar")
    V0 = np.array([10.0, 20.0, 40.0])
    I = oml_ion_current(-V0, 0.0, 1e16, WIRE_END, M, T_i=1e-4)
    np.testing.assert_allclose(I, [2.238e-5, 3.165e-5, 4.477e-5], rtol=3e-4)
    np.testing.assert_allclose(I, _cold_oml(V0, 1e16, WIRE_END, M), rtol=1e-4)


def test_oml_warm_tends_to_cold():
    """The warm-ion (Maxwellian) OML cylinder current tends to the cold-ion limit as
    T_i -> 0; the relative excess falls monotonically (asymptotically 1/(2 chi)).

    Source: MSL26 (from memory); limit derived from the erfc asymptote (A&S 7.1.23, from memory).
    """
    M = ion_mass("Ar")
    V0 = 20.0
    cold = _cold_oml(V0, 1e16, WIRE_SIDE, M)
    T_i = np.array([1.0, 0.3, 0.1, 0.03, 0.01, 1e-3])
    err = np.array([oml_ion_current(np.array([-V0]), 0.0, 1e16, WIRE_SIDE, M, T_i=t)[0] / cold - 1
                    for t in T_i])
    assert np.all(err > 0) and np.all(np.diff(err) < 0)
    np.testing.assert_allclose(err[-2:], T_i[-2:] / (2 * V0), rtol=0.02)


def test_oml_ion_current_squared_slope():
    """I_i^2 is linear in the bias with slope 4.9600e-11 A^2/V (Ar+, side area 6.2832e-6 m^2,
    n = 1e16); inverting n = (pi/(A e)) sqrt(M |d(I^2)/dV| / (2e)) returns 1e16.

    Source: MSL26 cold-ion limit (from memory); numbers notes §1.4 [D].
    """
    M = ion_mass("Ar")
    V0 = np.array([10.0, 25.0, 40.0])
    I = oml_ion_current(-V0, 0.0, 1e16, WIRE_SIDE, M, T_i=1e-5)
    slopes = np.diff(I**2) / np.diff(V0)
    np.testing.assert_allclose(slopes, 4.9600e-11, rtol=2e-4)
    n = math.pi / (WIRE_SIDE.area * E) * math.sqrt(M * slopes.mean() / (2 * E))
    assert n == pytest.approx(1e16, rel=1e-4)


def test_oml_sphere_ions():
    """Sphere OML ions: I = I_th (1 + (V_p - V)/T_i), I_th = e n A sqrt(e T_i/(2 pi M)).

    Source: MSL26 (from memory; notes §1.4).
    """
    M = ion_mass("He")
    probe = Probe("spherical", radius=1e-3)
    T_i = 0.1
    V0 = np.array([0.5, 5.0, 50.0])
    I = oml_ion_current(-V0, 0.0, 1e15, probe, M, T_i=T_i)
    I_th = E * 1e15 * probe.area * math.sqrt(E * T_i / (2 * math.pi * M))
    np.testing.assert_allclose(I, I_th * (1 + V0 / T_i), rtol=1e-12)


def test_oml_ion_current_scalar_bias():
    """A scalar bias gives the same current as a length-1 array.

    Source: common practice, no source (numpy broadcasting convention of the other functions).
    """
    M = ion_mass("Ar")
    scalar = oml_ion_current(-10.0, 0.0, 1e16, WIRE_SIDE, M)
    assert float(scalar) == oml_ion_current(np.array([-10.0]), 0.0, 1e16, WIRE_SIDE, M)[0]


# ---------------------------------------------------------------------------
# 6. Child-law sheath
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("ratio, s_over_lambda", [(5, "3.40"), (10, "5.72"), (20, "9.63"),
                                                  (50, "19.1"), (100, "32.2")])
def test_child_sheath_table(ratio, s_over_lambda):
    """s/lambda_D = (sqrt 2/3) e^(1/4) (2 V0/Te)^(3/4): 3.40, 5.72, 9.63, 19.1, 32.2 at
    V0/Te = 5 ... 100.

    Source: Child-law sheath with Bohm flux, LL05 ch. 6 (from memory); table notes §1.3 [D],
    compared to the printed number of digits (docs/physics-reference.md §1.3 gives 5.72453 at
    V0/Te = 10: 1.01797 * 10^0.75).
    """
    n, Te = 1e16, 2.0
    s = F.child_sheath_thickness(ratio * Te, n, Te) / F.debye_length(n, Te)
    decimals = len(s_over_lambda.split(".")[1])
    assert round(float(s), decimals) == float(s_over_lambda)


def test_child_sheath_case_values():
    """Ar+, 2 eV, 1e16: s = 3.674e-4 m at V0 = 10.36 V, 1.1965e-3 m at 50 V, 3.3843e-3 m at 200 V;
    and s satisfies Bohm flux = Child current independently computed.

    Source: notes §5.2 case 1 [D]; Child law LL05 ch. 6 (from memory).
    """
    n, Te = 1e16, 2.0
    s = F.child_sheath_thickness(np.array([10.36, 50.0, 200.0]), n, Te)
    np.testing.assert_allclose(s, [3.674e-4, 1.1965e-3, 3.3843e-3], rtol=2e-4)
    M = ion_mass("Ar")
    J_bohm = E * n * EXP_HALF * math.sqrt(E * Te / M)
    J_child = (4 / 9) * sc.epsilon_0 * math.sqrt(2 * E / M) * np.array([10.36, 50.0, 200.0]) ** 1.5 / s**2
    np.testing.assert_allclose(J_child, J_bohm, rtol=1e-12)


# ---------------------------------------------------------------------------
# 7. Maxwellian EEDF
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("n, Te", [(1e16, 3.0), (1e18, 0.5), (1e12, 20.0)])
def test_maxwellian_eedf_moments(n, Te):
    """Maxwellian g(eps) integrates to n; (2/3) <eps> = Te; g/sqrt(eps) -> n (2/sqrt pi) Te^-3/2.

    Source: moments of the Maxwellian energy distribution (any kinetic-theory text, e.g.
    LL05 ch. 2, from memory); EEPF limit 2.1716e15 for 3 eV, 1e16 from notes §2.3 [D].
    """
    norm, _ = quad(F.maxwellian_eedf, 0, np.inf, args=(n, Te), epsabs=0, epsrel=1e-11)
    assert norm == pytest.approx(n, rel=1e-8)
    first, _ = quad(lambda e: e * F.maxwellian_eedf(e, n, Te), 0, np.inf, epsabs=0, epsrel=1e-11)
    assert (2 / 3) * first / norm == pytest.approx(Te, rel=1e-8)
    eps = 1e-12
    assert F.maxwellian_eedf(eps, n, Te) / math.sqrt(eps) == pytest.approx(
        n * 2 / math.sqrt(math.pi) * Te**-1.5, rel=1e-9)
    if (n, Te) == (1e16, 3.0):
        assert F.maxwellian_eedf(eps, n, Te) / math.sqrt(eps) == pytest.approx(2.1716e15, rel=1e-4)
