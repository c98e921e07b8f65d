"""Reading one probe sweep: the file readers behind :func:`load_sweep` (text through
:func:`~bayesprobe.io.text.read_delimited_table`, NumPy files through :mod:`bayesprobe.io.numpy_files`)
and the cleaning every sweep passes, :func:`sweep_from_arrays`.

Everything read here is treated as untrusted: files are parsed with plain string handling and NumPy
(never ``eval``, never unpickled), their size is capped before anything is allocated, and every
problem becomes a one-line :class:`~bayesprobe.errors.InputError` that says how to fix it.
"""
from __future__ import annotations

import os
from pathlib import Path
from typing import Sequence

import numpy as np

from ..sweep import Sweep, detect_branches
from ._messages import _fail, _show
from .columns import identify_columns, sanitise_id
from .limits import (MAX_COLUMNS, MAX_FILE_BYTES, MAX_POINTS, MIN_POINTS, MIN_VOLTAGE_SPAN, NUMPY_SUFFIXES,
                     TEXT_SUFFIXES, _check_file, _read_bytes)
from .numpy_files import _load_npy, _load_npz
from .text import DelimitedTable, _looks_numeric, read_delimited_table

__all__ = ["load_sweep", "sweep_from_arrays"]

_SIGNS = ("auto", "electron-positive", "ion-positive")


# --------------------------------------------------------------------------
# cleaning (shared by every reader)
# --------------------------------------------------------------------------


def _check_sign(sign) -> None:
    if sign not in _SIGNS:
        raise _fail(
            f"unknown sign convention {_show(sign, 30)}; use 'auto', 'electron-positive' or 'ion-positive'"
        )


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


def _paired_arrays(voltage, current, where: str, max_points: int | None):
    """Voltage and current as 1-D float arrays of one length within the point cap."""
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
    return v, i


def _drop_non_finite(v, i, where: str, notes: list):
    """Drop rows with a non-finite voltage or current; then at least MIN_POINTS must be left."""
    finite = np.isfinite(v) & np.isfinite(i)
    n_bad = int(v.size - np.count_nonzero(finite))
    if n_bad:
        v, i = v[finite], i[finite]
        row = "row" if n_bad == 1 else "rows"
        notes.append(f"dropped {n_bad} {row} with a missing or non-finite voltage or current")
    if v.size < MIN_POINTS:
        extra = f" after dropping {n_bad} unusable rows" if n_bad else ""
        raise _fail(
            f"{where}: only {v.size} usable points{extra}, fewer than the {MIN_POINTS} needed; "
            f"record a sweep with more voltage steps"
        )
    return v, i


def _sort_by_voltage(v, i, notes: list):
    """Sort by voltage (stable); for a sweep recorded both ways keep each point's direction and ramp.

    Returns ``(v, i, direction, ramp, record_order)``, the last three None for a one-way sweep.
    """
    branches = detect_branches(v)
    direction = ramp = record_order = None
    if np.any(np.diff(v) < 0):
        order = np.argsort(v, kind="stable")
        v, i = v[order], i[order]
        if branches is not None:
            direction, ramp = branches[0][order], branches[1][order]
            record_order = order
            n_up = int(np.count_nonzero(direction > 0))
            notes.append(
                f"holds both sweep directions ({n_up} points recorded with rising bias, {v.size - n_up} with "
                f"falling bias); sorted by voltage, directions kept (model their difference with the "
                f"hysteresis distortion)")
        else:
            notes.append("sorted by voltage (the input was not in increasing voltage order)")
    return v, i, direction, ramp, record_order


def _check_span_and_spread(v, i, where: str) -> None:
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


def _end_medians(current: np.ndarray):
    n = current.size
    m = max(3, n // 10)
    return float(np.median(current[:m])), float(np.median(current[-m:]))


def _electron_positive(i, sign: str, notes: list):
    """Flip the current to the electron-positive convention if needed; returns (i, flipped, i_lo, i_hi)."""
    flipped = False
    i_lo, i_hi = _end_medians(i)
    if sign == "ion-positive":
        flipped = True
        notes.append("current sign flipped as requested: the input uses the ion-current-positive convention")
    elif sign == "auto" and i_hi < 0 and abs(i_hi) > abs(i_lo):
        flipped = True
        notes.append(
            "current sign flipped: the file uses the ion-current-positive convention "
            "(electron saturation was negative)"
        )
    if flipped:
        i = -i
        i_lo, i_hi = -i_lo, -i_hi
    return i, flipped, i_lo, i_hi


def _check_crosses_zero(i, i_lo: float, i_hi: float, where: str) -> None:
    """The current must rise through zero from the ion side (low bias) to the electron side."""
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
    _check_sign(sign)
    v, i = _paired_arrays(voltage, current, where, max_points)
    out_notes = [str(n) for n in notes]
    v, i = _drop_non_finite(v, i, where, out_notes)
    v, i, direction, ramp, record_order = _sort_by_voltage(v, i, out_notes)
    _check_span_and_spread(v, i, where)
    i, flipped, i_lo, i_hi = _electron_positive(i, sign, out_notes)
    _check_crosses_zero(i, i_lo, i_hi, where)
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
# text files
# --------------------------------------------------------------------------


def _check_sweep_table(table: DelimitedTable, where: str, max_points: int) -> None:
    """A sweep table needs a real header of 2 to MAX_COLUMNS columns and 1 to ``max_points`` rows."""
    header = table.header
    if len(header) > MAX_COLUMNS:
        raise _fail(
            f"{where}: the header has {len(header)} columns, more than {MAX_COLUMNS}; "
            f"keep only the voltage and current columns"
        )
    if len(header) < 2:
        raise _fail(
            f"{where} has only one column (header {_show(table.header_text, 40)}); the file needs a voltage and a "
            f"current column separated by commas, tabs, semicolons or spaces"
        )
    if all(_looks_numeric(h) for h in header):
        raise _fail(
            f"{where}: the first non-comment line (line {table.header_line}) is data, not a header; add a header "
            f"row such as 'voltage_V,current_A'"
        )
    if len(table) == 0:
        raise _fail(f"{where} has a header but no data rows; export the sweep data below the header")
    if len(table) > max_points:
        raise _fail(
            f"{where} has more than {max_points} data rows, the limit for one sweep; split it into separate sweep files"
        )


def _load_text(path: Path, data: bytes, voltage_column, current_column, max_points: int):
    """Voltage (V), current (A) and reading notes from a text sweep file whose bytes are ``data``."""
    where = _show(str(path), 120)
    table = read_delimited_table(data, where=where, max_rows=max_points, max_bytes=len(data))
    _check_sweep_table(table, where, max_points)
    iv, ic, fv, fi, unit_notes = identify_columns(table.header, voltage_column, current_column, where)
    v, i = table.numbers([iv, ic])
    table_notes = table.notes
    del table
    if fv != 1.0:
        v = v * fv
    if fi != 1.0:
        i = i * fi
    return v, i, unit_notes + table_notes


# --------------------------------------------------------------------------
# any sweep file
# --------------------------------------------------------------------------


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
    _check_sign(sign)
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
