"""Batch fits: many records on a local or remote Dask cluster, resumable.

* :mod:`cavchar.batch.spec`    the batch file (TOML: defaults, entries, globs) and its checks;
* :mod:`cavchar.batch.options` entry options read by the single-record commands' parsers;
* :mod:`cavchar.batch.worker`  the task a worker runs for one entry;
* :mod:`cavchar.batch.runner`  :func:`fit_many`: cluster, resumption, outputs, log;
* :mod:`cavchar.batch.summary` the summary table.

Names are imported lazily: ``import cavchar.batch`` imports neither dask nor numba.
"""

from __future__ import annotations

from cavchar._lazy import lazy_exports

_PUBLIC = {
    "fit_many": "cavchar.batch.runner",
    "BatchRun": "cavchar.batch.runner",
    "EXIT_SOME_FAILED": "cavchar.batch.runner",
    "SCHEDULER_ENV": "cavchar.batch.runner",
    "open_client": "cavchar.batch.runner",
    "read_batch_file": "cavchar.batch.spec",
    "plan_entries": "cavchar.batch.spec",
    "entry_seed": "cavchar.batch.spec",
    "BatchEntry": "cavchar.batch.spec",
    "BatchPlan": "cavchar.batch.spec",
    "BatchFileError": "cavchar.batch.spec",
}

__all__, __getattr__, __dir__ = lazy_exports(__name__, _PUBLIC)
