"""The batch folder's state: one record per sweep, the settings manifest, the lock, and which
sweeps are done.

Only the parent process writes here (workers return records); every file is written atomically,
so a killed run leaves finished records intact and at most some ``.*.tmp`` files, removed on the
next run. Reading a record back happens in one place, :func:`read_record`.
"""
from __future__ import annotations

import contextlib
import json
import math
from pathlib import Path

from .. import schema
from ..io import atomic_write_bytes, atomic_write_text
from ..schema import RECORD_SCHEMA
from ._messages import fail, one_line, show

MANIFEST_SCHEMA = "bayesprobe.batch/1"
#: largest per-sweep record read back when assembling the tables (bytes)
MAX_RECORD_BYTES = 16 << 20


def make_record(meta: dict, seed, status: str, reason: str, summary=None) -> dict:
    """The record of one sweep: its ids and coordinates (``meta``), seed, status, one-line reason
    and fit summary (None unless fitted)."""
    rec = {"schema": RECORD_SCHEMA, **meta, "seed": seed, "status": status, "reason": one_line(reason)}
    rec["summary"] = summary
    return rec


def read_record(p: Path):
    """The record in file ``p``, checked by :func:`bayesprobe.schema.read_record`, or None if it
    is too large, unreadable or not a sweep record."""
    return schema.read_record(p, max_bytes=MAX_RECORD_BYTES)


def finite_or_none(v):
    """``v`` as a finite float, or None (booleans, non-numbers, NaN and infinities)."""
    if isinstance(v, bool):
        return None
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


# ---------------------------------------------------------------------------- the folder

@contextlib.contextmanager
def exclusive(out: Path):
    """Refuse a second batch (or leftover workers of a killed one) writing to the same folder."""
    fh = open(out / ".lock", "a+b")
    try:
        try:
            import fcntl
            try:
                fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                raise fail(f"another bayesprobe batch (or leftover workers of one) is writing to "
                           f"{show(str(out), 120)}; wait for it to end or choose another --out") from None
        except ImportError:  # pragma: no cover - not POSIX
            pass
        yield
    finally:
        fh.close()


def _jsonable(x):
    return json.loads(json.dumps(x, sort_keys=True, default=str))


def check_manifest(out: Path, settings: dict):
    """Write ``batch.json`` with the run's settings, or check that an earlier run used the same ones."""
    path = out / "batch.json"
    settings = _jsonable(settings)
    if path.exists():
        try:
            old = json.loads(path.read_text(encoding="utf-8"))["settings"]
        except (OSError, ValueError, KeyError, TypeError):
            raise fail(f"{show(str(path), 120)} is unreadable; it is not a bayesprobe batch folder, or the file "
                       "was damaged - choose another --out") from None
        if old != settings:
            diff = sorted(k for k in set(old) | set(settings) if old.get(k) != settings.get(k))
            raise fail(f"{show(str(out), 120)} holds a batch run with other settings ({', '.join(diff)}); repeat "
                       "the original options to resume it, or choose another --out")
        return
    atomic_write_text(path, json.dumps({"schema": MANIFEST_SCHEMA, "settings": settings}, indent=2,
                                       sort_keys=True) + "\n")


def remove_stale_temporaries(folder: Path):
    """Temporary files left by a killed run (the folder is locked to this run)."""
    if folder.is_dir():
        for p in folder.iterdir():
            if p.name.startswith(".") and p.name.endswith(".tmp"):
                with contextlib.suppress(OSError):
                    p.unlink()


def done_ids(sweeps_dir: Path, retry_failed: bool) -> set:
    """Ids of the sweeps recorded in ``sweeps_dir`` (failed ones left out with ``retry_failed``)."""
    remove_stale_temporaries(sweeps_dir)
    done = set()
    for p in sweeps_dir.iterdir():
        if p.name.startswith(".") or p.suffix != ".json":
            continue
        if retry_failed:
            rec = read_record(p)
            if rec is None or rec.get("status") == "failed":
                continue
        done.add(p.stem)
    return done


class RecordWriter:
    """Writes the records (and posteriors) of finished sweeps as they come back, counting them."""

    def __init__(self, out: Path, bar=None):
        self.sweeps_dir = out / "sweeps"
        self.post_dir = out / "posteriors"
        self.bar = bar
        self.counts = {"failed": 0, "not-converged": 0, "written": 0}
        self.fitted_now = 0

    def write(self, rec: dict, nc: bytes | None = None):
        """One record (and its posterior netCDF bytes), atomically."""
        sid = rec["sweep_id"]
        if nc is not None:
            atomic_write_bytes(self.post_dir / f"{sid}.nc", nc)
        atomic_write_text(self.sweeps_dir / f"{sid}.json", json.dumps(rec, indent=1, allow_nan=False) + "\n")
        self.counts["written"] += 1
        if rec["status"] in self.counts:
            self.counts[rec["status"]] += 1
        if self.bar is not None:
            self.bar.update(1)
            self.bar.set_postfix(failed=self.counts["failed"], not_converged=self.counts["not-converged"],
                                 refresh=False)

    def write_result(self, task: dict, result):
        """The worker's result of ``task`` (one sweep, or a warm-start block): its fresh members' records."""
        pairs = result if "block" in task else [result]
        for member, (rec, nc) in zip(_members(task), pairs):
            if member.get("fresh", True) and "record" not in member:
                self.write(rec, nc)
                self.fitted_now += 1

    def write_failed(self, task: dict, reason: str):
        """Every fresh member of ``task`` recorded as failed for ``reason`` (its worker did not return)."""
        for member in _members(task):
            if member.get("fresh", True) and "record" not in member:
                self.write(make_record(member["meta"], member["seed"], "failed", reason))


def _members(task: dict) -> list:
    return task.get("block", [task])
