"""Typed readers of the files bayesprobe writes: ``summary.json``, batch records, ``results.csv``.

Everything read here is untrusted: sizes are capped before reading, JSON must be an object,
and every block of a summary is checked against its documented type. A block of the wrong
type is dropped (and named in the returned problems) rather than passed on, so readers
downstream (the report, :meth:`bayesprobe.FitResult.load`, the batch tables) can rely on
the types below without checking them again:

=================  ==========================================================================
``summary.json``   schema ``bayesprobe.summary/1``
``schema``         str
``sweep_id``       str or None
``model``          str
``credible_level`` float in (0, 1) or None
``parameters``     {name: {"unit": str, "mean"/"sd"/"median"/"ci_low"/"ci_high": float or None}}
``diagnostics``, ``classical``, ``priors``, ``quantities``, ``model_settings``, ``likelihood``,
``map_estimate``, ``sweep``, ``sampler_settings``, ``versions``, ``correlations``,
``comparison``, ``distortions``: dict (the last two may be absent)
``parameter_order`` list of str
``warnings``       list of {"code": str, "level": str, "message": str, "hint": str, ...}
=================  ==========================================================================

A batch record (``sweeps/<id>.json``, schema ``bayesprobe.batch-sweep/1``) holds
``sweep_id``, ``label``, ``source``, ``index``, ``coords`` (dict), ``seed`` (int),
``status`` (``ok`` / ``not-converged`` / ``failed``), ``reason`` and ``summary`` (a
summary as above, or None). ``results.csv`` has the fixed columns :data:`RESULTS_FIXED`
(the first four, then the sweep coordinates, then the rest), then ``<name>_median``,
``<name>_ci_low``, ``<name>_ci_high`` for each reported quantity.
"""
from __future__ import annotations

import csv
import json
import math
from pathlib import Path

from .errors import InputError

__all__ = ["SchemaError", "SUMMARY_SCHEMA", "RECORD_SCHEMA", "RESULTS_FIXED", "RESULTS_STATS", "STATUSES",
           "MAX_JSON_BYTES", "read_json_object", "check_summary", "read_summary", "check_record",
           "read_record", "read_results_csv", "results_columns", "CsvRows"]

SUMMARY_SCHEMA = "bayesprobe.summary/1"
RECORD_SCHEMA = "bayesprobe.batch-sweep/1"
#: fixed columns of results.csv, in order (the sweep coordinates follow the first four)
RESULTS_FIXED = ("sweep_id", "label", "source", "index", "status", "reason", "model", "converged",
                 "credible_level", "seed", "n_points", "engine", "r_hat_max", "ess_bulk_min", "tau_max", "n_steps",
                 "n_draws", "khat")
#: per-quantity columns of results.csv: <name>_<stat>
RESULTS_STATS = ("median", "ci_low", "ci_high")
STATUSES = ("ok", "not-converged", "failed")
#: largest JSON file read (bytes)
MAX_JSON_BYTES = 16 << 20

_DICT_BLOCKS = ("diagnostics", "classical", "priors", "quantities", "model_settings", "likelihood",
                "map_estimate", "sweep", "sampler_settings", "versions", "correlations", "comparison",
                "distortions", "residuals")
_STAT_KEYS = ("mean", "sd", "median", "ci_low", "ci_high")


class SchemaError(InputError):
    """A results file that cannot be used (unreadable, too large, not the expected schema)."""


def _num_or_none(v):
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return None
    return float(v) if math.isfinite(v) else None


def read_json_object(path, *, max_bytes: int = MAX_JSON_BYTES) -> dict:
    """The JSON object in ``path``; :class:`SchemaError` (one line) if it is too large, unreadable
    or not an object."""
    path = Path(path)
    try:
        size = path.stat().st_size
        if size > max_bytes:
            raise SchemaError(f"{path} is {size} bytes, more than the {max_bytes} read")
        data = json.loads(path.read_text(encoding="utf-8"))
    except SchemaError:
        raise
    except (OSError, ValueError, RecursionError) as exc:
        raise SchemaError(f"{path} is unreadable ({type(exc).__name__})") from None
    if not isinstance(data, dict):
        raise SchemaError(f"{path} does not hold a JSON object")
    return data


def _parameters(block, problems: list) -> dict:
    out = {}
    for name, e in block.items():
        if not isinstance(e, dict):
            problems.append(f"parameters.{name} is not an object")
            continue
        entry = {"unit": e["unit"] if isinstance(e.get("unit"), str) else ""}
        entry.update({k: _num_or_none(e.get(k)) for k in _STAT_KEYS})
        out[str(name)] = entry
    return out


def _warnings(block, problems: list) -> list:
    out = []
    for w in block:
        if isinstance(w, dict) and all(isinstance(w.get(k), str) for k in ("code", "level", "message")):
            item = {"code": w["code"], "level": w["level"], "message": w["message"],
                    "hint": w["hint"] if isinstance(w.get("hint"), str) else ""}
            if isinstance(w.get("quantity"), str):
                item["quantity"] = w["quantity"]
            out.append(item)
        else:
            problems.append("a warnings entry lacks code, level or message")
    return out


def check_summary(data: dict) -> tuple[dict, list[str]]:
    """(summary with every block of its documented type, problems found).

    Blocks of the wrong type are left out and named in the problems; unknown keys are kept.
    Raises :class:`SchemaError` when ``data`` is not a summary at all (not an object, or
    another schema).
    """
    if not isinstance(data, dict):
        raise SchemaError("a summary must be a JSON object")
    schema = data.get("schema", SUMMARY_SCHEMA)
    if schema != SUMMARY_SCHEMA:
        raise SchemaError(f"schema {str(schema)[:80]!r} is not {SUMMARY_SCHEMA!r}")
    problems: list = []
    s = dict(data)
    for key in _DICT_BLOCKS:
        if key in s and not isinstance(s[key], dict):
            problems.append(f"{key} is not an object")
            del s[key]
    for key, kind in (("sweep_id", str), ("model", str), ("input", str)):
        if s.get(key) is not None and not isinstance(s[key], kind):
            problems.append(f"{key} is not text")
            s[key] = None if key == "sweep_id" else str(s[key])
    level = _num_or_none(s.get("credible_level"))
    s["credible_level"] = level if level is not None and 0 < level < 1 else None
    params = s.get("parameters")
    s["parameters"] = _parameters(params, problems) if isinstance(params, dict) else {}
    if params is not None and not isinstance(params, dict):
        problems.append("parameters is not an object")
    order = s.get("parameter_order")
    s["parameter_order"] = [x for x in order if isinstance(x, str)] if isinstance(order, list) else []
    warns = s.get("warnings")
    s["warnings"] = _warnings(warns, problems) if isinstance(warns, list) else []
    return s, problems


def read_summary(path, *, strict: bool = False, max_bytes: int = MAX_JSON_BYTES) -> dict:
    """A checked ``summary.json`` (see :func:`check_summary`); with ``strict`` any problem raises."""
    s, problems = check_summary(read_json_object(path, max_bytes=max_bytes))
    if strict and problems:
        raise SchemaError(f"{path}: " + "; ".join(problems[:5]))
    return s


def check_record(data: dict, *, strict: bool = True) -> tuple[dict, list[str]]:
    """(batch record with documented types, problems). ``strict``: the schema must be
    :data:`RECORD_SCHEMA` (else :class:`SchemaError`); otherwise a missing schema is accepted."""
    if not isinstance(data, dict):
        raise SchemaError("a batch record must be a JSON object")
    schema = data.get("schema")
    if schema != RECORD_SCHEMA and (strict or schema is not None):
        raise SchemaError(f"schema {str(schema)[:80]!r} is not {RECORD_SCHEMA!r}")
    problems: list = []
    rec = dict(data)
    summary = rec.get("summary")
    if isinstance(summary, dict):
        rec["summary"], more = check_summary(summary)
        problems += [f"summary.{p}" for p in more]
    else:
        rec["summary"] = None
    if rec.get("status") not in STATUSES:
        problems.append("status is not one of " + ", ".join(STATUSES))
        rec["status"] = None
    rec["coords"] = rec["coords"] if isinstance(rec.get("coords"), dict) else {}
    seed = rec.get("seed")
    rec["seed"] = seed if isinstance(seed, int) and not isinstance(seed, bool) else None
    for key in ("sweep_id", "label", "source", "reason"):
        v = rec.get(key)
        rec[key] = v if isinstance(v, str) else (None if v is None else str(v))
    return rec, problems


def read_record(path, *, strict: bool = True, max_bytes: int = MAX_JSON_BYTES) -> dict | None:
    """A checked batch record, or None when it is unreadable or not a record."""
    try:
        rec, _ = check_record(read_json_object(path, max_bytes=max_bytes), strict=strict)
    except SchemaError:
        return None
    return rec


def read_results_csv(path):
    """(header, generator of row dicts) of ``results.csv`` read as a stream.

    Raises :class:`SchemaError` when the file cannot be opened or has no header. The rows
    (a :class:`CsvRows`) stop at a malformed line and set ``malformed``; close them if they
    are not run to the end (that closes the file).
    """
    path = Path(path)
    try:
        fh = open(path, newline="", encoding="utf-8")
    except OSError as exc:
        raise SchemaError(f"{path} is unreadable ({type(exc).__name__})") from None
    reader = csv.reader(fh)
    try:
        header = next(reader)
    except (StopIteration, csv.Error, UnicodeError, OSError):
        fh.close()
        raise SchemaError(f"{path} is empty or not CSV") from None
    return header, CsvRows(fh, reader, header)


class CsvRows:
    """Iterator of row dicts; ``malformed`` is True if it stopped at a malformed line."""

    def __init__(self, fh, reader, header):
        self._fh, self._reader, self._header = fh, reader, header
        self.malformed = False

    def __iter__(self):
        with self._fh:
            try:
                for line in self._reader:
                    if line:
                        yield dict(zip(self._header, line))
            except (csv.Error, UnicodeError, OSError):
                self.malformed = True

    def close(self):
        self._fh.close()


def results_columns(header) -> dict:
    """Columns of ``results.csv`` by role: ``fixed``, ``coords`` and ``parameters`` (names
    that have a ``<name>_median`` column, in file order)."""
    stats = tuple(f"_{s}" for s in RESULTS_STATS)
    params = [h[: -len("_median")] for h in header if h.endswith("_median")]
    coords = [h for h in header if h not in RESULTS_FIXED and not h.endswith(stats)]
    return {"fixed": [h for h in header if h in RESULTS_FIXED], "coords": coords, "parameters": params}
