"""Units of work: the input sweeps cut into single sweeps or warm-start runs, and the worker
task of each (a sweep that cannot be read gets its failed record here, in the parent)."""
from __future__ import annotations

import zipfile

from ..errors import InputError
from ._messages import one_line, show
from .ids import sweep_seed
from .records import finite_or_none, make_record


def warm_groups(items, block: int):
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


class TaskMaker:
    """Worker tasks from sweep items: the sweep loaded, its seed and its settings (``options``,
    a :class:`~.options.BatchOptions`; ``table``: per-sweep configs by label or id). A task holds
    the sweep, its FitOptions (``"options"``: the batch's, with the sweep's config and seed), the
    seed and the record metadata."""

    def __init__(self, options, table: dict):
        self.options = options
        self.table = table

    def member(self, item) -> dict:
        """The task of one sweep; it holds a ``"record"`` (failed) instead if the sweep cannot be read."""
        s_seed = sweep_seed(self.options.seed, item.sweep_id)
        meta = {"sweep_id": item.sweep_id, "label": item.label, "source": item.source,
                "index": item.index, "coords": {k: finite_or_none(v) for k, v in item.coords.items()}}
        try:
            sweep = item.load()
        except InputError as exc:
            return {"meta": meta, "seed": s_seed, "record": make_record(meta, s_seed, "failed", str(exc))}
        except (OSError, ValueError, EOFError, zipfile.BadZipFile) as exc:
            return {"meta": meta, "seed": s_seed,
                    "record": make_record(meta, s_seed, "failed", f"{show(item.source, 120)} could not be read: "
                                                                  f"{type(exc).__name__}: {one_line(exc, 200)}")}
        cfg = self.table.get(item.label, self.table.get(item.sweep_id, self.options.config))
        return self.options.fit_task(sweep, cfg, s_seed, meta)

    def for_group(self, group, done: set, writer):
        """The task of a group of items (None if nothing in it needs a worker). Items not in ``done``
        are fresh: their unreadable sweeps are recorded now; every item is added to ``done``."""
        members = []
        for item in group:
            fresh = item.sweep_id not in done
            done.add(item.sweep_id)
            member = self.member(item)
            if "record" in member and fresh:
                writer.write(member["record"])
            member["fresh"] = fresh
            members.append(member)
        if self.options.warm_start:
            # a warm-start block is always fitted whole, so its results do not depend on
            # which of its sweeps an interrupted run had finished
            if any("record" not in m for m in members):
                return {"block": members, "meta": members[0]["meta"], "seed": members[0]["seed"]}
            return None
        return None if "record" in members[0] else members[0]
