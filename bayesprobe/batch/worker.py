"""The worker side: fit one sweep (or a warm-start block of sweeps) and return its record.

:func:`run_task` is what every executor runs; it is sent to worker processes by reference
(``bayesprobe.batch.worker.run_task``), so it must stay a module-level function here.
"""
from __future__ import annotations

import warnings
from pathlib import Path

from ._messages import one_line
from .records import make_record


def limit_threads():
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
    """(record, posterior bytes or None, FitResult or None) of one sweep."""
    from ..fitting import fit
    nc = None
    result = None
    try:
        result = _fit(fit, task, start)
        summary = result.summary()
        if result.converged:
            status, reason = "ok", ""
        else:
            status = "not-converged"
            reason = "not converged: " + "; ".join(result.diagnostics.get("unmet", [])) or "criteria not met"
        if task.get("keep_posterior"):
            nc = _posterior_bytes(result)
    except (ValueError, FloatingPointError) as exc:   # InputError is a ValueError: bad data or priors
        summary, status, reason = None, "failed", one_line(exc)
    except MemoryError:
        summary, status, reason = None, "failed", "out of memory while fitting this sweep"
    except Exception as exc:  # noqa: BLE001 - one bad sweep must not stop the batch
        summary, status, reason = None, "failed", f"fit failed: {type(exc).__name__}: {one_line(exc)}"
    return make_record(task["meta"], task["seed"], status, reason, summary), nc, result


def _fit(fit, task: dict, start):
    """``fit`` (:func:`bayesprobe.fit`) called with the task's options (a FitOptions), quietly: the
    record carries a non-converged status, so the ConvergenceWarning would only say it twice."""
    from ..errors import ConvergenceWarning
    opts = task["options"] if start is None else task["options"].with_(start=start)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        return fit(task["sweep"], options=opts)


def _posterior_bytes(result) -> bytes:
    """The full posterior of ``result`` as netCDF bytes."""
    import tempfile
    with tempfile.TemporaryDirectory(prefix="bayesprobe-") as tmp:
        p = Path(tmp) / "posterior.nc"
        result.to_netcdf(p)
        return p.read_bytes()
