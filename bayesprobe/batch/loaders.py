"""What every multi-sweep reader shares: its limits, and the loaders that turn one sweep's
raw data into a :class:`~bayesprobe.sweep.Sweep` (or into the one-line error of an unusable sweep).

A loader is a callable ``loader(sweep_id=...)``: nothing is read or cleaned until it is called,
so sweeps already finished by an earlier run are never loaded.
"""
from __future__ import annotations

import os
from pathlib import Path

from ..io import load_sweep, sweep_from_arrays
from ._messages import fail, show

#: most sweeps one multi-sweep file may hold
MAX_SWEEPS_PER_FILE = 1_000_000
#: longest line accepted in a multi-sweep text file (bytes)
MAX_LINE_BYTES = 1 << 20
#: most per-sweep coordinates taken from one file
MAX_COORDS = 16
#: names recognised as the sweep-id column / array of a multi-sweep file
SWEEP_ID_NAMES = ("sweep_id", "sweep", "sweep_no", "sweep_number", "sweep_index", "sweep_name", "sweepid")


def raising(message: str):
    """Loader of an unusable sweep: raises InputError(message)."""
    def load(sweep_id=None):
        raise fail(message)
    return load


def cleaner(v, i, *, sign, source, notes=()):
    """Loader cleaning raw arrays into a Sweep (the sweep id is filled in by the caller)."""
    def load(sweep_id="sweep"):
        return sweep_from_arrays(v, i, sign=sign, sweep_id=sweep_id, source=source, notes=notes)
    return load


def single(path: Path, opts):
    """Loader of a one-sweep file through the ordinary reader."""
    def load(sweep_id="sweep"):
        return load_sweep(path, voltage_column=opts["voltage_column"], current_column=opts["current_column"],
                          sign=opts["sign"], sweep_id=sweep_id, max_points=opts["max_points"])
    return load


def check_size(path: Path):
    """InputError for an empty file."""
    st = os.stat(path)
    if st.st_size == 0:
        raise fail(f"{show(str(path), 120)} is empty")
