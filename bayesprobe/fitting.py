"""``fit``: one sweep in, a calibrated posterior out. Orchestrates physics and inference."""
from __future__ import annotations

import inspect
import math
import time
import warnings
from dataclasses import asdict, dataclass, replace

import numpy as np

from .derived import derived_quantities
from .distortion_choice import apply_distortions, describe_distortions, distortion_starts, select_distortions
from .errors import ConvergenceWarning
from .inference.arviz_adapter import build_inference_data
from .inference.engines import N_STORED_DRAWS, SeedStreams, get_engine
from .inference.optimize import approximate_map, find_map
from .inference.posterior import LogPosterior, default_parameters
from .inference.sampler import SamplerSettings
from .model import DEFAULT_ION_TEMPERATURE, ModelConfig
from .options import FitOptions
from .physics.electron_models import ELECTRON_MODELS
from .physics.geometry import Probe
from .result import FitResult, units_for
from .sweep import Sweep

__all__ = ["fit", "make_config", "N_STORED_DRAWS", "FitOptions"]

#: the simplest electron model: the classical start analysis assumes it
_SIMPLEST = min(ELECTRON_MODELS.values(), key=lambda m: m.complexity)
#: step budget of the two-temperature fit inside ``model="auto"`` before the comparison
AUTO_RICH_MAX_STEPS = 4000


def make_config(*, probe=None, ion="Ar", ion_mass=None, ion_collection="auto", electrons="maxwellian",
                quasi_neutral=False, T_i=DEFAULT_ION_TEMPERATURE, bohm_factor=float(np.exp(-0.5)), sheath_expansion=True,
                electron_sheath_expansion=False, rf_fluctuation=False, series_resistance=False,
                leakage=False, hysteresis=False) -> ModelConfig:
    """Build a :class:`ModelConfig` from plain options (``ion_mass`` in u overrides ``ion``)."""
    if probe is None:
        probe = Probe("cylindrical", radius=50e-6, length=5e-3)
    if not isinstance(probe, Probe):
        raise ValueError("probe must be a bayesprobe.Probe, e.g. Probe('cylindrical', radius=5e-5, length=5e-3)")
    return ModelConfig(probe=probe, ion=ion if ion_mass is None else float(ion_mass),
                       ion_collection=ion_collection, electrons=electrons, quasi_neutral=quasi_neutral,
                       T_i=T_i, bohm_factor=bohm_factor, sheath_expansion=sheath_expansion,
                       electron_sheath_expansion=electron_sheath_expansion, rf_fluctuation=rf_fluctuation,
                       series_resistance=series_resistance, leakage=leakage, hysteresis=hysteresis)


def _as_sweep(voltage, current, sign):
    if isinstance(voltage, Sweep):
        return voltage
    from .io import sweep_from_arrays
    if current is None:
        raise ValueError("give voltage and current arrays, or a Sweep")
    return sweep_from_arrays(voltage, current, sign=sign)


def _noise_start(V, I):
    """Rough noise level: scaled median absolute second difference in the lowest third."""
    k = max(10, V.size // 3)
    d2 = np.diff(I[:k], 2)
    s = 1.4826 * np.median(np.abs(d2 - np.median(d2))) / math.sqrt(6.0) if d2.size else 0.0
    return max(s, 1e-6 * float(np.max(np.abs(I))))


def _classical(V, I, config):
    from .classical import classical_analysis
    try:
        return classical_analysis(V, I, config)
    except Exception as exc:  # the start must never kill a fit; the sampler does the real work
        return exc


def _starts(params, cls, V, I, config):
    """Several starting points in z (classical estimate and perturbations)."""
    v_min, v_max = float(V[0]), float(V[-1])
    T0, Vp0, ne0, ni0 = 2.0, v_min + 0.8 * (v_max - v_min), None, None
    if not isinstance(cls, Exception):
        if np.isfinite(cls.T_e) and 0.1 < cls.T_e < 100:
            T0 = float(cls.T_e)
        if np.isfinite(cls.V_p) and v_min < cls.V_p < v_max + 0.5 * (v_max - v_min):
            Vp0 = float(cls.V_p)
        ne0 = cls.n_e if np.isfinite(cls.n_e) and 1e12 < cls.n_e < 1e21 else None
        ni0 = cls.n_i if np.isfinite(cls.n_i) and 1e12 < cls.n_i < 1e21 else None
    from .physics.electrons import electron_saturation_current
    if ne0 is None:
        I_top = float(np.max(I))
        ne0 = float(np.clip(I_top / electron_saturation_current(1.0, T0, config.probe.area), 1e13, 1e20))
    if ni0 is None:
        ni0 = ne0
    sig0 = _noise_start(V, I)
    starts = []
    for fT, dV in ((1.0, 0.0), (0.6, 0.0), (1.6, 0.0), (1.0, -1.0), (1.0, 1.0)):
        T = T0 * fT
        vals = {"n_e": ne0, "n_i": ni0, "T_e": T, "T_e_cold": T, "T_e_hot": 5 * T, "hot_fraction": 0.02,
                "V_p": Vp0 + dV * T0, "sigma_floor": sig0, "sigma_rel": 0.01}
        vals.update(distortion_starts(params, T0)[0])
        starts.append(params.to_z({n: vals[n] for n in params.names}))
    for extra in distortion_starts(params, T0)[1:]:       # the same start with larger distortions
        starts.append(starts[0].copy())
        for n, v in extra.items():
            starts[-1][params.index[n]] = params[n].to_z(v)
    return np.array(starts)


def _warm_start_z(params, start):
    """The warm start as a point in z, or None when it does not describe this model's parameters."""
    if start is None:
        return None
    values = start.map_estimate if isinstance(start, FitResult) else start
    if not isinstance(values, dict) or not all(n in values for n in params.names):
        return None
    try:
        z = params.to_z({n: float(values[n]) for n in params.names})
    except (TypeError, ValueError):
        return None
    return z if np.all(np.isfinite(z)) else None


def _plain_seeded_starts(sweep, config, priors, student_nu, cls, params):
    """Starts in z for a distorted model: a point near the plain model's optimum (Fisher scoring
    only, :func:`approximate_map`) with each set of distortion starts."""
    plain = config.undistorted()
    V, I = sweep.voltage, sweep.current
    nu = None if student_nu == "fit" else student_nu
    p_plain = default_parameters(plain, V, I)
    p_plain = p_plain.with_priors({k: v for k, v in (priors or {}).items() if k in p_plain.names})
    lp_plain = LogPosterior(V, I, plain, p_plain, student_nu=nu)
    z_plain = approximate_map(lp_plain, _starts(p_plain, cls, V, I, plain))
    values = {n: float(v[0]) for n, v in p_plain.to_physical(z_plain[None, :]).items()}
    T0 = values.get("T_e", values.get("T_e_cold", 2.0))
    sets = distortion_starts(params, T0)
    out = []
    for extra in sets:
        v = dict(values)
        v.update(sets[0])
        v.update(extra)
        v.setdefault("nu", 10.0)
        out.append(params.to_z({n: v[n] for n in params.names}))
    return np.array(out)


def fit(voltage, current=None, *, probe: Probe | None = None, ion="Ar", ion_mass=None,
        ion_collection="auto", model="maxwellian", credible_level=0.9, priors=None, student_nu=None,
        quasi_neutral=False, T_i=DEFAULT_ION_TEMPERATURE, bohm_factor=float(np.exp(-0.5)), seed: int | None = 0,
        sampler: SamplerSettings | None = None, progress=None, sign="auto",
        config: ModelConfig | None = None, engine: str = "mcmc", start=None,
        distortions=None, options: FitOptions | None = None) -> FitResult:
    """Fit the whole characteristic of one sweep and return its posterior.

    Parameters
    ----------
    voltage, current : array_like or Sweep
        Bias (V) and current (A, electron current positive; the other convention is
        detected and flipped unless ``sign`` forces it), or a :class:`Sweep`.
    probe : Probe
        Probe shape and size (default: a 50 um x 5 mm cylinder).
    ion, ion_mass : str, float
        Ion species name or mass in u.
    ion_collection : {"thin-sheath", "oml", "abr", "auto"}
    model : {"maxwellian", "bi-maxwellian", "auto"}
        Electron model; ``auto`` fits both and selects by PSIS-LOO.
    credible_level : float
        Probability of the reported equal-tailed intervals.
    priors : dict, optional
        ``{name: {"kind": ..., "lower": ..., "upper": ...}}`` (or ``{name: Prior}``) overrides of
        the defaults. Calibration of the circuit distortions: a measured circuit resistance,
        ``{"R_series": circuit_resistance_prior(R0, dR)}``, and the leakage line of a plasma-off
        sweep, ``vacuum_leakage_priors(V_vac, I_vac)`` (both in
        :mod:`bayesprobe.inference.instrument_priors`); with ``distortions="auto"`` each
        candidate uses the overrides of the parameters it has.
    student_nu : float or "fit", optional
        Use a Student-t likelihood with this many degrees of freedom (outliers);
        ``"fit"`` makes the degrees of freedom a parameter ``nu`` and flags outliers.
    quasi_neutral : bool
        Tie n_i to n_e instead of fitting both.
    seed : int
        Makes the run reproducible bit for bit.
    sampler : SamplerSettings, optional
        Ensembles, walkers, step budget and convergence thresholds.
    config : ModelConfig, optional
        A complete model configuration (overrides the individual physics options).
    engine : {"mcmc", "fast", "auto"}
        ``mcmc``: emcee ensembles until converged. ``fast`` (= ``auto``): importance
        sampling from the Laplace approximation, accepted only when the Pareto k-hat
        and the importance-sampling ESS pass; otherwise emcee runs from the same optimum
        (the engines: :mod:`bayesprobe.inference.engines`).
    start : FitResult or dict, optional
        Warm start from a neighbouring sweep (time series, scans): its MAP (or a dict of
        every sampled parameter in physical units) joins the starting points and the
        optimiser runs from the best candidate only. The posterior is the same; only
        the work to reach it changes (mostly the optimisation, so the fast engine
        gains most). Ignored when it does not describe the model being fitted.
    distortions : str or iterable of str, optional
        Distortions to model as nuisance parameters (see :mod:`bayesprobe.physics.distortions`):
        ``"rf"`` (plasma-potential oscillation, parameter V_rf), ``"resistance"`` (series
        resistance R_series), ``"leakage"`` (G_leak, I_offset), ``"hysteresis"`` (a sweep
        recorded with rising and falling bias: branch shift V_shift and displacement current
        I_cap, see :mod:`bayesprobe.model`), ``"outliers"`` (Student-t likelihood with fitted
        nu and an outlier flag list); a list or a comma-separated string. ``"auto"`` fits each against the plain model and keeps those PSIS-LOO
        supports (rule of :mod:`bayesprobe.comparison`; hysteresis only for sweeps with both
        directions), with a plain-language note in ``summary()["distortions"]``. ``None`` or ``"none"``: as set in ``config``.
    options : FitOptions, optional
        All of the options above as one value (:class:`bayesprobe.options.FitOptions`);
        give either ``options`` or the individual keywords.

    Returns
    -------
    FitResult

    Warns
    -----
    ConvergenceWarning
        The result did not converge within the step budget (``result.converged`` is False;
        its files are written with ``converged: false``).
    """
    opts = _options(dict(locals()))
    result = _fit(_as_sweep(voltage, current, opts.sign), opts)
    if not result.converged:
        warnings.warn(_not_converged_message(result), ConvergenceWarning, stacklevel=2)
    return result


def _not_converged_message(result) -> str:
    """One line: what was unmet, that the results say so, and the fix."""
    unmet = "; ".join(result.diagnostics.get("unmet") or []) or "convergence criteria not met"
    return (f"the fit did not converge within the step budget ({' '.join(unmet.split())}); its results are "
            "written with converged: false - give a larger budget, e.g. sampler=SamplerSettings(max_steps=...)")


def _options(given: dict) -> FitOptions:
    """The FitOptions of a call of :func:`fit` (its keywords, or ``options`` with no other keyword)."""
    options = given.pop("options")
    given.pop("voltage"), given.pop("current")
    if options is not None:
        if not isinstance(options, FitOptions):
            raise ValueError(f"options must be a bayesprobe.options.FitOptions, got {type(options).__name__}")
        changed = [k for k, v in given.items() if not _is_default(v, _FIT_DEFAULTS[k])]
        if changed:
            raise ValueError(f"give the options either as keywords or as options=FitOptions(...), not both "
                             f"(also given: {', '.join(changed)})")
        return options
    physics = {k: given.pop(k) for k in _PHYSICS_KEYWORDS}
    opts = FitOptions(**given)
    if opts.config is None:
        opts = opts.with_(config=make_config(**physics))
    return opts


def _is_default(value, default) -> bool:
    try:
        return value is default or (type(value) is type(default) and bool(value == default))
    except (TypeError, ValueError):
        return False


def _fit(sweep: Sweep, opts: FitOptions) -> FitResult:
    """Distortions (named or chosen by PSIS-LOO), then the electron model(s)."""
    config = opts.config if opts.config is not None else make_config()
    if opts.selects_distortions:
        return select_distortions(
            lambda cfg, nu: _fit(sweep, opts.with_(config=cfg, priors=_distortion_priors_for(opts.priors, cfg, nu),
                                                   student_nu=nu, distortions=None)),
            config, opts.student_nu, both_directions=sweep.branches is not None)
    config, student_nu = apply_distortions(opts.distortions, config, opts.student_nu)
    if config.hysteresis and sweep.branches is None:
        raise ValueError("the hysteresis distortion needs a sweep recorded with rising and falling bias "
                         "(this one has a single direction)")
    # every matrix here is tiny (d x d, or draws x d): multithreaded BLAS only adds thread wake-ups,
    # which made each L-BFGS-B iteration ~10x slower on a 2-core machine with other load
    from threadpoolctl import threadpool_limits
    with threadpool_limits(1, user_api="blas"):
        return _fit_models(sweep, opts.with_(config=config, student_nu=student_nu, distortions=None))


def _fit_models(sweep, opts: FitOptions):
    """The electron model(s) asked for, and the PSIS-LOO choice between them for ``model="auto"``."""
    config = opts.config
    cls = _classical(sweep.voltage, sweep.current, config.undistorted().with_(electrons=_SIMPLEST.name))
    results = {}
    for m in opts.electron_models:
        o = opts.with_(priors=_priors_for(opts.priors, m))
        if opts.selects_model and m.two_temperature and opts.sampler.max_steps > AUTO_RICH_MAX_STEPS:
            # an unsupported hot population leaves a long, flat ridge that mixes slowly; its LOO is
            # only needed to show it does not win. If it does win, it is re-run with the full budget.
            o = o.with_(sampler=replace(opts.sampler, max_steps=AUTO_RICH_MAX_STEPS))
        results[m.name] = _fit_one(sweep, config.with_(electrons=m.name), o, cls)
    if len(results) == 1:
        return next(iter(results.values()))
    from .comparison import compare_models
    chosen = compare_models(results)
    m = chosen.config.electron_model
    if m.two_temperature and not chosen.converged and opts.sampler.max_steps > AUTO_RICH_MAX_STEPS:
        results[m.name] = _fit_one(sweep, config.with_(electrons=m.name),
                                   opts.with_(priors=_priors_for(opts.priors, m), start=None), cls)
        chosen = compare_models(results)
    return chosen


def _fit_one(sweep: Sweep, config: ModelConfig, opts: FitOptions, cls) -> FitResult:
    """One electron model: optimum, engine draws, quantities of every draw, diagnostics."""
    V, I = sweep.voltage, sweep.current
    params = default_parameters(config, V, I, fit_nu=opts.student_nu == "fit").with_priors(opts.priors)
    logpost = LogPosterior(V, I, config, params, student_nu=opts.student_nu, branches=sweep.branches)
    t0 = time.perf_counter()
    mp, warm = _optimum(sweep, config, opts, cls, params, logpost)
    t_map = time.perf_counter() - t0
    seeds = SeedStreams.from_seed(opts.seed)
    run = get_engine(opts.engine).run(logpost, mp.z, mp.cov, seeds, opts.engine_settings)
    post = _Posterior.of(run, params, logpost, V, opts.credible_level)
    diagnostics = replace(run.quantity_diagnostics(post.draws, params.names), engine_requested=opts.engine,
                          map_hessian_ok=bool(mp.hessian_ok), warm_start=warm, map_s=t_map, posterior_s=post.seconds)
    cls_dict = cls.to_dict() if not isinstance(cls, Exception) else {"error": str(cls)}
    map_phys = {n: float(v[0]) for n, v in params.to_physical(mp.z[None]).items()}
    return FitResult(model=config.electrons, config=config, voltage=V, current=I, draws=post.draws,
                     units=post.units, parameter_order=params.names, priors=params.describe(),
                     diagnostics=diagnostics.to_dict(), classical=cls_dict, credible_level=opts.credible_level,
                     idata_builder=_idata_builder(sweep, logpost, run, post, seeds.predictive, opts.credible_level,
                                                  thin=diagnostics.thin),
                     sweep_info={"source": sweep.source, "sweep_id": sweep.sweep_id, "n_points": sweep.n_points,
                                 "notes": list(sweep.notes), "sign_flipped": sweep.sign_flipped,
                                 "both_directions": sweep.branches is not None},
                     map_estimate=map_phys, student_nu=opts.student_nu, seed=opts.seed,
                     settings=asdict(opts.sampler), distortions=post.distortions, branches=sweep.branches)


def _optimum(sweep, config, opts, cls, params, logpost):
    """The MAP (with its Laplace covariance) and whether a warm start joined the candidates."""
    V, I = sweep.voltage, sweep.current
    starts = _starts(params, cls, V, I, config)
    z_warm = _warm_start_z(params, opts.start)
    if z_warm is None and config.distorted:
        # distortions perturb the plain characteristic: its optimum (cheap and well posed) with the
        # distortion starts joins the candidates (a far start can settle in a spurious mode with a
        # large V_rf and V_p above the sweep)
        starts = np.vstack([_plain_seeded_starts(sweep, config, opts.priors, opts.student_nu, cls, params), starts])
    if z_warm is not None:
        # the neighbour's optimum joins the candidates; the local search runs from the best one only
        return find_map(logpost, np.vstack([z_warm[None, :], starts]), n_local=1), True
    return find_map(logpost, starts), False


@dataclass
class _Posterior:
    """Every quantity at every draw of an engine run, computed once per distinct draw."""

    draws: dict            # name -> (chain, draw): sampled parameters, then derived quantities
    units: dict
    unique: np.ndarray     # distinct draws in z
    inverse: np.ndarray    # draw -> row of ``unique``
    distortions: dict | None
    seconds: float

    @classmethod
    def of(cls, run, params, logpost, V, credible_level):
        t = time.perf_counter()
        # per-draw work once per distinct draw (resampled and rejected-move draws repeat), and one
        # model evaluation shared by the pointwise log-likelihood and the replicated sweeps
        Zu, inv = np.unique(run.draws, axis=0, return_inverse=True)
        inv = inv.reshape(-1)
        phys_u = params.to_physical(Zu)
        phys = {n: v[inv] for n, v in phys_u.items()}
        derived = {n: v[inv] for n, v in derived_quantities(phys_u, logpost.config).items()}
        record = describe_distortions(logpost, Zu, phys, V, counts=np.bincount(inv, minlength=len(Zu)),
                                      credible_level=credible_level)
        seconds = time.perf_counter() - t
        draws = {n: run.per_chain(v) for n, v in phys.items()}
        draws.update({n: run.per_chain(v) for n, v in derived.items()})
        return cls(draws=draws, units=units_for(list(draws), params), unique=Zu, inverse=inv,
                   distortions=record, seconds=seconds)


def _idata_builder(sweep, logpost, run, post, ppc_seed, credible_level, thin):
    """The InferenceData of a fit, built on first use.

    The pointwise log-likelihood and the replicated sweeps are only needed for model
    comparison, the fit figure and posterior.nc, so a batch that keeps only the summaries
    never pays for them; the seeded stream makes them the same whenever they are built.
    """
    V, I, config = sweep.voltage, sweep.current, logpost.config
    names = logpost.parameters.names

    def build():
        mu_u = logpost.model_current(post.unique)
        loglik = logpost.pointwise_loglik(post.unique, mu=mu_u)[post.inverse]
        ppc = logpost.posterior_predictive(run.draws, np.random.default_rng(ppc_seed), mu=mu_u[post.inverse])
        return build_inference_data(
            posterior=post.draws,
            log_likelihood={"current": run.per_chain(loglik)},
            observed_data={"current": I},
            posterior_predictive={"current": run.per_chain(ppc)},
            sample_stats={"lp": run.per_chain(run.log_prob)},
            constant_data={"voltage": V} if sweep.branches is None else
            {"voltage": V, "direction": sweep.branches[0], "ramp": sweep.branches[1]},
            coords={"point": np.arange(V.size)},
            dims={"current": ["point"], "voltage": ["point"], "direction": ["point"], "ramp": ["point"]},
            attrs={"bayesprobe_model": config.electrons, "parameter_order": ",".join(names),
                   "units": ";".join(f"{k}={v}" for k, v in post.units.items()),
                   "credible_level": credible_level, "thin_steps": thin},
        )
    return build


def _distortion_priors_for(priors, config, student_nu):
    """``auto``: each candidate keeps the prior overrides of the distortion parameters it has
    (e.g. a measured circuit resistance applies to the resistance candidate only)."""
    if not priors:
        return priors
    from .model import DISTORTION_SWITCHES
    absent = {n for switch, names in DISTORTION_SWITCHES.items() if not getattr(config, switch)
              for n in names}
    if student_nu != "fit":
        absent.add("nu")
    return {k: v for k, v in priors.items() if k not in absent}


def _priors_for(priors, model):
    """Drop prior overrides of the other electron models' parameters (``model="auto"`` fits all)."""
    if not priors:
        return priors
    skip = {n for m in ELECTRON_MODELS.values() for n in m.parameter_names} - set(model.parameter_names)
    return {k: v for k, v in priors.items() if k not in skip}


#: keywords of :func:`fit` that build the model configuration (:func:`make_config`)
_PHYSICS_KEYWORDS = ("probe", "ion", "ion_mass", "ion_collection", "quasi_neutral", "T_i", "bohm_factor")
_FIT_DEFAULTS = {k: p.default for k, p in inspect.signature(fit).parameters.items()}
