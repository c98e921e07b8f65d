"""Multi-sweep NumPy files, read one sweep at a time and never unpickled.

* ``.npz``: ``current`` of shape ``(k, n)`` with ``voltage`` ``(n,)`` (shared) or ``(k, n)``; other
  ``(k,)`` arrays become sweep coordinates, an optional sweep-id array names the sweeps. Rows are
  streamed from the archive member (C order), so a large file is never held in memory.
* ``.npy``: shape ``(k, 2, n)`` or ``(k, n, 2)`` (voltage then current), memory-mapped.

Files holding one sweep go to the ordinary reader (:func:`bayesprobe.io.load_sweep`).
"""
from __future__ import annotations

import zipfile
from pathlib import Path

import numpy as np

from ..io import MAX_FILE_BYTES, identify_columns, sanitise_id
from ._messages import fail, one_line, show
from .loaders import MAX_COORDS, MAX_SWEEPS_PER_FILE, SWEEP_ID_NAMES, check_size, cleaner, raising, single

#: names of the current array looked for when counting sweeps (for the progress bar only)
_COUNT_CURRENT_NAMES = ("current", "i", "i_probe", "probe_current")


def npy_header(fp):
    """(shape, fortran_order, dtype) of a .npy stream, never loading data or objects."""
    fmt = np.lib.format
    version = fmt.read_magic(fp)
    if version == (1, 0):
        return fmt.read_array_header_1_0(fp)
    return fmt.read_array_header_2_0(fp)


def _numeric(dtype) -> bool:
    return dtype.names is None and not dtype.hasobject and dtype.kind in "biuf" and dtype.subdtype is None


# ---------------------------------------------------------------------------- .npz

def npz_sweeps(path: Path, opts):
    """(raw_id, index, coords, loader) of every sweep of an ``.npz``."""
    where = show(str(path), 120)
    check_size(path)
    with zipfile.ZipFile(path) as zf:
        infos = {i.filename[:-4]: i for i in zf.infolist() if i.filename.endswith(".npy") and not i.is_dir()}
        if not infos:
            raise fail(f"{where} holds no arrays; save sweeps with numpy.savez(path, voltage=..., current=...)")
        headers = _npz_headers(zf, infos)
        keys = sorted(headers)
        iv, ic, fv, fi, notes = identify_columns(keys, opts["voltage_column"], opts["current_column"], where,
                                                  what="array")
        kv, kc = keys[iv], keys[ic]
        for key in (kv, kc):
            if not _numeric(headers[key][2]):
                raise fail(f"{where}: array {show(key, 40)} holds {headers[key][2]} values, not plain numbers "
                           "(pickled or structured data are never loaded); save float arrays")
        if len(headers[kc][0]) == 1:        # one sweep: the ordinary reader (with its own checks)
            yield (path.stem, None, {}, single(path, opts))
            return
        k = _npz_check_layout(infos, headers, kv, kc, opts, where)
        coords, labels = _npz_coords(zf, infos, headers, keys, (kv, kc), k)
        yield from _npz_rows_as_sweeps(path, zf, infos, headers, (kv, kc), (fv, fi, notes), coords, labels,
                                       opts, where)


def _npz_headers(zf, infos) -> dict:
    """name -> (shape, fortran order, dtype, header length) of the first 256 members."""
    headers = {}
    for key, info in sorted(infos.items())[:256]:
        with zf.open(info) as fp:
            shape, fortran, dtype = npy_header(fp)
            headers[key] = (tuple(int(s) for s in shape), bool(fortran), dtype, fp.tell())
    return headers


def _npz_check_layout(infos, headers, kv, kc, opts, where) -> int:
    """The number of sweeps k, after checking shapes, limits and member sizes."""
    sv, sc = headers[kv][0], headers[kc][0]
    if len(sc) != 2:
        raise fail(f"{where}: array {show(kc, 40)} has shape {sc}; store many sweeps as (sweeps, points)")
    k, n = sc
    if k < 1 or k > MAX_SWEEPS_PER_FILE:
        raise fail(f"{where} holds {k} sweeps; between 1 and {MAX_SWEEPS_PER_FILE} are accepted per file")
    if n > opts["max_points"]:
        raise fail(f"{where}: {n} points per sweep, more than the limit of {opts['max_points']}")
    if sv not in ((n,), (k, n)):
        raise fail(f"{where}: {show(kv, 40)} has shape {sv} but {show(kc, 40)} has shape {sc}; the "
                   f"voltage must have shape ({n},) (shared) or ({k}, {n})")
    for key in (kv, kc):
        shape, fortran, dt, hdr = headers[key]
        expected = hdr + int(np.prod(shape, dtype=np.int64)) * dt.itemsize
        if infos[key].file_size != expected:
            raise fail(f"{where}: array {show(key, 40)} is truncated or padded ({infos[key].file_size} bytes "
                       f"instead of {expected}); write the file again")
    return k


def _npz_coords(zf, infos, headers, keys, data_keys, k):
    """Per-sweep coordinates (other numeric ``(k,)`` members) and sweep labels (a sweep-id member)."""
    coords, labels = {}, None
    for key in keys:
        shape, fortran, dt, hdr = headers[key]
        if key in data_keys or shape != (k,):
            continue
        name = sanitise_id(key)[:32]
        if key.lower() in SWEEP_ID_NAMES and dt.kind in "Uiu" and (dt.kind != "U" or dt.itemsize <= 4 * 256):
            labels = _npz_member(zf, infos[key], hdr, shape, fortran, dt)
        elif _numeric(dt) and len(coords) < MAX_COORDS:
            coords[name] = _npz_member(zf, infos[key], hdr, shape, fortran, dt).astype(float)
    if labels is not None:
        labels = [str(x) for x in labels.tolist()]
    return coords, labels


def _npz_rows_as_sweeps(path, zf, infos, headers, data_keys, factors, coords, labels, opts, where):
    """One (raw_id, index, coords, loader) per row of the current member."""
    kv, kc = data_keys
    fv, fi, notes = factors
    (sv, fov, dv, hv), (sc, foc, dc, hc) = headers[kv], headers[kc]
    k = sc[0]
    width = len(str(k - 1))
    rows_v = _npz_rows(zf, infos[kv], hv, sv, fov, dv) if len(sv) == 2 else None
    shared_v = _npz_member(zf, infos[kv], hv, sv, fov, dv).astype(float) * fv if len(sv) == 1 else None
    rows_c = _npz_rows(zf, infos[kc], hc, sc, foc, dc)
    for j in range(k):
        raw = labels[j] if labels is not None else f"{path.stem}-{j:0{width}d}"
        c = {name: float(arr[j]) for name, arr in coords.items()}
        try:
            cur = next(rows_c).astype(float) * fi
            vol = shared_v if shared_v is not None else next(rows_v).astype(float) * fv
        except (OSError, EOFError, zipfile.BadZipFile, ValueError) as exc:
            yield (raw, j, c, raising(f"{where}: sweep {j} could not be read ({one_line(exc, 120)}); "
                                      "the rest of the file is skipped - write the file again"))
            return
        yield (raw, j, c, cleaner(vol, cur, sign=opts["sign"], source=f"{path} [sweep {j}]", notes=notes))


def _npz_member(zf, info, hdr, shape, fortran, dtype):
    """A small member read whole (coordinates, ids)."""
    with zf.open(info) as fp:
        fp.seek(hdr)
        count = int(np.prod(shape, dtype=np.int64))
        buf = fp.read(count * dtype.itemsize)
    if len(buf) != count * dtype.itemsize:
        raise fail(f"array {show(info.filename, 40)} is truncated")
    arr = np.frombuffer(buf, dtype=dtype, count=count)
    return arr.reshape(shape, order="F" if fortran else "C")


def _npz_rows(zf, info, hdr, shape, fortran, dtype):
    """Rows of a (k, n) member, streamed: C order one row at a time; Fortran order read whole (capped)."""
    k, n = shape
    if fortran:
        if k * n * dtype.itemsize > MAX_FILE_BYTES:
            raise fail(f"array {show(info.filename, 40)} is stored column-major and too large to read at once; "
                       "save it with numpy.ascontiguousarray")
        arr = _npz_member(zf, info, hdr, shape, fortran, dtype)
        for j in range(k):
            yield np.array(arr[j])
        return
    with zf.open(info) as fp:
        fp.seek(hdr)
        size = n * dtype.itemsize
        for _ in range(k):
            buf = fp.read(size)
            if len(buf) != size:
                raise EOFError("the array ends early")
            yield np.frombuffer(buf, dtype=dtype).copy()


def count_npz(path: Path) -> int:
    """Sweeps in an ``.npz`` from its member headers alone."""
    with zipfile.ZipFile(path) as zf:
        names = {i.filename[:-4]: i for i in zf.infolist() if i.filename.endswith(".npy")}
        key = next((k for k in names if k.lower() in _COUNT_CURRENT_NAMES), None)
        if key is None:
            return 1
        with zf.open(names[key]) as fp:
            shape = npy_header(fp)[0]
        return shape[0] if len(shape) == 2 else 1


# ---------------------------------------------------------------------------- .npy

def npy_sweeps(path: Path, opts):
    """(raw_id, index, coords, loader) of every sweep of an ``.npy`` of shape (k, 2, n) or (k, n, 2)."""
    where = show(str(path), 120)
    check_size(path)
    with open(path, "rb") as fp:
        shape, fortran, dtype = npy_header(fp)
    if len(shape) != 3:
        yield (path.stem, None, {}, single(path, opts))
        return
    if not _numeric(dtype):
        raise fail(f"{where} holds {dtype} values, not plain numbers; save float arrays")
    k = shape[0]
    if shape[1] == 2 and shape[2] != 2:
        layout = "k2n"
        n = shape[2]
    elif shape[2] == 2:
        layout = "kn2"
        n = shape[1]
    else:
        raise fail(f"{where} holds an array of shape {shape}; store many sweeps as (sweeps, 2, points) "
                   "with voltage then current")
    if not 1 <= k <= MAX_SWEEPS_PER_FILE or n > opts["max_points"]:
        raise fail(f"{where}: {k} sweeps of {n} points is beyond the limits ({MAX_SWEEPS_PER_FILE} sweeps, "
                   f"{opts['max_points']} points)")
    arr = np.load(path, mmap_mode="r", allow_pickle=False)
    width = len(str(k - 1))
    for j in range(k):
        row = np.array(arr[j], dtype=float)
        v, i = (row[0], row[1]) if layout == "k2n" else (row[:, 0], row[:, 1])
        yield (f"{path.stem}-{j:0{width}d}", j, {}, cleaner(v, i, sign=opts["sign"], source=f"{path} [sweep {j}]"))
    del arr


def count_npy(path: Path) -> int:
    """Sweeps in an ``.npy`` from its header alone."""
    with open(path, "rb") as fp:
        shape = npy_header(fp)[0]
    return shape[0] if len(shape) == 3 else 1
