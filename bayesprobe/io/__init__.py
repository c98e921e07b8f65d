"""Reading probe sweeps from files or arrays, and writing results atomically.

The package is split along its jobs:

* :mod:`~bayesprobe.io.text` -- the one reader of delimited numeric text with a header
  (:func:`read_delimited_table`);
* :mod:`~bayesprobe.io.columns` -- which column holds voltage and current, units in the names
  (:func:`identify_columns`, :func:`norm_name`), :func:`sanitise_id`;
* :mod:`~bayesprobe.io.numpy_files` -- .npy/.npz sweeps, never unpickled;
* :mod:`~bayesprobe.io.sweeps` -- :func:`load_sweep` and the cleaning :func:`sweep_from_arrays`;
* :mod:`~bayesprobe.io.atomic` -- atomic file writes and staged output folders;
* :mod:`~bayesprobe.io.csvfile` -- :func:`write_csv` and :func:`write_sweep_csv`;
* :mod:`~bayesprobe.io.limits` -- the size caps on untrusted input.

Everything read is treated as untrusted (never ``eval``, never unpickled, sizes capped) and every
problem becomes a one-line :class:`~bayesprobe.errors.InputError` that names the fix.  The private
helpers re-exported below keep their old import path for existing callers; new code uses the
public names.
"""
from __future__ import annotations

# ruff: noqa: F401  (the private names are re-exported for the readers that import them from here)

from ..errors import InputError
from ..sweep import Sweep, detect_branches
from ._messages import _CONTROL_CHARS, _fail, _show, _show_list
from .atomic import (_fsync_dir, _move_tree_into, _umask, atomic_path, atomic_write_bytes, atomic_write_text,
                     staged_output_dir)
from .columns import (_CURRENT_NAMES, _ID_BAD, _UNIT_HELP, _UNITS, _VOLTAGE_NAMES, _WINDOWS_RESERVED,
                      _find_explicit, _identify_columns, _norm_name, _role_of, _split_unit, _unit_factor,
                      identify_columns, norm_name, sanitise_id)
from .csvfile import write_csv, write_sweep_csv
from .limits import (MAX_COLUMNS, MAX_FILE_BYTES, MAX_POINTS, MIN_POINTS, MIN_VOLTAGE_SPAN, NUMPY_SUFFIXES,
                     TEXT_SUFFIXES, _check_file, _read_bytes)
from .numpy_files import _check_dtype, _load_npy, _load_npz, _np_load, _npy_header
from .sweeps import _SIGNS, _as_float_1d, _end_medians, _load_text, load_sweep, sweep_from_arrays
from .text import (_BINARY_BYTES, _DECIMAL_COMMA, _MISSING, _TEXT_BYTES, DelimitedTable, _choose_delimiter,
                   _decode_text, _fast_table, _looks_numeric, _merge_unit_tokens, _parse_numbers, _split_fields,
                   read_delimited_table)

__all__ = [
    "load_sweep",
    "sweep_from_arrays",
    "read_delimited_table",
    "DelimitedTable",
    "identify_columns",
    "norm_name",
    "sanitise_id",
    "atomic_write_text",
    "atomic_write_bytes",
    "atomic_path",
    "staged_output_dir",
    "write_csv",
    "write_sweep_csv",
    "MAX_FILE_BYTES",
    "MAX_POINTS",
    "MIN_POINTS",
    "MIN_VOLTAGE_SPAN",
    "TEXT_SUFFIXES",
    "NUMPY_SUFFIXES",
]
