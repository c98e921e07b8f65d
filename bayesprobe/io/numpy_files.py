"""Reading one sweep from NumPy files (.npy arrays and record arrays, .npz archives) without ever
unpickling: shapes and dtypes are read from the headers and checked before any data is loaded."""
from __future__ import annotations

import zipfile
from pathlib import Path

import numpy as np

from ..errors import InputError
from ._messages import _fail, _show
from .columns import identify_columns


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
        iv, ic, fv, fi, notes = identify_columns(names, voltage_column, current_column, where, what="field")
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
            iv, ic, fv, fi, notes = identify_columns(keys, voltage_column, current_column, where, what="array")
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
