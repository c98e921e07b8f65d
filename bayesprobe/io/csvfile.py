"""Writing tables as CSV files, atomically: any table (:func:`write_csv`) and one sweep
(:func:`write_sweep_csv`, in its recorded order so a re-read finds both sweep directions)."""
from __future__ import annotations

import csv
from pathlib import Path
from typing import Sequence

import numpy as np

from ..sweep import Sweep
from .atomic import atomic_path

__all__ = ["write_csv", "write_sweep_csv"]


def write_csv(path, header: Sequence[str], rows, *, comments: Sequence[str] = ()) -> Path:
    """Write a CSV table atomically: optional ``# `` comment lines, one header row, then ``rows``
    (sequences of values; None is written as an empty field, floats with ``repr`` so they read
    back exactly).

    ``rows`` may be any iterable, a generator included: each row is written to the temporary file
    of :func:`atomic_path` as it comes, so the table is never held in memory whole.  The file
    appears at ``path`` only when every row is written (UTF-8, ``\\n`` line ends); if anything
    fails on the way, ``path`` is left as it was and the temporary file is removed.
    """
    path = Path(path)
    with atomic_path(path) as tmp, open(tmp, "w", encoding="utf-8", newline="") as fh:
        for line in comments:
            fh.write(("# " + str(line)).rstrip() + "\n")
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(list(header))
        for row in rows:
            w.writerow(["" if v is None else (repr(float(v)) if isinstance(v, (float, np.floating)) else v)
                        for v in row])
    return path


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
    comments = str(header_comment).splitlines() if header_comment else ()
    return write_csv(path, ("voltage_V", "current_A"), zip(v.tolist(), i.tolist()), comments=comments)
