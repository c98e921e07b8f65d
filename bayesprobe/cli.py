"""Command line: ``bayesprobe {demo,fit,simulate,batch,report}``.

Exit status: 0 success; 2 unusable input or options (one line on stderr, no
traceback, nothing written); 3 the fit ran but did not converge (results written,
``converged: false``).
"""
from __future__ import annotations

import argparse
import json
import math
import os
import re
import sys
import tomllib
import warnings
from pathlib import Path

from .errors import ConvergenceWarning, InputError

EXIT_OK, EXIT_INPUT, EXIT_NOT_CONVERGED = 0, 2, 3

_LENGTH_UNITS = {"m": 1.0, "cm": 1e-2, "mm": 1e-3, "um": 1e-6, "µm": 1e-6, "micron": 1e-6}
_AREA_UNITS = {"m2": 1.0, "cm2": 1e-4, "mm2": 1e-6, "um2": 1e-12, "µm2": 1e-12}


def _quantity(units: dict, what: str):
    def parse(text: str) -> float:
        m = re.fullmatch(r"\s*([-+0-9.eE]+)\s*([a-zµ0-9^]*)\s*", text)
        if not m:
            raise argparse.ArgumentTypeError(f"{what} must be a number with an optional unit, got {text!r}")
        unit = m.group(2).replace("^", "")
        try:
            value = float(m.group(1))
        except ValueError:
            raise argparse.ArgumentTypeError(f"{what} must be a number, got {text!r}") from None
        if unit and unit not in units:
            raise argparse.ArgumentTypeError(f"unknown unit {unit!r} for {what}; use one of {', '.join(units)}")
        value *= units.get(unit, 1.0)
        if not math.isfinite(value) or value <= 0:
            raise argparse.ArgumentTypeError(f"{what} must be positive, got {text!r}")
        return value
    return parse


def _probability(text):
    try:
        p = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number between 0 and 1, got {text!r}") from None
    if not 0 < p < 1:
        raise argparse.ArgumentTypeError(f"must lie strictly between 0 and 1, got {text!r}")
    return p


def _positive_float(text):
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number, got {text!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise argparse.ArgumentTypeError(f"must be positive, got {text!r}")
    return v


def _int_at_least(minimum: int):
    """argparse type: a whole number >= ``minimum``."""
    def parse(text):
        try:
            v = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"must be a whole number, got {text!r}") from None
        if v < minimum:
            raise argparse.ArgumentTypeError(
                f"must not be negative, got {text!r}" if minimum == 0 else f"must be at least {minimum}, got {text!r}")
        return v
    return parse


def _nu_choice(text):
    if text.strip().lower() == "fit":
        return "fit"
    return _positive_float(text)


def _distortion_choice(text):
    from .distortion_choice import parse_distortions
    try:
        return parse_distortions(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def _resistance_with_sd(text):
    """``R0:dR`` in ohm (a measured circuit resistance and its uncertainty)."""
    parts = text.replace("+-", ":").replace("\u00b1", ":").split(":")
    try:
        if len(parts) != 2:
            raise ValueError
        value, sd = float(parts[0]), float(parts[1])
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be OHMS:SD, e.g. 47:2 or 0:0.5, got {text!r}") from None
    if not (math.isfinite(value) and value >= 0 and math.isfinite(sd) and sd > 0):
        raise argparse.ArgumentTypeError(f"needs a resistance >= 0 and an uncertainty > 0 (ohm), got {text!r}")
    return value, sd


_positive_int = _int_at_least(1)
_nonneg_int = _int_at_least(0)


class _Parser(argparse.ArgumentParser):
    """argparse that exits with status 2 and a single line on errors."""

    def error(self, message):
        raise InputError(f"{self.prog}: {message}")


def _add_physics_options(p):
    g = p.add_argument_group("probe and plasma")
    g.add_argument("--geometry", choices=["planar", "cylindrical", "spherical"], default="cylindrical",
                   help="probe shape (default cylindrical)")
    g.add_argument("--radius", type=_quantity(_LENGTH_UNITS, "--radius"),
                   help="probe radius; plain numbers in m, or with a unit: 50um, 0.1mm (default 50um for a wire)")
    g.add_argument("--length", type=_quantity(_LENGTH_UNITS, "--length"),
                   help="exposed wire length (cylinder); plain numbers in m, or 5mm (default 5mm)")
    g.add_argument("--area", type=_quantity(_AREA_UNITS, "--area"),
                   help="collecting area; plain numbers in m^2, or 2mm2; overrides radius/length")
    g.add_argument("--end-cap", action="store_true", help="cylinder: count the flat tip in the area")
    ion = g.add_mutually_exclusive_group()
    ion.add_argument("--ion", default="Ar", help="ion species from the built-in table (default Ar)")
    ion.add_argument("--ion-mass", type=_positive_float, metavar="AMU", help="ion mass in atomic mass units")
    g.add_argument("--ion-collection", choices=["thin-sheath", "oml", "abr", "auto"], default="auto",
                   help="ion collection theory (default auto: thin-sheath for planar probes, "
                        "the smaller of OML and radial-flow ABR for wires and spheres)")
    g.add_argument("--ion-temperature", type=_positive_float, default=0.026, metavar="EV",
                   help="ion temperature in eV (default 0.026, room temperature)")
    g.add_argument("--bohm-factor", default="boltzmann",
                   help="sheath-edge density factor: boltzmann (exp(-1/2), default), 0.61, fluid (0.5) or a number")
    g.add_argument("--quasi-neutral", action="store_true", help="tie n_i to n_e instead of fitting both")
    g.add_argument("--no-sheath-expansion", action="store_true",
                   help="thin-sheath ions: keep the collecting area fixed (no Child-law sheath growth)")


def _add_fit_options(p):
    g = p.add_argument_group("inference")
    g.add_argument("--model", choices=["maxwellian", "bi-maxwellian", "auto"], default="maxwellian",
                   help="electron model; auto fits both and selects by PSIS-LOO (default maxwellian)")
    g.add_argument("--credible-level", type=_probability, default=0.9, metavar="P",
                   help="probability of the equal-tailed credible intervals (default 0.9)")
    g.add_argument("--seed", type=_nonneg_int, default=0, help="random seed; same seed, same result (default 0)")
    g.add_argument("--priors", type=Path, metavar="TOML",
                   help="TOML file with [prior.NAME] tables (kind, lower, upper, mean, sd)")
    g.add_argument("--student-t", type=_nu_choice, metavar="NU|fit",
                   help="Student-t likelihood with NU degrees of freedom (robust to outliers); 'fit' makes "
                        "NU a parameter and flags outliers (same as --distortions outliers)")
    g.add_argument("--distortions", type=_distortion_choice, default=None, metavar="LIST|auto|none",
                   help="model sweep distortions as nuisance parameters instead of trimming the sweep: a "
                        "comma-separated list of rf (plasma-potential oscillation, fits V_rf), resistance "
                        "(series resistance, fits R_series), leakage (linear leakage and offset current, fits "
                        "G_leak and I_offset), hysteresis (a file recorded with rising and falling bias: fits "
                        "the branch shift V_shift and the displacement current I_cap), outliers (Student-t "
                        "noise with fitted nu, flags outlier points); auto fits each against the plain model and keeps those PSIS-LOO supports, with a note "
                        "in summary.json; none (default) models none")
    g.add_argument("--engine", choices=["mcmc", "fast", "auto"], default="mcmc",
                   help="mcmc: emcee until converged (default); fast/auto: importance sampling from the "
                        "Laplace approximation, checked by Pareto k-hat, with emcee as the fallback")
    g.add_argument("--max-steps", type=_nonneg_int, default=20000,
                   help="sampler step budget per ensemble before giving up (default 20000)")
    g.add_argument("--sign", choices=["auto", "electron-positive", "ion-positive"], default="auto",
                   help="current sign convention of the file (default: detect)")
    g.add_argument("--voltage-column", help="name or 0-based index of the voltage column")
    g.add_argument("--current-column", help="name or 0-based index of the current column")
    g.add_argument("--no-figures", action="store_true", help="skip the PNG figures")
    g.add_argument("--quiet", action="store_true", help="no progress bar or table")


def _add_circuit_options(p):
    g = p.add_argument_group(
        "circuit calibration", "what is known about the measuring circuit; each turns the matching distortion on "
        "(unless --distortions auto) with a prior from the measurement instead of the vague default")
    g.add_argument("--circuit-resistance", type=_resistance_with_sd, metavar="OHMS:SD",
                   help="measured resistance between bias source and probe surface and its uncertainty in ohm, "
                        "e.g. 47:2 (normal prior on R_series, R >= 0); 0:SD says no resistance beyond SD")
    g.add_argument("--vacuum-sweep", type=Path, metavar="FILE",
                   help="the same bias sweep recorded with the plasma off (same columns and sign convention): "
                        "its least-squares line sets normal priors on G_leak and I_offset")


def _circuit_priors(args, sweep):
    """Priors from --circuit-resistance / --vacuum-sweep and the distortions they switch on.

    ``sweep``: the plasma sweep whose detected sign convention the plasma-off sweep is read in;
    None (batch) uses ``--sign``, which must then be given explicitly.
    """
    from .inference.instrument_priors import circuit_resistance_prior, vacuum_leakage_priors
    from .io import load_sweep
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


def _add_batch_parser(sub):
    b = sub.add_parser(
        "batch", help="many sweeps (files, folders, multi-sweep files) -> one results table; resumable",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Fit many sweeps in parallel. Every sweep's result is written to OUT/sweeps/<id>.json the "
                    "moment it finishes; rerunning the same command skips finished sweeps. At the end OUT/"
                    "results.csv, OUT/results.nc and OUT/profiles.png hold one row per sweep.",
        epilog="inputs: sweep files, folders (their sweep files) or quoted glob patterns. A file may hold many\n"
               "sweeps: an .npz with current of shape (sweeps, points), voltage (points,) or (sweeps, points)\n"
               "and optional per-sweep arrays such as time or position; an .npy of shape (sweeps, 2, points);\n"
               "a CSV with a sweep_id column (each sweep's rows together).\n\n"
               "exit status: 0 every sweep converged; 2 unusable input or options (nothing fitted);\n"
               "3 some sweeps did not converge and none failed; 4 some sweeps failed (reasons in\n"
               "results.csv); 130 interrupted (finished sweeps are kept: rerun to resume).")
    b.add_argument("inputs", nargs="+", metavar="INPUT", help="sweep file, folder or quoted glob pattern")
    b.add_argument("--out", type=Path, required=True, help="output folder; rerun with the same folder to resume")
    b.add_argument("--workers", type=_positive_int, metavar="N",
                   help="parallel worker processes (default: the usable cores); with --dask local, Dask workers")
    b.add_argument("--serial", action="store_true",
                   help="fit one sweep at a time in this process (for debugging; same results)")
    b.add_argument("--dask", metavar="ADDRESS|local",
                   help="run on Dask: 'local' starts a local cluster, tcp://HOST:PORT joins a running scheduler "
                        "(needs pip install 'bayesprobe[dask]')")
    b.add_argument("--sweep-column", metavar="NAME",
                   help="sweep-id column of multi-sweep text files (default: sweep_id or sweep)")
    b.add_argument("--sweep-table", type=Path, metavar="CSV",
                   help="per-sweep probe settings: sweep_id and any of geometry, radius, length, area (SI), "
                        "ion, ion_mass, ion_collection, ion_temperature")
    b.add_argument("--keep-posteriors", action="store_true",
                   help="also write every sweep's full posterior to OUT/posteriors/<id>.nc")
    b.add_argument("--retry-failed", action="store_true", help="fit sweeps recorded as failed again")
    b.add_argument("--warm-start", type=_nonneg_int, default=0, metavar="N",
                   help="time series and scans: fit runs of up to N consecutive sweeps of a file in order, each "
                        "started from the previous sweep's result (default 0: every sweep starts cold)")
    _add_physics_options(b)
    _add_fit_options(b)
    _add_circuit_options(b)


def _add_simulate_parser(sub):
    s = sub.add_parser("simulate", help="synthetic sweep(s) with the truth written beside them")
    s.add_argument("--out", type=Path, required=True, help="output file: .csv or .npz (truth goes to NAME.truth.json)")
    _add_physics_options(s)
    s.add_argument("--model", choices=["maxwellian", "bi-maxwellian"], default="maxwellian")
    s.add_argument("--n-e", type=_positive_float, default=1e16, help="electron density in m^-3 (default 1e16)")
    s.add_argument("--n-i", type=_positive_float, help="ion density in m^-3 (default n_e)")
    s.add_argument("--T-e", type=_positive_float, default=3.0, help="electron temperature in eV (cold group for bi-maxwellian)")
    s.add_argument("--T-hot", type=_positive_float, default=12.0, help="hot-group temperature in eV (bi-maxwellian)")
    s.add_argument("--hot-fraction", type=_probability, default=0.05, help="hot density / total (bi-maxwellian)")
    s.add_argument("--V-p", type=float, default=12.0, help="plasma potential in V (default 12)")
    s.add_argument("--v-min", type=float, help="sweep start in V (default V_p - 12 T_e - 20)")
    s.add_argument("--v-max", type=float, help="sweep end in V (default V_p + 3 T_e)")
    s.add_argument("--points", type=_nonneg_int, default=500, help="points per sweep (default 500)")
    s.add_argument("--noise-rel", type=float, default=0.01, help="noise sd as a fraction of |I| (default 0.01)")
    s.add_argument("--noise-floor", type=float, help="constant noise sd in A (default 1e-3 of I at V_p)")
    s.add_argument("--outliers", type=float, default=0.0, help="fraction of heavy-tailed outlier points")
    s.add_argument("--rf-amplitude", type=float, default=0.0, metavar="V",
                   help="amplitude of a sinusoidal plasma-potential oscillation in V (default 0: none)")
    s.add_argument("--series-resistance", type=float, default=0.0, metavar="OHM",
                   help="resistance in series with the probe in ohm (default 0: none)")
    s.add_argument("--leak-conductance", type=float, default=0.0, metavar="S",
                   help="leakage conductance in parallel with the probe in S (default 0)")
    s.add_argument("--current-offset", type=float, default=0.0, metavar="A",
                   help="constant current offset in A (default 0)")
    s.add_argument("--both-directions", action="store_true",
                   help="record the sweep with rising and then falling bias (a triangular sweep; the file "
                        "keeps the recorded order)")
    s.add_argument("--branch-shift", type=float, default=0.0, metavar="V",
                   help="voltage shift of the rising-bias branch relative to the falling one in V "
                        "(contamination layer; implies --both-directions; default 0)")
    s.add_argument("--displacement-current", type=float, default=0.0, metavar="A",
                   help="displacement current C dV/dt at the sweep rate in A, positive on the rising branch "
                        "(stray capacitance; implies --both-directions; default 0)")
    s.add_argument("--seed", type=_nonneg_int, default=0)


def build_parser() -> argparse.ArgumentParser:
    from ._version import __version__
    p = _Parser(prog="bayesprobe", description="Bayesian analysis of electrostatic (Langmuir) probe I-V sweeps.")
    p.add_argument("--version", action="version", version=f"bayesprobe {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    d = sub.add_parser("demo", help="fit the bundled synthetic demo scenario end to end")
    d.add_argument("--out", type=Path, default=Path("bayesprobe-demo"), help="output folder (default ./bayesprobe-demo)")
    d.add_argument("--seed", type=_nonneg_int, default=0)
    d.add_argument("--quiet", action="store_true")

    f = sub.add_parser("fit", help="one sweep file -> posterior, summary, figures")
    f.add_argument("sweep", type=Path, help="sweep file: .csv/.tsv/.txt with a header row, .npy or .npz")
    f.add_argument("--out", type=Path, required=True, help="output folder (nothing is half-written there)")
    _add_physics_options(f)
    _add_fit_options(f)
    _add_circuit_options(f)

    _add_batch_parser(sub)

    r = sub.add_parser("report", help="self-contained HTML report of a fit, demo or batch results folder")
    r.add_argument("results", type=Path, metavar="RESULTS_DIR",
                   help="a fit folder (summary.json), a folder of fit folders (bayesprobe demo output) "
                        "or a batch folder (results.csv, sweeps/)")
    r.add_argument("--out", type=Path, metavar="FILE",
                   help="HTML file to write (default RESULTS_DIR/report.html); written atomically")

    _add_simulate_parser(sub)
    return p


# ---------------------------------------------------------------------------- helpers

def _probe_from(args):
    from .physics.geometry import Probe
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
    from .fitting import make_config
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
    from . import fitting
    from .io import load_sweep

    sweep = load_sweep(args.sweep, voltage_column=args.voltage_column, current_column=args.current_column,
                       sign=args.sign)
    for note in sweep.notes:
        _say(args, f"note: {note}")
    opts = _fit_options(args, sweep)
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
    from .options import FitOptions
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
    from .checks import format_warning
    for w in warnings:
        if w["code"] in _PRINTED_ELSEWHERE or (w["level"] == "note" and args.quiet):
            continue
        print(format_warning(w), file=sys.stderr)


def cmd_simulate(args) -> int:
    from .io import atomic_write_text, write_sweep_csv
    from .simulate import simulate
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

        from .io import atomic_write_bytes
        buf = _io.BytesIO()
        v_rec, i_rec = sim.sweep.in_record_order()
        np.savez(buf, voltage=v_rec, current=i_rec)
        atomic_write_bytes(out, buf.getvalue())
    atomic_write_text(truth_path, json.dumps(sim.truth_record(), indent=2) + "\n")
    print(f"wrote {out} ({sim.sweep.n_points} points) and {truth_path}")
    return EXIT_OK


def cmd_batch(args) -> int:
    from .batch import fit_many
    from .inference.sampler import SamplerSettings

    config = _config_from(args)
    if args.distortions == "auto" or (args.distortions and "outliers" in args.distortions) \
            or args.student_t == "fit":
        raise InputError("batch models the distortions rf, resistance, leakage and hysteresis (--distortions); "
                         "auto and outliers are options of the fit command")
    priors, needed = _all_priors(args, None, plain=True)      # one circuit for every sweep of the batch
    distortions = tuple(args.distortions or ()) + tuple(n for n in needed if n not in (args.distortions or ()))
    if distortions:
        from .distortion_choice import apply_distortions
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
    from .report import build_report
    path = build_report(args.results, out=args.out)   # InputError (no results) -> one line, exit 2
    print(f"report written to {path}")
    return EXIT_OK


def cmd_demo(args) -> int:
    from .demo import run_demo
    return run_demo(args.out, seed=args.seed, quiet=args.quiet)


def main(argv=None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
        if args.command is None:
            parser.print_help()
            return EXIT_OK
        handler = {"fit": cmd_fit, "simulate": cmd_simulate, "demo": cmd_demo, "batch": cmd_batch, "report": cmd_report}[args.command]
        return handler(args)
    except InputError as exc:
        print(f"error: {' '.join(str(exc).split())}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("interrupted; nothing was written to the output folder", file=sys.stderr)
        return 130
    except Exception as exc:                      # a bug, not the user's fault: still one line
        if os.environ.get("BAYESPROBE_DEBUG"):
            raise
        print(f"error: unexpected {type(exc).__name__}: {' '.join(str(exc).split())} "
              "(set BAYESPROBE_DEBUG=1 for a traceback and please report it)", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
