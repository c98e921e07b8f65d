"""Reading delimited numeric text with a header row: the one parser of CSV/TSV/white-space tables.

:func:`read_delimited_table` decodes untrusted bytes (UTF-8, UTF-16 with a byte-order mark, or
Windows-1252), drops blank and ``#`` comment lines, chooses the separator (tab, semicolon, comma or
runs of white space), splits the header, and returns a :class:`DelimitedTable` whose columns are
parsed on request: as numbers (missing-value markers become NaN, decimal commas are accepted when
the separator is not a comma) or as text.  In tab-separated text an empty field at the start or end
of a row is kept (a missing value, as an empty field between two commas is).  Every problem is a
one-line :class:`~bayesprobe.errors.InputError` naming the line (and column) and the fix.  This
module knows nothing about probes: which column means what is decided by the caller.
"""
from __future__ import annotations

import csv
import re
from pathlib import Path
from typing import Iterator, Sequence

import numpy as np

from ._messages import _fail, _show
from .limits import MAX_FILE_BYTES, MAX_POINTS, _check_file, _check_size, _read_bytes

__all__ = ["read_delimited_table", "DelimitedTable"]

# bytes that never occur in a text export: C0 controls except TAB LF VT FF CR, and DEL
_BINARY_BYTES = bytes(b for b in range(32) if b not in (9, 10, 11, 12, 13)) + b"\x7f"
_TEXT_BYTES = bytes(b for b in range(256) if b not in _BINARY_BYTES)

_DECIMAL_COMMA = re.compile(r"^[+-]?\d*,\d+(?:[eE][+-]?\d+)?$|^[+-]?\d+,\d*(?:[eE][+-]?\d+)?$")
_MISSING = {"", "na", "n/a", "nan", "null", "none", "-", "--"}

#: the white space stripped from both ends of a line before the separator is known (all but the tab)
_SPACE_BUT_TAB = "".join(chr(c) for c in range(0x3001) if chr(c).isspace() and c != 9)

#: widest table parsed in one call to numpy.loadtxt (wider ones go line by line)
_FAST_MAX_COLUMNS = 16


# --------------------------------------------------------------------------
# decoding, separators and fields
# --------------------------------------------------------------------------


def _decode_text(data: bytes, where: str, subject: str = "sweep") -> str:
    """Decode untrusted bytes: UTF-16 with a byte-order mark, else UTF-8 (BOM allowed), else Windows-1252."""
    binary = (f"{where} is not a text file (it contains binary data); export the {subject} as CSV text"
              + (" or save it as .npy" if subject == "sweep" else ""))
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
        # UTF-16 with a byte-order mark, as some spreadsheet programs export
        try:
            text = data.decode("utf-16")
        except UnicodeDecodeError:
            raise _fail(f"{where} is not valid UTF-16 text; export the {subject} as UTF-8 CSV text") from None
        if re.search(r"[\x00-\x08\x0e-\x1f\x7f]", text):
            raise _fail(binary)
        return text.lstrip("\ufeff")
    if data.translate(None, _TEXT_BYTES):
        raise _fail(binary)
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        pass
    # legacy 8-bit exports (e.g. a Windows-1252 / Latin-1 micro sign)
    try:
        return data.decode("cp1252")
    except UnicodeDecodeError:
        raise _fail(
            f"{where} is neither UTF-8 nor Windows-1252 text (it looks like binary data); "
            f"export the {subject} as UTF-8 CSV text"
        ) from None


def _choose_delimiter(header: str, first_row: str | None):
    """Return the delimiter (',', ';', '\\t' or None for runs of white space)."""
    for d in ("\t", ";", ","):
        nh = header.count(d)
        if nh == 0:
            continue
        if first_row is None:
            return d
        nr = first_row.count(d)
        if nr == nh or first_row.rstrip(d).count(d) == header.rstrip(d).count(d):
            return d
    for d in ("\t", ";", ","):
        if header.count(d):
            return d
    return None


def _split_fields(line: str, delim, quoted: bool) -> list:
    if delim is None:
        return line.split()
    if quoted and '"' in line:
        try:
            row = next(csv.reader([line], delimiter=delim, quotechar='"', skipinitialspace=True, strict=True))
        except (csv.Error, StopIteration):
            return None
        return [f.strip() for f in row]
    return [f.strip() for f in line.split(delim)]


def _merge_unit_tokens(tokens: list) -> list:
    """White-space headers: glue a lone '[mA]' or '(mA)' to the name before it."""
    merged = []
    for t in tokens:
        if merged and len(t) > 2 and t[0] in "[(" and t[-1] in "])":
            merged[-1] = merged[-1] + " " + t
        else:
            merged.append(t)
    return merged


def _looks_numeric(s: str) -> bool:
    try:
        float(s)
    except ValueError:
        return False
    return True


# --------------------------------------------------------------------------
# numbers
# --------------------------------------------------------------------------


def _parse_numbers(strings: list, line_numbers: list, column: str, delim, where: str, notes: list):
    try:
        return np.array(strings, dtype=float)
    except (ValueError, TypeError, OverflowError):
        pass
    out = np.empty(len(strings), dtype=float)
    comma_used = False
    for k, s in enumerate(strings):
        try:
            out[k] = float(s)
            continue
        except ValueError:
            pass
        t = s.strip()
        if t.lower() in _MISSING:
            out[k] = np.nan
        elif delim != "," and _DECIMAL_COMMA.match(t):
            out[k] = float(t.replace(",", "."))
            comma_used = True
        else:
            raise _fail(
                f"{where}: line {line_numbers[k]}, column {_show(column, 40)}: {_show(t, 30)} is not a number; "
                f"correct that value or comment the line out with '#'"
            )
    if comma_used:
        msg = "decimal commas read as decimal points"
        if msg not in notes:
            notes.append(msg)
    return out


def _fast_table(rows: list, delim, ncol: int):
    """Parse a plain all-numeric block of data rows in C; None when the careful path is needed.

    Any irregularity (a non-numeric or empty field, a ragged row, a trailing
    separator, decimal commas) makes this return None, and the line-by-line
    reader then either copes with it or names the offending line.
    """
    if ncol > _FAST_MAX_COLUMNS:
        return None
    try:
        table = np.loadtxt(rows, delimiter=delim, dtype=float, ndmin=2, comments=None, quotechar=None)
    except (ValueError, TypeError, OverflowError, IndexError):
        return None
    if table.ndim != 2 or table.shape != (len(rows), ncol):
        return None
    return table


# --------------------------------------------------------------------------
# the table
# --------------------------------------------------------------------------


class DelimitedTable:
    """A delimited text table: its header and its data rows, parsed column by column on request.

    Made by :func:`read_delimited_table`; the rows are kept as text, so a caller that needs two
    columns of a wide table parses only those two.

    Attributes
    ----------
    header : list of str
        Column names, surrounding quotes and white space removed (trailing empty names dropped;
        for white-space separated headers a lone ``[mA]``/``(mA)`` is joined to the name before it).
    delimiter : str or None
        ``","``, ``";"``, ``"\\t"``, or None for runs of white space.
    quoted : bool
        True if any line holds a double quote (fields are then split with CSV quoting rules).
    header_line : int
        1-based line number of the header in the file.
    header_text : str
        The header line as read (white space around it removed).
    line_numbers : list of int
        1-based file line number of every data row, in order.
    where : str
        How the source is named in messages.
    notes : list of str
        What the parser did that the user should know (``"decimal commas read as decimal points"``);
        filled by :meth:`numbers`.
    """

    def __init__(self, header, delimiter, quoted, header_line, header_text, rows, line_numbers, where):
        self.header = list(header)
        self.header_text = header_text
        self.delimiter = delimiter
        self.quoted = bool(quoted)
        self.header_line = int(header_line)
        self._rows = rows
        self.line_numbers = line_numbers
        self.where = where
        self.notes: list = []

    def __len__(self) -> int:
        return len(self._rows)

    def column_index(self, column) -> int:
        """0-based index of ``column`` (an index, or a header name matched exactly)."""
        if isinstance(column, (int, np.integer)) and not isinstance(column, (bool, np.bool_)):
            k = int(column)
            if not 0 <= k < len(self.header):
                raise IndexError(f"column index {k} is out of range for {len(self.header)} columns")
            return k
        try:
            return self.header.index(str(column))
        except ValueError:
            raise KeyError(f"no column named {column!r}") from None

    def lines(self, rows: slice | None = None) -> Iterator[tuple[int, str]]:
        """``(line number, text)`` of every data row as read (white space around it removed, not split)."""
        sl = rows if rows is not None else slice(None)
        return zip(self.line_numbers[sl], self._rows[sl])

    def rows(self, rows: slice | None = None) -> Iterator[tuple[int, list | None]]:
        """``(line number, fields)`` of every data row as split (no count check); ``fields`` is
        None for a line with unbalanced quotes.  For callers with their own per-row policy."""
        sl = rows if rows is not None else slice(None)
        for s, n in zip(self._rows[sl], self.line_numbers[sl]):
            yield n, _split_fields(s, self.delimiter, self.quoted)

    def strings(self, columns: Sequence, *, rows: slice | None = None) -> list[list[str]]:
        """The text fields of ``columns`` (indices or names), one list per column.

        ``rows`` (a slice of data-row positions) limits the rows read.  A row with unbalanced
        quotes, or with a number of fields other than the header's (trailing empty fields
        aside), raises a one-line InputError naming its line.
        """
        ks = [self.column_index(c) for c in columns]
        ncol, where = len(self.header), self.where
        out = [[] for _ in ks]
        for n, fields in self.rows(rows):
            if fields is None:
                raise _fail(f"{where}: line {n} has unbalanced quotes; fix the quoting on that line")
            if len(fields) != ncol:
                while len(fields) > ncol and fields[-1] == "":
                    fields.pop()
                if len(fields) != ncol:
                    raise _fail(
                        f"{where}: line {n} has {len(fields)} fields but the header has {ncol}; make every row "
                        f"match the header (check the separator and the decimal mark)"
                    )
            for col, k in zip(out, ks):
                col.append(fields[k])
        return out

    def numbers(self, columns: Sequence, *, rows: slice | None = None) -> list[np.ndarray]:
        """``columns`` (indices or names) as float arrays, one per column.

        Missing-value markers (empty, ``NA``, ``n/a``, ``nan``, ``null``, ``none``, ``-``, ``--``)
        become NaN; decimal commas are read as points when the separator is not a comma (noted
        in :attr:`notes`).  Anything else that is not a number, and every row error of
        :meth:`strings`, raises a one-line InputError naming the line and column.
        """
        ks = [self.column_index(c) for c in columns]
        sl = rows if rows is not None else slice(None)
        block = self._rows[sl]
        if not block:
            return [np.empty(0) for _ in ks]
        if not self.quoted:
            table = _fast_table(block, self.delimiter, len(self.header))
            if table is not None:
                return [np.ascontiguousarray(table[:, k]) for k in ks]
        del block
        texts = self.strings(ks, rows=rows)
        line_numbers = self.line_numbers[sl]
        out = []
        for k in ks:
            out.append(_parse_numbers(texts[0], line_numbers, self.header[k], self.delimiter, self.where,
                                      self.notes))
            del texts[0]
        return out


# --------------------------------------------------------------------------
# reading
# --------------------------------------------------------------------------


def _data_lines(text: str, where: str, max_rows: int, subject: str):
    """The non-blank, non-comment lines and their 1-based line numbers; header included.

    White space around each line is removed except tabs, which may end empty fields of a
    tab-separated row (the caller strips them when the separator is not a tab).
    """
    lines = []
    numbers = []
    for n, raw in enumerate(text.splitlines(), start=1):
        s = raw.strip(_SPACE_BUT_TAB)
        t = s.strip("\t") if s[:1] == "\t" or s[-1:] == "\t" else s
        if not t or t.startswith("#"):
            continue
        lines.append(s)
        numbers.append(n)
        if len(lines) > max_rows + 1:
            raise _fail(
                f"{where} has more than {max_rows} data rows, the limit for one {subject}; "
                f"split it into separate {subject} files"
            )
    if not lines:
        raise _fail(
            f"{where} holds no header or data (only blank or '#' comment lines); "
            f"export the {subject} with a header row"
        )
    return lines, numbers


def _header_fields(header_line: str, delim, line_number: int, where: str) -> list:
    header = _split_fields(header_line, delim, True)
    if header is None:
        raise _fail(f"{where}: the header row on line {line_number} has unbalanced quotes; fix the quoting")
    if delim is None:
        header = _merge_unit_tokens(header)
    while header and header[-1] == "":
        header.pop()
    return [h.strip().strip("\"'").strip() for h in header]


def read_delimited_table(
    source,
    *,
    where: str | None = None,
    max_rows: int = MAX_POINTS,
    max_bytes: int = MAX_FILE_BYTES,
    subject: str = "sweep",
) -> DelimitedTable:
    """Read a delimited text table with a header row from a file or from bytes.

    Parameters
    ----------
    source : str, path-like or bytes
        The file, or its content.  Text may be UTF-8 (with or without a byte-order mark),
        UTF-16 with a byte-order mark, or Windows-1252; bytes of binary data are refused.
    where : str, optional
        How the source is named in messages (default: the quoted path, or ``'text'``).
    max_rows : int
        Most data rows accepted (blank and ``#`` comment lines do not count).
    max_bytes : int
        Largest file (or byte string) accepted.
    subject : str
        What one file holds, for the messages (``"... the limit for one sweep; split it into
        separate sweep files"``, ``"export the sweep as UTF-8 CSV text"``).  A file *path* is
        checked with the sweep-file wording; a caller with its own wording checks and reads the
        file itself and passes the bytes.

    Returns
    -------
    DelimitedTable
        Header, separator and data rows; columns are parsed by :meth:`DelimitedTable.numbers`
        and :meth:`DelimitedTable.strings`.  The table may have no data rows and any number of
        columns: what is acceptable is for the caller to say.

    Raises
    ------
    InputError
        One line: unreadable or oversized file, binary content, nothing but comments, more than
        ``max_rows`` data rows, or a header with unbalanced quotes.
    """
    if isinstance(source, (bytes, bytearray, memoryview)):
        data = bytes(source)
        where = "'text'" if where is None else where
        _check_size(data, max_bytes, where)
    else:
        path = Path(source)
        where = _show(str(path), 120) if where is None else where
        _check_file(path, max_bytes)
        data = _read_bytes(path, max_bytes)
    text = _decode_text(data, where, subject)
    del data
    lines, numbers = _data_lines(text, where, max_rows, subject)
    had_tabs = "\t" in text
    del text
    lines[0] = lines[0].strip()
    delim = _choose_delimiter(lines[0], lines[1].strip() if len(lines) > 1 else None)
    if delim != "\t" and had_tabs:
        lines = [ln.strip() for ln in lines]
    quoted = delim is not None and any('"' in ln for ln in lines)
    header = _header_fields(lines[0], delim, numbers[0], where)
    return DelimitedTable(header, delim, quoted, numbers[0], lines[0], lines[1:], numbers[1:], where)
