"""Per-sweep probe settings: a CSV table mapping sweep ids to changes of the batch-wide ModelConfig."""
from __future__ import annotations

import csv
import math
import os
from pathlib import Path

from ..errors import InputError
from ._messages import fail, one_line, show

#: largest per-sweep settings table (bytes, rows)
MAX_TABLE_BYTES, MAX_TABLE_ROWS = 16 << 20, 200_000
#: the columns a settings table may have besides ``sweep_id``
TABLE_COLUMNS = ("geometry", "radius", "length", "area", "ion", "ion_mass", "ion_collection", "ion_temperature")
_PROBE_COLUMNS = ("geometry", "radius", "length", "area")


def load_sweep_table(path, base_config) -> dict:
    """Per-sweep probe settings from a CSV table: ``{sweep id: ModelConfig}``.

    The table has a header with ``sweep_id`` and any of ``geometry``, ``radius``,
    ``length``, ``area`` (SI: m, m^2), ``ion``, ``ion_mass`` (u), ``ion_collection``
    and ``ion_temperature`` (eV). Empty cells keep the batch-wide value. Rows match
    a sweep by the id given in the input or by its file id.
    """
    where = show(str(path), 120)
    header, rows = _read_table(path, where)
    out = {}
    for ln, row in enumerate(rows, start=2):
        if len(row) != len(header):
            raise fail(f"sweep table {where}: row {ln} has {len(row)} fields, the header {len(header)}")
        rec = {h: v.strip() for h, v in zip(header, row)}
        sid = rec.pop("sweep_id")
        if not sid:
            raise fail(f"sweep table {where}: row {ln} has no sweep_id")
        if sid in out:
            raise fail(f"sweep table {where}: sweep {show(sid, 60)} appears twice")
        try:
            changes = _row_changes(rec, base_config, ln, where)
            out[sid] = base_config.with_(**changes) if changes else base_config
        except InputError:
            raise
        except (ValueError, KeyError, TypeError) as exc:
            raise fail(f"sweep table {where}: row {ln}: {one_line(exc, 200)}") from None
    return out


def _read_table(path, where: str):
    """(normalised header, data rows) of the table, after the size, text and column checks."""
    try:
        size = os.stat(path).st_size
    except OSError:
        raise fail(f"sweep table {where} cannot be opened; check the path") from None
    if size > MAX_TABLE_BYTES:
        raise fail(f"sweep table {where} is larger than {MAX_TABLE_BYTES >> 20} MiB")
    data = Path(path).read_bytes()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise fail(f"sweep table {where} is not UTF-8 text") from None
    if "\x00" in text:
        raise fail(f"sweep table {where} is not a text file")
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise fail(f"sweep table {where} is empty")
    delim = "\t" if "\t" in lines[0] else (";" if ";" in lines[0] and "," not in lines[0] else ",")
    rows = list(csv.reader(lines, delimiter=delim))
    header = [h.strip().lower().replace(" ", "_").replace("-", "_") for h in rows[0]]
    if "sweep_id" not in header:
        raise fail(f"sweep table {where} needs a 'sweep_id' column")
    unknown = [h for h in header if h not in TABLE_COLUMNS and h != "sweep_id"]
    if unknown:
        raise fail(f"sweep table {where}: unknown column(s) {', '.join(show(u, 30) for u in unknown[:5])}; "
                   f"use sweep_id and any of {', '.join(TABLE_COLUMNS)}")
    if len(rows) - 1 > MAX_TABLE_ROWS:
        raise fail(f"sweep table {where} has more than {MAX_TABLE_ROWS} rows")
    return header, rows[1:]


def _positive(rec: dict, name: str, ln: int, where: str):
    """The positive number in cell ``name`` (None when empty)."""
    v = rec.get(name, "")
    if v == "":
        return None
    try:
        x = float(v)
    except ValueError:
        raise fail(f"sweep table {where}: row {ln}: {name} {show(v, 30)} is not a number (SI units)") from None
    if not (math.isfinite(x) and x > 0):
        raise fail(f"sweep table {where}: row {ln}: {name} must be positive")
    return x


def _row_changes(rec: dict, base_config, ln: int, where: str) -> dict:
    """The ``ModelConfig.with_`` changes of one row."""
    changes = {}
    if any(rec.get(k, "") for k in _PROBE_COLUMNS):
        changes["probe"] = _row_probe(rec, base_config.probe, ln, where)
    if rec.get("ion_mass"):
        changes["ion"] = _positive(rec, "ion_mass", ln, where)
    elif rec.get("ion"):
        changes["ion"] = rec["ion"]
    if rec.get("ion_collection"):
        changes["ion_collection"] = rec["ion_collection"]
    if rec.get("ion_temperature"):
        changes["T_i"] = _positive(rec, "ion_temperature", ln, where)
    return changes


def _row_probe(rec: dict, p, ln: int, where: str):
    """The probe of one row: the batch-wide probe ``p`` with the row's geometry and sizes."""
    from ..physics.geometry import Probe
    geometry = rec.get("geometry", "") or p.geometry
    same = geometry == p.geometry
    radius, length, area = (_positive(rec, k, ln, where) for k in ("radius", "length", "area"))
    if same:   # unchanged shape: inherit the sizes not given
        radius = radius if radius is not None else p.radius
        length = length if length is not None else p.length
        area = area if area is not None else p.area_override
    return Probe(geometry, radius=radius, length=length if geometry == "cylindrical" else None, area=area,
                 end_cap=p.end_cap and same and geometry == "cylindrical")
