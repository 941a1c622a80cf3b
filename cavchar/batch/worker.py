"""What a Dask worker runs for one batch entry: the fit and its output files, as data.

The worker writes nothing the user keeps: it fits, renders the single-fit outputs
(:func:`cavchar.outputs.write_fit_outputs`) into a private temporary folder,
reads them back as bytes and returns them with the result object.  The client
writes them into the entry's folder and the log, so a cluster needs no shared
output folder and the log has one writer.  Every failure of the fit becomes data
(status, exit class, message), never an exception of the task, so one bad record
cannot stop the others.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
import traceback
import warnings
from pathlib import Path
from typing import Any

__all__ = ["run_entry", "EVENT_TOPIC", "STATUS_OK", "STATUS_BAD_INPUT",
           "STATUS_NOT_CONVERGED", "STATUS_ERROR"]

#: topic of the worker events that count the attempts of each entry
EVENT_TOPIC = "cavchar-batch-attempt"

STATUS_OK = "fitted"
STATUS_BAD_INPUT = "bad input"
STATUS_NOT_CONVERGED = "not converged"
STATUS_ERROR = "internal error"


def _announce(label: str, run: str | None) -> str | None:
    """Tell the scheduler this worker starts ``label`` (for the attempt count)."""
    try:
        from distributed import get_worker

        worker = get_worker()
    except (ImportError, ValueError):
        return None
    try:
        worker.log_event(EVENT_TOPIC, {"label": label, "run": run,
                                       "worker": worker.address})
    except Exception:  # the count is information only; the fit goes on without it
        pass
    return worker.address


def _one_thread() -> None:
    """One numba thread and one BLAS thread per worker: the cluster already runs one
    worker per core.  One BLAS thread also makes the last digits of linear algebra
    independent of how a worker was started (Dask's nanny sets OMP_NUM_THREADS=1; a
    worker without one would otherwise split sums over several BLAS threads)."""
    try:
        from threadpoolctl import threadpool_limits

        threadpool_limits(1)
    except ImportError:
        pass
    if os.environ.get("NUMBA_NUM_THREADS"):
        return
    try:
        import numba

        numba.set_num_threads(1)
    except (ImportError, ValueError):
        pass


#: glibc ``mallopt`` parameters (malloc.h) and the values a worker sets (bytes)
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
MMAP_THRESHOLD_BYTES = 32 * 1024 * 1024
TRIM_THRESHOLD_BYTES = 64 * 1024 * 1024
_malloc_tuned = False


def _reuse_freed_memory() -> bool:
    """Let the C allocator of this worker process reuse freed memory (glibc only).

    Dask's nanny starts every worker with ``MALLOC_TRIM_THRESHOLD_=65536``
    (``distributed.nanny.pre-spawn-environ``), which returns freed memory to the
    system as soon as 64 KiB are free and switches off glibc's dynamic mmap
    threshold.  Every array above 128 KiB that a fit allocates, again and again
    while it samples, is then a fresh ``mmap`` whose pages the kernel faults in
    and zeroes again: 15-20x the page faults of the same fits in a plain process
    and about a tenth more CPU time (docs/batch.md, Throughput).  Raising both
    thresholds (``mallopt(M_MMAP_THRESHOLD, 32 MiB)``, ``mallopt(M_TRIM_THRESHOLD, 64 MiB)``,
    the largest values glibc's dynamic thresholds reach on their own on 64-bit
    systems) keeps such arrays on the heap and reuses them.  Once per process; a C
    library without ``mallopt`` (not glibc) is left as it is.  Returns whether the
    thresholds were set.
    """
    global _malloc_tuned
    if _malloc_tuned or not sys.platform.startswith("linux"):
        return _malloc_tuned
    _malloc_tuned = True
    try:
        import ctypes

        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):
        return False
    mallopt.argtypes = [ctypes.c_int, ctypes.c_int]
    mallopt.restype = ctypes.c_int
    return bool(mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD_BYTES)
                and mallopt(_M_TRIM_THRESHOLD, TRIM_THRESHOLD_BYTES))


def _read_outputs(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir()) if p.is_file()}


def run_entry(task: dict[str, Any]) -> dict[str, Any]:
    """Fit one entry and return its outcome (a plain dict).

    Parameters
    ----------
    task
        ``label``, ``kind``, ``argv`` (the ``cavchar fit`` arguments without the
        seed), ``seed``, ``check_every``, ``outputs`` (render the output files),
        ``figures`` (draw the figures among them), ``single_thread``.

    Returns
    -------
    dict
        ``label``, ``status`` (fitted / bad input / not converged / internal
        error), ``exit_class`` (0, 2, 3 or 1 as the single-record command),
        ``message``, ``result`` (FitResult or None), ``files`` (name -> bytes),
        ``warnings`` (texts), ``wall_s`` (s), ``cpu_s`` (CPU time of the thread that
        fitted and rendered, s), ``worker`` (address or None).
    """
    from cavchar.batch.options import fit_from_argv
    from cavchar.errors import CavcharError, ConvergenceError, InputError

    label = task["label"]
    worker = _announce(label, task.get("run"))
    if task.get("single_thread", worker is not None):
        _one_thread()
    if worker is not None:
        _reuse_freed_memory()
    start, cpu_start = time.perf_counter(), time.thread_time()
    outcome: dict[str, Any] = {"label": label, "status": STATUS_OK, "exit_class": 0,
                               "message": "", "result": None, "files": {}, "warnings": [],
                               "wall_s": 0.0, "cpu_s": 0.0, "worker": worker}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            result, trajectory = fit_from_argv(task["kind"], list(task["argv"]), task["seed"],
                                               task.get("check_every"))
            outcome["result"] = result
            if task.get("outputs", True):
                outcome["files"] = _render(result, trajectory, task.get("figures", True))
        except InputError as exc:
            outcome.update(status=STATUS_BAD_INPUT, exit_class=exc.exit_code, message=str(exc))
        except ConvergenceError as exc:
            outcome.update(status=STATUS_NOT_CONVERGED, exit_class=exc.exit_code,
                           message=str(exc))
        except CavcharError as exc:
            outcome.update(status=STATUS_ERROR, exit_class=exc.exit_code, message=str(exc))
        except Exception as exc:  # a bug: reported with its traceback, the batch goes on
            outcome.update(status=STATUS_ERROR, exit_class=1,
                           message=f"internal error ({type(exc).__name__}: {exc})",
                           traceback=traceback.format_exc())
    texts = []
    for item in caught:
        text = str(item.message)
        if text not in texts:
            texts.append(text)
    outcome["warnings"] = texts
    outcome["wall_s"] = time.perf_counter() - start
    outcome["cpu_s"] = time.thread_time() - cpu_start
    return outcome


def _render(result, trajectory, figures: bool) -> dict[str, bytes]:
    """The single-fit output files as bytes (written into a private temporary folder)."""
    from cavchar.outputs import write_fit_outputs

    with tempfile.TemporaryDirectory(prefix="cavchar-batch-") as tmp:
        folder = Path(tmp)
        write_fit_outputs(result, folder, figures=figures)
        if trajectory is not None:
            from cavchar.fits.probe_trajectory import viterbi_jump_record, write_trajectory
            from cavchar.io.writers import write_jump_record

            write_trajectory(trajectory, folder / "trajectory.csv")
            write_jump_record(viterbi_jump_record(trajectory), folder / "viterbi_jumps.csv")
        return _read_outputs(folder)
