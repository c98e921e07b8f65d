"""The two series-resistance solvers: Newton (exact) and interpolation on the parametric curve.

Outside references: scipy.special.lambertw (the root of I = a exp((V - I R)/T) is
(T/R) W(R a e^{V/T}/T)); the Fritsch-Carlson monotone cubic (SIAM J. Numer. Anal. 17, 238
(1980)) is what scipy.interpolate.PchipInterpolator builds, used here as a second opinion on
the interpolation step. The tolerances of the interpolated solve are our own requirement
(common practice, no source): its error must stay far below the noise of any real sweep
(>= 0.1 % of |I|); measured worst 1.5e-4 of max |I| over 2,500 random parameter sets (see
the test), 1e-4 is the limit for the default options.
"""
import numpy as np
import pytest
from scipy.special import lambertw

import bayesprobe as bp
from bayesprobe.inference.posterior import LogPosterior, default_parameters
from bayesprobe.physics.electrons import electron_saturation_current
from bayesprobe.physics.series import hermite_series_current, series_nodes, series_resistance_current

PLANAR = bp.Probe("planar", radius=2e-3)
WIRE = bp.Probe("cylindrical", radius=50e-6, length=5e-3)
BALL = bp.Probe("spherical", radius=1e-3)


@pytest.mark.parametrize("R_over", [0.5, 5.0, 50.0])
def test_newton_solves_a_saturating_exponential(R_over):
    """f = a exp(v/T) below v_p, a exp(v_p/T) above (a flat saturation branch): the root is the
    Lambert-W solution where that stays below saturation, else the saturation current. A large
    R (R I_sat = R_over T) once sent Newton back and forth between the two branches for ever."""
    a, T, v_p = 1e-4, 2.0, 5.0
    I_sat = a * np.exp(v_p / T)
    R = R_over * T / I_sat
    V = np.linspace(-20, v_p + 3 * R * I_sat, 400)
    I = series_resistance_current(lambda v: a * np.exp(np.minimum(v, v_p) / T), V, np.array([[R]]))[0]
    lw = (T / R) * np.real(lambertw(R * a * np.exp(V / T) / T))
    exact = np.where(V - I_sat * R >= v_p, I_sat, lw)
    assert np.allclose(I, exact, rtol=1e-8, atol=1e-14)


def _random_sets(probe, electrons, rf, k, seed):
    rng = np.random.default_rng(seed)
    T = np.exp(rng.uniform(np.log(0.3), np.log(20), k))
    n = 10 ** rng.uniform(14, 18, k)
    I_es = electron_saturation_current(n, T, probe.area)
    p = {"n_e": n, "V_p": rng.uniform(-5, 15, k), "R_series": T / I_es * 10 ** rng.uniform(-3, 1, k)}
    if electrons == "maxwellian":
        p["T_e"] = T
    else:
        p.update(T_e_cold=T, T_e_hot=T * rng.uniform(1.6, 8, k), hot_fraction=rng.uniform(0, 0.4, k))
    if rf:
        p["V_rf"] = T * np.exp(rng.uniform(np.log(0.01), np.log(10), k))
    return p


@pytest.mark.parametrize("probe, ions", [(PLANAR, "thin-sheath"), (WIRE, "thin-sheath"), (WIRE, "oml"),
                                         (BALL, "thin-sheath"), (BALL, "oml")])
@pytest.mark.parametrize("electrons", ["maxwellian", "bi-maxwellian"])
@pytest.mark.parametrize("rf", [False, True])
def test_interpolated_series_solve_matches_newton(probe, ions, electrons, rf):
    """Over T_e 0.3-20 eV, n 1e14-1e18 m^-3, R from 1e-3 to 10 sheath resistances T_e/I_es and
    V_rf from 0.01 to 10 T_e: the interpolated current is within 1e-4 of max |I| of the Newton
    solution (which is checked against Lambert W above and in test_distortions_physics.py)."""
    cfg = bp.ModelConfig(probe=probe, ion="Ar", ion_collection=ions, electrons=electrons, rf_fluctuation=rf,
                         series_resistance=True)
    p = _random_sets(probe, electrons, rf, 64, seed=1)
    V = np.linspace(-60, 25, 1000)
    exact = bp.probe_current(V, p, cfg, validate=False)
    fast = bp.probe_current(V, p, cfg, validate=False, series_solver="interpolate")
    err = np.max(np.abs(fast - exact) / np.max(np.abs(exact), axis=1, keepdims=True))
    assert err < 1e-4


def test_interpolated_solve_with_electron_sheath_expansion():
    """Planar electron Child-law growth above V_p (|V - V_p|^(3/4)) is the hardest shape for the
    cubic; measured worst 1.5e-4 of max |I|, limit 5e-4."""
    cfg = bp.ModelConfig(probe=PLANAR, ion="Ar", ion_collection="thin-sheath", electrons="bi-maxwellian",
                         series_resistance=True, electron_sheath_expansion=True)
    p = _random_sets(PLANAR, "bi-maxwellian", False, 64, seed=1)
    V = np.linspace(-60, 25, 1000)
    exact = bp.probe_current(V, p, cfg, validate=False)
    fast = bp.probe_current(V, p, cfg, validate=False, series_solver="interpolate")
    assert np.max(np.abs(fast - exact) / np.max(np.abs(exact), axis=1, keepdims=True)) < 5e-4


def test_interpolated_rows_do_not_depend_on_their_neighbours():
    """A parameter set gives the same current alone and in a batch with sets that need many more
    nodes (large V_rf / T_e): the node set of a row depends on that row only."""
    cfg = bp.ModelConfig(probe=PLANAR, ion="Ar", ion_collection="thin-sheath", rf_fluctuation=True,
                         series_resistance=True)
    p = _random_sets(PLANAR, "maxwellian", True, 16, seed=4)
    p["V_rf"][5:] = 10 * p["T_e"][5:]
    V = np.linspace(-60, 25, 700)
    batch = bp.probe_current(V, p, cfg, validate=False, series_solver="interpolate")
    for j in (0, 3):
        alone = bp.probe_current(V, {n: v[j:j + 1] for n, v in p.items()}, cfg, validate=False,
                                 series_solver="interpolate")[0]
        assert np.allclose(batch[j], alone, rtol=1e-12, atol=1e-14 * np.max(np.abs(alone)))


def test_hermite_step_agrees_with_pchip_on_a_monotone_curve():
    """On nodes of a monotone curve with slopes that violate the Fritsch-Carlson bound, the
    limited cubic stays between its node values, as scipy's PCHIP does (no overshoot); with R = 0
    it interpolates I(v) directly."""
    from scipy.interpolate import PchipInterpolator
    v = np.array([[0.0, 0.01, 1.0, 2.0, 3.0]])
    f = np.array([[0.0, 0.5, 0.6, 0.7, 2.0]])
    slope = np.array([[100.0, 100.0, 0.1, 0.1, 1.0]])         # far above 3x the secant at the first nodes
    x = np.linspace(0, 3, 301)
    ours = hermite_series_current(x, np.zeros((1, 1)), v, f, slope)[0]
    assert np.all(np.diff(ours) >= -1e-15)                     # monotone like the data
    assert np.all((ours >= 0) & (ours <= 2.0))
    pchip = PchipInterpolator(v[0], f[0])(x)
    assert np.all(np.diff(pchip) >= -1e-15)
    assert np.allclose(ours[[0, 1, 100, 200, 300]], pchip[[0, 1, 100, 200, 300]], atol=1e-12)  # at the nodes


def test_nodes_cover_the_sheath_range_with_the_knee_resolved():
    nodes = series_nodes(np.array([[-50.0]]), np.array([[20.0]]), np.array([[10.0]]), np.array([[2.0]]),
                         np.array([[1.0]]), np.array([[2.0]]), 0.026)[0]
    assert nodes[0] == -50.0 and nodes[-1] == 20.0
    assert np.all(np.diff(nodes) >= 0)
    core = nodes[(nodes > 10.0 - 1.0 - 8 * 2.0) & (nodes < 10.0 + 1.0 + 3 * 2.0)]
    assert np.max(np.diff(core)) <= 0.15 * 2.0 + 1e-12
    mid = nodes[(nodes > 10.0 - 1.0 - 20 * 2.0) & (nodes < 10.0 - 1.0 - 8 * 2.0)]
    assert np.max(np.diff(mid) / (10.0 - mid[1:])) <= 0.05 + 1e-12        # 5 % of the distance from V_p
    assert np.sum(np.abs(nodes - 10.0) < 3e-6) == 4           # the pair 1e-9 T around V_p and the 1e-6 T pair


def test_log_posterior_is_smooth_for_difference_steps():
    """The interpolated likelihood is continuous with a continuous slope in the parameters, so
    central differences with steps 1e-5 and 1e-6 (in z) agree (common practice, no source)."""
    probe = PLANAR
    cfg = bp.ModelConfig(probe=probe, ion="Ar", ion_collection="thin-sheath", quasi_neutral=True,
                         rf_fluctuation=True, series_resistance=True)
    I_es = electron_saturation_current(1e16, 3.0, probe.area)
    truth = {"n_e": 1e16, "T_e": 3.0, "V_p": 12.0, "V_rf": 2.0, "R_series": 0.5 * 3.0 / I_es}
    sim = bp.simulate(truth, config=cfg, n_points=800, noise_rel=0.01, seed=3)
    V, I = sim.sweep.voltage, sim.sweep.current
    params = default_parameters(cfg, V, I)
    lp = LogPosterior(V, I, cfg, params)
    z = params.to_z(truth | {"sigma_floor": 1e-6, "sigma_rel": 0.01})
    for i in range(len(z)):
        g = []
        for h in (1e-5, 1e-6):
            e = np.zeros_like(z)
            e[i] = h
            v = lp(np.array([z + e, z - e]))
            g.append((v[0] - v[1]) / (2 * h))
        assert g[0] == pytest.approx(g[1], rel=2e-3, abs=1e-2)


def test_interpolated_solve_with_two_sweep_directions():
    """Hysteresis shifts the sheath voltage per point (a (k, n) grid, not sorted along a row): the
    interpolated solve still matches Newton."""
    cfg = bp.ModelConfig(probe=PLANAR, ion="Ar", ion_collection="thin-sheath", rf_fluctuation=True,
                         series_resistance=True, leakage=True, hysteresis=True)
    p = _random_sets(PLANAR, "maxwellian", True, 16, seed=7)
    rng = np.random.default_rng(8)
    p.update(G_leak=rng.normal(0, 1e-7, 16), I_offset=rng.normal(0, 1e-6, 16),
             V_shift=rng.normal(0, 2.0, 16), I_cap=rng.normal(0, 1e-5, 16))
    up = np.linspace(-60, 25, 300)
    V = np.concatenate([up, up[::-1]])
    direction = np.concatenate([np.ones(300), -np.ones(300)])
    ramp = direction.copy()
    order = np.argsort(V, kind="stable")
    branches = (direction[order], ramp[order])
    exact = bp.probe_current(V[order], p, cfg, validate=False, branches=branches)
    fast = bp.probe_current(V[order], p, cfg, validate=False, branches=branches, series_solver="interpolate")
    assert np.max(np.abs(fast - exact) / np.max(np.abs(exact), axis=1, keepdims=True)) < 1e-4
