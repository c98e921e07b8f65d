"""Many sweeps: resumable, crash-safe batch fitting on a process pool or a Dask cluster.

Layout of the output folder ``OUT``::

    OUT/batch.json           the settings of the run (a resume must use the same ones)
    OUT/sweeps/<id>.json     one record per sweep, written atomically the moment it finishes
    OUT/posteriors/<id>.nc   full posterior per sweep (only with ``keep_posteriors``)
    OUT/results.csv          one row per sweep, sorted by sweep id
    OUT/results.nc           the same as an xarray Dataset with a ``sweep`` dimension
    OUT/profiles.png         main parameters against the sweep coordinate, with credible bands

Only the parent process writes files: workers (local processes or Dask workers on
other machines) return each sweep's record, and the parent writes it atomically.
A rerun with the same ``OUT`` skips every sweep that has a record, so killing a
batch loses at most the sweeps that were running. Each sweep's random seed is
derived from the global seed and the sweep id, so results do not depend on the
executor, the number of workers or the order in which sweeps finish.

Input is untrusted: files are never unpickled, multi-sweep files are read one
sweep at a time (rows of a ``(k, n)`` array member of an ``.npz``, memory-mapped
``.npy``, blocks of a CSV), and every size is capped.
"""
from __future__ import annotations

import contextlib
import csv
import glob
import hashlib
import io as _io
import json
import math
import os
import re
import sys
import time
import zipfile
from collections import deque
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Callable, Iterator

import numpy as np

from .errors import InputError
from .quantities import table_names
from .io import (MAX_FILE_BYTES, MAX_POINTS, NUMPY_SUFFIXES, TEXT_SUFFIXES, atomic_write_bytes,
                 atomic_write_text, load_sweep, sanitise_id, sweep_from_arrays)

__all__ = ["fit_many", "iter_sweeps", "assemble_results", "sweep_seed", "load_sweep_table", "BatchSummary",
           "SweepItem", "RECORD_SCHEMA", "MAX_SWEEPS_PER_FILE"]

RECORD_SCHEMA = "bayesprobe.batch-sweep/1"
MANIFEST_SCHEMA = "bayesprobe.batch/1"
RESULTS_SCHEMA = "bayesprobe.batch-results/1"
#: most sweeps one multi-sweep file may hold
MAX_SWEEPS_PER_FILE = 1_000_000
#: longest line accepted in a multi-sweep text file (bytes)
MAX_LINE_BYTES = 1 << 20
#: most per-sweep coordinates taken from one file
MAX_COORDS = 16
#: largest per-sweep record read back when assembling the tables (bytes)
MAX_RECORD_BYTES = 16 << 20
#: largest per-sweep settings table (bytes, rows)
MAX_TABLE_BYTES, MAX_TABLE_ROWS = 16 << 20, 200_000
#: the parameters reported in the tables (those present in any sweep)
#: (registry flag ``table``; distortion parameters are present only when that distortion is modelled)
TABLE_PARAMETERS = table_names()
#: names recognised as the sweep-id column / array of a multi-sweep file
SWEEP_ID_NAMES = ("sweep_id", "sweep", "sweep_no", "sweep_number", "sweep_index", "sweep_name", "sweepid")
STATUSES = ("ok", "not-converged", "failed")

_DASK_HINT = "install it with: pip install 'bayesprobe[dask]'"
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f]")


def _one_line(text, limit: int = 500) -> str:
    s = " ".join(_CONTROL.sub(" ", str(text)).split())
    return s if len(s) <= limit else s[: limit - 3] + "..."


def _show(text, limit: int = 80) -> str:
    s = _CONTROL.sub("?", str(text))
    return "'" + (s if len(s) <= limit else s[: limit - 3] + "...") + "'"


def _sha8(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()[:8]


def file_id_for(raw) -> str:
    """The safe file name stem of a sweep id.

    Ids that are already safe are kept; any other id is sanitised and gets the first
    8 hex digits of its SHA-256 appended, so that different ids (``a/b`` and ``a_b``)
    never share a file.
    """
    raw = str(raw)
    s = sanitise_id(raw)
    if s != raw:
        s = sanitise_id(f"{s[:55]}-{_sha8(raw)}")
    return s


def sweep_seed(seed: int, sweep_id: str) -> int:
    """The seed of one sweep: a 64-bit integer from ``SeedSequence([seed, sha256(sweep_id)])``.

    Independent of Python's hash randomisation, the executor and the worker count.
    """
    h = int.from_bytes(hashlib.sha256(str(sweep_id).encode("utf-8")).digest()[:8], "big")
    words = np.random.SeedSequence([int(seed), h]).generate_state(2, np.uint32)
    return int(words[0]) << 32 | int(words[1])


def _natural_key(s: str):
    return [(0, int(t), "") if t.isdigit() else (1, 0, t) for t in re.split(r"(\d+)", s) if t] + [(2, 0, s)]


# ============================================================================ reading sweeps

@dataclass
class SweepItem:
    """One sweep of the input: its ids and coordinates now, its data on :meth:`load`.

    ``sweep_id`` is the safe file-name id; ``label`` the id as given in the input;
    ``path`` the file it comes from.
    """

    sweep_id: str
    label: str
    source: str
    index: int | None = None
    coords: dict = field(default_factory=dict)
    loader: Callable[[], object] | None = None
    path: str = ""

    def load(self):
        """The cleaned :class:`~bayesprobe.sweep.Sweep`; raises InputError for unusable data."""
        return self.loader()


def _fail(msg: str) -> InputError:
    return InputError(_one_line(msg, 2000))


def _expand_inputs(inputs) -> list[Path]:
    """Files named by the inputs: files, folders (their sweep files, not recursive), glob patterns."""
    if isinstance(inputs, (str, os.PathLike)):
        inputs = [inputs]
    inputs = list(inputs)
    if not inputs:
        raise _fail("no input given; name sweep files, folders or glob patterns")
    suffixes = TEXT_SUFFIXES + NUMPY_SUFFIXES
    files: list[Path] = []
    for entry in inputs:
        text = os.fspath(entry)
        p = Path(text)
        if p.is_dir():
            found = sorted(q for q in p.iterdir() if q.suffix.lower() in suffixes and not q.name.startswith(".")
                           and q.is_file())
            if not found:
                raise _fail(f"folder {_show(text, 120)} holds no sweep files ({', '.join(suffixes)})")
            files += found
        elif os.path.lexists(p):
            files.append(p)
        elif glob.has_magic(text):
            found = sorted(Path(q) for q in glob.glob(text) if Path(q).is_file())
            if not found:
                raise _fail(f"the pattern {_show(text, 120)} matches no files; check the pattern and quote it")
            files += found
        else:
            raise _fail(f"input {_show(text, 120)} not found; name sweep files, folders or glob patterns")
    out, seen = [], set()
    for f in files:   # the same file through two inputs is read once
        key = os.path.abspath(f)
        if key not in seen:
            seen.add(key)
            out.append(f)
    return out


def _npy_header(fp):
    """(shape, fortran_order, dtype) of a .npy stream, never loading data or objects."""
    fmt = np.lib.format
    version = fmt.read_magic(fp)
    if version == (1, 0):
        return fmt.read_array_header_1_0(fp)
    return fmt.read_array_header_2_0(fp)


def _numeric(dtype) -> bool:
    return dtype.names is None and not dtype.hasobject and dtype.kind in "biuf" and dtype.subdtype is None


def _raising(message: str):
    def load(sweep_id=None):
        raise _fail(message)
    return load


def _cleaner(v, i, *, sign, source, notes=()):
    """Loader cleaning raw arrays into a Sweep (the sweep id is filled in by the caller)."""
    def load(sweep_id="sweep"):
        return sweep_from_arrays(v, i, sign=sign, sweep_id=sweep_id, source=source, notes=notes)
    return load


def _file_sweeps(path: Path, opts) -> Iterator[tuple]:
    """Per-file generator of (raw_id, index, coords, loader(sweep_id)) tuples."""
    where = str(path)
    suffix = path.suffix.lower()
    try:
        if suffix == ".npz":
            yield from _npz_sweeps(path, opts)
            return
        if suffix == ".npy":
            yield from _npy_sweeps(path, opts)
            return
        if suffix in TEXT_SUFFIXES:
            yield from _text_sweeps(path, opts)
            return
    except InputError as exc:
        yield (path.stem, None, {}, _raising(str(exc)))
        return
    except (OSError, zipfile.BadZipFile, zipfile.LargeZipFile, EOFError, ValueError, KeyError,
            NotImplementedError, RuntimeError, UnicodeError) as exc:
        yield (path.stem, None, {}, _raising(f"{_show(where, 120)} could not be read "
                                             f"({type(exc).__name__}: {_one_line(exc, 200)}); "
                                             "check that the file is complete and in a supported format"))
        return
    yield (path.stem, None, {}, _single(path, opts))


def _single(path: Path, opts):
    """Loader of a one-sweep file through the ordinary reader."""
    def load(sweep_id="sweep"):
        return load_sweep(path, voltage_column=opts["voltage_column"], current_column=opts["current_column"],
                          sign=opts["sign"], sweep_id=sweep_id, max_points=opts["max_points"])
    return load


def _check_size(path: Path):
    st = os.stat(path)
    if st.st_size == 0:
        raise _fail(f"{_show(str(path), 120)} is empty")


# ---------------------------------------------------------------------------- .npz

def _npz_sweeps(path: Path, opts):
    from .io import _identify_columns
    where = _show(str(path), 120)
    _check_size(path)
    with zipfile.ZipFile(path) as zf:
        infos = {i.filename[:-4]: i for i in zf.infolist() if i.filename.endswith(".npy") and not i.is_dir()}
        if not infos:
            raise _fail(f"{where} holds no arrays; save sweeps with numpy.savez(path, voltage=..., current=...)")
        headers = {}
        for key, info in sorted(infos.items())[:256]:
            with zf.open(info) as fp:
                shape, fortran, dtype = _npy_header(fp)
                headers[key] = (tuple(int(s) for s in shape), bool(fortran), dtype, fp.tell())
        keys = sorted(headers)
        iv, ic, fv, fi, notes = _identify_columns(keys, opts["voltage_column"], opts["current_column"], where,
                                                  what="array")
        kv, kc = keys[iv], keys[ic]
        (sv, fov, dv, hv), (sc, foc, dc, hc) = headers[kv], headers[kc]
        for key, dt in ((kv, dv), (kc, dc)):
            if not _numeric(dt):
                raise _fail(f"{where}: array {_show(key, 40)} holds {dt} values, not plain numbers (pickled or "
                            "structured data are never loaded); save float arrays")
        if len(sc) == 1:        # one sweep: the ordinary reader (with its own checks)
            yield (path.stem, None, {}, _single(path, opts))
            return
        if len(sc) != 2:
            raise _fail(f"{where}: array {_show(kc, 40)} has shape {sc}; store many sweeps as (sweeps, points)")
        k, n = sc
        if k < 1 or k > MAX_SWEEPS_PER_FILE:
            raise _fail(f"{where} holds {k} sweeps; between 1 and {MAX_SWEEPS_PER_FILE} are accepted per file")
        if n > opts["max_points"]:
            raise _fail(f"{where}: {n} points per sweep, more than the limit of {opts['max_points']}")
        if sv not in ((n,), (k, n)):
            raise _fail(f"{where}: {_show(kv, 40)} has shape {sv} but {_show(kc, 40)} has shape {sc}; the "
                        f"voltage must have shape ({n},) (shared) or ({k}, {n})")
        for key, (shape, fortran, dt, hdr) in ((kv, headers[kv]), (kc, headers[kc])):
            expected = hdr + int(np.prod(shape, dtype=np.int64)) * dt.itemsize
            if infos[key].file_size != expected:
                raise _fail(f"{where}: array {_show(key, 40)} is truncated or padded ({infos[key].file_size} bytes "
                            f"instead of {expected}); write the file again")
        coords, labels = {}, None
        for key in keys:
            shape, fortran, dt, hdr = headers[key]
            if key in (kv, kc) or shape != (k,):
                continue
            name = sanitise_id(key)[:32]
            if key.lower() in SWEEP_ID_NAMES and dt.kind in "Uiu" and (dt.kind != "U" or dt.itemsize <= 4 * 256):
                labels = _npz_member(zf, infos[key], hdr, shape, fortran, dt)
            elif _numeric(dt) and len(coords) < MAX_COORDS:
                coords[name] = _npz_member(zf, infos[key], hdr, shape, fortran, dt).astype(float)
        if labels is not None:
            labels = [str(x) for x in labels.tolist()]
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
                yield (raw, j, c, _raising(f"{where}: sweep {j} could not be read ({_one_line(exc, 120)}); "
                                           "the rest of the file is skipped - write the file again"))
                return
            yield (raw, j, c, _cleaner(vol, cur, sign=opts["sign"], source=f"{path} [sweep {j}]", notes=notes))


def _npz_member(zf, info, hdr, shape, fortran, dtype):
    """A small member read whole (coordinates, ids)."""
    with zf.open(info) as fp:
        fp.seek(hdr)
        count = int(np.prod(shape, dtype=np.int64))
        buf = fp.read(count * dtype.itemsize)
    if len(buf) != count * dtype.itemsize:
        raise _fail(f"array {_show(info.filename, 40)} is truncated")
    arr = np.frombuffer(buf, dtype=dtype, count=count)
    return arr.reshape(shape, order="F" if fortran else "C")


def _npz_rows(zf, info, hdr, shape, fortran, dtype):
    """Rows of a (k, n) member, streamed: C order one row at a time; Fortran order read whole (capped)."""
    k, n = shape
    if fortran:
        if k * n * dtype.itemsize > MAX_FILE_BYTES:
            raise _fail(f"array {_show(info.filename, 40)} is stored column-major and too large to read at once; "
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


# ---------------------------------------------------------------------------- .npy

def _npy_sweeps(path: Path, opts):
    where = _show(str(path), 120)
    _check_size(path)
    with open(path, "rb") as fp:
        shape, fortran, dtype = _npy_header(fp)
    if len(shape) != 3:
        yield (path.stem, None, {}, _single(path, opts))
        return
    if not _numeric(dtype):
        raise _fail(f"{where} holds {dtype} values, not plain numbers; save float arrays")
    k = shape[0]
    if shape[1] == 2 and shape[2] != 2:
        layout = "k2n"
        n = shape[2]
    elif shape[2] == 2:
        layout = "kn2"
        n = shape[1]
    else:
        raise _fail(f"{where} holds an array of shape {shape}; store many sweeps as (sweeps, 2, points) "
                    "with voltage then current")
    if not 1 <= k <= MAX_SWEEPS_PER_FILE or n > opts["max_points"]:
        raise _fail(f"{where}: {k} sweeps of {n} points is beyond the limits ({MAX_SWEEPS_PER_FILE} sweeps, "
                    f"{opts['max_points']} points)")
    arr = np.load(path, mmap_mode="r", allow_pickle=False)
    width = len(str(k - 1))
    for j in range(k):
        row = np.array(arr[j], dtype=float)
        v, i = (row[0], row[1]) if layout == "k2n" else (row[:, 0], row[:, 1])
        yield (f"{path.stem}-{j:0{width}d}", j, {}, _cleaner(v, i, sign=opts["sign"], source=f"{path} [sweep {j}]"))
    del arr


# ---------------------------------------------------------------------------- text

def _text_lines(path: Path):
    """(line number, text) of a text file, one line at a time, lines capped in length."""
    where = _show(str(path), 120)
    with open(path, "rb") as fh:
        n = 0
        while True:
            raw = fh.readline(MAX_LINE_BYTES + 1)
            if not raw:
                return
            n += 1
            if len(raw) > MAX_LINE_BYTES:
                raise _fail(f"{where}: line {n} is longer than {MAX_LINE_BYTES} bytes; this is not a sweep table")
            if b"\x00" in raw:
                raise _fail(f"{where} is not a text file (it contains binary data)")
            if n == 1:
                raw = raw.removeprefix(b"\xef\xbb\xbf")
            try:
                text = raw.decode("utf-8")
            except UnicodeDecodeError:
                text = raw.decode("cp1252", errors="replace")
            yield n, text


def _text_header(path: Path):
    """(header fields, delimiter, first data line number) or None if there is no header."""
    from .io import _choose_delimiter, _split_fields
    header, hline, first = None, None, None
    for n, line in _text_lines(path):
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


def _find_id_column(names, wanted):
    from .io import _norm_name
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


def _text_sweeps(path: Path, opts):
    from .io import _MISSING, _identify_columns, _split_fields
    where = _show(str(path), 120)
    _check_size(path)
    head = _text_header(path)
    if head is None:
        yield (path.stem, None, {}, _single(path, opts))
        return
    names, delim, hline = head
    kid = _find_id_column(names, opts["sweep_column"])
    if kid is None:
        yield (path.stem, None, {}, _single(path, opts))
        return
    others = [nm for k, nm in enumerate(names) if k != kid]
    iv, ic, fv, fi, notes = _identify_columns(others, opts["voltage_column"], opts["current_column"], where)
    col = [k for k in range(len(names)) if k != kid]
    iv, ic = col[iv], col[ic]
    coord_cols = [k for k in range(len(names)) if k not in (kid, iv, ic)][:MAX_COORDS]
    coord_names = {k: sanitise_id(names[k])[:32] for k in coord_cols}
    ncol = len(names)

    def number(text, n, k):
        t = text.strip().strip("\"'")
        try:
            return float(t)
        except ValueError:
            if t.lower() in _MISSING:
                return math.nan
            raise _fail(f"{where}: line {n}, column {_show(names[k], 40)}: {_show(t, 30)} is not a number; "
                        "correct that value or comment the line out with '#'") from None

    state = {"id": None, "v": [], "i": [], "coords": {}, "error": None, "line": None}
    seen = set()
    count = 0

    def emit():
        raw = state["id"]
        idx = count
        if state["error"]:
            return (raw, idx, {}, _raising(state["error"]))
        c = {coord_names[k]: val for k, val in state["coords"].items() if val is not None}
        v, i = np.asarray(state["v"], float) * fv, np.asarray(state["i"], float) * fi
        return (raw, idx, c, _cleaner(v, i, sign=opts["sign"], source=f"{path} [sweep {_one_line(raw, 60)}]",
                                      notes=notes))

    for n, line in _text_lines(path):
        if n <= hline:
            continue
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        fields = _split_fields(s, delim, '"' in s)
        bad = fields is None or len(fields) < ncol
        raw = fields[kid].strip().strip("\"'") if fields is not None and len(fields) > kid else None
        if raw is None:                 # no readable id: the problem belongs to the sweep being read
            raw = state["id"] if state["id"] is not None else ""
        if raw != state["id"]:
            if state["id"] is not None:
                yield emit()
                count += 1
                if count >= MAX_SWEEPS_PER_FILE:
                    raise _fail(f"{where} holds more than {MAX_SWEEPS_PER_FILE} sweeps; split it into several files")
            state = {"id": raw, "v": [], "i": [], "coords": {}, "error": None, "line": n}
            if raw in seen:
                state["error"] = (f"{where}: the rows of sweep {_show(raw, 60)} are not together (they start again "
                                  f"on line {n}); sort the file by sweep id")
            seen.add(raw)
            if raw == "":
                state["error"] = f"{where}: line {n} has an empty sweep id; give every row its sweep's id"
        if bad and not state["error"]:
            state["error"] = (f"{where}: line {n} has {0 if fields is None else len(fields)} fields but the "
                              f"header has {ncol}; make every row match the header (check quotes and separators)")
        if state["error"]:
            continue
        if len(state["v"]) >= opts["max_points"]:
            state["error"] = (f"{where}: sweep {_show(raw, 60)} has more than {opts['max_points']} rows, "
                              "the limit for one sweep")
            continue
        try:
            state["v"].append(number(fields[iv], n, iv))
            state["i"].append(number(fields[ic], n, ic))
            for k in coord_cols:
                try:
                    val = float(fields[k].strip().strip("\"'"))
                except ValueError:
                    val = None
                if k not in state["coords"]:
                    state["coords"][k] = val
                elif state["coords"][k] is not None and state["coords"][k] != val:
                    state["coords"][k] = None       # varies within the sweep: not a sweep coordinate
        except InputError as exc:
            state["error"] = str(exc)
    if state["id"] is not None:
        yield emit()
    elif not seen:
        raise _fail(f"{where} has a header but no data rows")


# ---------------------------------------------------------------------------- all inputs

def iter_sweeps(inputs, *, voltage_column=None, current_column=None, sweep_column=None, sign: str = "auto",
                max_points: int = MAX_POINTS) -> Iterator[SweepItem]:
    """Every sweep of the inputs, in a deterministic order, one at a time.

    Parameters
    ----------
    inputs : path, glob pattern or folder, or a list of them
        Folders contribute their sweep files (not recursively), sorted by name.
        A file holds one sweep, or many: an ``.npz`` whose ``current`` has shape
        ``(k, n)`` (``voltage`` ``(n,)`` or ``(k, n)``; other ``(k,)`` arrays such as
        ``time`` or ``position`` become sweep coordinates, an optional ``sweep_id``
        array names the sweeps); an ``.npy`` of shape ``(k, 2, n)`` or ``(k, n, 2)``;
        a text table with a sweep-id column (``sweep_id``, ``sweep``, or
        ``sweep_column``), each sweep's rows together; other numeric columns that
        are constant within a sweep become its coordinates.

    Yields
    ------
    SweepItem
        ``item.load()`` reads and cleans the data (raising InputError with a
        one-line reason for unusable data), so finished sweeps need not be read.
        A sweep id used twice yields an item with a ``.dup-`` id whose load fails.
    """
    opts = {"voltage_column": voltage_column, "current_column": current_column, "sweep_column": sweep_column,
            "sign": sign, "max_points": int(max_points)}
    first_use: dict[str, str] = {}
    for path in _expand_inputs(inputs):
        for raw, index, coords, loader in _file_sweeps(path, opts):
            label = _one_line(raw, 200)
            fid = file_id_for(raw)
            source = str(path) if index is None else f"{path} [sweep {index}]"
            key = fid.casefold()
            if key in first_use:
                dup = file_id_for(f"{fid[:48]}.dup-{_sha8(source)}")
                yield SweepItem(dup, label, source, index, coords, _duplicate(
                    loader, f"sweep id {_show(raw, 60)} from {_show(source, 120)} is already used by "
                            f"{_show(first_use[key], 120)}; give every sweep its own id"), str(path))
                continue
            first_use[key] = source
            yield SweepItem(fid, label, source, index, coords, _bind_id(loader, fid), str(path))


def _duplicate(loader, message):
    """Loader of a sweep whose id is taken: the reader's own complaint if it has one, else the duplicate."""
    def load():
        loader(sweep_id="duplicate")
        raise _fail(message)
    return load


def _bind_id(loader, fid):
    def load():
        return loader(sweep_id=fid)
    return load


def _count_sweeps(paths: list[Path], opts) -> int | None:
    """Number of sweeps in the inputs without reading their data (None if unknown)."""
    total = 0
    for path in paths:
        suffix = path.suffix.lower()
        try:
            if suffix == ".npz":
                with zipfile.ZipFile(path) as zf:
                    names = {i.filename[:-4]: i for i in zf.infolist() if i.filename.endswith(".npy")}
                    key = next((k for k in names if k.lower() in ("current", "i", "i_probe", "probe_current")),
                               None)
                    if key is None:
                        total += 1
                        continue
                    with zf.open(names[key]) as fp:
                        shape = _npy_header(fp)[0]
                    total += shape[0] if len(shape) == 2 else 1
            elif suffix == ".npy":
                with open(path, "rb") as fp:
                    shape = _npy_header(fp)[0]
                total += shape[0] if len(shape) == 3 else 1
            else:
                head = _text_header(path)
                kid = None if head is None else _find_id_column(head[0], opts["sweep_column"])
                if kid is None:
                    total += 1
                    continue
                from .io import _split_fields
                names, delim, hline = head
                last, blocks = None, 0
                for n, line in _text_lines(path):
                    s = line.strip()
                    if n <= hline or not s or s.startswith("#"):
                        continue
                    f = _split_fields(s, delim, '"' in s)
                    if f is None or len(f) <= kid:
                        continue
                    rid = f[kid].strip().strip("\"'")
                    if rid != last:
                        blocks += 1
                        last = rid
                total += max(blocks, 1)
        except Exception:  # noqa: BLE001 - counting is only for the progress bar
            total += 1
    return total


# ============================================================================ per-sweep settings

_TABLE_COLUMNS = ("geometry", "radius", "length", "area", "ion", "ion_mass", "ion_collection", "ion_temperature")


def load_sweep_table(path, base_config) -> dict:
    """Per-sweep probe settings from a CSV table: ``{sweep id: ModelConfig}``.

    The table has a header with ``sweep_id`` and any of ``geometry``, ``radius``,
    ``length``, ``area`` (SI: m, m^2), ``ion``, ``ion_mass`` (u), ``ion_collection``
    and ``ion_temperature`` (eV). Empty cells keep the batch-wide value. Rows match
    a sweep by the id given in the input or by its file id.
    """
    from .physics.geometry import Probe
    where = _show(str(path), 120)
    try:
        size = os.stat(path).st_size
    except OSError:
        raise _fail(f"sweep table {where} cannot be opened; check the path") from None
    if size > MAX_TABLE_BYTES:
        raise _fail(f"sweep table {where} is larger than {MAX_TABLE_BYTES >> 20} MiB")
    data = Path(path).read_bytes()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise _fail(f"sweep table {where} is not UTF-8 text") from None
    if "\x00" in text:
        raise _fail(f"sweep table {where} is not a text file")
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise _fail(f"sweep table {where} is empty")
    delim = "\t" if "\t" in lines[0] else (";" if ";" in lines[0] and "," not in lines[0] else ",")
    rows = list(csv.reader(lines, delimiter=delim))
    header = [h.strip().lower().replace(" ", "_").replace("-", "_") for h in rows[0]]
    if "sweep_id" not in header:
        raise _fail(f"sweep table {where} needs a 'sweep_id' column")
    unknown = [h for h in header if h not in _TABLE_COLUMNS and h != "sweep_id"]
    if unknown:
        raise _fail(f"sweep table {where}: unknown column(s) {', '.join(_show(u, 30) for u in unknown[:5])}; "
                    f"use sweep_id and any of {', '.join(_TABLE_COLUMNS)}")
    if len(rows) - 1 > MAX_TABLE_ROWS:
        raise _fail(f"sweep table {where} has more than {MAX_TABLE_ROWS} rows")
    out = {}
    for ln, row in enumerate(rows[1:], start=2):
        if len(row) != len(header):
            raise _fail(f"sweep table {where}: row {ln} has {len(row)} fields, the header {len(header)}")
        rec = {h: v.strip() for h, v in zip(header, row)}
        sid = rec.pop("sweep_id")
        if not sid:
            raise _fail(f"sweep table {where}: row {ln} has no sweep_id")
        if sid in out:
            raise _fail(f"sweep table {where}: sweep {_show(sid, 60)} appears twice")

        def num(name):
            v = rec.get(name, "")
            if v == "":
                return None
            try:
                x = float(v)
            except ValueError:
                raise _fail(f"sweep table {where}: row {ln}: {name} {_show(v, 30)} is not a number (SI units)") \
                    from None
            if not (math.isfinite(x) and x > 0):
                raise _fail(f"sweep table {where}: row {ln}: {name} must be positive")
            return x
        try:
            changes = {}
            probe_fields = {k: rec.get(k, "") for k in ("geometry", "radius", "length", "area")}
            if any(probe_fields.values()):
                p = base_config.probe
                geometry = probe_fields["geometry"] or p.geometry
                same = geometry == p.geometry
                radius, length, area = num("radius"), num("length"), num("area")
                if same:   # unchanged shape: inherit the sizes not given
                    radius = radius if radius is not None else p.radius
                    length = length if length is not None else p.length
                    area = area if area is not None else p.area_override
                changes["probe"] = Probe(geometry, radius=radius,
                                         length=length if geometry == "cylindrical" else None, area=area,
                                         end_cap=p.end_cap and same and geometry == "cylindrical")
            if rec.get("ion_mass"):
                changes["ion"] = num("ion_mass")
            elif rec.get("ion"):
                changes["ion"] = rec["ion"]
            if rec.get("ion_collection"):
                changes["ion_collection"] = rec["ion_collection"]
            if rec.get("ion_temperature"):
                changes["T_i"] = num("ion_temperature")
            out[sid] = base_config.with_(**changes) if changes else base_config
        except InputError:
            raise
        except (ValueError, KeyError, TypeError) as exc:
            raise _fail(f"sweep table {where}: row {ln}: {_one_line(exc, 200)}") from None
    return out


# ============================================================================ the worker side

def _limit_threads():
    """Pool initializer: one BLAS/OpenMP thread per worker process."""
    from threadpoolctl import threadpool_limits
    threadpool_limits(1)


def run_task(task: dict):
    """Fit one sweep (in a worker). Returns ``(record, posterior netCDF bytes or None)``; never raises.

    A warm-start block (``task["block"]``: consecutive sweeps) is fitted in order, each sweep
    started from the previous one's result, and gives a list of such pairs.
    """
    from threadpoolctl import threadpool_limits
    with threadpool_limits(1):
        if "block" not in task:
            return _run_task(task)[:2]
        out, prev = [], None
        for member in task["block"]:
            if "record" in member:              # could not be read: recorded by the parent already
                out.append((member["record"], None))
                continue
            rec, nc, result = _run_task(member, start=prev)
            out.append((rec, nc))
            if result is not None:           # its optimum is a good start even if its sampler did not converge
                prev = result
        return out


def _run_task(task: dict, start=None):
    from .fitting import fit
    nc = None
    result = None
    try:
        extra = {} if task.get("engine", "mcmc") == "mcmc" else {"engine": task["engine"]}
        if start is not None:
            extra["start"] = start
        result = fit(task["sweep"], config=task["config"], model=task["model"],
                     credible_level=task["credible_level"], priors=task["priors"], student_nu=task["student_nu"],
                     seed=task["seed"], sampler=task["sampler"], progress=False, **extra)
        summary = result.summary()
        if result.converged:
            status, reason = "ok", ""
        else:
            status = "not-converged"
            reason = "not converged: " + "; ".join(result.diagnostics.get("unmet", [])) or "criteria not met"
        if task.get("keep_posterior"):
            import tempfile
            with tempfile.TemporaryDirectory(prefix="bayesprobe-") as tmp:
                p = Path(tmp) / "posterior.nc"
                result.to_netcdf(p)
                nc = p.read_bytes()
    except (ValueError, FloatingPointError) as exc:   # InputError is a ValueError: bad data or priors
        summary, status, reason = None, "failed", _one_line(exc)
    except MemoryError:
        summary, status, reason = None, "failed", "out of memory while fitting this sweep"
    except Exception as exc:  # noqa: BLE001 - one bad sweep must not stop the batch
        summary, status, reason = None, "failed", f"fit failed: {type(exc).__name__}: {_one_line(exc)}"
    return _record(task["meta"], task["seed"], status, reason, summary), nc, result


def _record(meta: dict, seed, status: str, reason: str, summary=None) -> dict:
    rec = {"schema": RECORD_SCHEMA, **meta, "seed": seed, "status": status, "reason": _one_line(reason)}
    rec["summary"] = summary
    return rec


# ============================================================================ the engine

@dataclass
class BatchSummary:
    """What a batch did. Counts cover every sweep recorded in ``out_dir`` (earlier runs included)."""

    out_dir: Path
    n_sweeps: int = 0
    n_ok: int = 0
    n_not_converged: int = 0
    n_failed: int = 0
    n_fitted_now: int = 0
    n_resumed: int = 0
    failed: list = field(default_factory=list)     # (sweep_id, reason), first 1000
    seconds: float = 0.0
    executor: str = ""

    @property
    def exit_status(self) -> int:
        """0 all converged; 4 some sweeps failed; 3 some did not converge and none failed."""
        if self.n_failed:
            return 4
        if self.n_not_converged:
            return 3
        return 0

    def line(self) -> str:
        return (f"{self.n_sweeps} sweeps: {self.n_ok} ok, {self.n_not_converged} not converged, "
                f"{self.n_failed} failed ({self.n_fitted_now} fitted now, {self.n_resumed} kept from earlier runs; "
                f"{self.executor}, {self.seconds:.1f} s)")


@contextlib.contextmanager
def _exclusive(out: Path):
    """Refuse a second batch (or leftover workers of a killed one) writing to the same folder."""
    fh = open(out / ".lock", "a+b")
    try:
        try:
            import fcntl
            try:
                fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                raise _fail(f"another bayesprobe batch (or leftover workers of one) is writing to "
                            f"{_show(str(out), 120)}; wait for it to end or choose another --out") from None
        except ImportError:  # pragma: no cover - not POSIX
            pass
        yield
    finally:
        fh.close()


def _jsonable(x):
    return json.loads(json.dumps(x, sort_keys=True, default=str))


def _check_manifest(out: Path, settings: dict):
    path = out / "batch.json"
    settings = _jsonable(settings)
    if path.exists():
        try:
            old = json.loads(path.read_text(encoding="utf-8"))["settings"]
        except (OSError, ValueError, KeyError, TypeError):
            raise _fail(f"{_show(str(path), 120)} is unreadable; it is not a bayesprobe batch folder, or the file "
                        "was damaged - choose another --out") from None
        if old != settings:
            diff = sorted(k for k in set(old) | set(settings) if old.get(k) != settings.get(k))
            raise _fail(f"{_show(str(out), 120)} holds a batch run with other settings ({', '.join(diff)}); repeat "
                        "the original options to resume it, or choose another --out")
        return
    atomic_write_text(path, json.dumps({"schema": MANIFEST_SCHEMA, "settings": settings}, indent=2,
                                       sort_keys=True) + "\n")


def _remove_stale_temporaries(folder: Path):
    """Temporary files left by a killed run (the folder is locked to this run)."""
    if folder.is_dir():
        for p in folder.iterdir():
            if p.name.startswith(".") and p.name.endswith(".tmp"):
                with contextlib.suppress(OSError):
                    p.unlink()


def _done_ids(sweeps_dir: Path, retry_failed: bool) -> set:
    _remove_stale_temporaries(sweeps_dir)
    done = set()
    for p in sweeps_dir.iterdir():
        if p.name.startswith(".") or p.suffix != ".json":
            continue
        if retry_failed:
            rec = _read_record(p)
            if rec is None or rec.get("status") == "failed":
                continue
        done.add(p.stem)
    return done


def _read_record(p: Path):
    try:
        if p.stat().st_size > MAX_RECORD_BYTES:
            return None
        rec = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return rec if isinstance(rec, dict) and rec.get("schema") == RECORD_SCHEMA else None


class _Pool:
    """Local process pool; replaced by a fresh one when a worker process dies."""

    name = "process pool"

    def __init__(self, workers, runner):
        from concurrent.futures import ProcessPoolExecutor
        self._cls = ProcessPoolExecutor
        self.workers = workers
        self.runner = runner
        self.restarts = 0
        self.pool = self._new()
        self.name = f"process pool, {workers} worker(s)"

    def _new(self):
        return self._cls(max_workers=self.workers, initializer=_limit_threads)

    def submit(self, task):
        from concurrent.futures import Future
        from concurrent.futures.process import BrokenProcessPool
        try:
            return self.pool.submit(self.runner, task)
        except BrokenProcessPool as exc:   # broke since the last wait: hand back a future that says so
            fut = Future()
            fut.set_exception(exc)
            fut.rejected = True
            return fut

    def wait(self, futures):
        from concurrent.futures import FIRST_COMPLETED, wait
        done, _ = wait(futures, return_when=FIRST_COMPLETED)
        return done

    def is_broken(self, exc) -> bool:
        from concurrent.futures.process import BrokenProcessPool
        return isinstance(exc, BrokenProcessPool)

    def restart(self):
        self.restarts += 1
        self.pool.shutdown(wait=False, cancel_futures=True)
        self.pool = self._new()

    def capacity(self):
        return 2 * self.workers

    def close(self):
        self.pool.shutdown(wait=True, cancel_futures=True)


class _Dask:
    """Dask distributed: a LocalCluster (``"local"``), a scheduler address, or a given Client."""

    def __init__(self, target, workers, runner):
        try:
            import distributed
        except ImportError:
            raise _fail(f"--dask needs the dask.distributed package; {_DASK_HINT}") from None
        self.distributed = distributed
        self.runner = runner
        self.cluster = None
        self.own_client = True
        if isinstance(target, distributed.Client):
            self.client, self.own_client = target, False
        elif target == "local":
            import dask
            env = {k: "1" for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}
            with dask.config.set({"distributed.nanny.pre-spawn-environ": env}):
                self.cluster = distributed.LocalCluster(n_workers=workers or _cpu_count(), threads_per_worker=1,
                                                        processes=True, dashboard_address=None)
            self.client = distributed.Client(self.cluster)
        else:
            try:
                self.client = distributed.Client(str(target), timeout="20s")
            except (OSError, TimeoutError, ValueError) as exc:
                raise _fail(f"cannot reach the Dask scheduler at {_show(target, 120)} ({_one_line(exc, 120)}); "
                            "give its address as tcp://HOST:PORT, or use --dask local") from None
        info = self.client.scheduler_info()
        self.threads = max(1, sum(w.get("nthreads", 1) for w in info.get("workers", {}).values()))
        self.name = f"dask, {len(info.get('workers', {}))} worker(s)"

    def submit(self, task):
        return self.client.submit(self.runner, task, pure=False)

    def wait(self, futures):
        done, _ = self.distributed.wait(list(futures), return_when="FIRST_COMPLETED")
        return done

    def is_broken(self, exc) -> bool:
        return False

    def capacity(self):
        return 2 * self.threads + 2

    def close(self):
        if self.own_client:
            self.client.close()
        if self.cluster is not None:
            self.cluster.close()


def _cpu_count() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover
        return max(1, os.cpu_count() or 1)


def _warm_groups(items, block: int):
    """Units of work: single sweeps, or (``block`` > 1) runs of up to ``block`` consecutive sweeps of
    one source. The runs are cut from the whole input stream, finished sweeps included, so their
    boundaries are the same on every rerun and for every number of workers or executor."""
    if block <= 1:
        for item in items:
            yield [item]
        return
    group = []
    for item in items:
        if group and (len(group) >= block or item.path != group[-1].path):
            yield group
            group = []
        group.append(item)
    if group:
        yield group


def fit_many(inputs, *, out_dir, config=None, model: str = "maxwellian", credible_level: float = 0.9, seed: int = 0,
             workers: int | None = None, dask=None, sampler=None, priors=None, student_nu=None, sign: str = "auto",
             voltage_column=None, current_column=None, sweep_column=None, sweep_table=None,
             keep_posteriors: bool = False, retry_failed: bool = False, figures: bool = True,
             progress: bool | None = None, engine: str = "mcmc", warm_start: int = 0,
             _runner=None) -> BatchSummary:
    """Fit every sweep of the inputs; resumable, one atomic record per sweep, tables at the end.

    Parameters
    ----------
    inputs : path, folder, glob pattern, or a list of them
        See :func:`iter_sweeps` for the multi-sweep formats.
    out_dir : path
        Output folder. Rerunning with the same folder (and the same settings)
        skips the sweeps already recorded there.
    config : ModelConfig, optional
        Probe and plasma model for every sweep (default :func:`bayesprobe.fitting.make_config`).
    model, credible_level, priors, student_nu, sampler :
        As in :func:`bayesprobe.fit`.
    seed : int
        Global seed; each sweep's seed is :func:`sweep_seed` (seed, sweep id).
    workers : int, optional
        Local worker processes (default: the usable cores), or Dask workers with ``dask="local"``.
    dask : None, "local", scheduler address, or a ``distributed.Client``
        Run on Dask instead of a local process pool.
    sign, voltage_column, current_column, sweep_column :
        How to read the files (see :func:`bayesprobe.io.load_sweep`, :func:`iter_sweeps`).
    sweep_table : path, optional
        Per-sweep probe settings (:func:`load_sweep_table`).
    keep_posteriors : bool
        Also write each sweep's full posterior to ``out_dir/posteriors/<id>.nc``.
    retry_failed : bool
        Fit sweeps recorded as failed again.
    figures : bool
        Draw ``profiles.png``.
    progress : bool, optional
        Progress bar on stderr (default: when stderr is a terminal).
    engine : str
        Posterior engine passed to :func:`bayesprobe.fit` (default ``"mcmc"``).
    warm_start : int
        0 (default): every sweep starts cold. N > 1: sweeps are fitted in runs of up to N
        consecutive sweeps of one input file, in one worker, each started from the previous
        sweep's result (``fit(start=...)``), for time series and scans that change smoothly.
        The first sweep of each run starts cold; the runs are fixed by the input order, so
        results stay the same for any number of workers, executor or resumption.

    Returns
    -------
    BatchSummary
        ``exit_status`` is 0 (all converged), 3 (some not converged, none failed) or 4 (some failed).

    Raises
    ------
    InputError
        Unusable inputs or options (nothing is fitted).

    A sweep whose worker process dies (a crash, or killed for memory) is found by
    re-running the sweeps that were in flight one at a time; it is recorded as
    failed and the batch goes on.
    """
    from .fitting import MODEL_CHOICES, make_config
    from .inference.sampler import SamplerSettings
    from .model import ModelConfig

    t0 = time.perf_counter()
    if model not in MODEL_CHOICES:
        raise _fail(f"model must be one of {', '.join(MODEL_CHOICES)}, got {model!r}")
    if not (isinstance(credible_level, (int, float)) and 0 < credible_level < 1):
        raise _fail(f"credible_level must lie strictly between 0 and 1, got {credible_level!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise _fail(f"seed must be a non-negative integer, got {seed!r}")
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, (int, np.integer))
                                or workers < 1):
        raise _fail(f"workers must be a positive integer, got {workers!r}")
    if student_nu is not None and not (isinstance(student_nu, (int, float)) and np.isfinite(student_nu)
                                       and student_nu > 0):
        raise _fail(f"student_nu must be a positive number, got {student_nu!r}")
    from . import fitting as _fitting
    engines = getattr(_fitting, "ENGINES", ("mcmc",))
    if engine not in engines:
        raise _fail(f"engine must be one of {', '.join(engines)}, got {engine!r}")
    if isinstance(warm_start, bool) or not isinstance(warm_start, (int, np.integer)) or warm_start < 0:
        raise _fail(f"warm_start must be a non-negative integer (sweeps per warm-start run), got {warm_start!r}")
    warm_start = int(warm_start) if warm_start > 1 else 0
    if sign not in ("auto", "electron-positive", "ion-positive"):
        raise _fail(f"sign must be 'auto', 'electron-positive' or 'ion-positive', got {sign!r}")
    if priors is not None and not (isinstance(priors, dict) and all(isinstance(v, dict) for v in priors.values())):
        raise _fail("priors must be a dict like {'T_e': {'kind': 'log-uniform', 'lower': 0.1, 'upper': 50}}")
    config = config if config is not None else make_config()
    if not isinstance(config, ModelConfig):
        raise _fail("config must be a bayesprobe.ModelConfig (see bayesprobe.fitting.make_config)")
    settings = sampler or SamplerSettings()
    out = Path(out_dir)
    if os.path.lexists(out) and not out.is_dir():
        raise _fail(f"output path {_show(str(out), 120)} exists and is not a directory; choose a folder for --out")
    paths = _expand_inputs(inputs)
    table, table_hash = {}, None
    if sweep_table is not None:
        table = load_sweep_table(sweep_table, config)
        table_hash = hashlib.sha256(Path(sweep_table).read_bytes()).hexdigest()
    opts = {"voltage_column": voltage_column, "current_column": current_column, "sweep_column": sweep_column,
            "sign": sign, "max_points": MAX_POINTS}
    run_settings = {"model": model, "credible_level": float(credible_level), "seed": int(seed),
                    "config": config.to_dict(), "priors": priors, "student_nu": student_nu,
                    "sampler": asdict(settings), "sign": sign, "voltage_column": voltage_column,
                    "current_column": current_column, "sweep_column": sweep_column,
                    "sweep_table_sha256": table_hash, "engine": engine,
                    **({"warm_start": warm_start} if warm_start else {})}
    out.mkdir(parents=True, exist_ok=True)
    sweeps_dir = out / "sweeps"
    sweeps_dir.mkdir(exist_ok=True)
    post_dir = out / "posteriors"
    runner = _runner or run_task

    summary = BatchSummary(out_dir=out)
    with _exclusive(out):
        _check_manifest(out, run_settings)
        if keep_posteriors:
            post_dir.mkdir(exist_ok=True)
        _remove_stale_temporaries(post_dir)
        _remove_stale_temporaries(out)
        done = _done_ids(sweeps_dir, retry_failed)
        total = _count_sweeps(paths, opts)
        executor = (_Dask(dask, workers, runner) if dask is not None
                    else _Pool(workers or _cpu_count(), runner))
        summary.executor = executor.name
        bar = _progress_bar(progress, total, min(len(done), total or 0))
        counts = {"failed": 0, "not-converged": 0, "written": 0}

        def write(rec, nc=None):
            sid = rec["sweep_id"]
            if nc is not None:
                atomic_write_bytes(post_dir / f"{sid}.nc", nc)
            atomic_write_text(sweeps_dir / f"{sid}.json", json.dumps(rec, indent=1, allow_nan=False) + "\n")
            counts["written"] += 1
            if rec["status"] in counts:
                counts[rec["status"]] += 1
            if bar is not None:
                bar.update(1)
                bar.set_postfix(failed=counts["failed"], not_converged=counts["not-converged"], refresh=False)

        def write_result(task, result):
            pairs = result if "block" in task else [result]
            members = task["block"] if "block" in task else [task]
            for member, (rec, nc) in zip(members, pairs):
                if member.get("fresh", True) and "record" not in member:
                    write(rec, nc)
                    summary.n_fitted_now += 1

        def write_failed(task, reason):
            for member in task["block"] if "block" in task else [task]:
                if member.get("fresh", True) and "record" not in member:
                    write(_record(member["meta"], member["seed"], "failed", reason))

        def _member_task(item):
            s_seed = sweep_seed(seed, item.sweep_id)
            meta = {"sweep_id": item.sweep_id, "label": item.label, "source": item.source,
                    "index": item.index, "coords": {k: _float(v) for k, v in item.coords.items()}}
            try:
                sweep = item.load()
            except InputError as exc:
                return {"meta": meta, "seed": s_seed, "record": _record(meta, s_seed, "failed", str(exc))}
            except (OSError, ValueError, EOFError, zipfile.BadZipFile) as exc:
                return {"meta": meta, "seed": s_seed,
                        "record": _record(meta, s_seed, "failed", f"{_show(item.source, 120)} could not be read: "
                                                                  f"{type(exc).__name__}: {_one_line(exc, 200)}")}
            cfg = table.get(item.label, table.get(item.sweep_id, config))
            return {"sweep": sweep, "config": cfg, "model": model, "credible_level": float(credible_level),
                    "priors": priors, "student_nu": student_nu, "seed": s_seed, "sampler": settings,
                    "keep_posterior": bool(keep_posteriors), "engine": engine, "meta": meta}

        items = iter_sweeps(paths, **{k: opts[k] for k in ("voltage_column", "current_column", "sweep_column",
                                                         "sign")})
        groups = _warm_groups(items, warm_start)
        inflight: dict = {}
        try:
            exhausted = False
            suspects: deque = deque()       # sweeps in flight when a worker process died
            isolated = None                 # the future of a suspect running alone
            while True:
                while len(inflight) < executor.capacity():
                    if suspects:            # re-run suspects one at a time to find the one that kills workers
                        if not inflight:
                            task = suspects.popleft()
                            isolated = executor.submit(task)
                            inflight[isolated] = task
                        break
                    if exhausted:
                        break
                    group = next(groups, None)
                    if group is None:
                        exhausted = True
                        break
                    if all(item.sweep_id in done for item in group):
                        continue
                    members = []
                    for item in group:
                        fresh = item.sweep_id not in done
                        done.add(item.sweep_id)
                        member = _member_task(item)
                        if "record" in member and fresh:
                            write(member["record"])
                        member["fresh"] = fresh
                        members.append(member)
                    if warm_start:
                        # a warm-start block is always fitted whole, so its results do not depend on
                        # which of its sweeps an interrupted run had finished
                        if any("record" not in m for m in members):
                            task = {"block": members, "meta": members[0]["meta"], "seed": members[0]["seed"]}
                            inflight[executor.submit(task)] = task
                    elif "record" not in members[0]:
                        inflight[executor.submit(members[0])] = members[0]
                if not inflight:
                    break
                broken = False
                for fut in executor.wait(inflight):
                    task = inflight.pop(fut)
                    try:
                        write_result(task, fut.result())
                    except Exception as exc:  # noqa: BLE001 - infrastructure, not the sweep
                        if executor.is_broken(exc):
                            broken = True
                            if fut is isolated and not getattr(fut, "rejected", False):
                                write_failed(task, "the worker process died while fitting this sweep alone (it "
                                                   "crashed or was killed, e.g. for running out of memory)")
                            else:
                                suspects.append(task)
                            continue
                        write_failed(task, f"the worker running this sweep failed: {type(exc).__name__}: "
                                           f"{_one_line(exc, 200)}")
                if broken:              # every other sweep in flight went down with the pool
                    for fut, task in inflight.items():
                        if fut.done() and not fut.cancelled() and fut.exception() is None:
                            write_result(task, fut.result())
                        else:
                            suspects.append(task)
                    inflight.clear()
                    isolated = None
                    executor.restart()
        finally:
            for fut in inflight:
                fut.cancel()
            executor.close()
            if bar is not None:
                bar.close()
        stats = assemble_results(out, figures=figures)
    summary.n_sweeps = stats["n_sweeps"]
    summary.n_ok = stats["ok"]
    summary.n_not_converged = stats["not-converged"]
    summary.n_failed = stats["failed"]
    summary.failed = stats["failed_list"]
    summary.n_resumed = max(0, summary.n_sweeps - counts["written"])
    summary.seconds = time.perf_counter() - t0
    return summary


def _progress_bar(progress, total, initial):
    if progress is None:
        progress = sys.stderr.isatty()
    if not progress:
        return None
    from tqdm.auto import tqdm
    return tqdm(total=total, initial=initial, desc="sweeps", unit="sweep", file=sys.stderr, dynamic_ncols=True)


# ============================================================================ tables

_STR_COLS = ("sweep_id", "label", "source", "status", "reason", "model", "engine")
_INT_COLS = ("index", "n_points", "n_steps", "n_draws")          # -1: missing
_FLOAT_COLS = ("credible_level", "r_hat_max", "ess_bulk_min", "tau_max", "khat")
_FIXED = ("sweep_id", "label", "source", "index", "status", "reason", "model", "converged", "credible_level",
          "seed", "n_points", "engine", "r_hat_max", "ess_bulk_min", "tau_max", "n_steps", "n_draws", "khat")
_STATS = ("median", "ci_low", "ci_high")
_TYPECODES = {"d": np.float64, "q": np.int64, "b": np.int8, "Q": np.uint64}


class _Columns:
    """The table held column-wise in typed buffers (a few hundred bytes per sweep)."""

    def __init__(self):
        from array import array
        self._array = array
        self.n = 0
        self.s = {k: [] for k in _STR_COLS}
        self.i = {k: array("q") for k in _INT_COLS}
        self.f = {k: array("d") for k in _FLOAT_COLS}
        self.converged = array("b")             # -1 no fit, 0, 1
        self.seed = array("Q")
        self.params: dict = {}                  # (name, stat) -> array("d")
        self.units: dict = {}
        self.coords: dict = {}                  # name -> array("d")

    def _padded(self, store, key):
        if key not in store:
            store[key] = self._array("d", [math.nan]) * self.n
        return store[key]

    def add(self, sid: str, rec: dict | None):
        rec = rec or {"status": "failed",
                      "reason": "the result record of this sweep is unreadable; delete it and rerun to fit it again"}
        s = rec.get("summary") if isinstance(rec.get("summary"), dict) else {}
        d = s.get("diagnostics") if isinstance(s.get("diagnostics"), dict) else {}
        sw = s.get("sweep") if isinstance(s.get("sweep"), dict) else {}
        text = {"sweep_id": sid, "label": rec.get("label"), "source": rec.get("source"), "status": rec.get("status"),
                "reason": rec.get("reason"), "model": s.get("model"), "engine": d.get("engine")}
        for k in _STR_COLS:
            v = text[k]
            self.s[k].append(sys.intern(_one_line(v, 1000)) if v is not None else "")
        ints = {"index": rec.get("index"), "n_points": sw.get("n_points"), "n_steps": d.get("n_steps"),
                "n_draws": d.get("n_draws")}
        for k in _INT_COLS:
            v = ints[k]
            ok = isinstance(v, int) and not isinstance(v, bool) and 0 <= v < 2**62
            self.i[k].append(v if ok else -1)
        floats = {"credible_level": s.get("credible_level"), **{k: d.get(k) for k in _FLOAT_COLS[1:]}}
        for k in _FLOAT_COLS:
            self.f[k].append(_nan(floats[k]))
        conv = d.get("converged")
        self.converged.append(-1 if conv is None else int(bool(conv)))
        seed = rec.get("seed")
        self.seed.append(seed if isinstance(seed, int) and 0 <= seed < 2**64 else 0)
        params = s.get("parameters") if isinstance(s.get("parameters"), dict) else {}
        for name in TABLE_PARAMETERS:
            if isinstance(params.get(name), dict):
                self.units.setdefault(name, str(params[name].get("unit", "")))
                for st in _STATS:
                    self._padded(self.params, (name, st))
        for (name, st), col in self.params.items():
            e = params.get(name)
            col.append(_nan(e.get(st)) if isinstance(e, dict) else math.nan)
        coords = rec.get("coords") if isinstance(rec.get("coords"), dict) else {}
        coords = {sanitise_id(k)[:32]: v for k, v in list(coords.items())[:MAX_COORDS]}
        for cname in coords:
            self._padded(self.coords, cname)
        for cname, col in self.coords.items():
            col.append(_nan(coords.get(cname)))
        self.n += 1

    def parameters(self):
        return [p for p in TABLE_PARAMETERS if (p, "median") in self.params]

    def np(self, buf):
        dtype = _TYPECODES[buf.typecode]
        return np.frombuffer(buf, dtype=dtype, count=self.n).copy() if self.n else np.zeros(0, dtype)


def _read_columns(out: Path) -> _Columns:
    sweeps_dir = out / "sweeps"
    names = sorted((p.stem for p in sweeps_dir.glob("*.json") if not p.name.startswith(".")), key=_natural_key)
    cols = _Columns()
    for sid in names:
        cols.add(sid, _read_record(sweeps_dir / f"{sid}.json"))
    return cols


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return repr(v) if math.isfinite(v) else ""
    return str(v)


def assemble_results(out_dir, *, figures: bool = True) -> dict:
    """Write ``results.csv``, ``results.nc`` (and ``profiles.png``) from the per-sweep records.

    Rows are sorted by sweep id (natural order); the same records give the same bytes.
    Returns counts by status.
    """
    import xarray as xr

    out = Path(out_dir)
    cols = _read_columns(out)
    n = cols.n
    params = cols.parameters()
    coord_names = sorted(cols.coords)
    reserved = set(_FIXED) | {f"{p}_{st}" for p in params for st in _STATS} | set(params)
    coord_cols = {c: (f"coord_{c}" if c in reserved else c) for c in coord_names}

    def value(k, j):
        if k in cols.s:
            return cols.s[k][j]
        if k in cols.i:
            v = cols.i[k][j]
            return None if v < 0 else v
        if k in cols.f:
            return cols.f[k][j]
        if k == "converged":
            c = cols.converged[j]
            return None if c < 0 else bool(c)
        return cols.seed[j]

    header = list(_FIXED[:4]) + [coord_cols[c] for c in coord_names] + list(_FIXED[4:])
    header += [f"{p}_{st}" for p in params for st in _STATS]
    tmp = out / ".results.csv.tmp"
    try:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh, lineterminator="\n")
            w.writerow(header)
            for j in range(n):
                line = [_cell(value(k, j)) for k in _FIXED[:4]]
                line += [_cell(cols.coords[c][j]) for c in coord_names]
                line += [_cell(value(k, j)) for k in _FIXED[4:]]
                line += [_cell(cols.params[(p, st)][j]) for p in params for st in _STATS]
                w.writerow(line)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, out / "results.csv")
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink()

    def strings(k):
        return ("sweep", np.array(cols.s[k], dtype=object) if n else np.array([], dtype=object))

    ds_coords = {"sweep": strings("sweep_id"), "label": strings("label"), "source": strings("source"),
                 "index": ("sweep", cols.np(cols.i["index"]), {"missing": -1})}
    for c in coord_names:
        ds_coords[coord_cols[c]] = ("sweep", cols.np(cols.coords[c]))
    data = {"status": strings("status"), "reason": strings("reason"), "model": strings("model"),
            "engine": strings("engine"),
            "converged": ("sweep", cols.np(cols.converged),
                          {"flag_values": "-1 0 1", "flag_meanings": "not_fitted no yes"})}
    for k in _FLOAT_COLS:
        data[k] = ("sweep", cols.np(cols.f[k]))
    for k in _INT_COLS[1:]:
        data[k] = ("sweep", cols.np(cols.i[k]), {"missing": -1})
    data["seed"] = ("sweep", cols.np(cols.seed))
    descr = {"median": "posterior median", "ci_low": "credible interval low", "ci_high": "credible interval high"}
    for p in params:
        for st in _STATS:
            data[p if st == "median" else f"{p}_{st}"] = (
                "sweep", cols.np(cols.params[(p, st)]), {"units": cols.units.get(p, ""), "description": descr[st]})
    ds = xr.Dataset(data, coords=ds_coords,
                    attrs={"schema": RESULTS_SCHEMA, "title": "bayesprobe batch results",
                           "credible_intervals": "equal-tailed, probability in credible_level"})
    tmp = out / ".results.nc.tmp"
    try:
        ds.to_netcdf(tmp, engine="h5netcdf")
        os.replace(tmp, out / "results.nc")
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink()
    del ds
    if figures and n:
        plot_profiles(cols, params, out / "profiles.png")
    status = cols.s["status"]
    stats = {st: sum(1 for x in status if x == st) for st in STATUSES}
    stats["n_sweeps"] = n
    stats["failed_list"] = [(cols.s["sweep_id"][j], cols.s["reason"][j]) for j in range(n)
                            if status[j] == "failed"][:1000]
    return stats


def _float(v):
    if isinstance(v, bool):
        return None
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def _nan(v):
    x = _float(v)
    return math.nan if x is None else x


_PREFERRED_COORDS = ("position", "radius", "r", "x", "y", "z", "time", "t")


def plot_profiles(cols, params, path):
    """Each main parameter against the sweep coordinate (median and credible band), one line per source file."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    status = cols.s["status"]
    usable = [j for j in range(cols.n) if status[j] in ("ok", "not-converged")]
    if not usable or not params:
        return None
    names = sorted((c for c, col in cols.coords.items() if any(math.isfinite(col[j]) for j in usable)),
                   key=lambda k: (_PREFERRED_COORDS.index(k) if k in _PREFERRED_COORDS else 99, k))
    xname = names[0] if names else None
    groups: dict = {}
    for pos, j in enumerate(usable):
        x = cols.coords[xname][j] if xname else float(pos)
        if math.isfinite(x):
            groups.setdefault(cols.s["source"][j].split(" [sweep ")[0], []).append((x, j))
    ncols = 2 if len(params) > 1 else 1
    nrows = int(math.ceil(len(params) / ncols))
    fig = Figure(figsize=(5.5 * ncols, 3.0 * nrows), layout="constrained")
    FigureCanvasAgg(fig)
    for k, p in enumerate(params):
        ax = fig.add_subplot(nrows, ncols, k + 1)
        med, lo, hi = (cols.params[(p, st)] for st in _STATS)
        for gi, (src, pts) in enumerate(sorted(groups.items())):
            pts = sorted((x, j) for x, j in pts if math.isfinite(med[j]))
            if not pts:
                continue
            xs = np.array([x for x, _ in pts])
            js = [j for _, j in pts]
            m = np.array([med[j] for j in js])
            ok = np.array([status[j] == "ok" for j in js])
            colour = f"C{gi % 10}"
            ax.fill_between(xs, [lo[j] for j in js], [hi[j] for j in js], color=colour, alpha=0.25, linewidth=0)
            ax.plot(xs, m, "-", color=colour, linewidth=1,
                    label=Path(src).name[:30] if 1 < len(groups) <= 8 else None)
            ax.plot(xs[ok], m[ok], "o", color=colour, markersize=3)
            if np.any(~ok):
                ax.plot(xs[~ok], m[~ok], "o", markerfacecolor="none", color=colour, markersize=4,
                        label="not converged" if gi == 0 else None)
        if p in ("n_e", "n_i"):
            ax.set_yscale("log")
        ax.set_ylabel(f"{p} [{cols.units.get(p, '')}]")
        ax.set_xlabel(xname if xname else "sweep (table order)")
        if ax.get_legend_handles_labels()[0]:
            ax.legend(fontsize=7)
    levels = {cols.f["credible_level"][j] for j in usable if math.isfinite(cols.f["credible_level"][j])}
    level = f"{100 * levels.pop():g}% " if len(levels) == 1 else ""
    fig.suptitle(f"posterior median and {level}credible band per sweep", fontsize=10)
    b = _io.BytesIO()
    fig.savefig(b, format="png", dpi=110)
    return atomic_write_bytes(path, b.getvalue())
