"""Fitting many sweeps: :func:`fit_many`, built from the steps of the other modules (options,
reading, settings table, folder state, executor, scheduler, tables)."""
from __future__ import annotations

import hashlib
import os
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

from ..io import MAX_POINTS
from ._messages import fail, show
from .executors import make_executor
from .options import check_options
from .readers import count_sweeps, expand_inputs, iter_sweeps, reading_options
from .records import RecordWriter, check_manifest, done_ids, exclusive, remove_stale_temporaries
from .scheduler import Scheduler
from .settings import load_sweep_table
from .tables import assemble_results
from .tasks import TaskMaker, warm_groups
from .worker import run_task


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

    def take(self, stats: dict, writer: RecordWriter, t0: float):
        """Fill in the counts from the tables' ``stats`` and the ``writer`` of this run."""
        self.n_sweeps = stats["n_sweeps"]
        self.n_ok = stats["ok"]
        self.n_not_converged = stats["not-converged"]
        self.n_failed = stats["failed"]
        self.failed = stats["failed_list"]
        self.n_fitted_now = writer.fitted_now
        self.n_resumed = max(0, self.n_sweeps - writer.counts["written"])
        self.seconds = time.perf_counter() - t0


def fit_many(inputs, *, out_dir, config=None, model: str = "maxwellian", credible_level: float = 0.9, seed: int = 0,
             workers: int | None = None, dask=None, sampler=None, priors=None, student_nu=None, sign: str = "auto",
             voltage_column=None, current_column=None, sweep_column=None, sweep_table=None,
             keep_posteriors: bool = False, retry_failed: bool = False, figures: bool = True,
             progress: bool | None = None, engine: str = "mcmc", warm_start: int = 0,
             executor: str | None = None, _runner=None) -> BatchSummary:
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
        As in :func:`bayesprobe.fit`, checked once by :class:`bayesprobe.options.FitOptions` (the same
        messages); every sweep is fitted with that FitOptions and its own seed and config. A batch
        fits a fixed ``student_nu`` (a number, not ``"fit"``).
    seed : int
        Global seed (an integer, not None); each sweep's seed is :func:`sweep_seed` (seed, sweep id).
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
    executor : {None, "processes", "serial", "dask"}
        Where the fits run. None (default): on Dask when ``dask`` is given, else on a local
        process pool. ``"serial"``: one sweep at a time in this process, for debugging
        (breakpoints and profilers reach the fit); the records are the same as on a pool.
        ``"dask"`` without ``dask``: a local Dask cluster.

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
    t0 = time.perf_counter()
    reading = reading_options(voltage_column=voltage_column, current_column=current_column,
                              sweep_column=sweep_column, sign=sign, max_points=MAX_POINTS)
    options = check_options(model=model, credible_level=credible_level, seed=seed, workers=workers,
                            executor=executor, dask=dask, student_nu=student_nu, engine=engine,
                            warm_start=warm_start, sign=sign, priors=priors, config=config, sampler=sampler,
                            keep_posteriors=keep_posteriors, reading=reading)
    out = _output_folder(out_dir)
    paths = expand_inputs(inputs)
    table, table_hash = _settings_table(sweep_table, options.config)
    _make_folders(out)
    summary = BatchSummary(out_dir=out)
    with exclusive(out):
        check_manifest(out, options.manifest(table_hash))
        done = _prepare_folder(out, keep_posteriors, retry_failed)
        total = count_sweeps(paths, reading)
        pool = make_executor(executor, dask=dask, workers=workers, runner=_runner or run_task)
        summary.executor = pool.name
        bar = _progress_bar(progress, total, min(len(done), total or 0))
        writer = RecordWriter(out, bar)
        items = iter_sweeps(paths, **{k: reading[k] for k in ("voltage_column", "current_column", "sweep_column",
                                                             "sign")})
        try:
            Scheduler(pool, warm_groups(items, options.warm_start), TaskMaker(options, table), writer, done).run()
        finally:
            pool.close()
            if bar is not None:
                bar.close()
        stats = assemble_results(out, figures=figures)
    summary.take(stats, writer, t0)
    return summary


def _output_folder(out_dir) -> Path:
    out = Path(out_dir)
    if os.path.lexists(out) and not out.is_dir():
        raise fail(f"output path {show(str(out), 120)} exists and is not a directory; choose a folder for --out")
    return out


def _settings_table(sweep_table, config):
    """({sweep id: ModelConfig}, SHA-256 of the table file) of the per-sweep settings table, if any."""
    if sweep_table is None:
        return {}, None
    table = load_sweep_table(sweep_table, config)
    return table, hashlib.sha256(Path(sweep_table).read_bytes()).hexdigest()


def _make_folders(out: Path):
    out.mkdir(parents=True, exist_ok=True)
    (out / "sweeps").mkdir(exist_ok=True)


def _prepare_folder(out: Path, keep_posteriors: bool, retry_failed: bool) -> set:
    """Under the lock: the posteriors folder made if wanted, stale temporaries removed; the done ids."""
    post_dir = out / "posteriors"
    if keep_posteriors:
        post_dir.mkdir(exist_ok=True)
    remove_stale_temporaries(post_dir)
    remove_stale_temporaries(out)
    return done_ids(out / "sweeps", retry_failed)


def _progress_bar(progress, total, initial):
    if progress is None:
        progress = sys.stderr.isatty()
    if not progress:
        return None
    from tqdm.auto import tqdm
    return tqdm(total=total, initial=initial, desc="sweeps", unit="sweep", file=sys.stderr, dynamic_ncols=True)
