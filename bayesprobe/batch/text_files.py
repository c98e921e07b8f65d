"""Multi-sweep text tables: a header with a sweep-id column, each sweep's rows together.

The file is read by the project's one reader of delimited text,
:func:`bayesprobe.io.read_delimited_table` (decoding, separator, quoting, missing-value markers,
numbers); this module only finds the columns in its header, walks the rows to delimit the sweeps by
their id, and parses each sweep's voltage and current on its own, so a problem in a row spoils its
own sweep only. Other columns whose value is one number throughout a sweep become its coordinates.
A table without a sweep-id column goes to the ordinary reader (:func:`bayesprobe.io.load_sweep`).

Differences from the earlier line-by-line reader of this module (deliberate, to read multi-sweep
files exactly as single-sweep ones):

* decimal commas are accepted when the separator is not a comma (noted on the sweep), in the
  voltage, the current and the coordinates;
* a multi-sweep text file is read whole and so has the size cap of any text sweep file
  (:data:`bayesprobe.io.MAX_FILE_BYTES`); a file over it, or one the text reader cannot decode,
  goes to the ordinary reader, whose one-line message the sweep then carries;
* a row whose number of fields differs from the header's (trailing empty fields aside; more fields
  were accepted before) spoils its sweep with the io wording, ``line N has K fields but the header
  has M; make every row match the header ...``; within one sweep such a row is reported before a
  non-number on an earlier line;
* the header is split as by the sweep reader (trailing empty names dropped, a lone ``[mA]`` of a
  white-space header joined to the name before it), a tab-separated row may end in empty fields,
  and the text may be UTF-16 with a byte-order mark; binary content is refused with the io wording (``... is not a text file (it contains binary
  data); export the sweep as CSV text ...``);
* the longest-line cap (:data:`~.loaders.MAX_LINE_BYTES`) is checked on the header and data rows
  before any sweep is given out (comment lines are not checked).
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass
from pathlib import Path

from ..errors import InputError
from ..io import MAX_FILE_BYTES, identify_columns, norm_name, read_delimited_table, sanitise_id
from ._messages import fail, one_line, show
from .loaders import (
    MAX_COORDS,
    MAX_LINE_BYTES,
    MAX_SWEEPS_PER_FILE,
    SWEEP_ID_NAMES,
    check_size,
    cleaner,
    raising,
    single,
)

#: rows passed as the text reader's row cap: never reached (every data row takes at least two bytes)
_NO_ROW_CAP = MAX_FILE_BYTES


def find_id_column(names, wanted):
    """Index of the sweep-id column (``wanted``, or a name of :data:`SWEEP_ID_NAMES`), or None."""
    if wanted is not None:
        t = str(wanted).strip().lower()
        for k, name in enumerate(names):
            if name.strip().lower() == t or norm_name(name) == norm_name(t):
                return k
        return None
    for k, name in enumerate(names):
        if norm_name(name) in SWEEP_ID_NAMES:
            return k
    return None


def _read(path: Path, where: str):
    """The table of ``path``, or None if the text reader refuses it (the ordinary reader then says why)."""
    try:
        return read_delimited_table(path, where=where, max_rows=_NO_ROW_CAP)
    except InputError:
        return None


@dataclass
class _Layout:
    """Where the sweep id, voltage, current and coordinates are in a multi-sweep table."""

    kid: int
    iv: int
    ic: int
    factors: tuple          # (voltage factor, current factor, unit notes)
    coord_cols: list
    coord_names: dict


def _layout(names: list, opts, where: str) -> _Layout | None:
    """The table's layout, or None if it is not a multi-sweep table (no sweep-id column)."""
    kid = find_id_column(names, opts["sweep_column"])
    if kid is None:
        return None
    col = [k for k in range(len(names)) if k != kid]
    iv, ic, fv, fi, notes = identify_columns([names[k] for k in col], opts["voltage_column"],
                                             opts["current_column"], where)
    iv, ic = col[iv], col[ic]
    coord_cols = [k for k in range(len(names)) if k not in (kid, iv, ic)][:MAX_COORDS]
    coord_names = {k: sanitise_id(names[k])[:32] for k in coord_cols}
    return _Layout(kid, iv, ic, (fv, fi, notes), coord_cols, coord_names)


def _check_line_lengths(table, where: str):
    """The line cap of a multi-sweep table, on its header and data rows."""
    for n, s in itertools.chain([(table.header_line, table.header_text)], table.lines()):
        if len(s) * 4 >= MAX_LINE_BYTES and len(s.encode("utf-8", "surrogatepass")) >= MAX_LINE_BYTES:
            raise fail(f"{where}: line {n} is longer than {MAX_LINE_BYTES} bytes; this is not a sweep table")


def _row_id(fields, kid: int):
    """The sweep id of one split row, or None when the row has no readable id."""
    if fields is None or len(fields) <= kid:
        return None
    return fields[kid].strip().strip("\"'")


def _blocks(table, kid: int):
    """``(raw id, first line, start, stop)`` of each run of rows with the same id, in file order."""
    start, current, first = 0, None, None
    for pos, (n, fields) in enumerate(table.rows()):
        raw = _row_id(fields, kid)
        if raw is None:                 # no readable id: the row belongs to the sweep being read
            raw = current if current is not None else ""
        if current is None or raw != current:
            if current is not None:
                yield current, first, start, pos
            current, first, start = raw, n, pos
    if current is not None:
        yield current, first, start, len(table)


def _block_error(raw: str, n: int, seen: set, where: str) -> str | None:
    """Why a block is unusable before its numbers are read (empty or repeated id), or None."""
    error = None
    if raw in seen:
        error = (f"{where}: the rows of sweep {show(raw, 60)} are not together (they start again "
                 f"on line {n}); sort the file by sweep id")
    seen.add(raw)
    if raw == "":
        error = f"{where}: line {n} has an empty sweep id; give every row its sweep's id"
    return error


def _coordinates(table, lay: _Layout, rows: slice, columns=None) -> dict:
    """The sweep's coordinates: the columns holding one and the same number in every row of ``rows``.

    Numbers are read as the voltage and current are (decimal commas included); a column with
    anything else than a number in the sweep, a missing value or different numbers is no coordinate.
    ``columns`` are the coordinate columns already parsed, if they were.
    """
    if columns is None:
        columns = [_numbers_or_none(table, k, rows) for k in lay.coord_cols]
    out = {}
    for k, vals in zip(lay.coord_cols, columns):
        if vals is not None and vals.size and (vals == vals[0]).all():
            out[lay.coord_names[k]] = float(vals[0])
    return out


def _read_block(table, lay: _Layout, raw: str, start: int, stop: int, limit: int):
    """``(voltage, current, coordinates)`` of the rows ``start:stop`` of one sweep (raw, not scaled).

    The voltage, current and coordinate columns are parsed together when they all hold numbers (one
    pass over the rows); otherwise voltage and current first, so that text in a coordinate column
    never spoils the sweep.  Raises the one-line InputError of an unusable sweep.
    """
    rows = slice(start, min(stop, start + limit))
    cols = [lay.iv, lay.ic] + lay.coord_cols
    try:
        v, i, *coord_values = table.numbers(cols, rows=rows)
    except InputError:
        v, i = table.numbers([lay.iv, lay.ic], rows=rows)
        coord_values = None
    if stop - start > limit:
        raise fail(f"{table.where}: sweep {show(raw, 60)} has more than {limit} rows, the limit for one sweep")
    return v, i, _coordinates(table, lay, rows, coord_values)


def _numbers_or_none(table, k: int, rows: slice):
    try:
        return table.numbers([k], rows=rows)[0]
    except InputError:
        return None


def _sweep(table, lay: _Layout, block: tuple, index: int, path: Path, opts):
    """(raw_id, index, coords, loader) of one block of rows ``(raw id, first line, start, stop, error)``."""
    raw, _, start, stop, error = block
    table.notes = []            # the notes of this sweep only
    if error is None:
        try:
            v, i, coords = _read_block(table, lay, raw, start, stop, opts["max_points"])
        except InputError as exc:
            error = str(exc)
    if error is not None:
        return (raw, index, {}, raising(error))
    fv, fi, notes = lay.factors
    return (raw, index, coords, cleaner(v * fv, i * fi, sign=opts["sign"],
                                        source=f"{path} [sweep {one_line(raw, 60)}]",
                                        notes=notes + table.notes))


def text_sweeps(path: Path, opts):
    """(raw_id, index, coords, loader) of every sweep of a text table."""
    where = show(str(path), 120)
    check_size(path)
    table = _read(path, where)
    lay = None if table is None else _layout(table.header, opts, where)
    if lay is None:
        yield (path.stem, None, {}, single(path, opts))
        return
    _check_line_lengths(table, where)
    seen, count = set(), 0
    for raw, n, start, stop in _blocks(table, lay.kid):
        if count >= MAX_SWEEPS_PER_FILE:
            raise fail(f"{where} holds more than {MAX_SWEEPS_PER_FILE} sweeps; split it into several files")
        error = _block_error(raw, n, seen, where)
        yield _sweep(table, lay, (raw, n, start, stop, error), count, path, opts)
        count += 1
    if count == 0:
        raise fail(f"{where} has a header but no data rows")


def count_text(path: Path, opts) -> int:
    """Sweeps in a text table: blocks of its sweep-id column, without converting any number."""
    table = _read(path, show(str(path), 120))
    kid = None if table is None else find_id_column(table.header, opts["sweep_column"])
    if kid is None:
        return 1
    last, blocks = None, 0
    for _, fields in table.rows():
        rid = _row_id(fields, kid)
        if rid is None:
            continue
        if rid != last:
            blocks += 1
            last = rid
    return max(blocks, 1)
