"""Keeping the executor busy: tasks submitted as capacity allows, results written as they come
back, and a sweep that kills its worker process found by re-running the suspects one at a time."""
from __future__ import annotations

from collections import deque

from ._messages import one_line


class Scheduler:
    """Runs every group of ``groups`` not yet ``done`` on ``executor``; ``writer`` records the results."""

    def __init__(self, executor, groups, tasks, writer, done: set):
        self.executor = executor
        self.groups = groups
        self.tasks = tasks
        self.writer = writer
        self.done = done
        self.inflight: dict = {}
        self.exhausted = False
        self.suspects: deque = deque()      # sweeps in flight when a worker process died
        self.isolated = None                # the future of a suspect running alone

    def run(self):
        """Until every task has a result; futures still in flight on an exception are cancelled."""
        try:
            while self._fill():
                self._collect()
        finally:
            for fut in self.inflight:
                fut.cancel()

    def _fill(self) -> bool:
        """Submit tasks up to the executor's capacity; True if any is in flight."""
        while len(self.inflight) < self.executor.capacity():
            if self.suspects:       # re-run suspects one at a time to find the one that kills workers
                if not self.inflight:
                    task = self.suspects.popleft()
                    self.isolated = self.executor.submit(task)
                    self.inflight[self.isolated] = task
                break
            task = self._next_task()
            if task is None:
                break
            self.inflight[self.executor.submit(task)] = task
        return bool(self.inflight)

    def _next_task(self):
        """The next task needing a worker, or None when the input is exhausted."""
        while not self.exhausted:
            group = next(self.groups, None)
            if group is None:
                self.exhausted = True
                break
            if all(item.sweep_id in self.done for item in group):
                continue
            task = self.tasks.for_group(group, self.done, self.writer)
            if task is not None:
                return task
        return None

    def _collect(self):
        """Write the results that are done; after a worker died, recover the rest of the flight."""
        broken = False
        for fut in self.executor.wait(self.inflight):
            task = self.inflight.pop(fut)
            try:
                self.writer.write_result(task, fut.result())
            except Exception as exc:  # noqa: BLE001 - infrastructure, not the sweep
                if self.executor.is_broken(exc):
                    broken = True
                    if fut is self.isolated and not getattr(fut, "rejected", False):
                        self.writer.write_failed(task, "the worker process died while fitting this sweep alone "
                                                       "(it crashed or was killed, e.g. for running out of memory)")
                    else:
                        self.suspects.append(task)
                    continue
                self.writer.write_failed(task, f"the worker running this sweep failed: {type(exc).__name__}: "
                                               f"{one_line(exc, 200)}")
        if broken:
            self._recover()

    def _recover(self):
        """Every other sweep in flight went down with the pool: keep finished results, suspect the rest."""
        for fut, task in self.inflight.items():
            if fut.done() and not fut.cancelled() and fut.exception() is None:
                self.writer.write_result(task, fut.result())
            else:
                self.suspects.append(task)
        self.inflight.clear()
        self.isolated = None
        self.executor.restart()
