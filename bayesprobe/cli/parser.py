"""The command line's parsers: ``bayesprobe {demo,fit,simulate,batch,report}`` and their options
(no numerical import here: ``--help`` stays fast)."""
from __future__ import annotations

import argparse
from pathlib import Path

from ..errors import InputError
from .arguments import (_AREA_UNITS, _LENGTH_UNITS, _distortion_choice, _nonneg_int, _nu_choice, _positive_float,
                        _positive_int, _probability, _quantity, _resistance_with_sd)


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
    from .._version import __version__
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
