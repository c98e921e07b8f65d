"""FitResult: the posterior of one sweep, its summary, and how it writes itself."""
from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .quantities import QUANTITIES, describe, main_names, unit_of
from .model import ModelConfig
from .schema import SUMMARY_SCHEMA

__all__ = ["FitResult", "summarise_draws", "SUMMARY_SCHEMA", "MAIN_PARAMETERS", "FIT_FILES"]

#: the files :meth:`FitResult.save` writes (figures besides: fit, corner, trace, eedf .png)
FIT_FILES = ("summary.json", "parameters.csv", "posterior.nc")
#: the parameters every summary reports first (registry order, bayesprobe.quantities)
MAIN_PARAMETERS = main_names()


def summarise_draws(x: np.ndarray, credible_level: float) -> dict:
    """mean, sd, median and the equal-tailed credible interval of 1-D draws."""
    x = np.asarray(x, float).ravel()
    x = x[np.isfinite(x)]
    if x.size == 0:
        return {"mean": None, "sd": None, "median": None, "ci_low": None, "ci_high": None}
    tail = 0.5 * (1.0 - credible_level)
    lo, med, hi = np.quantile(x, [tail, 0.5, 1.0 - tail])
    return {"mean": float(np.mean(x)), "sd": float(np.std(x, ddof=1)) if x.size > 1 else 0.0,
            "median": float(med), "ci_low": float(lo), "ci_high": float(hi)}


def _clean(obj):
    """JSON-safe copy: numpy scalars to Python, NaN/inf to None."""
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _clean(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        v = float(obj)
        return v if np.isfinite(v) else None
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


@dataclass
class FitResult:
    """Posterior of one sweep under one electron model.

    Attributes
    ----------
    draws : dict name -> ndarray (chain, draw)
        Physical-unit posterior draws of fitted and derived quantities.
    units : dict name -> unit string
    parameter_order : tuple of the fitted parameter names (sampler order)
    idata : arviz.InferenceData
        posterior, sample_stats, log_likelihood, observed_data, posterior_predictive; built on
        first use from ``idata_builder`` when the fit supplied one instead.
    branches : (direction, ramp) or None
        Per-point sweep direction and relative sweep rate of a sweep recorded both ways
        (:attr:`bayesprobe.Sweep.branches`), in the order of ``voltage``.
    """

    model: str
    config: ModelConfig
    voltage: np.ndarray
    current: np.ndarray
    draws: dict
    units: dict
    parameter_order: tuple
    priors: dict
    diagnostics: dict
    classical: dict
    credible_level: float = 0.9
    _idata: object = field(default=None, repr=False)
    sweep_info: dict = field(default_factory=dict)
    map_estimate: dict = field(default_factory=dict)
    comparison: dict | None = None
    alternatives: dict = field(default_factory=dict)
    student_nu: float | None = None
    seed: int | None = None
    settings: dict = field(default_factory=dict)
    distortions: dict | None = None
    branches: tuple | None = None
    idata_builder: object = field(default=None, repr=False, compare=False)
    versions: dict | None = field(default=None, repr=False)    # set by load(): the versions that wrote it

    def __getstate__(self):
        # the lazy InferenceData builder is a closure over the fit: build it so the result pickles
        state = dict(self.__dict__)
        if state.get("idata_builder") is not None:
            state["_idata"] = self.idata
            state["idata_builder"] = None
        return state

    @property
    def idata(self):
        if self._idata is None and self.idata_builder is not None:
            self._idata = self.idata_builder()
            self.idata_builder = None
        return self._idata

    @idata.setter
    def idata(self, value):
        self._idata = value
        self.idata_builder = None

    # ------------------------------------------------------------------ numbers
    @property
    def converged(self) -> bool:
        return bool(self.diagnostics.get("converged", False))

    def parameter_summary(self, credible_level: float | None = None) -> dict:
        level = self.credible_level if credible_level is None else credible_level
        out = {}
        order = [n for n in MAIN_PARAMETERS if n in self.draws]
        order += [n for n in self.parameter_order if n not in order]
        order += [n for n in self.draws if n not in order]
        for name in order:
            entry = {"unit": self.units.get(name, "")}
            entry.update(summarise_draws(self.draws[name], level))
            out[name] = entry
        return out

    def correlations(self) -> dict:
        names = [n for n in main_names(self.draws) if QUANTITIES[n].fitted or n == "V_f"]
        X = np.vstack([np.log(self.draws[n].ravel()) if self.units.get(n) in ("m^-3", "eV", "1")
                       and np.all(self.draws[n] > 0) else self.draws[n].ravel() for n in names])
        good = np.all(np.isfinite(X), axis=0)
        C = np.corrcoef(X[:, good]) if good.sum() > 2 else np.full((len(names), len(names)), np.nan)
        return {a: {b: float(C[i, j]) for j, b in enumerate(names) if j != i} for i, a in enumerate(names)}

    def summary(self) -> dict:
        """The contract's ``summary.json`` content as a dict."""
        from ._version import __version__
        s = {
            "schema": SUMMARY_SCHEMA,
            "input": self.sweep_info.get("source", "array"),
            "sweep_id": self.sweep_info.get("sweep_id"),
            "model": self.model,
            "credible_level": self.credible_level,
            "parameters": self.parameter_summary(),
            "correlations": self.correlations(),
            "correlations_note": "Pearson correlations of the posterior draws; densities and "
                                 "temperatures in log space",
            "diagnostics": self.diagnostics,
            "classical": self.classical,
            "parameter_order": list(self.parameter_order),
            "quantities": describe(self.draws),
            "residuals": self.residuals(),
            "priors": self.priors,
            "model_settings": self.config.to_dict(),
            "likelihood": {"kind": "gaussian" if self.student_nu is None else "student-t",
                           "nu_fitted": self.student_nu == "fit",
                           "student_nu": self.student_nu,
                           "noise_model": "sd^2 = sigma_floor^2 + (sigma_rel * I_model)^2"},
            "map_estimate": self.map_estimate,
            "sweep": {k: v for k, v in self.sweep_info.items() if k != "source"},
            "seed": self.seed,
            "sampler_settings": self.settings,
            "versions": self.versions if self.versions is not None else _versions(__version__),
        }
        if self.comparison is not None:
            s["comparison"] = self.comparison
        if self.distortions is not None:
            s["distortions"] = self.distortions
        s = _clean(s)
        from .checks import summary_warnings
        s["warnings"] = summary_warnings(s)
        return s

    def residuals(self) -> dict | None:
        """Residual diagnostics at the posterior maximum (lag-1 autocorrelation of the standardised
        residuals, :func:`bayesprobe.inference.residuals.residual_diagnostics`); None when the
        maximum is not available."""
        from .inference.residuals import residual_diagnostics
        from .model import probe_current
        m = self.map_estimate or {}
        if not all(k in m for k in ("sigma_floor", "sigma_rel")):
            return None
        try:
            with np.errstate(all="ignore"):
                mu = probe_current(self.voltage, m, self.config, branches=self.branches, validate=False)
        except (ValueError, KeyError):
            return None
        sd = np.sqrt(m["sigma_floor"] ** 2 + (m["sigma_rel"] * mu) ** 2)
        return residual_diagnostics(self.current, mu, sd, None if self.branches is None else self.branches[0])

    def warnings(self) -> list[dict]:
        """Scientific warnings about this fit (code, level, one-line message, hint; see
        :mod:`bayesprobe.checks`); the same list is in ``summary.json`` under ``warnings``."""
        return self.summary()["warnings"]

    def to_json(self, path=None) -> str:
        text = json.dumps(self.summary(), indent=2, allow_nan=False)
        if path is not None:
            from .io import atomic_write_text
            atomic_write_text(path, text + "\n")
        return text

    def to_netcdf(self, path):
        """Write the full InferenceData (atomically)."""
        from .io import atomic_path
        path = Path(path)
        with atomic_path(path) as tmp:
            self.idata.to_netcdf(str(tmp))
        return path

    def parameters_csv_rows(self):
        """(header, rows) of ``parameters.csv``: one row per quantity with its summary."""
        header = ("parameter", "unit", "mean", "sd", "median", "ci_low", "ci_high", "credible_level", "classical")
        rows = []
        for name, e in self.parameter_summary().items():
            c = self.classical.get(name) if isinstance(self.classical, dict) else None
            rows.append([name, e["unit"]] + [None if e[k] is None else float(e[k])
                                             for k in ("mean", "sd", "median", "ci_low", "ci_high")]
                        + [float(self.credible_level), None if c in ("", None) else float(c)])
        return header, rows

    def save(self, folder, *, figures: bool = True):
        """Write the fit's folder: summary.json, parameters.csv, posterior.nc and (``figures``)
        fit.png, corner.png, trace.png, eedf.png. All or nothing: the files are staged beside
        ``folder`` and moved in only when every one is written. Returns the folder's path."""
        from .io import staged_output_dir, write_csv
        folder = Path(folder)
        with staged_output_dir(folder) as tmp:
            self.to_json(tmp / "summary.json")
            write_csv(tmp / "parameters.csv", *self.parameters_csv_rows())
            self.to_netcdf(tmp / "posterior.nc")
            if figures:
                from .plots import save_figures
                save_figures(self, tmp)
        return folder

    @classmethod
    def load(cls, folder) -> "FitResult":
        """Read a fit folder written by :meth:`save` (summary.json and posterior.nc) back.

        The result gives the same :meth:`summary`, :meth:`table`, :meth:`warnings` and figures
        as the one that was saved; the alternatives of a model comparison are not stored (their
        comparison numbers are, in ``comparison``). Raises :class:`~bayesprobe.errors.InputError`
        if a file is missing or not a bayesprobe result.
        """
        return _load_fit_folder(cls, Path(folder))

    # ------------------------------------------------------------------ figures
    def plot_fit(self, **kwargs):
        from .plots import plot_fit
        return plot_fit(self, **kwargs)

    def plot_corner(self, **kwargs):
        from .plots import plot_corner
        return plot_corner(self, **kwargs)

    def plot_trace(self, **kwargs):
        from .plots import plot_trace
        return plot_trace(self, **kwargs)

    def plot_eedf(self, **kwargs):
        from .plots import plot_eedf
        return plot_eedf(self, **kwargs)

    def eedf(self, **kwargs) -> dict:
        """The fitted distribution's EEDF/EEPF with its credible band (see :func:`bayesprobe.eedf.model_eedf`)."""
        from .eedf import model_eedf
        return model_eedf(self, **kwargs)

    def table(self) -> str:
        """A compact text table: parameter, median, credible interval, classical value."""
        rows = [f"{'parameter':<14}{'unit':<7}{'median':>12}{'ci_low':>12}{'ci_high':>12}{'classical':>12}"]
        ps = self.parameter_summary()
        names = [n for n in ("T_e", "T_e_cold", "T_e_hot", "hot_fraction", "T_e_eff", "n_e", "n_i", "V_f", "V_p")
                 if n in ps]
        for n in names:
            e = ps[n]
            c = self.classical.get(n) if isinstance(self.classical, dict) else None
            rows.append(f"{n:<14}{e['unit']:<7}{_fmt(e['median']):>12}{_fmt(e['ci_low']):>12}"
                        f"{_fmt(e['ci_high']):>12}{_fmt(c):>12}")
        return "\n".join(rows)


def _read_posterior(path: Path):
    """The InferenceData of posterior.nc, read into memory (the file is closed afterwards)."""
    from .errors import InputError
    from .inference.arviz_adapter import load_inference_data
    if not path.is_file():
        raise InputError(f"{str(path)!r} is missing; a fit folder holds summary.json and posterior.nc")
    try:
        idata = load_inference_data(path)
        for group in idata.groups():
            ds = getattr(idata, group)
            ds.load()
            ds.close()
    except (OSError, ValueError, KeyError) as exc:
        raise InputError(f"{str(path)!r} is not a readable posterior ({type(exc).__name__})") from None
    return idata


def _load_fit_folder(cls, folder: Path) -> "FitResult":
    from .errors import InputError
    from .schema import read_summary
    s = read_summary(folder / "summary.json", strict=True)
    idata = _read_posterior(folder / "posterior.nc")
    post = idata.posterior
    order = list(s["parameters"]) + [n for n in post.data_vars if n not in s["parameters"]]
    draws = {n: np.asarray(post[n].values) for n in order if n in post.data_vars}
    if not draws or "observed_data" not in idata.groups() or "constant_data" not in idata.groups():
        raise InputError(f"{str(folder / 'posterior.nc')!r} lacks the posterior draws or the sweep")
    const = idata.constant_data
    branches = None
    if "direction" in const.data_vars and "ramp" in const.data_vars:
        branches = (np.asarray(const["direction"].values), np.asarray(const["ramp"].values))
    lik = s.get("likelihood", {})
    try:
        config = ModelConfig.from_dict(s["model_settings"])
    except (KeyError, TypeError, ValueError) as exc:
        raise InputError(f"{str(folder / 'summary.json')!r}: model_settings unusable ({exc})") from None
    return cls(model=s["model"], config=config, voltage=np.asarray(const["voltage"].values),
               current=np.asarray(idata.observed_data["current"].values), draws=draws,
               units={n: e["unit"] for n, e in s["parameters"].items()},
               parameter_order=tuple(s["parameter_order"]), priors=s.get("priors", {}),
               diagnostics=s.get("diagnostics", {}), classical=s.get("classical", {}),
               credible_level=s["credible_level"], _idata=idata,
               sweep_info={"source": s.get("input"), **s.get("sweep", {})},
               map_estimate=s.get("map_estimate", {}), comparison=s.get("comparison"),
               student_nu=lik.get("student_nu"), seed=s.get("seed"), settings=s.get("sampler_settings", {}),
               distortions=s.get("distortions"), branches=branches, versions=s.get("versions"))


def _fmt(v):
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return "-"
    return f"{v:.4g}"


def _versions(own):
    import platform
    import sys

    import emcee
    import scipy
    out = {"bayesprobe": own, "python": sys.version.split()[0], "numpy": np.__version__,
           "scipy": scipy.__version__, "emcee": emcee.__version__, "platform": platform.platform()}
    try:
        from .inference.arviz_adapter import az
        out["arviz"] = az.__version__
    except Exception:  # pragma: no cover
        pass
    return out


def units_for(names, parameters) -> dict:
    units = {p.name: p.unit for p in parameters}
    for n in names:
        if n not in units and unit_of(n):
            units[n] = unit_of(n)
    return units
