"""Per-sweep probe settings: a CSV table mapping sweep ids to changes of the batch-wide ModelConfig.

The table is read by :func:`bayesprobe.io.read_delimited_table`, the project's one reader of
delimited text.  Compared with the earlier reader of this module: messages name the real line of
the file (``line N``, comment and blank lines counted) where they said ``row N``; the separator is
chosen from the header and the first row as for sweep files (tab, semicolon, comma, or runs of white
space); a trailing empty header name or field is ignored; a row with another number of fields than
the header, a table of nothing but comments, and binary content get the text reader's one-line
messages (``sweep table '...': line N has K fields but the header has M ...``, ``... holds no header
or data ...``, ``... is not a text file (it contains binary data) ...``).
"""
from __future__ import annotations

import math
import os
from pathlib import Path

from ..errors import InputError
from ..io import read_delimited_table
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

    The text is read by :func:`bayesprobe.io.read_delimited_table` (separator, quoting,
    blank and ``#`` comment lines as for sweep files); messages name the line of the file
    (``line N``, counting every line, comments and blank lines included).
    """
    where = f"sweep table {show(str(path), 120)}"
    header, rows = _read_table(path, where)
    out = {}
    for ln, row in rows:
        rec = dict(zip(header, row))
        sid = rec.pop("sweep_id")
        if not sid:
            raise fail(f"{where}: line {ln} has no sweep_id")
        if sid in out:
            raise fail(f"{where}: sweep {show(sid, 60)} appears twice")
        try:
            changes = _row_changes(rec, base_config, ln, where)
            out[sid] = base_config.with_(**changes) if changes else base_config
        except InputError:
            raise
        except (ValueError, KeyError, TypeError) as exc:
            raise fail(f"{where}: line {ln}: {one_line(exc, 200)}") from None
    return out


def _read_table(path, where: str):
    """(normalised header, [(line number, fields)]) of the table, after the size, text and column checks."""
    try:
        size = os.stat(path).st_size
    except OSError:
        raise fail(f"{where} cannot be opened; check the path") from None
    if size > MAX_TABLE_BYTES:
        raise fail(f"{where} is larger than {MAX_TABLE_BYTES >> 20} MiB")
    data = Path(path).read_bytes()
    try:
        data.decode("utf-8")
    except UnicodeDecodeError:
        raise fail(f"{where} is not UTF-8 text") from None
    # the row cap is checked below with this table's own message (every data row takes two bytes or more)
    table = read_delimited_table(data, where=where, max_rows=MAX_TABLE_BYTES, max_bytes=MAX_TABLE_BYTES,
                                 subject="sweep table")
    del data
    header = [h.strip().lower().replace(" ", "_").replace("-", "_") for h in table.header]
    if "sweep_id" not in header:
        raise fail(f"{where} needs a 'sweep_id' column")
    unknown = [h for h in header if h not in TABLE_COLUMNS and h != "sweep_id"]
    if unknown:
        raise fail(f"{where}: unknown column(s) {', '.join(show(u, 30) for u in unknown[:5])}; "
                   f"use sweep_id and any of {', '.join(TABLE_COLUMNS)}")
    if len(table) > MAX_TABLE_ROWS:
        raise fail(f"{where} has more than {MAX_TABLE_ROWS} rows")
    columns = table.strings(range(len(header)))
    return header, list(zip(table.line_numbers, zip(*columns)))


def _positive(rec: dict, name: str, ln: int, where: str):
    """The positive number in cell ``name`` (None when empty)."""
    v = rec.get(name, "")
    if v == "":
        return None
    try:
        x = float(v)
    except ValueError:
        raise fail(f"{where}: line {ln}: {name} {show(v, 30)} is not a number (SI units)") from None
    if not (math.isfinite(x) and x > 0):
        raise fail(f"{where}: line {ln}: {name} must be positive")
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
