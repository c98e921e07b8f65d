"""Executors: where the worker tasks run. Each one has the same small interface, used by the
scheduler (:mod:`.scheduler`):

``name``                a short description for the summary line
``submit(task)``        start ``runner(task)``; returns a future
``wait(futures)``       the futures that are done (at least one)
``is_broken(exc)``      True if ``exc`` means the workers died (the tasks in flight are suspects)
``restart()``           replace broken workers
``capacity()``          how many tasks to keep in flight
``close()``             release the workers

Results do not depend on the executor: every sweep's seed comes from the global seed and its id.
"""
from __future__ import annotations

import os
from concurrent.futures import Future

from ._messages import fail, one_line, show
from .worker import limit_threads

_DASK_HINT = "install it with: pip install 'bayesprobe[dask]'"
#: the executors ``fit_many(executor=...)`` accepts (None: Dask when a Dask target is given, else processes)
EXECUTORS = ("processes", "serial", "dask")


def cpu_count() -> int:
    """The cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover
        return max(1, os.cpu_count() or 1)


class ProcessPool:
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
        return self._cls(max_workers=self.workers, initializer=limit_threads)

    def submit(self, task):
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


class DaskCluster:
    """Dask distributed: a LocalCluster (``"local"``), a scheduler address, or a given Client."""

    def __init__(self, target, workers, runner):
        try:
            import distributed
        except ImportError:
            raise fail(f"--dask needs the dask.distributed package; {_DASK_HINT}") from None
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
                self.cluster = distributed.LocalCluster(n_workers=workers or cpu_count(), threads_per_worker=1,
                                                        processes=True, dashboard_address=None)
            self.client = distributed.Client(self.cluster)
        else:
            try:
                self.client = distributed.Client(str(target), timeout="20s")
            except (OSError, TimeoutError, ValueError) as exc:
                raise fail(f"cannot reach the Dask scheduler at {show(target, 120)} ({one_line(exc, 120)}); "
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


class Serial:
    """In the calling process, one task at a time, run as it is submitted: for debugging
    (breakpoints, profilers and tracebacks reach the fit). A task that raises is recorded like a
    worker that failed; a crash of the fit ends the batch itself (there is no worker to lose)."""

    name = "serial, in-process"

    def __init__(self, runner):
        self.runner = runner

    def submit(self, task):
        fut = Future()
        try:
            fut.set_result(self.runner(task))
        except Exception as exc:  # noqa: BLE001 - reported like the failure of a worker
            fut.set_exception(exc)
        return fut

    def wait(self, futures):
        return [f for f in futures if f.done()]

    def is_broken(self, exc) -> bool:
        return False

    def restart(self):  # pragma: no cover - never broken
        pass

    def capacity(self):
        return 1

    def close(self):
        pass


def make_executor(kind: str | None, *, dask=None, workers=None, runner):
    """The executor of ``kind`` (see :data:`EXECUTORS`; the options were checked by :mod:`.options`)."""
    if kind == "serial":
        return Serial(runner)
    if kind == "dask" or (kind is None and dask is not None):
        return DaskCluster("local" if dask is None else dask, workers, runner)
    return ProcessPool(workers or cpu_count(), runner)
