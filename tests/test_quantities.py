"""The quantity registry (bayesprobe.quantities) is the one description every layer reads.

Checks: every parameter a model can fit, and every derived quantity, is registered with a unit
and labels; units are the SI/eV units the project states (README "The physics in the model");
default priors are the documented ones (inference/parameters.py and inference/posterior.py
module tables; common practice, no source); summary.json carries the registry's description of
what it reports.
"""
from __future__ import annotations

import itertools

import numpy as np
import pytest

import bayesprobe as bp
from bayesprobe import quantities as Q
from bayesprobe.derived import derived_quantities
from bayesprobe.inference.posterior import default_parameters
from bayesprobe.model import DISTORTION_SWITCHES, ModelConfig

SI = {"m^-3", "eV", "V", "A", "S", "ohm", "1", "m", "rad/s", "m/s"}


def _configs():
    for electrons, quasi, switches in itertools.product(
            ("maxwellian", "bi-maxwellian"), (False, True),
            [()] + [(s,) for s in DISTORTION_SWITCHES] + [tuple(DISTORTION_SWITCHES)]):
        yield ModelConfig(electrons=electrons, quasi_neutral=quasi, **{s: True for s in switches})


def test_every_fitted_parameter_is_registered_with_its_default_prior():
    V = np.linspace(-30, 10, 50)
    I = np.linspace(-1e-4, 1e-2, 50)
    for config in _configs():
        for fit_nu in (False, True):
            params = default_parameters(config, V, I, fit_nu=fit_nu)
            for p in params:
                q = Q.QUANTITIES[p.name]
                assert q.fitted and p.unit == q.unit and p.transform == q.transform
                assert p.prior == q.default_prior(Q.SweepScale.of(V, I))


def test_documented_default_priors():
    """The table in inference/parameters.py: densities 1e12..1e21 m^-3, T_e 0.1..100 eV,
    V_p from V_min to V_max + half the span, sigma_floor 1e-7..1 x max|I|."""
    s = Q.SweepScale(-30.0, 10.0, 2e-2)
    assert Q.QUANTITIES["n_e"].default_prior(s).to_dict() == {"kind": "log-uniform", "lower": 1e12, "upper": 1e21}
    assert Q.QUANTITIES["T_e"].default_prior(s).to_dict() == {"kind": "log-uniform", "lower": 0.1, "upper": 100.0}
    assert Q.QUANTITIES["V_p"].default_prior(s).to_dict() == {"kind": "uniform", "lower": -30.0, "upper": 30.0}
    sf = Q.QUANTITIES["sigma_floor"].default_prior(s)
    assert (sf.kind, sf.lower, sf.upper) == ("log-uniform", pytest.approx(2e-9), pytest.approx(2e-2))


def test_derived_quantities_are_registered():
    config = ModelConfig(electrons="bi-maxwellian", rf_fluctuation=True)
    phys = {"n_e": np.array([1e16]), "n_i": np.array([1e16]), "T_e_cold": np.array([2.0]),
            "T_e_hot": np.array([10.0]), "hot_fraction": np.array([0.1]), "V_p": np.array([5.0]),
            "V_rf": np.array([0.5])}
    for name in derived_quantities(phys, config):
        q = Q.quantity(name)
        assert q is not None and q.group == "derived", name


def test_units_and_labels():
    for q in Q.QUANTITIES.values():
        assert q.unit in SI, q
        assert q.group in Q.GROUPS
        assert q.tex and q.html and q.description
    for d in Q.DISTORTIONS.values():
        assert d.main_parameter in d.parameters
        assert all(Q.QUANTITIES[n].group in ("distortion", "likelihood") for n in d.parameters)


def test_ordered_keeps_unknown_names_last():
    assert Q.ordered(["zzz", "V_p", "T_e", "n_e"]) == ["T_e", "n_e", "V_p", "zzz"]
    assert Q.main_names({"V_p": 0, "T_e": 0, "sigma_rel": 0}) == ("T_e", "V_p")


def test_describe_follows_the_registry():
    V = np.linspace(-30, 10, 50)
    params = default_parameters(ModelConfig(), V, np.linspace(-1e-4, 1e-2, 50))
    described = Q.describe(list(params.names) + ["V_f", "unknown_name"])
    assert list(described) == Q.ordered([*params.names, "V_f"])
    assert described["n_e"] == {"unit": "m^-3", "label_tex": Q.tex_label("n_e"), "label_html": Q.html_label("n_e"),
                                "description": "electron density", "group": "plasma"}


def test_summary_carries_the_registry_description():
    sim = bp.simulate(seed=3, n_points=200)
    result = bp.fit(sim.sweep, probe=sim.config.probe, ion="Ar", seed=1, engine="fast")
    s = result.summary()
    assert set(s["quantities"]) == set(s["parameters"])
    for name, entry in s["parameters"].items():
        assert s["quantities"][name]["unit"] == entry["unit"] == Q.unit_of(name)
