"""FitOptions: one validated value for every option of fit().

Oracles: the public signature of :func:`bayesprobe.fit` (defaults must agree), and fit itself
(the same options given as keywords or as ``options=FitOptions(...)`` must give the same draws
bit for bit; a wrong option must be refused by both with the same one-line message).
"""
import dataclasses
import inspect

import numpy as np
import pytest

import bayesprobe as bp
from bayesprobe.inference.importance import ImportanceSettings
from bayesprobe.inference.sampler import SamplerSettings
from bayesprobe.options import MODEL_CHOICES, FitOptions
from bayesprobe.physics.electron_models import ELECTRON_MODELS

BAD = [
    ({"credible_level": 0}, "credible_level"), ({"credible_level": 1.0}, "credible_level"),
    ({"credible_level": True}, "credible_level"), ({"credible_level": "0.9"}, "credible_level"),
    ({"model": "kappa"}, "model"), ({"model": None}, "model"),
    ({"student_nu": -1}, "student_nu"), ({"student_nu": float("nan")}, "student_nu"),
    ({"student_nu": "auto"}, "student_nu"),
    ({"distortions": "bogus"}, "distortion"), ({"distortions": "outliers", "student_nu": 4.0}, "student_nu"),
    ({"engine": "nuts"}, "engine"), ({"engine": 3}, "engine"),
    ({"seed": -1}, "seed"), ({"seed": 1.5}, "seed"), ({"seed": True}, "seed"),
    ({"sampler": {"max_steps": 10}}, "sampler"), ({"importance": 3}, "importance"),
    ({"priors": [1, 2]}, "priors"), ({"priors": {"T_e": 3.0}}, "priors"),
    ({"start": 3.0}, "start"), ({"config": "argon"}, "config"), ({"sign": "up"}, "sign"),
    ({"progress": "yes"}, "progress"),
]


def _message(call):
    with pytest.raises(ValueError) as info:
        call()
    return str(info.value)


@pytest.mark.parametrize("kw,name", BAD)
def test_bad_options_are_refused_in_one_line_naming_the_option(kw, name):
    text = _message(lambda: FitOptions(**kw))
    assert name in text and "\n" not in text
    assert _message(lambda: FitOptions.from_mapping(kw)) == text            # the same message from a mapping


@pytest.mark.parametrize("kw,name", [b for b in BAD if "config" not in b[0] and "importance" not in b[0]])
def test_fit_refuses_with_the_same_message(kw, name):
    sweep = bp.simulate(n_points=60, seed=0).sweep
    assert _message(lambda: bp.fit(sweep, **kw)) == _message(lambda: FitOptions(**kw))


def test_defaults_agree_with_fit_signature():
    sig = inspect.signature(bp.fit).parameters
    opts = FitOptions()
    for f in dataclasses.fields(FitOptions):
        if f.name == "importance":
            assert opts.importance == ImportanceSettings()
            continue
        default = sig[f.name].default
        if f.name == "sampler":
            assert default is None and opts.sampler == SamplerSettings()
        elif f.name == "distortions":
            assert default is None and opts.distortions == ()
        else:
            assert getattr(opts, f.name) == default, f.name


def test_values_are_normalised_and_frozen():
    o = FitOptions(distortions="leakage, rf", priors={"T_e": {"kind": "log-uniform", "lower": 0.5, "upper": 9}})
    assert o.distortions == ("rf", "leakage")                # registry order, as parse_distortions gives
    assert FitOptions(distortions="auto").selects_distortions and not o.selects_distortions
    with pytest.raises(dataclasses.FrozenInstanceError):
        o.seed = 3
    assert o.with_(seed=3).seed == 3 and o.seed == 0
    with pytest.raises(ValueError, match="seed"):
        o.with_(seed=-3)                                     # changes are validated again


def test_electron_models_follow_the_model_objects():
    assert MODEL_CHOICES[:-1] == tuple(sorted(ELECTRON_MODELS, key=lambda n: ELECTRON_MODELS[n].complexity))
    assert FitOptions(model="auto").selects_model
    assert [m.complexity for m in FitOptions(model="auto").electron_models] == sorted(
        m.complexity for m in ELECTRON_MODELS.values())
    for name, m in ELECTRON_MODELS.items():
        assert FitOptions(model=name).electron_models == (m,) and not FitOptions(model=name).selects_model


def test_from_mapping_max_steps_and_unknown_keys():
    o = FitOptions.from_mapping({"engine": "fast", "max_steps": 3000, "seed": 4})
    assert o.sampler == SamplerSettings(max_steps=3000) and o.engine == "fast" and o.seed == 4
    o = FitOptions.from_mapping({"sampler": SamplerSettings(n_ensembles=3), "max_steps": 500})
    assert o.sampler == SamplerSettings(n_ensembles=3, max_steps=500)
    for bad in (0, -5, 2.5, True):
        with pytest.raises(ValueError, match="max_steps must be a positive integer"):
            FitOptions.from_mapping({"max_steps": bad})
    with pytest.raises(ValueError, match=r"unknown fit option\(s\) 'steps'"):
        FitOptions.from_mapping({"steps": 10})
    with pytest.raises(ValueError, match="mapping"):
        FitOptions.from_mapping([("seed", 1)])


def test_fit_with_options_is_fit_with_keywords():
    sim = bp.simulate(n_points=120, seed=4)
    kw = dict(engine="fast", seed=9, credible_level=0.8, progress=False)
    a = bp.fit(sim.sweep, **kw)
    b = bp.fit(sim.sweep, options=FitOptions(**kw))
    for n in a.draws:
        assert np.array_equal(a.draws[n], b.draws[n])
    assert a.summary()["parameters"] == b.summary()["parameters"]
    c = bp.fit(sim.sweep, options=FitOptions(**{**kw, "seed": 10}))
    assert not np.array_equal(a.draws["T_e"], c.draws["T_e"])          # negative control: the seed matters
    with pytest.raises(ValueError, match="not both"):
        bp.fit(sim.sweep, options=FitOptions(**kw), seed=9 + 1)


def test_fit_warns_exactly_when_it_did_not_converge():
    """fit() issues one ConvergenceWarning when its result did not converge and none when it did.
    Oracle: the result's own ``converged`` flag and ``unmet`` list (the sampler's criteria); a
    60-step budget cannot reach 50 autocorrelation times, the default budget (fast engine) does."""
    import warnings
    sim = bp.simulate(n_points=120, seed=4)
    with pytest.warns(bp.ConvergenceWarning) as caught:
        short = bp.fit(sim.sweep, seed=0, progress=False, sampler=SamplerSettings(initial_steps=60, max_steps=60))
    assert not short.converged and short.diagnostics["unmet"]
    assert len([w for w in caught if issubclass(w.category, bp.ConvergenceWarning)]) == 1
    text = str(caught[0].message)
    assert "\n" not in text and "converged: false" in text and "max_steps" in text
    assert all(" ".join(u.split()) in text for u in short.diagnostics["unmet"])
    assert caught[0].filename == __file__                   # points at the caller, not into bayesprobe
    with warnings.catch_warnings():
        warnings.simplefilter("error")                      # any warning would fail here
        full = bp.fit(sim.sweep, options=FitOptions(engine="fast", seed=9, progress=False))
    assert full.converged


def test_public_names():
    from bayesprobe.errors import ConvergenceWarning
    assert bp.FitOptions is FitOptions and bp.ConvergenceWarning is ConvergenceWarning
    assert {"FitOptions", "ConvergenceWarning"} <= set(bp.__all__)
