"""``fit``: one sweep in, a calibrated posterior out. Orchestrates physics and inference."""
from __future__ import annotations

import math
import time
from dataclasses import asdict, replace

import numpy as np

from .derived import derived_quantities
from .distortion_choice import (apply_distortions, describe_distortions, distortion_starts, parse_distortions,
                                select_distortions)
from .inference.arviz_adapter import build_inference_data
from .inference.optimize import approximate_map, find_map
from .inference.posterior import LogPosterior, default_parameters
from .inference.sampler import SamplerSettings, run_ensembles
from .model import ELECTRON_MODELS, ModelConfig
from .physics.geometry import Probe
from .result import FitResult, units_for
from .sweep import Sweep

__all__ = ["fit", "make_config", "N_STORED_DRAWS"]

#: posterior draws kept in the result (thinned evenly from the converged chains)
N_STORED_DRAWS = 2000
MODEL_CHOICES = ELECTRON_MODELS + ("auto",)
ENGINES = ("mcmc", "fast", "auto")
#: step budget of the two-temperature fit inside ``model="auto"`` before the comparison
AUTO_RICH_MAX_STEPS = 4000


def make_config(*, probe=None, ion="Ar", ion_mass=None, ion_collection="auto", electrons="maxwellian",
                quasi_neutral=False, T_i=0.026, bohm_factor=float(np.exp(-0.5)), sheath_expansion=True,
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


def _fit_one(sweep: Sweep, config: ModelConfig, *, credible_level, priors, student_nu, seed, settings,
             progress, cls, engine="mcmc", is_settings=None, start=None) -> FitResult:
    V, I = sweep.voltage, sweep.current
    params = default_parameters(config, V, I, fit_nu=student_nu == "fit").with_priors(priors)
    logpost = LogPosterior(V, I, config, params, student_nu=student_nu, branches=sweep.branches)
    t0 = time.perf_counter()
    starts = _starts(params, cls, V, I, config)
    z_warm = _warm_start_z(params, start)
    if z_warm is None and config.distorted:
        # distortions perturb the plain characteristic: its optimum (cheap and well posed) with the
        # distortion starts joins the candidates (a far start can settle in a spurious mode with a
        # large V_rf and V_p above the sweep)
        starts = np.vstack([_plain_seeded_starts(sweep, config, priors, student_nu, cls, params), starts])
    if z_warm is not None:
        # the neighbour's optimum joins the candidates; the local search runs from the best one only
        starts = np.vstack([z_warm[None, :], starts])
        mp = find_map(logpost, starts, n_local=1)
    else:
        mp = find_map(logpost, starts)
    t_map = time.perf_counter() - t0
    ss = np.random.SeedSequence(seed)
    s_sampler, s_ppc, s_is = ss.spawn(3)          # the first two match the MCMC-only seeding
    d = len(params)
    is_run = None
    fallback_reason = None
    if engine in ("fast", "auto"):
        from .inference.importance import ImportanceSettings, importance_sample
        is_settings = is_settings or ImportanceSettings()
        is_run = importance_sample(logpost, mp.z, mp.cov, settings=is_settings, seed=s_is)
        if not is_run.accepted:
            fallback_reason = "; ".join(is_run.reasons)
    use_is = is_run is not None and is_run.accepted
    if use_is:
        E, Sp, W, thin = 1, is_run.draws.shape[0], 1, 1
        Zflat = is_run.draws
        lp_flat = is_run.log_prob
        run = None
    else:
        run = run_ensembles(logpost, mp.z, mp.cov, settings=settings, seed=s_sampler, progress=progress)
        # thin evenly to about N_STORED_DRAWS draws, chain = independent ensemble
        E, S, W, d = run.chains.shape
        thin = max(1, int(S * W * E / N_STORED_DRAWS))
        Z = run.chains[:, ::thin]                           # (E, S', W, d)
        Sp = Z.shape[1]
        Zflat = Z.reshape(-1, d)
        lp_flat = run.log_prob[:, ::thin].reshape(-1)
    t_post = time.perf_counter()
    # per-draw work once per distinct draw (resampled and rejected-move draws repeat), and one
    # model evaluation shared by the pointwise log-likelihood and the replicated sweeps
    Zu, inv = np.unique(Zflat, axis=0, return_inverse=True)
    inv = inv.reshape(-1)
    phys_u = params.to_physical(Zu)
    phys = {n: v[inv] for n, v in phys_u.items()}
    derived = {n: v[inv] for n, v in derived_quantities(phys_u, config).items()}
    distortion_record = describe_distortions(logpost, Zu, phys, V, counts=np.bincount(inv, minlength=len(Zu)),
                                             credible_level=credible_level)
    t_post = time.perf_counter() - t_post

    def cd(x):  # (E*S'*W,) -> (chain=E, draw=S'*W)
        return np.asarray(x).reshape(E, Sp * W, *np.shape(x)[1:])

    draws = {n: cd(v) for n, v in phys.items()}
    draws.update({n: cd(v) for n, v in derived.items()})
    units = units_for(list(draws), params)

    if use_is:
        # all quantities share the importance weights: one ESS for everything, no R-hat
        ess_all = {n: float(is_run.ess) for n in draws}
        rhat_all = {}
        ess_min, rhat_max = float(is_run.ess), None
        converged = True
        reasons = []
        engine_diag = {"tau_max": None, "tau": {}, "n_steps": 0, "burn_in": 0, "thin": 1, "n_ensembles": 0,
                       "n_walkers": 0, "acceptance": None, "history": is_run.history,
                       "timings_s": {"map": t_map, "importance": is_run.timings, "posterior_processing": t_post}}
    else:
        from .inference.arviz_adapter import ess_bulk, rhat_rank
        ess_all, rhat_all = {}, {}
        for n, x in draws.items():
            if np.all(np.isfinite(x)) and np.ptp(x) > 0:
                ess_all[n] = ess_bulk(x)
                rhat_all[n] = rhat_rank(x)
        # sampled parameters: the run's own diagnostics over the full kept chains
        for j, n in enumerate(params.names):
            ess_all[n] = float(run.ess[j])
            rhat_all[n] = float(run.rhat[j])
        reported = [n for n in draws if n in ess_all]
        ess_min = float(min(ess_all[n] for n in reported))
        rhat_max = float(max(rhat_all[n] for n in reported))
        converged = bool(run.converged and ess_min >= settings.ess_min and rhat_max <= settings.rhat_max)
        reasons = list(run.reasons)
        if run.converged and not converged:
            reasons.append(f"derived quantities: ESS {ess_min:.0f}, R-hat {rhat_max:.4f}")
        engine_diag = {"tau_max": float(np.max(run.tau)),
                       "tau": {n: float(t) for n, t in zip(params.names, run.tau)},
                       "n_steps": int(run.n_steps), "burn_in": int(run.burn), "thin": int(thin),
                       "n_ensembles": int(E), "n_walkers": int(W), "acceptance": run.acceptance,
                       "history": run.history,
                       "timings_s": {"map": t_map, **run.timings, "posterior_processing": t_post}}

    diagnostics = {
        "r_hat_max": rhat_max, "ess_bulk_min": ess_min, "n_draws": int(E * Sp * W), "converged": converged,
        "engine": "importance" if use_is else "mcmc", "engine_requested": engine,
        "criteria": {"tau_multiple_min": settings.min_tau_multiple, "r_hat_max": settings.rhat_max,
                     "ess_bulk_min": settings.ess_min},
        "unmet": reasons, "ess_bulk": ess_all, "r_hat": rhat_all,
        "map_hessian_ok": bool(mp.hessian_ok), "warm_start": z_warm is not None, **engine_diag,
    }
    if is_run is not None:
        diagnostics.update({"khat": float(is_run.khat), "is_ess": float(is_run.ess), "is_rounds": is_run.n_rounds,
                            "is_n_evaluations": int(is_run.n_evaluations), "fallback_reason": fallback_reason})
        diagnostics["criteria"].update({"khat_max": is_settings.khat_max, "is_ess_min": is_settings.ess_min})

    coords = {"point": np.arange(V.size)}
    sample_stats = {"lp": cd(lp_flat)}
    def build_idata():
        # the pointwise log-likelihood and the replicated sweeps are only needed for model
        # comparison, the fit figure and posterior.nc, so they are computed on first use (a batch
        # that keeps only the summaries never pays for them); the seeded stream makes them the
        # same whenever that is
        mu_u = logpost.model_current(Zu)
        loglik = logpost.pointwise_loglik(Zu, mu=mu_u)[inv]
        ppc = logpost.posterior_predictive(Zflat, np.random.default_rng(s_ppc), mu=mu_u[inv])
        return build_inference_data(
            posterior=draws,
            log_likelihood={"current": cd(loglik)},
            observed_data={"current": I},
            posterior_predictive={"current": cd(ppc)},
            sample_stats=sample_stats,
            constant_data={"voltage": V} if sweep.branches is None else
            {"voltage": V, "direction": sweep.branches[0], "ramp": sweep.branches[1]},
            coords=coords, dims={"current": ["point"], "voltage": ["point"], "direction": ["point"],
                                 "ramp": ["point"]},
            attrs={"bayesprobe_model": config.electrons, "parameter_order": ",".join(params.names),
                   "units": ";".join(f"{k}={v}" for k, v in units.items()),
                   "credible_level": credible_level, "thin_steps": thin},
        )

    cls_dict = cls.to_dict() if not isinstance(cls, Exception) else {"error": str(cls)}
    map_phys = {n: float(v[0]) for n, v in params.to_physical(mp.z[None]).items()}
    return FitResult(model=config.electrons, config=config, voltage=V, current=I, draws=draws, units=units,
                     parameter_order=params.names, priors=params.describe(), diagnostics=diagnostics,
                     classical=cls_dict, credible_level=credible_level, idata_builder=build_idata,
                     sweep_info={"source": sweep.source, "sweep_id": sweep.sweep_id, "n_points": sweep.n_points,
                                 "notes": list(sweep.notes), "sign_flipped": sweep.sign_flipped,
                                 "both_directions": sweep.branches is not None},
                     map_estimate=map_phys, student_nu=student_nu, seed=seed,
                     settings=asdict(settings), distortions=distortion_record, branches=sweep.branches)


def fit(voltage, current=None, *, probe: Probe | None = None, ion="Ar", ion_mass=None,
        ion_collection="auto", model="maxwellian", credible_level=0.9, priors=None, student_nu=None,
        quasi_neutral=False, T_i=0.026, bohm_factor=float(np.exp(-0.5)), seed: int | None = 0,
        sampler: SamplerSettings | None = None, progress=None, sign="auto",
        config: ModelConfig | None = None, engine: str = "mcmc", start=None,
        distortions=None) -> FitResult:
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
        and the importance-sampling ESS pass; otherwise emcee runs from the same optimum.
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

    Returns
    -------
    FitResult
    """
    if not (isinstance(credible_level, (int, float)) and 0 < credible_level < 1):
        raise ValueError(f"credible_level must lie strictly between 0 and 1, got {credible_level!r}")
    if model not in MODEL_CHOICES:
        raise ValueError(f"model must be one of {', '.join(MODEL_CHOICES)}, got {model!r}")
    if student_nu is not None and student_nu != "fit" and not (
            isinstance(student_nu, (int, float, np.integer, np.floating)) and np.isfinite(student_nu)
            and student_nu > 0):
        raise ValueError(f"student_nu must be a positive number or 'fit', got {student_nu!r}")
    wanted = parse_distortions(distortions)
    if wanted != "auto" and "outliers" in wanted:
        apply_distortions(("outliers",), ModelConfig(), student_nu)     # checks the student_nu conflict early
    if engine not in ENGINES:
        raise ValueError(f"engine must be one of {', '.join(ENGINES)}, got {engine!r}")
    if seed is not None and not isinstance(seed, (int, np.integer)):
        raise ValueError(f"seed must be an integer, got {seed!r}")
    sweep = _as_sweep(voltage, current, sign)
    if config is None:
        config = make_config(probe=probe, ion=ion, ion_mass=ion_mass, ion_collection=ion_collection,
                             quasi_neutral=quasi_neutral, T_i=T_i, bohm_factor=bohm_factor)
    settings = sampler or SamplerSettings()
    if wanted == "auto":
        return select_distortions(
            lambda cfg, nu: fit(sweep, config=cfg, model=model, credible_level=credible_level,
                                priors=_distortion_priors_for(priors, cfg, nu), student_nu=nu, seed=seed,
                                sampler=settings, progress=progress, engine=engine, start=start),
            config, student_nu, both_directions=sweep.branches is not None)
    config, student_nu = apply_distortions(wanted, config, student_nu)
    if config.hysteresis and sweep.branches is None:
        raise ValueError("the hysteresis distortion needs a sweep recorded with rising and falling bias "
                         "(this one has a single direction)")
    # every matrix here is tiny (d x d, or draws x d): multithreaded BLAS only adds thread wake-ups,
    # which made each L-BFGS-B iteration ~10x slower on a 2-core machine with other load
    from threadpoolctl import threadpool_limits
    with threadpool_limits(1, user_api="blas"):
        return _fit_models(sweep, config, model=model, settings=settings, credible_level=credible_level,
                           priors=priors, student_nu=student_nu, seed=seed, progress=progress, engine=engine,
                           start=start)


def _fit_models(sweep, config, *, model, settings, credible_level, priors, student_nu, seed, progress, engine,
                start):
    """The electron model(s) asked for, and the PSIS-LOO choice between them for ``model="auto"``."""
    cls = _classical(sweep.voltage, sweep.current, config.undistorted().with_(electrons="maxwellian"))
    kinds = ELECTRON_MODELS if model == "auto" else (model,)
    results = {}
    for kind in kinds:
        s = settings
        if model == "auto" and kind == "bi-maxwellian" and settings.max_steps > AUTO_RICH_MAX_STEPS:
            # an unsupported hot population leaves a long, flat ridge that mixes slowly; its LOO is
            # only needed to show it does not win. If it does win, it is re-run with the full budget.
            s = replace(settings, max_steps=AUTO_RICH_MAX_STEPS)
        results[kind] = _fit_one(sweep, config.with_(electrons=kind), credible_level=credible_level,
                                 priors=_priors_for(priors, kind), student_nu=student_nu, seed=seed,
                                 settings=s, progress=progress, cls=cls, engine=engine, start=start)
    if len(results) == 1:
        return results[kinds[0]]
    from .comparison import compare_models
    chosen = compare_models(results)
    if chosen.model == "bi-maxwellian" and not chosen.converged and settings.max_steps > AUTO_RICH_MAX_STEPS:
        full = _fit_one(sweep, config.with_(electrons="bi-maxwellian"), credible_level=credible_level,
                        priors=_priors_for(priors, "bi-maxwellian"), student_nu=student_nu, seed=seed,
                        settings=settings, progress=progress, cls=cls, engine=engine)
        results["bi-maxwellian"] = full
        chosen = compare_models(results)
    return chosen


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


def _priors_for(priors, kind):
    """Drop prior overrides that do not apply to this electron model (auto fits both)."""
    if not priors:
        return priors
    single = {"T_e"}
    double = {"T_e_cold", "T_e_hot", "hot_fraction"}
    skip = double if kind == "maxwellian" else single
    return {k: v for k, v in priors.items() if k not in skip}
