"""Reading probe sweeps from files or arrays, and writing results atomically.

Everything read here is treated as untrusted: files are parsed with plain
string handling and NumPy (never ``eval``, never unpickled), their size is
capped before anything is allocated, and every problem becomes a one-line
:class:`~bayesprobe.errors.InputError` that says how to fix it.
"""
from __future__ import annotations

import contextlib
import csv
import io as _io
import os
import re
import shutil
import stat
import tempfile
import zipfile
from pathlib import Path
from typing import Iterator, Sequence

import numpy as np

from .errors import InputError
from .sweep import Sweep, detect_branches

__all__ = [
    "load_sweep",
    "sweep_from_arrays",
    "sanitise_id",
    "atomic_write_text",
    "atomic_write_bytes",
    "staged_output_dir",
    "write_sweep_csv",
    "MAX_FILE_BYTES",
    "MAX_POINTS",
    "MIN_POINTS",
    "MIN_VOLTAGE_SPAN",
    "TEXT_SUFFIXES",
    "NUMPY_SUFFIXES",
]

#: Largest sweep file that will be read at all (bytes).
MAX_FILE_BYTES = 200 * 1024 * 1024
#: Default cap on the number of data rows (points) in one sweep.
MAX_POINTS = 2_000_000
#: Fewest usable points accepted for one sweep.
MIN_POINTS = 20
#: Narrowest accepted voltage span (V).
MIN_VOLTAGE_SPAN = 1.0
#: Most header columns a text file may have.
MAX_COLUMNS = 1000

TEXT_SUFFIXES = (".csv", ".tsv", ".txt", ".dat")
NUMPY_SUFFIXES = (".npy", ".npz")

_SIGNS = ("auto", "electron-positive", "ion-positive")

# --------------------------------------------------------------------------
# small helpers
# --------------------------------------------------------------------------

_CONTROL_CHARS = re.compile(r"[\x00-\x1f\x7f-\x9f]")


def _show(text: object, limit: int = 80) -> str:
    """Quote user-supplied text for a one-line message (control chars hidden)."""
    s = _CONTROL_CHARS.sub("?", str(text))
    if len(s) > limit:
        s = s[: limit - 3] + "..."
    return "'" + s + "'"


def _fail(message: str) -> InputError:
    """Build an InputError whose message is guaranteed to be one line."""
    return InputError(" ".join(message.split()))


def _show_list(names: Sequence[str], limit: int = 8) -> str:
    shown = ", ".join(_show(n, 40) for n in names[:limit])
    if len(names) > limit:
        shown += f", ... ({len(names)} in all)"
    return shown


_ID_BAD = re.compile(r"[^A-Za-z0-9._-]")
_WINDOWS_RESERVED = {"CON", "PRN", "AUX", "NUL"} | {f"COM{k}" for k in range(1, 10)} | {
    f"LPT{k}" for k in range(1, 10)
}


def sanitise_id(text: object) -> str:
    """Turn any text into a short name that is safe to use in a file name.

    Only ``A-Z a-z 0-9 . _ -`` survive (everything else becomes ``_``), runs
    of dots collapse to one (so ``..`` can never appear), leading dots,
    underscores and dashes are removed, and the result is at most 64
    characters.  An empty result becomes ``"sweep"``.
    """
    s = "" if text is None else str(text)
    s = s[:1024]
    s = _ID_BAD.sub("_", s)
    s = re.sub(r"\.{2,}", ".", s)
    s = re.sub(r"_{2,}", "_", s)
    s = s.lstrip("._-")
    s = s[:64].rstrip("._")
    if not s:
        return "sweep"
    if s.split(".")[0].upper() in _WINDOWS_RESERVED:
        s = ("_" + s)[:64]
    return s


# --------------------------------------------------------------------------
# column names and units
# --------------------------------------------------------------------------

_VOLTAGE_NAMES = {
    "v", "u", "voltage", "volt", "volts", "bias", "v_bias", "vbias", "u_bias",
    "ubias", "bias_voltage", "probe_voltage", "voltage_probe", "v_probe",
    "vprobe", "probe_bias", "u_probe", "v_b", "vb", "potential",
    "probe_potential", "applied_voltage", "sweep_voltage",
}
_CURRENT_NAMES = {
    "i", "current", "i_probe", "iprobe", "probe_current", "current_probe",
    "i_p", "ip", "probe_i", "collected_current", "probe_signal_current",
}

# unit spelling (lower case, micro signs mapped to "u") -> (kind, factor, shown as)
_UNITS = {
    "a": ("A", 1.0, "A"), "amp": ("A", 1.0, "A"), "amps": ("A", 1.0, "A"),
    "ampere": ("A", 1.0, "A"), "amperes": ("A", 1.0, "A"),
    "ma": ("A", 1e-3, "mA"), "ua": ("A", 1e-6, "uA"), "na": ("A", 1e-9, "nA"),
    "pa": ("A", 1e-12, "pA"),
    "v": ("V", 1.0, "V"), "volt": ("V", 1.0, "V"), "volts": ("V", 1.0, "V"),
    "mv": ("V", 1e-3, "mV"), "kv": ("V", 1e3, "kV"),
}
_UNIT_HELP = {"A": "A, mA, uA (or µA), nA or pA", "V": "V, mV or kV"}


def _norm_name(text: str) -> str:
    s = text.strip().lower()
    s = re.sub(r"[\s\-]+", "_", s)
    return s.strip("_")


def _split_unit(raw: str):
    """Split a header entry into (normalised base name, unit text or None, style)."""
    low = raw.strip().strip("\"'").strip().lower().replace("\u00b5", "u").replace("\u03bc", "u")
    if len(low) > 200:
        return _norm_name(low), None, None
    if _norm_name(low) in _VOLTAGE_NAMES or _norm_name(low) in _CURRENT_NAMES:
        return _norm_name(low), None, None
    for close, open_ in (("]", "["), (")", "(")):
        if low.endswith(close):
            k = low.rfind(open_)
            if k > 0:
                return _norm_name(low[:k]), low[k + 1: -1].strip().replace(" ", ""), "bracket"
    if "/" in low:
        base, _, unit = low.rpartition("/")
        if unit.strip() in _UNITS and base.strip():
            return _norm_name(base), unit.strip(), "slash"
    idx = max(low.rfind(" "), low.rfind("_"), low.rfind("-"))
    if idx > 0 and low[idx + 1:] in _UNITS:
        return _norm_name(low[:idx]), low[idx + 1:], "suffix"
    return _norm_name(low), None, None


def _role_of(base: str):
    if base in _VOLTAGE_NAMES:
        return "V"
    if base in _CURRENT_NAMES:
        return "A"
    return None


def _unit_factor(raw: str, unit, kind: str, where: str):
    """Return (factor, shown unit) for a column of the given kind ("V" or "A")."""
    if unit is None or unit == "":
        return 1.0, _UNITS["v" if kind == "V" else "a"][2]
    info = _UNITS.get(unit)
    quantity = "voltage" if kind == "V" else "current"
    if info is None:
        raise _fail(
            f"{where}: unrecognised unit {_show(unit, 20)} in the {quantity} column {_show(raw, 40)}; "
            f"write the unit as one of {_UNIT_HELP[kind]}"
        )
    if info[0] != kind:
        raise _fail(
            f"{where}: the {quantity} column {_show(raw, 40)} carries the unit {_show(info[2], 10)}, "
            f"which is not a {quantity} unit; use one of {_UNIT_HELP[kind]} or name the right column explicitly"
        )
    return info[1], info[2]


def _find_explicit(names: Sequence[str], wanted, role: str, where: str) -> int:
    quantity = "voltage" if role == "V" else "current"
    if isinstance(wanted, (bool, np.bool_)):
        raise _fail(f"{where}: the {quantity} column must be given as a name or a 0-based index")
    if isinstance(wanted, (int, np.integer)):
        k = int(wanted)
        if k < 0:
            k += len(names)
        if not 0 <= k < len(names):
            raise _fail(
                f"{where}: {quantity} column index {int(wanted)} is out of range for {len(names)} "
                f"columns; use an index from 0 to {len(names) - 1}"
            )
        return k
    target = str(wanted).strip().lower()
    for k, name in enumerate(names):
        if name.strip().strip("\"'").strip().lower() == target:
            return k
    target_norm = _norm_name(target.replace("\u00b5", "u").replace("\u03bc", "u"))
    for k, name in enumerate(names):
        if _split_unit(name)[0] == target_norm:
            return k
    if target.isdigit() and target.isascii():  # an index given as text, e.g. from a command line
        return _find_explicit(names, int(target), role, where)
    raise _fail(
        f"{where}: no {quantity} column named {_show(wanted, 40)}; the columns are "
        f"{_show_list(list(names))} - name one of these"
    )


def _identify_columns(names: Sequence[str], voltage_column, current_column, where: str, what="column"):
    """Pick the voltage and current columns; return (iv, ic, fv, fi, notes)."""
    parsed = [_split_unit(n) for n in names]
    chosen = {}
    for role, wanted in (("V", voltage_column), ("A", current_column)):
        if wanted is not None:
            chosen[role] = _find_explicit(names, wanted, role, where)
    for role in ("V", "A"):
        if role in chosen:
            continue
        taken = set(chosen.values())
        cands = [k for k, p in enumerate(parsed) if _role_of(p[0]) == role and k not in taken]
        quantity = "voltage" if role == "V" else "current"
        if not cands:
            raise _fail(
                f"{where}: no {what} is recognisable as the probe {quantity} (the {what}s are "
                f"{_show_list(list(names))}); call them 'voltage' and 'current' (units such as "
                f"'current [mA]' are allowed) or name the {quantity} {what} explicitly"
            )
        if len(cands) > 1:
            raise _fail(
                f"{where}: several {what}s could be the probe {quantity} "
                f"({_show_list([names[k] for k in cands])}); name the {quantity} {what} explicitly"
            )
        chosen[role] = cands[0]
    iv, ic = chosen["V"], chosen["A"]
    if iv == ic:
        raise _fail(
            f"{where}: the same {what} {_show(names[iv], 40)} was chosen for voltage and current; "
            f"name two different {what}s"
        )
    notes = []
    factors = []
    for role, k in (("V", iv), ("A", ic)):
        base, unit, style = parsed[k]
        if style == "bracket" and unit not in _UNITS and _role_of(base) is None:
            # an explicitly chosen column such as "Ch2 (raw)": brackets are not a unit
            unit = None
        factor, shown = _unit_factor(names[k], unit, role, where)
        factors.append(factor)
        if factor != 1.0:
            quantity = "voltage" if role == "V" else "current"
            si = "V" if role == "V" else "A"
            notes.append(f"{quantity} {what} {_show(names[k], 40)} converted from {shown} to {si}")
    return iv, ic, factors[0], factors[1], notes


# --------------------------------------------------------------------------
# cleaning (shared by every reader)
# --------------------------------------------------------------------------


def _as_float_1d(values, name: str, where: str) -> np.ndarray:
    if np.iscomplexobj(values):
        raise _fail(f"{where}: the {name} values are complex numbers; pass real-valued data")
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError, OverflowError):
        raise _fail(f"{where}: the {name} values are not numbers; pass a numeric array") from None
    if arr.ndim != 1:
        raise _fail(
            f"{where}: the {name} values form an array of shape {arr.shape}, not a 1-D sequence; "
            f"pass one sweep as two 1-D arrays (use the batch command for many sweeps)"
        )
    return arr


def _end_medians(current: np.ndarray):
    n = current.size
    m = max(3, n // 10)
    return float(np.median(current[:m])), float(np.median(current[-m:]))


def sweep_from_arrays(
    voltage,
    current,
    *,
    sign: str = "auto",
    sweep_id: str = "sweep",
    source: str = "array",
    notes: Sequence[str] = (),
    max_points: int | None = MAX_POINTS,
) -> Sweep:
    """Clean one sweep given as arrays and return it as a :class:`Sweep`.

    Parameters
    ----------
    voltage, current : array-like, 1-D
        Probe bias (V) and probe current (A), same length, any order.
    sign : {"auto", "electron-positive", "ion-positive"}
        Current sign convention of the input.  ``"auto"`` flips the sign when
        the high-voltage end (the electron-saturation side, which carries the
        larger current magnitude) is negative; ``"ion-positive"`` always flips,
        ``"electron-positive"`` never does.
    sweep_id : str
        Name of the sweep; sanitised with :func:`sanitise_id`.
    source : str
        Where the data came from (used in messages and stored on the sweep).
    notes : sequence of str
        Notes from an earlier reading step, kept in front of the new ones.
    max_points : int or None
        Largest accepted number of points (None: no cap).

    Rows with a non-finite voltage or current are dropped, the rows are sorted
    by voltage (stable, so repeated voltages of up/down sweeps stay in their
    recorded order), and the result must have at least ``MIN_POINTS`` points,
    a voltage span of at least ``MIN_VOLTAGE_SPAN`` and a current that rises
    through zero from the ion side to the electron side.

    Raises
    ------
    InputError
        If the data cannot be used; the message is one line naming the fix.
    """
    where = str(source)
    if where != "array":
        where = _show(where, 120)
    if sign not in _SIGNS:
        raise _fail(
            f"unknown sign convention {_show(sign, 30)}; use 'auto', 'electron-positive' or 'ion-positive'"
        )
    v = _as_float_1d(voltage, "voltage", where)
    i = _as_float_1d(current, "current", where)
    if v.size != i.size:
        raise _fail(
            f"{where}: {v.size} voltage values but {i.size} current values; "
            f"pass voltage and current of the same length"
        )
    if max_points is not None and v.size > max_points:
        raise _fail(
            f"{where}: {v.size} points, more than the limit of {max_points}; "
            f"split the data into separate sweeps or thin it"
        )
    out_notes = [str(n) for n in notes]

    finite = np.isfinite(v) & np.isfinite(i)
    n_bad = int(v.size - np.count_nonzero(finite))
    if n_bad:
        v, i = v[finite], i[finite]
        row = "row" if n_bad == 1 else "rows"
        out_notes.append(f"dropped {n_bad} {row} with a missing or non-finite voltage or current")

    if v.size < MIN_POINTS:
        extra = f" after dropping {n_bad} unusable rows" if n_bad else ""
        raise _fail(
            f"{where}: only {v.size} usable points{extra}, fewer than the {MIN_POINTS} needed; "
            f"record a sweep with more voltage steps"
        )

    branches = detect_branches(v)
    direction = ramp = record_order = None
    if np.any(np.diff(v) < 0):
        order = np.argsort(v, kind="stable")
        v, i = v[order], i[order]
        if branches is not None:
            direction, ramp = branches[0][order], branches[1][order]
            record_order = order
            n_up = int(np.count_nonzero(direction > 0))
            out_notes.append(
                f"holds both sweep directions ({n_up} points recorded with rising bias, {v.size - n_up} with "
                f"falling bias); sorted by voltage, directions kept (model their difference with the "
                f"hysteresis distortion)")
        else:
            out_notes.append("sorted by voltage (the input was not in increasing voltage order)")

    span = float(v[-1] - v[0])
    if span < MIN_VOLTAGE_SPAN:
        raise _fail(
            f"{where}: the voltage range is only {span:.3g} V, too narrow to hold ion saturation, "
            f"retardation and the knee; sweep across tens of volts around the floating potential"
        )

    if float(np.max(i)) == float(np.min(i)):
        raise _fail(
            f"{where}: the current is the same ({float(i[0]):.6g} A) at every point; "
            f"check that the current column holds the measured probe current"
        )

    flipped = False
    i_lo, i_hi = _end_medians(i)
    if sign == "ion-positive":
        flipped = True
        out_notes.append("current sign flipped as requested: the input uses the ion-current-positive convention")
    elif sign == "auto" and i_hi < 0 and abs(i_hi) > abs(i_lo):
        flipped = True
        out_notes.append(
            "current sign flipped: the file uses the ion-current-positive convention "
            "(electron saturation was negative)"
        )
    if flipped:
        i = -i
        i_lo, i_hi = -i_lo, -i_hi

    if (i_lo > 0 and i_hi > 0) or float(np.min(i)) >= 0:
        raise _fail(
            f"{where}: the sweep never crosses zero current, so there is no floating potential and no "
            f"electron-retardation region; extend the sweep to more negative bias"
        )
    if (i_lo < 0 and i_hi < 0) or float(np.max(i)) <= 0:
        raise _fail(
            f"{where}: the sweep never crosses zero current, so there is no floating potential and no "
            f"electron-retardation region; extend the sweep to more positive bias"
        )
    if i_lo > 0 > i_hi:
        raise _fail(
            f"{where}: the current falls from positive to negative as the bias rises, the reverse of "
            f"an electron-current-positive sweep; if the data use the ion-current-positive convention "
            f"set the sign convention to 'ion-positive', otherwise check the voltage and current columns"
        )

    return Sweep(
        voltage=v,
        current=i,
        sweep_id=sanitise_id(sweep_id),
        source=str(source),
        notes=out_notes,
        sign_flipped=flipped,
        direction=direction,
        ramp=ramp,
        record_order=record_order,
    )


# --------------------------------------------------------------------------
# file readers
# --------------------------------------------------------------------------


def _check_file(path: Path, max_bytes: int) -> int:
    where = _show(str(path), 120)
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise _fail(f"sweep file {where} not found; check the path and file name") from None
    except ValueError:  # e.g. an embedded NUL character in the name
        raise _fail(f"sweep file name {where} is not a valid path; check the path and file name") from None
    except PermissionError:
        raise _fail(f"sweep file {where} cannot be read (permission denied); fix its permissions") from None
    except OSError as exc:
        raise _fail(f"sweep file {where} cannot be opened ({exc.strerror or 'OS error'}); check the path") from None
    if stat.S_ISDIR(st.st_mode):
        raise _fail(f"{where} is a directory; give one sweep file (use the batch command for folders)")
    if not stat.S_ISREG(st.st_mode):
        raise _fail(f"{where} is not a regular file (a device, pipe or socket); save the sweep to a file first")
    if st.st_size > max_bytes:
        raise _fail(
            f"{where} is {st.st_size / 2**20:.1f} MiB, above the {max_bytes / 2**20:.0f} MiB limit for one sweep; "
            f"split it into smaller files"
        )
    if st.st_size == 0:
        raise _fail(f"{where} is empty; export the sweep with a header row and voltage/current data")
    return st.st_size


def _read_bytes(path: Path, max_bytes: int) -> bytes:
    where = _show(str(path), 120)
    try:
        with open(path, "rb") as fh:
            data = fh.read(max_bytes + 1)
    except OSError as exc:
        raise _fail(f"sweep file {where} cannot be read ({exc.strerror or 'OS error'}); check the file") from None
    if len(data) > max_bytes:
        raise _fail(
            f"{where} is above the {max_bytes / 2**20:.0f} MiB limit for one sweep; split it into smaller files"
        )
    return data


# bytes that never occur in a text export: C0 controls except TAB LF VT FF CR, and DEL
_BINARY_BYTES = bytes(b for b in range(32) if b not in (9, 10, 11, 12, 13)) + b"\x7f"
_TEXT_BYTES = bytes(b for b in range(256) if b not in _BINARY_BYTES)


def _decode_text(data: bytes, where: str) -> str:
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
        # UTF-16 with a byte-order mark, as some spreadsheet programs export
        try:
            text = data.decode("utf-16")
        except UnicodeDecodeError:
            raise _fail(f"{where} is not valid UTF-16 text; export the sweep as UTF-8 CSV text") from None
        if re.search(r"[\x00-\x08\x0e-\x1f\x7f]", text):
            raise _fail(
                f"{where} is not a text file (it contains binary data); export the sweep as CSV text or save it as .npy"
            )
        return text.lstrip("\ufeff")
    if data.translate(None, _TEXT_BYTES):
        raise _fail(
            f"{where} is not a text file (it contains binary data); export the sweep as CSV text or save it as .npy"
        )
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
            f"export the sweep as UTF-8 CSV text"
        ) from None


_DECIMAL_COMMA = re.compile(r"^[+-]?\d*,\d+(?:[eE][+-]?\d+)?$|^[+-]?\d+,\d*(?:[eE][+-]?\d+)?$")
_MISSING = {"", "na", "n/a", "nan", "null", "none", "-", "--"}


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


def _load_text(path: Path, data: bytes, voltage_column, current_column, max_points: int):
    where = _show(str(path), 120)
    text = _decode_text(data, where)
    del data
    lines = []
    numbers = []
    for n, raw in enumerate(text.splitlines(), start=1):
        s = raw.strip()
        if not s or s.startswith("#"):
            continue
        lines.append(s)
        numbers.append(n)
        if len(lines) > max_points + 1:
            raise _fail(
                f"{where} has more than {max_points} data rows, the limit for one sweep; "
                f"split it into separate sweep files"
            )
    del text
    if not lines:
        raise _fail(
            f"{where} holds no header or data (only blank or '#' comment lines); "
            f"export the sweep with a header row"
        )

    header_line = lines[0]
    first = lines[1] if len(lines) > 1 else None
    delim = _choose_delimiter(header_line, first)
    quoted = delim is not None and any('"' in ln for ln in lines)
    header = _split_fields(header_line, delim, True)
    if header is None:
        raise _fail(f"{where}: the header row on line {numbers[0]} has unbalanced quotes; fix the quoting")
    if delim is None:
        header = _merge_unit_tokens(header)
    while header and header[-1] == "":
        header.pop()
    header = [h.strip().strip("\"'").strip() for h in header]
    if len(header) > MAX_COLUMNS:
        raise _fail(
            f"{where}: the header has {len(header)} columns, more than {MAX_COLUMNS}; "
            f"keep only the voltage and current columns"
        )
    if len(header) < 2:
        raise _fail(
            f"{where} has only one column (header {_show(header_line, 40)}); the file needs a voltage and a "
            f"current column separated by commas, tabs, semicolons or spaces"
        )
    if all(_looks_numeric(h) for h in header):
        raise _fail(
            f"{where}: the first non-comment line (line {numbers[0]}) is data, not a header; add a header row "
            f"such as 'voltage_V,current_A'"
        )
    if len(lines) == 1:
        raise _fail(f"{where} has a header but no data rows; export the sweep data below the header")
    if len(lines) - 1 > max_points:
        raise _fail(
            f"{where} has more than {max_points} data rows, the limit for one sweep; split it into separate sweep files"
        )

    notes: list = []
    iv, ic, fv, fi, unit_notes = _identify_columns(header, voltage_column, current_column, where)
    ncol = len(header)
    table = _fast_table(lines, delim, ncol) if not quoted else None
    if table is not None:
        v, i = np.ascontiguousarray(table[:, iv]), np.ascontiguousarray(table[:, ic])
        del table
        if fv != 1.0:
            v = v * fv
        if fi != 1.0:
            i = i * fi
        return v, i, unit_notes
    vs, cs = [], []
    append_v, append_c = vs.append, cs.append
    for s, n in zip(lines[1:], numbers[1:]):
        fields = _split_fields(s, delim, quoted)
        if fields is None:
            raise _fail(f"{where}: line {n} has unbalanced quotes; fix the quoting on that line")
        if len(fields) != ncol:
            while len(fields) > ncol and fields[-1] == "":
                fields.pop()
            if len(fields) != ncol:
                raise _fail(
                    f"{where}: line {n} has {len(fields)} fields but the header has {ncol}; make every row match "
                    f"the header (check the separator and the decimal mark)"
                )
        append_v(fields[iv])
        append_c(fields[ic])
    del lines
    rows = numbers[1:]
    v = _parse_numbers(vs, rows, header[iv], delim, where, notes)
    del vs
    i = _parse_numbers(cs, rows, header[ic], delim, where, notes)
    del cs
    if fv != 1.0:
        v = v * fv
    if fi != 1.0:
        i = i * fi
    return v, i, unit_notes + notes


def _fast_table(lines: list, delim, ncol: int):
    """Parse a plain all-numeric table in C; None when the careful path is needed.

    Any irregularity (a non-numeric or empty field, a ragged row, a trailing
    separator, decimal commas) makes this return None, and the line-by-line
    reader then either copes with it or names the offending line.
    """
    if ncol > 16:
        return None
    try:
        table = np.loadtxt(
            lines[1:], delimiter=delim, dtype=float, ndmin=2, comments=None, quotechar=None
        )
    except (ValueError, TypeError, OverflowError, IndexError):
        return None
    if table.ndim != 2 or table.shape != (len(lines) - 1, ncol):
        return None
    return table


def _looks_numeric(s: str) -> bool:
    try:
        float(s)
    except ValueError:
        return False
    return True


def _npy_header(fp, where: str):
    """Read shape and dtype from a .npy header without loading the data."""
    fmt = np.lib.format
    try:
        version = fmt.read_magic(fp)
        if version == (1, 0):
            shape, _, dtype = fmt.read_array_header_1_0(fp)
        else:
            # 2.0 and 3.0 share the layout (3.0 only allows UTF-8 field names)
            shape, _, dtype = fmt.read_array_header_2_0(fp)
    except Exception:  # noqa: BLE001 - any parse failure means "not a usable .npy"
        raise _fail(
            f"{where} is not a readable NumPy array file (pickled or other data are never loaded); "
            f"save the sweep with numpy.save/numpy.savez using plain numeric arrays"
        ) from None
    return tuple(int(s) for s in shape), dtype


def _check_dtype(dtype, where: str):
    if dtype.hasobject:
        raise _fail(
            f"{where} holds Python objects, which are never unpickled; save plain float arrays "
            f"(e.g. numpy.save(path, data.astype(float)))"
        )
    if dtype.names is None and dtype.kind not in "biuf":
        raise _fail(
            f"{where} holds {dtype} values, not real numbers; save the voltage and current as float arrays"
        )


def _np_load(path: Path, where: str, key=None):
    try:
        loaded = np.load(path, allow_pickle=False)
        if key is None:
            return np.asarray(loaded)
        with loaded as npz:
            return np.asarray(npz[key])
    except InputError:
        raise
    except Exception:  # noqa: BLE001 - any failure of an untrusted file becomes one line
        raise _fail(
            f"{where} could not be read as NumPy data (corrupt, truncated, or containing pickled objects); "
            f"save plain float arrays with numpy.save/numpy.savez"
        ) from None


def _load_npy(path: Path, voltage_column, current_column, max_points: int):
    where = _show(str(path), 120)
    with open(path, "rb") as fh:
        shape, dtype = _npy_header(fh, where)
    _check_dtype(dtype, where)
    count = int(np.prod(shape, dtype=np.int64)) if shape else 1
    if dtype.names is not None:
        if len(shape) != 1:
            raise _fail(f"{where}: a record array must be 1-D (one sweep); use the batch command for many sweeps")
        if count > max_points:
            raise _fail(
                f"{where} holds {count} points, more than the limit of {max_points}; split it into separate sweeps"
            )
        names = list(dtype.names)
        iv, ic, fv, fi, notes = _identify_columns(names, voltage_column, current_column, where, what="field")
        for k in (iv, ic):
            _check_dtype(dtype[names[k]], where)
        arr = _np_load(path, where)
        return arr[names[iv]].astype(float) * fv, arr[names[ic]].astype(float) * fi, notes
    if voltage_column is not None or current_column is not None:
        raise _fail(
            f"{where}: column names apply to text files, .npz keys and record arrays; a plain .npy array "
            f"must have shape (n, 2) or (2, n) holding voltage then current - drop the column options"
        )
    if len(shape) != 2 or 2 not in shape:
        hint = " (use the batch command for many sweeps)" if len(shape) > 2 else ""
        raise _fail(
            f"{where} holds an array of shape {shape}; save one sweep as shape (n, 2) or (2, n) with "
            f"voltage then current{hint}"
        )
    if count > 2 * max_points:
        raise _fail(
            f"{where} holds {count // 2} points, more than the limit of {max_points}; split it into separate sweeps"
        )
    arr = _np_load(path, where).astype(float)
    if arr.shape[1] == 2:
        return arr[:, 0], arr[:, 1], []
    return arr[0], arr[1], []


def _load_npz(path: Path, voltage_column, current_column, max_points: int, max_bytes: int):
    where = _show(str(path), 120)
    try:
        with zipfile.ZipFile(path) as zf:
            infos = {
                info.filename[:-4]: info
                for info in zf.infolist()
                if info.filename.endswith(".npy") and not info.is_dir()
            }
            keys = sorted(infos)
            if not keys:
                raise _fail(f"{where} holds no arrays; save the sweep with numpy.savez(path, voltage=..., current=...)")
            iv, ic, fv, fi, notes = _identify_columns(keys, voltage_column, current_column, where, what="array")
            for k in (iv, ic):
                info = infos[keys[k]]
                if info.file_size > max_bytes:
                    raise _fail(
                        f"{where}: array {_show(keys[k], 40)} unpacks to {info.file_size / 2**20:.0f} MiB, above "
                        f"the {max_bytes / 2**20:.0f} MiB limit; split the data into smaller files"
                    )
                with zf.open(info) as member:
                    shape, dtype = _npy_header(member, where)
                _check_dtype(dtype, where)
                if dtype.names is not None:
                    raise _fail(
                        f"{where}: array {_show(keys[k], 40)} is a record array; "
                        f"store voltage and current as plain float arrays"
                    )
                if len(shape) == 2 and min(shape) > 1:
                    raise _fail(
                        f"{where}: array {_show(keys[k], 40)} has shape {shape}, i.e. many sweeps; "
                        f"use the batch command for multi-sweep files"
                    )
                if len(shape) != 1:
                    raise _fail(
                        f"{where}: array {_show(keys[k], 40)} has shape {shape}; store one sweep as 1-D "
                        f"voltage and current arrays (use the batch command for many sweeps)"
                    )
                if shape[0] > max_points:
                    raise _fail(
                        f"{where}: array {_show(keys[k], 40)} holds {shape[0]} points, more than the limit of "
                        f"{max_points}; split it into separate sweeps"
                    )
    except InputError:
        raise
    except (zipfile.BadZipFile, zipfile.LargeZipFile, OSError, EOFError, ValueError, KeyError,
            NotImplementedError, RuntimeError):
        raise _fail(
            f"{where} is not a readable .npz archive; save the sweep with numpy.savez(path, voltage=..., current=...)"
        ) from None
    v = _np_load(path, where, keys[iv]).astype(float) * fv
    i = _np_load(path, where, keys[ic]).astype(float) * fi
    return v, i, notes


def load_sweep(
    source,
    *,
    voltage_column=None,
    current_column=None,
    sign: str = "auto",
    sweep_id: str | None = None,
    max_points: int = MAX_POINTS,
    max_bytes: int = MAX_FILE_BYTES,
) -> Sweep:
    """Read one I-V sweep from a file and return it cleaned, in SI units.

    Parameters
    ----------
    source : str or path-like
        A text file (``.csv``, ``.tsv``, ``.txt``, ``.dat``) with a header row,
        optional ``#`` comment lines, and comma, tab, semicolon or white-space
        separated columns; or a NumPy ``.npy`` file (shape (n, 2) or (2, n):
        voltage, current) or ``.npz`` archive (1-D arrays ``voltage`` and
        ``current``).
    voltage_column, current_column : str or int, optional
        Column (text), array key (.npz) or field (record .npy) to use, by name
        (case-insensitive) or 0-based index.  By default they are recognised
        from names like ``voltage``, ``V``, ``bias``, ``U`` and ``current``,
        ``I``, ``I_probe``.  Units given in the name (``current [mA]``,
        ``I_uA``, ``V_kV``, ``I/nA``) are converted to V and A; no unit means
        V and A.
    sign : {"auto", "electron-positive", "ion-positive"}
        Current sign convention of the file; see :func:`sweep_from_arrays`.
    sweep_id : str, optional
        Name of the sweep (default: the file stem); always sanitised.
    max_points : int
        Largest number of data rows accepted.
    max_bytes : int
        Largest file accepted (bytes); also caps what an .npz may unpack to.

    Raises
    ------
    InputError
        If the file cannot be used; the message is one line naming the fix.
    """
    if not isinstance(source, (str, os.PathLike)):
        raise TypeError("source must be a path (str or os.PathLike)")
    if sign not in _SIGNS:
        raise _fail(
            f"unknown sign convention {_show(sign, 30)}; use 'auto', 'electron-positive' or 'ion-positive'"
        )
    path = Path(source)
    where = _show(str(path), 120)
    _check_file(path, max_bytes)
    suffix = path.suffix.lower()
    if suffix in (".npy",):
        v, i, notes = _load_npy(path, voltage_column, current_column, max_points)
    elif suffix == ".npz":
        v, i, notes = _load_npz(path, voltage_column, current_column, max_points, max_bytes)
    elif suffix in TEXT_SUFFIXES:
        data = _read_bytes(path, max_bytes)
        v, i, notes = _load_text(path, data, voltage_column, current_column, max_points)
    else:
        shown = suffix or "no extension"
        raise _fail(
            f"{where}: unsupported file type ({_show(shown, 20)}); save the sweep as "
            f"{', '.join(TEXT_SUFFIXES + NUMPY_SUFFIXES)}"
        )
    return sweep_from_arrays(
        v,
        i,
        sign=sign,
        sweep_id=sweep_id if sweep_id is not None else path.stem,
        source=str(path),
        notes=notes,
        max_points=max_points,
    )


# --------------------------------------------------------------------------
# atomic writing
# --------------------------------------------------------------------------

_UMASK = None


def _umask() -> int:
    global _UMASK
    if _UMASK is None:
        mask = None
        try:
            with open("/proc/self/status", encoding="ascii", errors="replace") as fh:
                for line in fh:
                    if line.startswith("Umask:"):
                        mask = int(line.split()[1], 8)
                        break
        except (OSError, ValueError):
            mask = None
        if mask is None:
            mask = os.umask(0o022)
            os.umask(mask)
        _UMASK = mask
    return _UMASK


def _fsync_dir(directory: Path) -> None:
    if os.name != "posix":
        return
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def atomic_write_bytes(path, data: bytes) -> Path:
    """Write ``data`` to ``path`` so that readers see the old file or the new one, never a part.

    The bytes go to a temporary file in the same directory, which is flushed
    to disk and then renamed over ``path`` with :func:`os.replace`.  Missing
    parent directories are created.  Returns the path written.
    """
    path = Path(path)
    data = bytes(memoryview(data))
    parent = path.parent
    parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name[:100]}.", suffix=".tmp", dir=parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    _fsync_dir(parent)
    return path


def atomic_write_text(path, text: str, encoding: str = "utf-8") -> Path:
    """Write ``text`` to ``path`` atomically (see :func:`atomic_write_bytes`)."""
    if not isinstance(text, str):
        raise TypeError("text must be a str")
    return atomic_write_bytes(path, text.encode(encoding))


@contextlib.contextmanager
def atomic_path(path) -> Iterator[Path]:
    """Yield a temporary path beside ``path`` for a writer that needs a file name (netCDF,
    figures); on success it is flushed to disk and renamed over ``path``, on failure removed.

    The same guarantee as :func:`atomic_write_bytes`: readers see the old file or the new one.
    """
    path = Path(path)
    parent = path.parent
    parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name[:100]}.", suffix=".tmp", dir=parent)
    os.close(fd)
    try:
        yield Path(tmp)
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    _fsync_dir(parent)


def write_csv(path, header: Sequence[str], rows, *, comments: Sequence[str] = ()) -> Path:
    """Write a CSV table atomically: optional ``# `` comment lines, one header row, then ``rows``
    (sequences of values; None is written as an empty field, floats with ``repr`` so they read
    back exactly)."""
    buf = _io.StringIO()
    for line in comments:
        buf.write(("# " + str(line)).rstrip() + "\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(list(header))
    for row in rows:
        w.writerow(["" if v is None else (repr(float(v)) if isinstance(v, (float, np.floating)) else v)
                    for v in row])
    return atomic_write_text(path, buf.getvalue())


def _move_tree_into(src: Path, dst: Path) -> None:
    """Move every entry of ``src`` into ``dst`` (which exists), replacing same-named files."""
    for entry in sorted(os.listdir(src)):
        s = src / entry
        d = dst / entry
        if s.is_dir() and not s.is_symlink():
            if d.is_dir() and not d.is_symlink():
                _move_tree_into(s, d)
                continue
            if not os.path.lexists(d):
                os.replace(s, d)
                continue
        os.replace(s, d)


@contextlib.contextmanager
def staged_output_dir(out_dir) -> Iterator[Path]:
    """Stage results in a temporary sibling directory and publish them only on success.

    Yields a fresh directory next to ``out_dir`` (named
    ``.{name}.partial-XXXX``).  When the ``with`` block finishes normally,
    every file written there is moved into ``out_dir`` (created if needed;
    when it did not exist the whole directory is renamed into place at once).
    If the block raises, the staging directory is deleted, any parent
    directories this call created are removed again, ``out_dir`` is left
    exactly as it was, and the exception propagates.
    """
    out = Path(out_dir)
    if out.name in ("", ".", ".."):
        out = out.resolve()
    if os.path.lexists(out) and not out.is_dir():
        raise _fail(f"output path {_show(str(out), 120)} exists and is not a directory; choose a directory for --out")
    parent = out.parent
    created = []
    probe = parent
    while not probe.exists():
        created.append(probe)
        if probe.parent == probe:
            break
        probe = probe.parent
    parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{out.name[:100]}.partial-", dir=parent))
    try:
        yield staging
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        for d in created:  # innermost first
            with contextlib.suppress(OSError):
                d.rmdir()
        raise
    try:
        if not os.path.lexists(out):
            os.chmod(staging, 0o777 & ~_umask())
            try:
                os.rename(staging, out)
            except OSError:
                out.mkdir(exist_ok=True)
                _move_tree_into(staging, out)
        else:
            _move_tree_into(staging, out)
        _fsync_dir(parent)
    finally:
        if staging.exists():
            shutil.rmtree(staging, ignore_errors=True)


def write_sweep_csv(path, sweep_or_arrays, *, header_comment: str | None = None) -> Path:
    """Write a sweep as ``voltage_V,current_A`` CSV, atomically.

    A :class:`Sweep` holding both sweep directions is written in its recorded
    order, so reading the file back recovers the directions.

    ``sweep_or_arrays`` is a :class:`Sweep` or a pair ``(voltage, current)``
    of 1-D arrays in V and A.  Each line of ``header_comment`` becomes a
    ``# `` comment line above the header.  Values are written with enough
    digits to read back exactly.
    """
    if isinstance(sweep_or_arrays, Sweep):
        v, i = sweep_or_arrays.in_record_order()
    else:
        try:
            v, i = sweep_or_arrays
        except (TypeError, ValueError):
            raise TypeError("sweep_or_arrays must be a Sweep or a (voltage, current) pair") from None
    v = np.asarray(v, dtype=float)
    i = np.asarray(i, dtype=float)
    if v.ndim != 1 or v.shape != i.shape:
        raise ValueError("voltage and current must be 1-D arrays of the same length")
    parts = []
    if header_comment:
        for line in str(header_comment).splitlines():
            parts.append(("# " + line).rstrip() + "\n")
    parts.append("voltage_V,current_A\n")
    if v.size:
        parts.append(("%r,%r\n" * v.size) % tuple(np.column_stack([v, i]).ravel().tolist()))
    return atomic_write_text(path, "".join(parts))
