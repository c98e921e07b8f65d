"""Physics of the sweep distortions: RF fluctuation, series resistance, leakage.

Outside references: scipy.special.i0 / i0e (modified Bessel function), scipy.special.lambertw,
scipy.integrate.quad (general-purpose adaptive quadrature), and the identity
(1/pi) int_0^pi exp(a cos t) dt = I0(a) (Abramowitz & Stegun 9.6.19). I0 table values
I0(1) = 1.266066, I0(2) = 2.279585, I0(3) = 4.880793 are Abramowitz & Stegun table 9.8
(from memory; scipy.special.i0 is the check that runs).
"""
import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import i0, lambertw

import bayesprobe as bp
from bayesprobe.model import measured_floating_potential
from bayesprobe.physics.distortions import leakage_current, rf_electron_current, rf_phase_average
from bayesprobe.physics.electrons import attracted_factor, electron_current, electron_saturation_current
from bayesprobe.physics.series import series_resistance_current

PLANAR = bp.Probe("planar", radius=2e-3)
WIRE = bp.Probe("cylindrical", radius=50e-6, length=5e-3)


def _reference_average(x, a, geometry):
    """Phase average by adaptive quadrature (scipy.integrate.quad), split where the probe crosses V_p."""
    def shape(u):
        return np.exp(u) if u < 0 else float(attracted_factor(np.array(u), geometry))
    th = np.arccos(np.clip(x / a, -1, 1))
    v1 = quad(lambda t: shape(x - a * np.cos(t)), 0, th, epsabs=0, epsrel=1e-12, limit=200)[0]
    v2 = quad(lambda t: shape(x - a * np.cos(t)), th, np.pi, epsabs=0, epsrel=1e-12, limit=200)[0]
    return (v1 + v2) / np.pi


def test_i0_table_values():
    """A&S table 9.8 values (from memory) agree with scipy.special.i0."""
    assert i0(1.0) == pytest.approx(1.266066, rel=1e-6)
    assert i0(2.0) == pytest.approx(2.279585, rel=1e-6)
    assert i0(3.0) == pytest.approx(4.880793, rel=1e-6)


@pytest.mark.parametrize("a", [0.1, 0.5, 1.0, 3.0, 8.0, 25.0])
def test_rf_retardation_is_bessel_factor(a):
    """Below the knee the phase average multiplies exp(x) by I0(a) (scipy.special.i0)."""
    x = np.linspace(-40.0, -a, 50)
    got = rf_phase_average(x, a, "cylindrical")
    assert np.allclose(got, np.exp(x) * i0(a), rtol=1e-12, atol=0)


@pytest.mark.parametrize("geometry", ["planar", "cylindrical", "spherical"])
def test_rf_average_matches_adaptive_quadrature(geometry):
    """Knee and saturation regions against scipy.integrate.quad; the tolerance 1e-4 is far below
    the 0.3-3 % noise of real sweeps (our own requirement)."""
    worst = 0.0
    for a in (0.05, 0.7, 2.0, 5.0, 12.0, 30.0):
        for x in np.linspace(-a - 1, a + 4, 23):
            got = float(rf_phase_average(np.array([x]), a, geometry)[0])
            worst = max(worst, abs(got / _reference_average(x, a, geometry) - 1))
    assert worst < 1e-4


def test_rf_zero_amplitude_is_the_plain_characteristic():
    V = np.linspace(-30, 15, 200)
    for probe in (PLANAR, WIRE):
        plain = electron_current(V, 5.0, 1e16, 2.5, probe)
        # absolute tolerance: the plain branch formula exp(min(x,0)) + g(x) - 1 rounds at 1e-16 of I_es
        assert np.allclose(rf_electron_current(V, 5.0, 1e16, 2.5, 0.0, probe), plain, rtol=1e-12,
                           atol=1e-14 * np.max(plain))


def test_rf_shifts_floating_potential_by_log_i0():
    """Flat ion saturation (planar, no sheath expansion): I = I_es e^x I0(a) - I_is, so the
    floating potential moves by exactly -T_e ln I0(A/T_e) (the I0 factor, scipy.special.i0)."""
    cfg = bp.ModelConfig(probe=PLANAR, ion_collection="thin-sheath", sheath_expansion=False, rf_fluctuation=True)
    T_e = 3.0
    base = {"n_e": 1e16, "T_e": T_e, "V_p": 10.0}
    V_f0 = bp.floating_potential(base, cfg)
    for A in (0.75, 1.5, 3.0, 6.0):
        V_f = measured_floating_potential(base | {"V_rf": A}, cfg)
        assert V_f - V_f0 == pytest.approx(-T_e * np.log(i0(A / T_e)), abs=1e-9)
        # the plasma's own floating potential ignores the distortion
        assert bp.floating_potential(base | {"V_rf": A}, cfg) == pytest.approx(V_f0, abs=1e-12)


def test_rf_flattens_knee_and_inflates_apparent_temperature():
    """Known effect (Garscadden & Emeleus 1962; Godyak & Demidov 2011): a log-linear fit of the
    electron current just below V_p returns a larger T_e when the potential oscillates."""
    V = np.linspace(4.0, 10.0, 40)           # V_p - 2 T_e .. V_p
    T_e, V_p = 3.0, 10.0
    slopes = []
    for A in (0.0, 3.0, 6.0):
        Ie = rf_electron_current(V, V_p, 1e16, T_e, A, PLANAR)
        slopes.append(1.0 / np.polyfit(V, np.log(Ie), 1)[0])
    assert slopes[0] == pytest.approx(T_e, rel=1e-9)
    assert slopes[0] < slopes[1] < slopes[2]


@pytest.mark.parametrize("R", [1.0, 100.0, 1e4, 1e6])
def test_series_resistance_solves_lambert_w(R):
    """f = a exp(V/T): the root of I = f(V - I R) is (T/R) W(R a e^{V/T}/T) (scipy.special.lambertw)."""
    a, T = 1e-4, 2.0
    V = np.linspace(-20, 30, 101)
    I = series_resistance_current(lambda v: a * np.exp(v / T), V, np.array([[R]]))[0]
    exact = (T / R) * np.real(lambertw(R * a * np.exp(V / T) / T))
    assert np.allclose(I, exact, rtol=1e-8, atol=0)


def test_series_resistance_many_walkers_at_once():
    """(k, 1) resistances against (n,) voltages give (k, n), each row the scalar solution."""
    a, T = 1e-3, 1.5
    R = np.array([[0.0], [10.0], [300.0]])
    V = np.linspace(-10, 10, 31)
    I = series_resistance_current(lambda v: a * np.exp(v / T), V, R)
    assert I.shape == (3, 31)
    assert np.allclose(I[0], a * np.exp(V / T), rtol=1e-12)
    for r, row in zip(R[1:, 0], I[1:]):
        exact = (T / r) * np.real(lambertw(r * a * np.exp(V / T) / T))
        assert np.allclose(row, exact, rtol=1e-8)


def test_series_resistance_on_the_probe_model_is_self_consistent():
    """I_measured = f(V - I R) with f the undistorted characteristic; R = 0 is the plain model."""
    cfg = bp.ModelConfig(probe=WIRE, series_resistance=True)
    p = {"n_e": 2e16, "T_e": 2.0, "V_p": 8.0, "R_series": 200.0}
    V = np.linspace(-40, 14, 300)
    I = bp.probe_current(V, p, cfg)
    f_at = np.array([bp.probe_current(np.array([v - i * 200.0]), p, cfg, distorted=False)[0] for v, i in zip(V, I)])
    assert np.allclose(I, f_at, rtol=1e-8, atol=1e-12 * np.max(np.abs(I)))
    plain = bp.probe_current(V, p | {"R_series": 0.0}, cfg)
    assert np.allclose(plain, bp.probe_current(V, p, cfg, distorted=False), rtol=1e-12)
    # the resistance lowers the electron current near and above the knee
    assert I[-1] < plain[-1]


def test_leakage_adds_a_linear_current():
    cfg = bp.ModelConfig(probe=WIRE, leakage=True)
    p = {"n_e": 1e16, "T_e": 3.0, "V_p": 10.0, "G_leak": 2e-7, "I_offset": -3e-6}
    V = np.linspace(-50, 15, 100)
    diff = bp.probe_current(V, p, cfg) - bp.probe_current(V, p, cfg, distorted=False)
    assert np.allclose(diff, leakage_current(V, 2e-7, -3e-6), rtol=1e-12, atol=1e-18)
    # measured zero crossing solves I = 0 of the full model
    V_f = measured_floating_potential(p, cfg)
    assert abs(bp.probe_current(np.array([V_f]), p, cfg)[0]) < 1e-9 * electron_saturation_current(1e16, 3.0, WIRE.area)


def test_all_distortions_vectorised_match_single_evaluations():
    cfg = bp.ModelConfig(probe=WIRE, rf_fluctuation=True, series_resistance=True, leakage=True)
    k = 4
    rng = np.random.default_rng(3)
    p = {"n_e": rng.uniform(5e15, 5e16, k), "n_i": rng.uniform(5e15, 5e16, k), "T_e": rng.uniform(1, 5, k),
         "V_p": rng.uniform(0, 10, k), "V_rf": rng.uniform(0, 5, k), "R_series": rng.uniform(0, 500, k),
         "G_leak": rng.normal(0, 1e-7, k), "I_offset": rng.normal(0, 1e-6, k)}
    V = np.linspace(-40, 20, 150)
    I = bp.probe_current(V, p, cfg)
    for j in range(k):
        one = bp.probe_current(V, {n: float(v[j]) for n, v in p.items()}, cfg)
        assert np.allclose(I[j], one, rtol=1e-9, atol=1e-15)


def test_bad_distortion_parameters_raise_one_line_errors():
    cfg = bp.ModelConfig(probe=WIRE, rf_fluctuation=True, series_resistance=True)
    p = {"n_e": 1e16, "T_e": 3.0, "V_p": 10.0, "V_rf": -1.0, "R_series": 10.0}
    with pytest.raises(ValueError, match="V_rf"):
        bp.probe_current(np.zeros(3), p, cfg)
    with pytest.raises(ValueError, match="R_series"):
        bp.probe_current(np.zeros(3), {"n_e": 1e16, "T_e": 3.0, "V_p": 10.0, "V_rf": 1.0}, cfg)
    with pytest.raises(ValueError, match="rf_fluctuation"):
        bp.ModelConfig(probe=WIRE, rf_fluctuation="yes")


def test_config_round_trip_keeps_switches():
    cfg = bp.ModelConfig(probe=WIRE, rf_fluctuation=True, leakage=True)
    back = bp.ModelConfig.from_dict(cfg.to_dict())
    assert back == cfg and back.distorted and not back.undistorted().distorted


@pytest.mark.parametrize("geometry", ["planar", "cylindrical", "spherical"])
def test_rf_average_slope_matches_derivative_of_adaptive_quadrature(geometry):
    """The analytic x-derivative of the phase average (used by the series-resistance Newton
    steps) against a central difference of the scipy.integrate.quad reference (step 1e-4,
    truncation error ~1e-9 relative). Tolerance 1e-3 (our own requirement): the slope only sets
    the Newton step, and a relative slope error e leaves a fraction ~e of a step that is already
    below 1e-6 |I| when it is taken last; the cylinder's slope converges slowest (erfcx(sqrt u)
    has an infinite second derivative at u = 0+), measured worst 1.3e-4."""
    from bayesprobe.physics.distortions import _rf_factor
    h = 1e-4
    worst = 0.0
    for a in (0.05, 0.7, 2.0, 5.0, 12.0):
        for x in np.linspace(-a - 1, a + 4, 17):
            if min(abs(x - a), abs(x + a)) < 10 * h:
                continue                     # the difference stencil must not straddle a region edge
            _, d = _rf_factor(np.array([x]), np.array(a), geometry, slope=True)
            ref = (_reference_average(x + h, a, geometry) - _reference_average(x - h, a, geometry)) / (2 * h)
            scale = max(abs(ref), _reference_average(x, a, geometry))
            worst = max(worst, abs(float(d[0]) - ref) / scale)
    assert worst < 1e-3


def test_plasma_slope_matches_finite_difference():
    """dI/dV of the full plasma characteristic (analytic electron part, differenced ion part)
    against a central difference of the characteristic itself, bi-Maxwellian, RF on, every geometry.
    Tolerance 1e-3 relative, as for the phase-average slope above (measured worst 2e-4)."""
    from bayesprobe.model import _characteristic, _columns
    p = {"n_e": np.array([1e16, 3e16]), "n_i": np.array([1.2e16, 2e16]), "T_e_cold": np.array([2.0, 3.0]),
         "T_e_hot": np.array([8.0, 12.0]), "hot_fraction": np.array([0.05, 0.1]), "V_p": np.array([8.0, 10.0]),
         "V_rf": np.array([1.5, 4.0])}
    V = np.linspace(-40, 20, 301) + 0.0123
    h = 1e-5
    for probe, ions in ((PLANAR, "thin-sheath"), (WIRE, "oml"), (WIRE, "thin-sheath"),
                        (bp.Probe("spherical", radius=1e-3), "oml")):
        cfg = bp.ModelConfig(probe=probe, ion_collection=ions, electrons="bi-maxwellian", rf_fluctuation=True)
        cols = _columns(p, cfg)
        _, slope = _characteristic(V, cols, cfg, slope=True)
        fd = (_characteristic(V + h, cols, cfg) - _characteristic(V - h, cols, cfg)) / (2 * h)
        assert np.allclose(slope, fd, rtol=1e-3, atol=1e-6 * np.max(np.abs(fd)))


@pytest.mark.parametrize("ions, probe", [("thin-sheath", PLANAR), ("thin-sheath", WIRE), ("oml", WIRE),
                                         ("oml", bp.Probe("spherical", radius=1e-3)),
                                         ("thin-sheath", bp.Probe("spherical", radius=1e-3))])
@pytest.mark.parametrize("expansion", [True, False])
def test_analytic_ion_slope_matches_central_difference(ions, probe, expansion):
    """The analytic ion slopes (Child-law edge growth below V_p, Boltzmann repulsion with T_i
    above) against a central difference of the ion current, away from the kink at V_p (h = 1e-6 V;
    truncation ~h^2 f''' / 6, tolerance 1e-6 relative; common practice, no source)."""
    from bayesprobe.physics.ions import ION_THEORIES, _ion_current
    V = np.concatenate([np.linspace(-40, 9.9, 200), np.linspace(10.01, 10.3, 30)])
    args = (10.0, 1e16, 3.0, probe, 6.63e-26, 1e16, 0.026, 0.6, expansion)
    I, dI = ION_THEORIES[ions].current(V, *args, slope=True)

    def ion(v):
        return _ion_current(v, 10.0, 1e16, 3.0, probe, 6.63e-26, ions, 1e16, 0.026, 0.6, expansion)
    h = 1e-6
    assert np.allclose(I, ion(V), rtol=1e-14)
    fd = (ion(V + h) - ion(V - h)) / (2 * h)
    assert np.allclose(dI, fd, rtol=1e-6, atol=1e-9 * np.max(np.abs(I)))
