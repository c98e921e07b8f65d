"""Writing files so that readers never see a partial one: atomic replacement of single files
(bytes, text, or a temporary path for writers that need a file name) and staged output folders
that appear only when a run succeeds."""
from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from pathlib import Path
from typing import Iterator

from ._messages import _fail, _show

__all__ = ["atomic_write_bytes", "atomic_write_text", "atomic_path", "staged_output_dir"]

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
    data = bytes(memoryview(data))
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:
            fh.write(data)
    return Path(path)


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
