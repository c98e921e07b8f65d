"""Tests of the radial cold-ion (ABR) collection table and its look-up.

Physics being checked: cold ions falling radially from rest onto an absorbing
cylinder or sphere through Boltzmann electrons (J. E. Allen, R. L. F. Boyd,
P. Reynolds, Proc. Phys. Soc. B 70, 297 (1957) for the sphere; F. F. Chen,
"Electric Probes", in Plasma Diagnostic Techniques, eds. Huddlestone & Leonard,
Academic Press 1965, for the cylinder). The shipped table is never rebuilt
here; instead a few profiles are integrated directly with an independent
formulation of the same equation (radius rho as the variable, start on the
bare quasi-neutral branch, its own event handling) and compared with the table.
"""
from __future__ import annotations

import math
import os

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from bayesprobe.physics.abr import abr_current, abr_table_range

TABLE = os.path.join(os.path.dirname(__file__), os.pardir, "bayesprobe", "physics",
                     "data", "abr_table.npz")
BOHM_LIMIT = math.exp(-0.5)      # thin-sheath ion flux: n0 e^{-1/2} c_s

# ---------------------------------------------------------------------------
# Regression values i(xi, eta) computed by a colleague (Radau, rtol 1e-8,
# quoted accuracy about +-0.2 %), NOT yet cross-checked against the curves
# printed in Chen 1965.
XI_CHECK = [1, 2, 5, 10, 20, 50, 100]
ETA_CHECK = [3, 5, 10, 20, 40]
CHECK = {
    "cylindrical": [
        [2.5298, 3.1464, 4.2368, 5.7100, 7.8340],
        [1.7684, 2.1179, 2.7225, 3.5452, 4.7224],
        [1.2051, 1.3671, 1.6461, 2.0271, 2.5730],
        [0.9686, 1.0588, 1.2125, 1.4271, 1.7323],
        [0.8243, 0.8735, 0.9579, 1.0750, 1.2470],
        [0.7163, 0.7378, 0.7742, 0.8269, 0.9043],
        [0.6712, 0.6824, 0.7016, 0.7293, 0.7710],
    ],
    "spherical": [
        [4.8660, 6.8148, 10.8556, 17.4772, 28.4548],
        [2.9856, 3.9691, 5.9317, 9.0525, 14.1102],
        [1.7413, 2.1450, 2.9136, 4.0914, 5.9540],
        [1.2656, 1.4733, 1.8571, 2.4335, 3.3296],
        [0.9930, 1.1000, 1.2940, 1.5805, 2.0214],
        [0.7979, 0.8428, 0.9216, 1.0371, 1.2137],
        [0.7188, 0.7419, 0.7817, 0.8400, 0.9299],
    ],
}
# The same colleague's direct shooting solve, cylinder, xi = 10, eta = 10.
SHOOT_CYL_10_10 = 1.21171


@pytest.mark.parametrize("geometry", ["cylindrical", "spherical"])
def test_table_matches_check_values(geometry):
    """Shipped table vs the colleague's regression values (see CHECK above).

    Source: colleague's independent Radau solve (rtol 1e-8, quoted +-0.2 %),
    not yet cross-checked against Chen 1965's printed curves.

    Tolerance 1 %. Budget: the quoted +-0.2 % of the check values, plus the
    table's own error, measured by direct shooting at all 70 points as at most
    0.012 % (cylinder) and 0.016 % (sphere) (bilinear error at cell centres
    <= 0.04 %, recorded in the table metadata). The measured deviation is
    larger than that budget for the cylinder: up to 0.46 % at xi <= 2,
    eta = 40, all with the check value high. Our direct solves (this file:
    test_direct_solves_match_table) agree with the table there, and the
    colleague's own direct shooting value at (10, 10) agrees with ours to
    1e-5 (test_shooting_cylinder_10_10), so the excess is in the check
    table; 1 % is about twice the largest observed deviation.
    """
    xi = np.array(XI_CHECK, dtype=float)[:, None]
    eta = np.array(ETA_CHECK, dtype=float)
    got = abr_current(xi, eta, geometry)
    np.testing.assert_allclose(got, np.array(CHECK[geometry]), rtol=0.01)


# ---------------------------------------------------------------------------
# Independent direct integration (variable rho, not ln rho as in the builder).
def _radii(J, k, etas, rho_floor=1e-3):
    """rho at which the profile for normalised current J first reaches each eta.

    Poisson in rho: eta'' + (k/rho) eta' = J/(rho^k sqrt(eta)) - exp(-eta),
    started at rho0 = max(60, 4 rho_s) on the bare quasi-neutral branch
    rho^k = J e^eta / sqrt(eta) (eta < 1/2) with its slope
    d eta/d rho = -2 k eta / (rho (1 - 2 eta)).
    """
    rho_s = (J * math.sqrt(2.0 * math.e)) ** (1.0 / k)
    rho0 = max(60.0, 4.0 * rho_s)
    target = k * math.log(rho0) - math.log(J)
    x = brentq(lambda x: math.exp(x) - 0.5 * x - target, -2.0 * target - 10.0,
               math.log(0.5), xtol=1e-14)
    eta0 = math.exp(x)
    slope0 = -2.0 * k * eta0 / (rho0 * (1.0 - 2.0 * eta0))

    def rhs(r, y):
        e = max(y[0], 1e-300)
        return [y[1], -k * y[1] / r + J / (r ** k * math.sqrt(e)) - math.exp(-e)]

    def jac(r, y):
        e = max(y[0], 1e-300)
        return [[0.0, 1.0], [-0.5 * J / r ** k * e ** -1.5 + math.exp(-e), -k / r]]

    events = [(lambda ep: (lambda r, y: y[0] - ep))(ep) for ep in etas]
    events[int(np.argmax(etas))].terminal = True
    sol = solve_ivp(rhs, (rho0, rho_floor), [eta0, slope0], method="Radau", jac=jac,
                    rtol=1e-9, atol=[1e-12, 1e-8], events=events)
    assert sol.status >= 0, sol.message
    out = []
    for te in sol.t_events:
        assert len(te) >= 1, "profile did not reach a requested eta"
        out.append(te[0])
    return np.array(out)


ETAS_SOLVED = (3.0, 10.0, 40.0)
# Pairs of J bracketing xi = 10 at eta = 10 (found once by hand from the check
# values: J = i xi^k / sqrt(2)).
J_BRACKETS = {"cylindrical": (8.55, 8.59), "spherical": (130.9, 131.7)}
K = {"cylindrical": 1, "spherical": 2}


@pytest.fixture(scope="module")
def direct_solves():
    out = {}
    for geometry, Js in J_BRACKETS.items():
        out[geometry] = [(J, _radii(J, K[geometry], ETAS_SOLVED)) for J in Js]
    return out


def _shoot_10_10(solves, k):
    """i at xi = 10, eta = 10 from two bracketing solves (ln J linear in ln xi)."""
    j10 = ETAS_SOLVED.index(10.0)
    (J1, r1), (J2, r2) = solves
    x1, x2 = math.log(r1[j10]), math.log(r2[j10])
    assert x1 < math.log(10.0) < x2, "J bracket does not enclose xi = 10"
    w = (math.log(10.0) - x1) / (x2 - x1)
    J = math.exp((1 - w) * math.log(J1) + w * math.log(J2))
    return math.sqrt(2.0) * J / 10.0 ** k


def test_shooting_cylinder_10_10(direct_solves):
    """Direct solve at (10, 10), cylinder, vs the colleague's direct shooting.

    Source: colleague's shooting solve, 1.21171 (6 figures, rtol 1e-8).
    Tolerance 5e-5: rounding of the quoted value (4e-6) plus our solver
    tolerance and the linear bracket interpolation (about 3e-6 over a 0.5 %
    J bracket), with margin.
    """
    i = _shoot_10_10(direct_solves["cylindrical"], 1)
    assert i == pytest.approx(SHOOT_CYL_10_10, rel=5e-5)
    # and the shipped table at that point (bilinear error <= 0.04 %)
    assert float(abr_current(10.0, 10.0, "cylindrical")) == pytest.approx(i, rel=1e-3)


def test_shooting_sphere_10_10(direct_solves):
    """Direct solve at (10, 10), sphere, vs the colleague's table value 1.8571.

    Source: colleague's regression table (quoted +-0.2 %); tolerance 0.2 %.
    """
    i = _shoot_10_10(direct_solves["spherical"], 2)
    assert i == pytest.approx(1.8571, rel=2e-3)
    assert float(abr_current(10.0, 10.0, "spherical")) == pytest.approx(i, rel=1e-3)


@pytest.mark.parametrize("geometry", ["cylindrical", "spherical"])
def test_direct_solves_match_table(direct_solves, geometry):
    """Every (xi, eta) on a directly integrated profile: table vs i = sqrt(2) J / xi^k.

    Source: the governing equation itself (independent integration above).
    Tolerance 0.1 %: measured bilinear error of the table <= 0.04 % and
    table-vs-direct-shooting differences <= 0.02 %; the two solvers agree to
    about 1e-7.
    """
    k = K[geometry]
    for J, radii in direct_solves[geometry]:
        expected = math.sqrt(2.0) * J / radii ** k
        got = abr_current(radii, np.array(ETAS_SOLVED), geometry)
        np.testing.assert_allclose(got, expected, rtol=1e-3)


# ---------------------------------------------------------------------------
@pytest.mark.parametrize("geometry", ["cylindrical", "spherical"])
def test_thin_sheath_limit(geometry):
    """i -> e^{-1/2} for xi >> 1, from above, slowly.

    Source: Bohm criterion -- ions enter a thin sheath at the sound speed where
    the density is n0 e^{-1/2} (D. Bohm, in The Characteristics of Electrical
    Discharges in Magnetic Fields, eds. Guthrie & Wakerling, McGraw-Hill 1949;
    from memory). At xi = 1000 the sheath (tens of Debye lengths at eta ~ 10)
    still adds a few per cent, so the bound is 5 % for eta <= 10. The excess
    falls roughly as a power of xi between xi^-1 (sheath thickness / radius)
    and xi^-4/5 (presheath-sheath transition layer of width ~ rho_s^{1/5}
    Debye lengths; from memory, e.g. K.-U. Riemann, J. Phys. D 24, 493
    (1991)); the local exponent is required to lie in [-1.0, -0.65].
    """
    eta = np.array([0.5, 1.0, 3.0, 10.0])
    i_1000 = abr_current(1000.0, eta, geometry)
    assert np.all(i_1000 > BOHM_LIMIT)
    assert np.all(i_1000 < 1.05 * BOHM_LIMIT)
    xi = np.geomspace(100.0, 1000.0, 25)[:, None]
    excess = abr_current(xi, eta, geometry) - BOHM_LIMIT
    assert np.all(excess > 0.0)
    assert np.all(np.diff(excess, axis=0) < 0.0)
    exponent = np.log(excess[-1] / excess[-9]) / np.log(xi[-1, 0] / xi[-9, 0])
    assert np.all((exponent > -1.0) & (exponent < -0.65)), exponent


@pytest.mark.parametrize("geometry", ["cylindrical", "spherical"])
def test_monotonic(geometry):
    """i rises with bias at fixed xi and falls with xi at fixed bias.

    Source: ABR / Chen 1965 curves (from memory): a more negative probe has a
    larger sheath and collects more ions; a larger probe (in Debye lengths)
    has a relatively thinner sheath. Checked between and beyond table nodes,
    including the extrapolated range eta > 200.
    """
    xi = np.geomspace(0.05, 1000.0, 301)[:, None]
    eta = np.geomspace(0.5, 500.0, 257)
    i = abr_current(xi, eta, geometry)
    assert np.all(np.diff(i, axis=1) > 0.0)
    assert np.all(np.diff(i, axis=0) < 0.0)


def test_cylinder_exceeds_oml_only_when_thin():
    """Thin cylinders: radial-flow current above the OML value; thick ones below.

    Source: cold-ion OML current to a cylinder, i = (sqrt(2)/pi) sqrt(eta)
    (Mott-Smith & Langmuir, Phys. Rev. 28, 727 (1926), large-bias limit with
    T_i -> 0; from memory). OML is the collisionless upper bound (Laframboise
    1966, from memory); the radial model exceeds it for xi of order 1.
    """
    eta = np.array([10.0, 20.0, 40.0])
    oml = math.sqrt(2.0) / math.pi * np.sqrt(eta)
    assert np.all(abr_current(1.0, eta, "cylindrical") > oml)
    assert np.all(abr_current(20.0, eta, "cylindrical") < oml)


# ---------------------------------------------------------------------------
def test_broadcasting_shapes():
    """(k,1) x (n,) -> (k,n); scalars -> 0-d; both code paths give the same values.

    With n = 200 the (7, 1) radius array takes the few-radii branch (one ln xi
    interpolation per radius); full (7, 200) inputs and scalars take the
    general bilinear branch.
    """
    rng = np.random.default_rng(3)
    xi = np.exp(rng.uniform(np.log(0.02), np.log(2000.0), (7, 1)))
    eta = np.exp(rng.uniform(np.log(0.1), np.log(500.0), 200))
    for geometry in ("cylindrical", "spherical"):
        a = abr_current(xi, eta, geometry)
        assert a.shape == (7, 200)
        full = abr_current(np.broadcast_to(xi, (7, 200)).copy(),
                           np.broadcast_to(eta, (7, 200)).copy(), geometry)
        np.testing.assert_allclose(a, full, rtol=1e-12)
        one = np.array([[float(abr_current(x, e, geometry)) for e in eta] for x in xi[:, 0]])
        np.testing.assert_allclose(a, one, rtol=1e-12)
        s = abr_current(3.0, 4.0, geometry)
        assert isinstance(s, np.ndarray) and s.shape == ()
        assert abr_current(np.ones((2, 1, 3)), np.ones((5, 1)), geometry).shape == (2, 5, 3)
    with pytest.raises(ValueError, match="broadcast"):
        abr_current(np.ones(3), np.ones(4), "cylindrical")


@pytest.mark.parametrize("geometry", ["cylindrical", "spherical"])
def test_finite_and_clamped_outside_table(geometry):
    """Finite positive output for any finite input; documented clamping."""
    rng_ = abr_table_range()
    eta_min, eta_max = rng_["eta_min"], rng_["eta_max"]
    xi = np.array([0.0, -1.0, 1e-300, 0.01, 1.0, 1e4, 1e300])[:, None]
    eta = np.array([-1e300, -5.0, 0.0, 1e-300, 0.2, 1.0, 1e3, 1e300])
    i = abr_current(xi, eta, geometry)
    assert np.all(np.isfinite(i)) and np.all(i > 0.0)
    # eta <= eta_min (including 0 and negative) uses the value at eta_min
    at_min = abr_current(xi, eta_min, geometry)
    np.testing.assert_array_equal(i[:, :5], np.broadcast_to(at_min, (7, 5)))
    # xi clamped to the table range
    np.testing.assert_array_equal(abr_current(1e-6, 5.0, geometry),
                                  abr_current(rng_["xi_min"], 5.0, geometry))
    np.testing.assert_array_equal(abr_current(1e6, 5.0, geometry),
                                  abr_current(rng_["xi_max"], 5.0, geometry))
    # above eta_max: straight line in (ln eta, ln i) through the last interval
    with np.load(TABLE, allow_pickle=False) as d:
        e1 = np.exp(d["log_eta"][-2:])            # the last table interval
    i1 = np.log(abr_current(2.0, e1, geometry))
    slope = (i1[1] - i1[0]) / math.log(e1[1] / e1[0])
    i_far = np.log(float(abr_current(2.0, 4 * eta_max, geometry)))
    assert i_far == pytest.approx(i1[1] + slope * math.log(4.0), rel=1e-10)
    # NaN propagates, and only to the affected elements (both code paths)
    assert np.isnan(abr_current(np.nan, 3.0, geometry))
    assert np.isnan(abr_current(3.0, np.nan, geometry))
    # (the (3, 1) radius array takes the few-radii branch, the (3, 200) one the general one)
    for xs in (np.array([[2.0], [np.nan], [30.0]]), np.array([[2.0], [np.nan], [30.0]]) * np.ones(200)):
        r = abr_current(xs, np.geomspace(1.0, 100.0, 200), geometry)
        assert np.all(np.isnan(r[1])) and np.all(np.isfinite(r[[0, 2]]))


@pytest.mark.parametrize("bad", ["planar", "Cylindrical", "sphere", "", None, 1])
def test_bad_geometry(bad):
    with pytest.raises(ValueError, match="geometry"):
        abr_current(1.0, 1.0, bad)


def test_table_file():
    """The shipped file: small, natural-log uniform axes covering the stated range."""
    assert os.path.getsize(TABLE) < 300 * 1024
    with np.load(TABLE, allow_pickle=False) as d:
        assert set(d.files) >= {"log_xi", "log_eta", "log_i_cylindrical",
                                "log_i_spherical", "meta"}
        lx, le = d["log_xi"], d["log_eta"]
        for axis in (lx, le):
            assert 60 <= axis.size <= 120
            np.testing.assert_allclose(np.diff(axis), np.diff(axis)[0], rtol=1e-9)
        assert math.exp(lx[0]) <= 0.05 * (1 + 1e-9) and math.exp(lx[-1]) >= 1000 * (1 - 1e-9)
        assert math.exp(le[0]) <= 0.5 * (1 + 1e-9) and math.exp(le[-1]) >= 200 * (1 - 1e-9)
        for g in ("cylindrical", "spherical"):
            assert d[f"log_i_{g}"].shape == (lx.size, le.size)
        meta = " ".join(str(s) for s in d["meta"])
    assert "Radau" in meta and "rtol" in meta
