"""The commands behind the parsers: each reads its options, runs the job, writes its outputs and
returns the exit status."""
from __future__ import annotations

import json
import math
import sys
import tomllib
import warnings
from pathlib import Path

from ..errors import ConvergenceWarning, InputError

EXIT_OK, EXIT_INPUT, EXIT_NOT_CONVERGED = 0, 2, 3


def _circuit_priors(args, sweep):
    """Priors from --circuit-resistance / --vacuum-sweep and the distortions they switch on.

    ``sweep``: the plasma sweep whose detected sign convention the plasma-off sweep is read in;
    None (batch) uses ``--sign``, which must then be given explicitly.
    """
    from ..inference.instrument_priors import circuit_resistance_prior, vacuum_leakage_priors
    from ..io import load_sweep
    priors, needed = {}, []
    if getattr(args, "circuit_resistance", None) is not None:
        priors["R_series"] = circuit_resistance_prior(*args.circuit_resistance)
        needed.append("resistance")
    if getattr(args, "vacuum_sweep", None) is not None:
        # a plasma-off sweep has no sign to detect: read it in the plasma sweep's convention
        if sweep is not None:
            sign = "ion-positive" if sweep.sign_flipped else "electron-positive"
        elif args.sign == "auto":
            raise InputError("batch --vacuum-sweep needs --sign electron-positive or ion-positive: a plasma-off "
                             "sweep has no sign convention to detect, and the sweeps of a batch may differ")
        else:
            sign = args.sign
        vac = load_sweep(args.vacuum_sweep, voltage_column=args.voltage_column,
                         current_column=args.current_column, sign=sign)
        try:
            priors.update(vacuum_leakage_priors(vac.voltage, vac.current))
        except ValueError as exc:
            raise InputError(f"--vacuum-sweep {str(args.vacuum_sweep)!r}: {exc}") from None
        needed.append("leakage")
    return priors, needed


def _all_priors(args, sweep, plain=False):
    """(prior overrides from --priors and the circuit calibration, the distortions the calibration needs).

    ``sweep`` as for :func:`_circuit_priors`; ``plain``: the calibrated priors as dicts (batch records are JSON).
    """
    priors = _read_priors(args.priors)
    measured, needed = _circuit_priors(args, sweep)
    clash = sorted(set(measured) & set(priors or {}))
    if clash:
        raise InputError(f"prior for {', '.join(clash)} given twice (--priors and the circuit calibration); "
                         f"drop one")
    if measured:
        priors = {**(priors or {}), **{n: p.to_dict() if plain else p for n, p in measured.items()}}
    return priors, needed


def _probe_from(args):
    from ..physics.geometry import Probe
    radius, length = args.radius, args.length
    if args.geometry == "cylindrical":
        radius = radius or 50e-6
        length = length or 5e-3
    elif args.geometry == "spherical":
        radius = radius or 1e-3
    elif args.geometry == "planar" and radius is None and args.area is None:
        radius = 2e-3
    return Probe(args.geometry, radius=radius, length=length if args.geometry == "cylindrical" else None,
                 area=args.area, end_cap=args.end_cap)


def _bohm(text):
    try:
        return float(text)
    except ValueError:
        return text


def _config_from(args, electrons="maxwellian"):
    from ..fitting import make_config
    try:
        return _make(make_config, args, electrons)
    except ValueError as exc:
        raise InputError(" ".join(str(exc).split())) from None


def _make(make_config, args, electrons):
    return make_config(probe=_probe_from(args), ion=args.ion, ion_mass=args.ion_mass,
                       ion_collection=args.ion_collection, electrons=electrons,
                       quasi_neutral=args.quasi_neutral, T_i=args.ion_temperature,
                       bohm_factor=_bohm(args.bohm_factor), sheath_expansion=not args.no_sheath_expansion)


def _read_priors(path: Path | None):
    if path is None:
        return None
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise InputError(f"priors file {str(path)!r} does not exist") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"priors file {str(path)!r} is not valid TOML: {' '.join(str(exc).split())}") from None
    table = data.get("prior", data)
    if not isinstance(table, dict) or not all(isinstance(v, dict) for v in table.values()):
        raise InputError("priors file must hold tables like [prior.T_e] with kind = \"log-uniform\", lower, upper")
    return table


def _say(args, text):
    if not getattr(args, "quiet", False):
        print(text, file=sys.stderr)


# ---------------------------------------------------------------------------- commands

def cmd_fit(args) -> int:
    from ..io import load_sweep

    # the sweep first: a bad file is reported before the fitting stack is imported
    sweep = load_sweep(args.sweep, voltage_column=args.voltage_column, current_column=args.current_column,
                       sign=args.sign)
    for note in sweep.notes:
        _say(args, f"note: {note}")
    opts = _fit_options(args, sweep)
    from .. import fitting
    try:
        with warnings.catch_warnings():      # not converging is reported below, with exit status 3
            warnings.simplefilter("ignore", ConvergenceWarning)
            result = fitting.fit(sweep, options=opts)
    except ValueError as exc:          # bad prior values and the like: one line
        raise InputError(" ".join(str(exc).split())) from None
    result.save(args.out, figures=not args.no_figures)
    if not args.quiet:
        print(result.table())
        if result.comparison:
            print(result.comparison["reasoning"])
        if result.distortions and result.distortions.get("note"):
            print(result.distortions["note"])
        print(f"results written to {args.out}")
    _print_warnings(args, result.warnings())
    if not result.converged:
        print("warning: the sampler did not converge within the step budget "
              f"({'; '.join(result.diagnostics['unmet'])}); results are written with converged: false",
              file=sys.stderr)
        return EXIT_NOT_CONVERGED
    return EXIT_OK


def _fit_options(args, sweep):
    """The FitOptions of ``bayesprobe fit``: the parsed options, the priors file and the circuit calibration."""
    from ..options import FitOptions
    config = _config_from(args)
    priors, needed = _all_priors(args, sweep)
    distortions = args.distortions
    if needed and distortions != "auto":
        distortions = tuple(distortions or ()) + tuple(n for n in needed if n not in (distortions or ()))
    try:
        return FitOptions.from_mapping({
            "config": config, "model": args.model, "credible_level": args.credible_level,
            "priors": priors, "student_nu": args.student_t, "seed": args.seed, "max_steps": max(args.max_steps, 100),
            "progress": None if not args.quiet else False, "engine": args.engine, "distortions": distortions,
            "sign": args.sign})
    except ValueError as exc:
        raise InputError(" ".join(str(exc).split())) from None


#: warnings cmd_fit prints otherwise (reader notes before the fit, the distortion note with the table,
#: non-convergence with the exit status)
_PRINTED_ELSEWHERE = ("input-note", "not-converged", "distortion-selection")


def _print_warnings(args, warnings) -> None:
    """One line on stderr per scientific warning (bayesprobe.checks); notes only without --quiet."""
    from ..checks import format_warning
    for w in warnings:
        if w["code"] in _PRINTED_ELSEWHERE or (w["level"] == "note" and args.quiet):
            continue
        print(format_warning(w), file=sys.stderr)


def cmd_simulate(args) -> int:
    from ..io import atomic_write_text, write_sweep_csv
    from ..simulate import simulate
    config = _config_from(args, electrons=args.model)
    extra = {"V_rf": args.rf_amplitude, "R_series": args.series_resistance, "G_leak": args.leak_conductance,
             "I_offset": args.current_offset}
    for name, flag in (("V_rf", "--rf-amplitude"), ("R_series", "--series-resistance")):
        if not (math.isfinite(extra[name]) and extra[name] >= 0):
            raise InputError(f"{flag} must be a non-negative number, got {extra[name]!r}")
    extra.update({"V_shift": args.branch_shift, "I_cap": args.displacement_current})
    for name, flag in (("G_leak", "--leak-conductance"), ("I_offset", "--current-offset"),
                       ("V_shift", "--branch-shift"), ("I_cap", "--displacement-current")):
        if not math.isfinite(extra[name]):
            raise InputError(f"{flag} must be a finite number, got {extra[name]!r}")
    hysteresis = extra["V_shift"] != 0 or extra["I_cap"] != 0
    config = config.with_(rf_fluctuation=extra["V_rf"] > 0, series_resistance=extra["R_series"] > 0,
                          leakage=extra["G_leak"] != 0 or extra["I_offset"] != 0, hysteresis=hysteresis)
    truth = {"n_e": args.n_e, "V_p": args.V_p}
    truth.update({k: v for k, v in extra.items() if v != 0})
    if extra["G_leak"] != 0 or extra["I_offset"] != 0:
        truth.update({"G_leak": extra["G_leak"], "I_offset": extra["I_offset"]})
    if hysteresis:
        truth.update({"V_shift": extra["V_shift"], "I_cap": extra["I_cap"]})
    if args.n_i:
        truth["n_i"] = args.n_i
    if config.electron_model.two_temperature:
        truth.update({"T_e_cold": args.T_e, "T_e_hot": args.T_hot, "hot_fraction": args.hot_fraction})
    else:
        truth["T_e"] = args.T_e
    try:
        sim = simulate(truth, config=config, v_min=args.v_min, v_max=args.v_max, n_points=args.points,
                       noise_rel=args.noise_rel, noise_floor=args.noise_floor, outlier_fraction=args.outliers,
                       seed=args.seed, sweep_id=args.out.stem,
                       both_directions=args.both_directions or hysteresis)
    except ValueError as exc:
        raise InputError(" ".join(str(exc).split())) from None
    out = args.out
    suffix = out.suffix.lower()
    if suffix not in (".csv", ".npz"):
        raise InputError(f"--out must end in .csv or .npz, got {str(out)!r}")
    out.parent.mkdir(parents=True, exist_ok=True)
    truth_path = out.with_name(out.stem + ".truth.json")
    if suffix == ".csv":
        write_sweep_csv(out, sim.sweep, header_comment="synthetic sweep from the bayesprobe forward model; "
                                                       f"truth in {truth_path.name}")
    else:
        import io as _io

        import numpy as np

        from ..io import atomic_write_bytes
        buf = _io.BytesIO()
        v_rec, i_rec = sim.sweep.in_record_order()
        np.savez(buf, voltage=v_rec, current=i_rec)
        atomic_write_bytes(out, buf.getvalue())
    atomic_write_text(truth_path, json.dumps(sim.truth_record(), indent=2) + "\n")
    print(f"wrote {out} ({sim.sweep.n_points} points) and {truth_path}")
    return EXIT_OK


def cmd_batch(args) -> int:
    from ..batch import fit_many
    from ..inference.sampler import SamplerSettings

    config = _config_from(args)
    if args.distortions == "auto" or (args.distortions and "outliers" in args.distortions) \
            or args.student_t == "fit":
        raise InputError("batch models the distortions rf, resistance, leakage and hysteresis (--distortions); "
                         "auto and outliers are options of the fit command")
    priors, needed = _all_priors(args, None, plain=True)      # one circuit for every sweep of the batch
    distortions = tuple(args.distortions or ()) + tuple(n for n in needed if n not in (args.distortions or ()))
    if distortions:
        from ..distortion_choice import apply_distortions
        config, _ = apply_distortions(distortions, config, None)
    settings = SamplerSettings(max_steps=max(args.max_steps, 100))
    try:
        summary = fit_many(args.inputs, out_dir=args.out, config=config, model=args.model,
                           credible_level=args.credible_level, seed=args.seed, workers=args.workers,
                           dask=args.dask, sampler=settings, priors=priors, student_nu=args.student_t,
                           sign=args.sign, voltage_column=args.voltage_column, current_column=args.current_column,
                           sweep_column=args.sweep_column, sweep_table=args.sweep_table,
                           keep_posteriors=args.keep_posteriors, retry_failed=args.retry_failed,
                           figures=not args.no_figures, progress=None if not args.quiet else False,
                           engine=args.engine, warm_start=args.warm_start,
                           executor="serial" if args.serial else None)
    except KeyboardInterrupt:
        print(f"interrupted; finished sweeps are kept in {args.out} - rerun the same command to resume",
              file=sys.stderr)
        return 130
    _say(args, summary.line())
    for sid, reason in summary.failed[:20]:
        _say(args, f"  failed {sid}: {reason}")
    if len(summary.failed) > 20 or summary.n_failed > len(summary.failed):
        _say(args, f"  ... {summary.n_failed - 20} more failures, see results.csv")
    if not args.quiet:
        print(f"results: {args.out / 'results.csv'}, {args.out / 'results.nc'}")
    return summary.exit_status


def cmd_report(args) -> int:
    from ..report import build_report
    path = build_report(args.results, out=args.out)   # InputError (no results) -> one line, exit 2
    print(f"report written to {path}")
    return EXIT_OK


def cmd_demo(args) -> int:
    from ..demo import run_demo
    return run_demo(args.out, seed=args.seed, quiet=args.quiet)
