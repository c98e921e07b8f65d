"""The batch's result tables from its per-sweep records: ``results.csv`` (one row per sweep) and
``results.nc`` (the same as an xarray Dataset with a ``sweep`` dimension), both written atomically
through :mod:`bayesprobe.io`; and ``profiles.png`` (:mod:`.profiles`)."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..io import atomic_path, write_csv
from .columns import FIXED, FLOAT_COLS, INT_COLS, STATS, Columns, read_columns
from .profiles import plot_profiles
from ..schema import STATUSES

RESULTS_SCHEMA = "bayesprobe.batch-results/1"
_DESCRIPTION = {"median": "posterior median", "ci_low": "credible interval low", "ci_high": "credible interval high"}


def assemble_results(out_dir, *, figures: bool = True) -> dict:
    """Write ``results.csv``, ``results.nc`` (and ``profiles.png``) from the per-sweep records.

    Rows are sorted by sweep id (natural order); the same records give the same bytes.
    Returns counts by status.
    """
    out = Path(out_dir)
    cols = read_columns(out)
    params = cols.parameters()
    coord_cols = _coordinate_columns(cols, params)
    _write_csv_table(out / "results.csv", cols, params, coord_cols)
    _write_netcdf_table(out / "results.nc", cols, params, coord_cols)
    if figures and cols.n:
        plot_profiles(cols, params, out / "profiles.png")
    return _status_counts(cols)


def _coordinate_columns(cols: Columns, params) -> dict:
    """Coordinate name -> its column name (``coord_<name>`` where it would clash with another column)."""
    reserved = set(FIXED) | {f"{p}_{st}" for p in params for st in STATS} | set(params)
    return {c: (f"coord_{c}" if c in reserved else c) for c in sorted(cols.coords)}


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return repr(v) if math.isfinite(v) else ""
    return str(v)


def _write_csv_table(path: Path, cols: Columns, params, coord_cols: dict):
    header = list(FIXED[:4]) + list(coord_cols.values()) + list(FIXED[4:])
    header += [f"{p}_{st}" for p in params for st in STATS]

    def rows():
        for j in range(cols.n):
            line = [_cell(cols.value(k, j)) for k in FIXED[:4]]
            line += [_cell(cols.coords[c][j]) for c in coord_cols]
            line += [_cell(cols.value(k, j)) for k in FIXED[4:]]
            line += [_cell(cols.params[(p, st)][j]) for p in params for st in STATS]
            yield line

    write_csv(path, header, rows())


def _write_netcdf_table(path: Path, cols: Columns, params, coord_cols: dict):
    import xarray as xr

    def strings(k):
        return ("sweep", np.array(cols.s[k], dtype=object) if cols.n else np.array([], dtype=object))

    ds_coords = {"sweep": strings("sweep_id"), "label": strings("label"), "source": strings("source"),
                 "index": ("sweep", cols.np(cols.i["index"]), {"missing": -1})}
    for c, name in coord_cols.items():
        ds_coords[name] = ("sweep", cols.np(cols.coords[c]))
    data = {"status": strings("status"), "reason": strings("reason"), "model": strings("model"),
            "engine": strings("engine"),
            "converged": ("sweep", cols.np(cols.converged),
                          {"flag_values": "-1 0 1", "flag_meanings": "not_fitted no yes"})}
    for k in FLOAT_COLS:
        data[k] = ("sweep", cols.np(cols.f[k]))
    for k in INT_COLS[1:]:
        data[k] = ("sweep", cols.np(cols.i[k]), {"missing": -1})
    data["seed"] = ("sweep", cols.np(cols.seed))
    for p in params:
        for st in STATS:
            attrs = {"units": cols.units.get(p, ""), "description": _DESCRIPTION[st]}
            data[p if st == "median" else f"{p}_{st}"] = ("sweep", cols.np(cols.params[(p, st)]), attrs)
    ds = xr.Dataset(data, coords=ds_coords,
                    attrs={"schema": RESULTS_SCHEMA, "title": "bayesprobe batch results",
                           "credible_intervals": "equal-tailed, probability in credible_level"})
    with atomic_path(path) as tmp:
        ds.to_netcdf(tmp, engine="h5netcdf")


def _status_counts(cols: Columns) -> dict:
    status = cols.s["status"]
    stats = {st: sum(1 for x in status if x == st) for st in STATUSES}
    stats["n_sweeps"] = cols.n
    stats["failed_list"] = [(cols.s["sweep_id"][j], cols.s["reason"][j]) for j in range(cols.n)
                            if status[j] == "failed"][:1000]
    return stats
