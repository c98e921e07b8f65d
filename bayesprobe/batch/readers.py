"""The sweeps of a batch's inputs: files, folders and glob patterns expanded, each file read by
the reader of its kind (:mod:`.array_files`, :mod:`.text_files`, or the ordinary one-sweep reader),
one :class:`SweepItem` at a time in a deterministic order.

Input is untrusted: files are never unpickled, multi-sweep NumPy files are read one sweep at a
time and text tables whole (within the io size cap), every size is capped, and an unreadable file or sweep becomes an item whose ``load`` raises
InputError with a one-line reason (the batch records it as failed and goes on).
"""
from __future__ import annotations

import glob
import os
import zipfile
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputError
from ..io import MAX_POINTS, NUMPY_SUFFIXES, TEXT_SUFFIXES
from ._messages import fail, one_line, show
from .array_files import count_npy, count_npz, npy_sweeps, npz_sweeps
from .ids import file_id_for, sha8
from .loaders import raising, single
from .text_files import count_text, text_sweeps


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


def expand_inputs(inputs) -> list[Path]:
    """Files named by the inputs: files, folders (their sweep files, not recursive), glob patterns."""
    if isinstance(inputs, (str, os.PathLike)):
        inputs = [inputs]
    inputs = list(inputs)
    if not inputs:
        raise fail("no input given; name sweep files, folders or glob patterns")
    files: list[Path] = []
    for entry in inputs:
        files += _files_of(os.fspath(entry))
    out, seen = [], set()
    for f in files:   # the same file through two inputs is read once
        key = os.path.abspath(f)
        if key not in seen:
            seen.add(key)
            out.append(f)
    return out


def _files_of(text: str) -> list[Path]:
    """The files of one input entry."""
    suffixes = TEXT_SUFFIXES + NUMPY_SUFFIXES
    p = Path(text)
    if p.is_dir():
        found = sorted(q for q in p.iterdir() if q.suffix.lower() in suffixes and not q.name.startswith(".")
                       and q.is_file())
        if not found:
            raise fail(f"folder {show(text, 120)} holds no sweep files ({', '.join(suffixes)})")
        return found
    if os.path.lexists(p):
        return [p]
    if glob.has_magic(text):
        found = sorted(Path(q) for q in glob.glob(text) if Path(q).is_file())
        if not found:
            raise fail(f"the pattern {show(text, 120)} matches no files; check the pattern and quote it")
        return found
    raise fail(f"input {show(text, 120)} not found; name sweep files, folders or glob patterns")


def reading_options(*, voltage_column=None, current_column=None, sweep_column=None, sign: str = "auto",
                    max_points: int = MAX_POINTS) -> dict:
    """The options every reader takes, as one dict."""
    return {"voltage_column": voltage_column, "current_column": current_column, "sweep_column": sweep_column,
            "sign": sign, "max_points": int(max_points)}


def _file_sweeps(path: Path, opts) -> Iterator[tuple]:
    """Per-file generator of (raw_id, index, coords, loader(sweep_id)) tuples."""
    where = str(path)
    suffix = path.suffix.lower()
    reader = {".npz": npz_sweeps, ".npy": npy_sweeps}.get(suffix, text_sweeps if suffix in TEXT_SUFFIXES else None)
    try:
        if reader is not None:
            yield from reader(path, opts)
            return
    except InputError as exc:
        yield (path.stem, None, {}, raising(str(exc)))
        return
    except (OSError, zipfile.BadZipFile, zipfile.LargeZipFile, EOFError, ValueError, KeyError,
            NotImplementedError, RuntimeError, UnicodeError) as exc:
        yield (path.stem, None, {}, raising(f"{show(where, 120)} could not be read "
                                            f"({type(exc).__name__}: {one_line(exc, 200)}); "
                                            "check that the file is complete and in a supported format"))
        return
    yield (path.stem, None, {}, single(path, opts))


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
    opts = reading_options(voltage_column=voltage_column, current_column=current_column,
                           sweep_column=sweep_column, sign=sign, max_points=max_points)
    first_use: dict[str, str] = {}
    for path in expand_inputs(inputs):
        for raw, index, coords, loader in _file_sweeps(path, opts):
            label = one_line(raw, 200)
            fid = file_id_for(raw)
            source = str(path) if index is None else f"{path} [sweep {index}]"
            key = fid.casefold()
            if key in first_use:
                dup = file_id_for(f"{fid[:48]}.dup-{sha8(source)}")
                yield SweepItem(dup, label, source, index, coords, _duplicate(
                    loader, f"sweep id {show(raw, 60)} from {show(source, 120)} is already used by "
                            f"{show(first_use[key], 120)}; give every sweep its own id"), str(path))
                continue
            first_use[key] = source
            yield SweepItem(fid, label, source, index, coords, _bind_id(loader, fid), str(path))


def _duplicate(loader, message):
    """Loader of a sweep whose id is taken: the reader's own complaint if it has one, else the duplicate."""
    def load():
        loader(sweep_id="duplicate")
        raise fail(message)
    return load


def _bind_id(loader, fid):
    def load():
        return loader(sweep_id=fid)
    return load


def count_sweeps(paths: list[Path], opts) -> int | None:
    """Number of sweeps in the inputs without reading their data (for the progress bar)."""
    total = 0
    for path in paths:
        suffix = path.suffix.lower()
        try:
            if suffix == ".npz":
                total += count_npz(path)
            elif suffix == ".npy":
                total += count_npy(path)
            else:
                total += count_text(path, opts)
        except Exception:  # noqa: BLE001 - counting is only for the progress bar
            total += 1
    return total
