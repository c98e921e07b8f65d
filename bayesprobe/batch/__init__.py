"""Many sweeps: resumable, crash-safe batch fitting on a process pool, a Dask cluster, or in-process.

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

Modules, one job each:

=================  ==================================================================
``readers``        inputs expanded; :class:`SweepItem`, :func:`iter_sweeps`
``array_files``    multi-sweep ``.npz`` / ``.npy`` files
``text_files``     multi-sweep text tables with a sweep-id column
``loaders``        limits and one-sweep loaders shared by the readers
``settings``       the per-sweep settings table (:func:`load_sweep_table`)
``options``        option checks (the single place) and the manifest settings
``records``        per-sweep records and the folder state: manifest, lock, done ids
``worker``         the worker task (:func:`run_task`)
``executors``      process pool, Dask, serial in-process
``tasks``          units of work (warm-start runs) and their worker tasks
``scheduler``      submitting, collecting, isolating a sweep that kills its worker
``runner``         :func:`fit_many`, :class:`BatchSummary`
``columns``        the records read back into typed columns
``tables``         ``results.csv`` / ``results.nc`` (:func:`assemble_results`)
``profiles``       ``profiles.png`` (:func:`plot_profiles`)
=================  ==================================================================
"""
from .columns import TABLE_PARAMETERS
from .executors import EXECUTORS
from .ids import file_id_for, sweep_seed
from .loaders import MAX_SWEEPS_PER_FILE
from .profiles import plot_profiles
from .readers import SweepItem, iter_sweeps
from ..schema import RECORD_SCHEMA, STATUSES
from .records import MANIFEST_SCHEMA
from .records import make_record as _record  # noqa: F401 - the record maker under its old name
from .runner import BatchSummary, fit_many
from .settings import load_sweep_table
from .tables import RESULTS_SCHEMA, assemble_results
from .tasks import warm_groups as _warm_groups  # noqa: F401 - under its old name
from .worker import run_task

__all__ = ["EXECUTORS", "MANIFEST_SCHEMA", "MAX_SWEEPS_PER_FILE", "RECORD_SCHEMA", "RESULTS_SCHEMA", "STATUSES",
           "TABLE_PARAMETERS", "BatchSummary", "SweepItem", "assemble_results", "file_id_for", "fit_many",
           "iter_sweeps", "load_sweep_table", "plot_profiles", "run_task", "sweep_seed"]
