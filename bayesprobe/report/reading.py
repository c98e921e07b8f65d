"""What a results folder holds: fit folders, a folder of them, or a batch folder.

All files are read through :mod:`bayesprobe.schema`, so every summary block has its
documented type here; a file that cannot be read is recorded as a problem (and left out),
not raised, except when the folder holds no results at all.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputError
from ..schema import (SchemaError, check_record, check_summary, read_json_object, read_results_csv)
from .formatting import _natural_key

#: rows of a batch table shown (all rows are counted for the warnings)
MAX_TABLE_ROWS = 2000
#: sweeps given a section of their own (fit folders or batch records)
MAX_SECTIONS = 100
#: rows of demo_table.csv read
MAX_DEMO_ROWS = 10_000
#: batch rows with a problem kept for the warnings
MAX_PROBLEM_ROWS = 10_000


@dataclass
class _Sweep:
    """One fit: a fit folder or one batch record."""

    label: str
    source: str                       # the file its numbers come from (relative path, for the reader)
    summary: dict | None              # checked by bayesprobe.schema
    status: str                       # ok | not-converged | failed
    reason: str = ""
    folder: Path | None = None        # where its figures are (fit folders)
    coords: dict = field(default_factory=dict)
    seed: object = None               # batch: the sweep's own seed from its record
    given_label: str | None = None    # batch: the id as given in the input, when the file id differs


@dataclass
class _Results:
    kind: str                         # fit | collection | batch
    root: Path
    sweeps: list = field(default_factory=list)
    n_sweeps: int = 0                 # all sweeps (batch: every row), even those without a section
    problems: list = field(default_factory=list)     # unreadable files: (sweep label or '', message)
    files: list = field(default_factory=list)        # files read, relative to root
    demo_rows: list = field(default_factory=list)    # demo_table.csv rows (dicts)
    batch_header: list = field(default_factory=list)
    batch_rows: list = field(default_factory=list)   # results.csv rows (dicts), at most MAX_TABLE_ROWS
    batch_counts: dict = field(default_factory=dict)
    batch_problem_rows: list = field(default_factory=list)   # (sweep_id, status, reason), capped
    truncated_sections: int = 0


def _rel(path: Path, root: Path) -> str:
    try:
        return str(path.relative_to(root))
    except ValueError:
        return str(path)


def _read_object(path: Path, res: _Results, label: str = ""):
    """The JSON object in ``path``, or None with the reason recorded in ``res.problems``."""
    try:
        data = read_json_object(path)
    except SchemaError as exc:
        text = str(exc).replace(str(path), _rel(path, res.root), 1)
        res.problems.append((label, f"{text}; it is left out"))
        return None
    res.files.append(_rel(path, res.root))
    return data


def _status_of(summary: dict) -> str:
    return "ok" if summary.get("diagnostics", {}).get("converged") is True else "not-converged"


def _fit_sweep(folder: Path, res: _Results, fallback_label: str) -> _Sweep | None:
    data = _read_object(folder / "summary.json", res, fallback_label)
    if data is None:
        return None
    try:
        summary, _ = check_summary(data)
    except SchemaError as exc:
        res.problems.append((fallback_label, f"{_rel(folder / 'summary.json', res.root)}: {exc}; it is left out"))
        return None
    label = summary.get("sweep_id") or fallback_label
    return _Sweep(label=label, source=_rel(folder / "summary.json", res.root), summary=summary,
                  status=_status_of(summary), folder=folder)


def _read_csv(path: Path, res: _Results):
    """(header, rows) of a CSV read as a stream (see :func:`bayesprobe.schema.read_results_csv`),
    or (None, None) with the reason recorded."""
    try:
        header, rows = read_results_csv(path)
    except SchemaError:
        res.problems.append(("", f"{_rel(path, res.root)} is unreadable, empty or not CSV; it is left out"))
        return None, None
    res.files.append(_rel(path, res.root))
    return header, rows


def _csv_malformed(rows, path: Path, res: _Results):
    if rows.malformed:
        res.problems.append(("", f"{_rel(path, res.root)} has a malformed line; the rest is left out"))


def _record_sweep(path: Path, res: _Results) -> _Sweep:
    data = _read_object(path, res, path.stem)
    rec = None
    if isinstance(data, dict) and "summary" not in data and isinstance(data.get("parameters"), dict):
        data = {"summary": data, "sweep_id": data.get("sweep_id")}     # a bare summary as its own record
    if data is not None:
        try:
            rec, _ = check_record(data, strict=False)
        except SchemaError as exc:
            res.problems.append((path.stem, f"{_rel(path, res.root)}: {exc}; it is left out"))
    if rec is None:
        return _Sweep(label=path.stem, source=_rel(path, res.root), summary=None, status="failed",
                      reason="the record of this sweep is unreadable")
    summary = rec["summary"]
    status = rec["status"] or (_status_of(summary) if summary else "failed")
    sid = rec["sweep_id"] or path.stem
    given = rec["label"]
    return _Sweep(label=sid, source=_rel(path, res.root), summary=summary, status=status,
                  reason=rec["reason"] or "", coords=rec["coords"], seed=rec["seed"],
                  given_label=given if given not in (None, "", sid) else None)


def find_results(results_dir) -> _Results:
    """Read what a results folder holds (no figures decoded yet).

    Raises :class:`~bayesprobe.errors.InputError` if the folder holds no results.
    """
    root = Path(results_dir)
    if not root.is_dir():
        raise InputError(f"results folder {str(root)!r} does not exist or is not a folder")
    if (root / "summary.json").is_file():
        res = _Results("fit", root)
        sw = _fit_sweep(root, res, root.name)
        if sw is None:
            raise InputError(f"{str(root / 'summary.json')!r} is unreadable; "
                             f"{res.problems[0][1] if res.problems else ''}")
        res.sweeps.append(sw)
        res.n_sweeps = 1
        return res
    if (root / "results.csv").is_file() or (root / "sweeps").is_dir():
        res = _Results("batch", root)
        _read_batch(res)
        if res.n_sweeps == 0 and not res.sweeps:
            raise InputError(f"batch folder {str(root)!r} holds no sweep results yet "
                             "(results.csv and sweeps/*.json are missing or empty)")
        return res
    return _read_collection(root)


def _read_collection(root: Path) -> _Results:
    subs = sorted((p for p in root.iterdir() if p.is_dir() and not p.name.startswith(".")
                   and (p / "summary.json").is_file()), key=lambda p: _natural_key(p.name))
    if not subs:
        raise InputError(f"{str(root)!r} holds no bayesprobe results: expected summary.json, sub-folders "
                         "with summary.json, or a batch's results.csv / sweeps/*.json")
    res = _Results("collection", root)
    res.n_sweeps = len(subs)
    for p in subs[:MAX_SECTIONS]:
        sw = _fit_sweep(p, res, p.name)
        if sw is not None:
            res.sweeps.append(sw)
    res.truncated_sections = max(0, len(subs) - MAX_SECTIONS)
    if not res.sweeps:
        raise InputError(f"no readable summary.json in the sub-folders of {str(root)!r}")
    if (root / "demo_table.csv").is_file():
        header, rows = _read_csv(root / "demo_table.csv", res)
        if header is not None:
            res.demo_rows = [r for _, r in zip(range(MAX_DEMO_ROWS), rows)]
            rows.close()
            _csv_malformed(rows, root / "demo_table.csv", res)
    return res


def _read_batch_table(res: _Results, counts: dict) -> None:
    path = res.root / "results.csv"
    header, rows = _read_csv(path, res)
    if header is None:
        return
    res.batch_header = header
    for row in rows:
        res.n_sweeps += 1
        st = row.get("status", "")
        counts[st if st in counts else "other"] += 1
        if len(res.batch_rows) < MAX_TABLE_ROWS:
            res.batch_rows.append(row)
        if st != "ok" and len(res.batch_problem_rows) < MAX_PROBLEM_ROWS:
            res.batch_problem_rows.append((row.get("sweep_id", ""), st, row.get("reason", "")))
    _csv_malformed(rows, path, res)


def _read_batch(res: _Results):
    root = res.root
    counts = {"ok": 0, "not-converged": 0, "failed": 0, "other": 0}
    if (root / "results.csv").is_file():
        _read_batch_table(res, counts)
    records = []
    if (root / "sweeps").is_dir():
        records = sorted((p for p in (root / "sweeps").iterdir() if p.suffix == ".json"
                          and not p.name.startswith(".") and p.is_file()), key=lambda p: _natural_key(p.stem))
    if not res.batch_header:          # no table: the records are all there is
        res.n_sweeps = len(records)
    for p in records[:MAX_SECTIONS]:
        sw = _record_sweep(p, res)
        res.sweeps.append(sw)
        if not res.batch_header:
            counts[sw.status if sw.status in counts else "other"] += 1
            if sw.status != "ok":
                res.batch_problem_rows.append((sw.label, sw.status, sw.reason))
    if not res.batch_header and len(records) > MAX_SECTIONS:
        counts["other"] += len(records) - MAX_SECTIONS
    res.truncated_sections = max(0, len(records) - MAX_SECTIONS)
    res.batch_counts = counts
