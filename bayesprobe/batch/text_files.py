"""Multi-sweep text tables: a header with a sweep-id column, each sweep's rows together.

The file is read one line at a time (lines capped in length); a problem in a row spoils its own
sweep only. Other numeric columns that are constant within a sweep become its coordinates.
A table without a sweep-id column goes to the ordinary reader (:func:`bayesprobe.io.load_sweep`).

The delimiter, field splitting, column identification and missing-value words are those of
:mod:`bayesprobe.io` (imported here, in one place).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..io import _MISSING, _choose_delimiter, _identify_columns, _norm_name, _split_fields, sanitise_id
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


def text_lines(path: Path):
    """(line number, text) of a text file, one line at a time, lines capped in length."""
    where = show(str(path), 120)
    with open(path, "rb") as fh:
        n = 0
        while True:
            raw = fh.readline(MAX_LINE_BYTES + 1)
            if not raw:
                return
            n += 1
            if len(raw) > MAX_LINE_BYTES:
                raise fail(f"{where}: line {n} is longer than {MAX_LINE_BYTES} bytes; this is not a sweep table")
            if b"\x00" in raw:
                raise fail(f"{where} is not a text file (it contains binary data)")
            if n == 1:
                raw = raw.removeprefix(b"\xef\xbb\xbf")
            try:
                text = raw.decode("utf-8")
            except UnicodeDecodeError:
                text = raw.decode("cp1252", errors="replace")
            yield n, text


def text_header(path: Path):
    """(header fields, delimiter, header line number) or None if there is no header."""
    header, hline, first = None, None, None
    for n, line in text_lines(path):
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        if header is None:
            header, hline = s, n
            continue
        first = s
        break
    if header is None:
        return None
    delim = _choose_delimiter(header, first)
    fields = _split_fields(header, delim, True)
    if fields is None:
        return None
    return [f.strip().strip("\"'").strip() for f in fields], delim, hline


def find_id_column(names, wanted):
    """Index of the sweep-id column (``wanted``, or a name of :data:`SWEEP_ID_NAMES`), or None."""
    if wanted is not None:
        t = str(wanted).strip().lower()
        for k, name in enumerate(names):
            if name.strip().lower() == t or _norm_name(name) == _norm_name(t):
                return k
        return None
    for k, name in enumerate(names):
        if _norm_name(name) in SWEEP_ID_NAMES:
            return k
    return None


def _data_lines(path: Path, hline: int):
    """(line number, stripped text) of the data lines: after the header, not blank, not comments."""
    for n, line in text_lines(path):
        if n <= hline:
            continue
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        yield n, s


@dataclass
class _Layout:
    """Where the sweep id, voltage, current and coordinates are in a multi-sweep table."""

    names: list
    delim: object
    hline: int
    kid: int
    iv: int
    ic: int
    factors: tuple          # (voltage factor, current factor, unit notes)
    coord_cols: list
    coord_names: dict


def _layout(path: Path, opts, where: str) -> _Layout | None:
    """The table's layout, or None if it is not a multi-sweep table (no header or no sweep-id column)."""
    head = text_header(path)
    if head is None:
        return None
    names, delim, hline = head
    kid = find_id_column(names, opts["sweep_column"])
    if kid is None:
        return None
    others = [nm for k, nm in enumerate(names) if k != kid]
    iv, ic, fv, fi, notes = _identify_columns(others, opts["voltage_column"], opts["current_column"], where)
    col = [k for k in range(len(names)) if k != kid]
    iv, ic = col[iv], col[ic]
    coord_cols = [k for k in range(len(names)) if k not in (kid, iv, ic)][:MAX_COORDS]
    coord_names = {k: sanitise_id(names[k])[:32] for k in coord_cols}
    return _Layout(names, delim, hline, kid, iv, ic, (fv, fi, notes), coord_cols, coord_names)


@dataclass
class _Block:
    """The rows of one sweep gathered so far (or the reason the sweep is unusable)."""

    id: str
    line: int
    v: list = field(default_factory=list)
    i: list = field(default_factory=list)
    coords: dict = field(default_factory=dict)
    error: str | None = None

    def add(self, fields, n: int, lay: _Layout, opts, where: str):
        """Take one data row (``fields``; None if it could not be split)."""
        ncol = len(lay.names)
        if (fields is None or len(fields) < ncol) and not self.error:
            self.error = (f"{where}: line {n} has {0 if fields is None else len(fields)} fields but the "
                          f"header has {ncol}; make every row match the header (check quotes and separators)")
        if self.error:
            return
        if len(self.v) >= opts["max_points"]:
            self.error = (f"{where}: sweep {show(self.id, 60)} has more than {opts['max_points']} rows, "
                          "the limit for one sweep")
            return
        try:
            self.v.append(_number(fields[lay.iv], n, lay.names[lay.iv], where))
            self.i.append(_number(fields[lay.ic], n, lay.names[lay.ic], where))
            for k in lay.coord_cols:
                self._coordinate(k, fields[k])
        except InputError as exc:
            self.error = str(exc)

    def _coordinate(self, k: int, text: str):
        try:
            val = float(text.strip().strip("\"'"))
        except ValueError:
            val = None
        if k not in self.coords:
            self.coords[k] = val
        elif self.coords[k] is not None and self.coords[k] != val:
            self.coords[k] = None       # varies within the sweep: not a sweep coordinate

    def sweep(self, index: int, path: Path, lay: _Layout, opts):
        """(raw_id, index, coords, loader) of the finished block."""
        if self.error:
            return (self.id, index, {}, raising(self.error))
        fv, fi, notes = lay.factors
        c = {lay.coord_names[k]: val for k, val in self.coords.items() if val is not None}
        v, i = np.asarray(self.v, float) * fv, np.asarray(self.i, float) * fi
        return (self.id, index, c, cleaner(v, i, sign=opts["sign"], source=f"{path} [sweep {one_line(self.id, 60)}]",
                                           notes=notes))


def _number(text: str, n: int, column: str, where: str) -> float:
    t = text.strip().strip("\"'")
    try:
        return float(t)
    except ValueError:
        if t.lower() in _MISSING:
            return math.nan
        raise fail(f"{where}: line {n}, column {show(column, 40)}: {show(t, 30)} is not a number; "
                   "correct that value or comment the line out with '#'") from None


def _new_block(raw: str, n: int, seen: set, where: str) -> _Block:
    block = _Block(raw, n)
    if raw in seen:
        block.error = (f"{where}: the rows of sweep {show(raw, 60)} are not together (they start again "
                       f"on line {n}); sort the file by sweep id")
    seen.add(raw)
    if raw == "":
        block.error = f"{where}: line {n} has an empty sweep id; give every row its sweep's id"
    return block


def text_sweeps(path: Path, opts):
    """(raw_id, index, coords, loader) of every sweep of a text table."""
    where = show(str(path), 120)
    check_size(path)
    lay = _layout(path, opts, where)
    if lay is None:
        yield (path.stem, None, {}, single(path, opts))
        return
    block, seen, count = None, set(), 0
    for n, s in _data_lines(path, lay.hline):
        fields = _split_fields(s, lay.delim, '"' in s)
        raw = fields[lay.kid].strip().strip("\"'") if fields is not None and len(fields) > lay.kid else None
        if raw is None:                 # no readable id: the problem belongs to the sweep being read
            raw = block.id if block is not None else ""
        if block is None or raw != block.id:
            if block is not None:
                yield block.sweep(count, path, lay, opts)
                count += 1
                if count >= MAX_SWEEPS_PER_FILE:
                    raise fail(f"{where} holds more than {MAX_SWEEPS_PER_FILE} sweeps; split it into several files")
            block = _new_block(raw, n, seen, where)
        block.add(fields, n, lay, opts, where)
    if block is None:
        raise fail(f"{where} has a header but no data rows")
    yield block.sweep(count, path, lay, opts)


def count_text(path: Path, opts) -> int:
    """Sweeps in a text table: blocks of its sweep-id column, without converting any number."""
    head = text_header(path)
    kid = None if head is None else find_id_column(head[0], opts["sweep_column"])
    if kid is None:
        return 1
    _, delim, hline = head
    last, blocks = None, 0
    for n, s in _data_lines(path, hline):
        f = _split_fields(s, delim, '"' in s)
        if f is None or len(f) <= kid:
            continue
        rid = f[kid].strip().strip("\"'")
        if rid != last:
            blocks += 1
            last = rid
    return max(blocks, 1)
