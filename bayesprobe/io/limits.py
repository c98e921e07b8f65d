"""Size caps on untrusted input files, and the checks that enforce them before anything is parsed."""
from __future__ import annotations

import os
import stat
from pathlib import Path

from ._messages import _fail, _show

__all__ = ["MAX_FILE_BYTES", "MAX_POINTS", "MIN_POINTS", "MIN_VOLTAGE_SPAN", "MAX_COLUMNS",
           "TEXT_SUFFIXES", "NUMPY_SUFFIXES"]

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


def _check_size(data: bytes, max_bytes: int, where: str) -> None:
    if len(data) > max_bytes:
        raise _fail(
            f"{where} is above the {max_bytes / 2**20:.0f} MiB limit for one sweep; split it into smaller files"
        )


def _read_bytes(path: Path, max_bytes: int) -> bytes:
    where = _show(str(path), 120)
    try:
        with open(path, "rb") as fh:
            data = fh.read(max_bytes + 1)
    except OSError as exc:
        raise _fail(f"sweep file {where} cannot be read ({exc.strerror or 'OS error'}); check the file") from None
    _check_size(data, max_bytes, where)
    return data
