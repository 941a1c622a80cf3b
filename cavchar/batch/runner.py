"""``fit_many``: fit every entry of a batch on a Dask cluster (local or remote), resumably.

One code path for both: without a client, :func:`fit_many` starts a
``distributed.LocalCluster`` (one single-threaded worker process per core) or
connects to the scheduler given by ``scheduler`` / ``$CAVCHAR_SCHEDULER``; the same
tasks (:func:`cavchar.batch.worker.run_entry`) are then submitted either way.
Workers return result objects and output files as data; only this process writes
the entry folders, the summary, the report and the cooldown log.
"""

from __future__ import annotations

import json
import logging
import math
import os
import shutil
import time
import uuid
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, TextIO

from cavchar.batch.spec import (
    BatchEntry,
    BatchFileError,
    BatchPlan,
    plan_entries,
    read_batch_file,
)
from cavchar.batch.summary import as_frame, summary_row
from cavchar.batch.worker import (
    EVENT_TOPIC,
    STATUS_ERROR,
    STATUS_OK,
    run_entry,
)
from cavchar.errors import InputError

if TYPE_CHECKING:
    from cavchar.result import FitResult

__all__ = ["fit_many", "BatchRun", "EXIT_SOME_FAILED", "SCHEDULER_ENV", "STATE_NAME",
           "load_plan"]

#: exit code of ``cavchar batch run`` when some entries have no result
EXIT_SOME_FAILED = 6
#: environment variable with the address of an existing Dask scheduler
SCHEDULER_ENV = "CAVCHAR_SCHEDULER"
#: file in each entry folder that records what was fitted (for resumption)
STATE_NAME = "batch-entry.json"
SUMMARY_NAME = "summary.csv"
REPORT_NAME = "report.html"
STATUS_SKIPPED = "skipped (done before)"
STATUS_WORKER_DIED = "worker died"
STATUS_NOT_LOGGED = "fitted, not logged"


@dataclass
class BatchRun:
    """What :func:`fit_many` did.

    Attributes
    ----------
    summary
        One row per entry (columns :data:`cavchar.batch.summary.SUMMARY_COLUMNS`;
        lifetime in s).
    results
        label -> FitResult of every entry with a result (fitted now or before).
    skipped
        Labels of entries skipped because they were done before.
    failed
        Labels of entries without a result (see ``summary`` for why).
    exit_code
        0 when every entry has a result, :data:`EXIT_SOME_FAILED` otherwise.
    """

    summary: Any
    results: dict[str, Any]
    skipped: list[str] = field(default_factory=list)
    failed: list[str] = field(default_factory=list)
    out_dir: Path | None = None
    summary_csv: Path | None = None
    report: Path | None = None
    elapsed_s: float = 0.0

    @property
    def exit_code(self) -> int:
        return EXIT_SOME_FAILED if self.failed else 0


def load_plan(entries: Any, seed: int | None = None) -> BatchPlan:
    """A :class:`BatchPlan` from a batch file path, a plan, or entry dicts."""
    if isinstance(entries, BatchPlan):
        return entries
    if isinstance(entries, str | os.PathLike):
        return read_batch_file(entries, seed=seed)
    items = list(entries)
    if items and all(isinstance(e, BatchEntry) for e in items):
        return BatchPlan(tuple(items), 1 if seed is None else seed)
    return plan_entries(items, seed=1 if seed is None else seed)


# ------------------------------------------------------------------ the cluster


def _quiet_dask() -> None:
    for name in ("distributed", "distributed.nanny", "distributed.scheduler",
                 "distributed.worker", "distributed.core", "distributed.batched"):
        logging.getLogger(name).setLevel(logging.CRITICAL)


def _check_cluster_options(workers: int | None, scheduler: str | None,
                           client: Any = None) -> None:
    if client is not None and (scheduler or workers is not None):
        raise InputError("a client was given: workers and scheduler belong to its cluster",
                         hint="pass either client or workers/scheduler")
    if scheduler and workers is not None:
        raise InputError("--scheduler and --workers exclude each other: the workers of an "
                         "existing cluster are started with `dask worker`",
                         hint="drop --workers, or drop --scheduler for a local cluster")
    if workers is not None and int(workers) < 1:
        raise InputError(f"the number of workers must be at least 1, not {workers}",
                         hint="--workers 2")


#: Dask settings of the local clusters cavchar starts: no statistical profiler (it
#: samples each worker's stack every 10 ms for a dashboard that is not started)
LOCAL_CLUSTER_CONFIG = {"distributed.worker.profile.enabled": False}


def start_local_cluster(n_workers: int):
    """A ``distributed.LocalCluster`` of ``n_workers`` single-threaded worker processes,
    without dashboard and profiler (:data:`LOCAL_CLUSTER_CONFIG`)."""
    import dask
    from distributed import LocalCluster

    with dask.config.set(LOCAL_CLUSTER_CONFIG):
        return LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                            dashboard_address=None, silence_logs=logging.CRITICAL)


def open_client(workers: int | None = None, scheduler: str | None = None,
                timeout_s: float = 30.0):
    """A ``distributed.Client`` and the things to close after the run.

    Which cluster, in this order: ``scheduler`` (an existing Dask scheduler);
    ``workers`` (a new LocalCluster of that many single-threaded processes, even when
    ``$CAVCHAR_SCHEDULER`` is set); ``$CAVCHAR_SCHEDULER``; a new LocalCluster with one
    process per core.  Both ``scheduler`` and ``workers`` is an :class:`InputError`.
    """
    _check_cluster_options(workers, scheduler)
    try:
        from distributed import Client
    except ImportError:
        raise InputError("batch fits need dask.distributed",
                         hint="pip install 'dask[distributed]'") from None
    _quiet_dask()
    address = scheduler or (None if workers is not None else os.environ.get(SCHEDULER_ENV))
    if address:
        try:
            client = Client(address, timeout=timeout_s)
        except (OSError, TimeoutError) as exc:
            raise InputError(f"cannot reach the Dask scheduler at {address} ({exc})",
                             hint="start it with `dask scheduler` and check the address "
                             f"(--scheduler or ${SCHEDULER_ENV})") from None
        return client, [client]
    n = int(workers) if workers is not None else (os.cpu_count() or 1)
    cluster = start_local_cluster(n)
    client = Client(cluster, timeout=timeout_s)
    return client, [client, cluster]


# ------------------------------------------------------------------ progress


class _Progress:
    """One line across records: done / failed / running, elapsed, estimate."""

    def __init__(self, total: int, stream: TextIO | None) -> None:
        self.total, self.stream = total, stream
        self.start = time.perf_counter()
        self.tty = bool(stream is not None and getattr(stream, "isatty", lambda: False)())
        self.last_line = ""

    def show(self, fitted: int, failed: int, running: int, final: bool = False) -> None:
        if self.stream is None:
            return
        done = fitted + failed
        elapsed = time.perf_counter() - self.start
        width = 24
        filled = int(width * done / self.total) if self.total else width
        left = ""
        if 0 < done < self.total:
            left = f", about {_clock(elapsed / done * (self.total - done))} left"
        line = (f"batch [{'#' * filled}{'.' * (width - filled)}] {done}/{self.total} "
                f"(fitted {fitted}, failed {failed}, running {running}) "
                f"{_clock(elapsed)} elapsed{left}")
        if self.tty:
            self.stream.write("\r" + line.ljust(len(self.last_line)) + ("\n" if final else ""))
        elif line.split(" (")[0] != self.last_line.split(" (")[0] or final:
            self.stream.write(line + "\n")
        self.stream.flush()
        self.last_line = line


def _clock(seconds: float) -> str:
    seconds = int(round(seconds))
    return f"{seconds // 60}:{seconds % 60:02d}"


# ------------------------------------------------------------------ resumption


@dataclass
class _Job:
    entry: BatchEntry
    hashes: list[str]
    key: str
    folder: Path | None
    row: dict | None = None
    result: FitResult | None = None


def _state(folder: Path) -> dict | None:
    try:
        return json.loads((folder / STATE_NAME).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _done_in_folder(job: _Job) -> bool:
    if job.folder is None:
        return False
    state = _state(job.folder)
    return bool(state and state.get("key") == job.key and state.get("status") == STATUS_OK
                and (job.folder / "result.json").is_file())


def _source_tag(job: _Job) -> str:
    return f"{job.entry.files[0]} (batch {job.key[:16]})"


def _logged(log, job: _Job) -> Any:
    """The log's fit of this entry (same inputs and batch key), or None."""
    if log is None or not job.entry.cavity or not job.entry.cooldown:
        return None
    try:
        fits = log.fits(cavity=job.entry.cavity, cooldown=job.entry.cooldown, summaries=False)
    except InputError:  # cavity or cooldown not in the log yet
        return None
    sha = ",".join(job.hashes[:len(job.entry.files)])
    tag = f"(batch {job.key[:16]})"
    for fit in fits:
        if fit.input_sha256 == sha and tag in (fit.source or ""):
            return fit
    return None


# ------------------------------------------------------------------ writing


def _write_folder(folder: Path, files: Mapping[str, bytes], state: dict, force: bool) -> None:
    """All files of an entry into ``folder`` at once: written into a hidden sibling
    folder, then renamed (an earlier folder is replaced only with ``force``)."""
    from cavchar.io.atomic import write_bytes_atomic

    parent = folder.parent
    parent.mkdir(parents=True, exist_ok=True)
    staging = parent / f".{folder.name}.partial-{uuid.uuid4().hex[:8]}"
    try:
        staging.mkdir()
        for name, data in files.items():
            write_bytes_atomic(staging / name, data)
        write_bytes_atomic(staging / STATE_NAME,
                           (json.dumps(state, indent=1) + "\n").encode())
        if folder.exists():
            if not force:
                raise InputError("the entry's output folder already exists", path=folder,
                                 hint="pass --force to replace it")
            old = parent / f".{folder.name}.old-{uuid.uuid4().hex[:8]}"
            os.replace(folder, old)
            os.replace(staging, folder)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(staging, folder)
    finally:
        if staging.exists():
            shutil.rmtree(staging, ignore_errors=True)


# ------------------------------------------------------------------ the run


def fit_many(
    entries: Any,
    client: Any = None,
    *,
    out: str | os.PathLike | None = None,
    workers: int | None = None,
    scheduler: str | None = None,
    seed: int | None = None,
    log: bool = False,
    log_file: str | os.PathLike | None = None,
    log_create: bool = False,
    force: bool = False,
    figures: bool = True,
    report: bool = True,
    progress: TextIO | None = None,
    say: Any = None,
) -> BatchRun:
    """Fit many records on a Dask cluster; every entry's failure stays its own.

    Parameters
    ----------
    entries
        A batch file path (docs/batch.md), a :class:`~cavchar.batch.spec.BatchPlan`,
        or dicts with the keys of a batch file's ``[[entry]]`` tables (``kind``,
        ``file``, ``label``, ``cavity``, ``cooldown`` and options such as
        ``freq="6.8GHz"``; relative paths from the current folder).
    client
        An existing ``distributed.Client`` (e.g. in a notebook); it is left open.
        Without one, ``scheduler`` / ``$CAVCHAR_SCHEDULER`` names an existing
        scheduler, else a LocalCluster of ``workers`` processes is started (one per
        core by default) and closed at the end.
    out
        Folder for one sub-folder per entry (the single-fit outputs plus
        ``batch-entry.json``), ``summary.csv`` and ``report.html``.  None: nothing
        is written and nothing is skipped from earlier runs (results are returned).
    seed
        Batch seed, overriding a batch file's ``seed``; each entry's sampler seed
        follows from it and the entry's label (:func:`cavchar.batch.spec.entry_seed`).
    log, log_file, log_create
        Log every result in the cooldown log (cavity and cooldown per entry);
        ``log_create`` adds cavities and cooldowns that are not in it yet.
    force
        Refit entries that were done before and replace their folders.
    figures
        Draw each entry's figures (PNG and PDF) into its folder.
    report
        Write the overview report ``report.html`` (needs ``out``).
    progress
        Stream for the progress line (None: silent).
    say
        Called with each message line (skips, files written); None: silent.

    Returns
    -------
    BatchRun
        The summary DataFrame, the results by label, skipped and failed labels.

    Raises
    ------
    BatchFileError
        Bad entries, missing cavity/cooldown for ``log``, or output folders of
        other settings without ``force``: all listed, before any fit starts.
    """
    start = time.perf_counter()
    tell = say or (lambda _text: None)
    _check_cluster_options(workers, scheduler, client)
    plan = load_plan(entries, seed)
    out_dir = Path(out) if out is not None else None
    jobs = _prepare(plan, out_dir, log, log_file, log_create, force)
    logbook = None
    if log:
        from cavchar.tracking import open_log

        logbook = open_log(log_file)
    try:
        skipped = [] if force else _skip_done(jobs, logbook, log, log_create, tell)
        todo = [j for j in jobs if j.row is None]
        if skipped:
            tell(f"skipped {len(skipped)} of {len(jobs)} entries done before (same inputs "
                 "and settings; --force refits them)")
        if todo:
            _run(todo, client, workers, scheduler, out_dir, logbook, log_create, force,
                 figures, progress)
    finally:
        if logbook is not None:
            logbook.close()
    table = as_frame([j.row for j in jobs])
    results = {j.entry.label: j.result for j in jobs if j.result is not None}
    run = BatchRun(summary=table, results=results, skipped=skipped,
                   failed=[j.entry.label for j in jobs if j.row["exit_class"] != 0],
                   out_dir=out_dir)
    if out_dir is not None:
        from cavchar.io.atomic import write_text_atomic

        run.summary_csv = write_text_atomic(out_dir / SUMMARY_NAME,
                                            table.to_csv(index=False), force=True)
        if report and results:
            run.report = _write_report(jobs, table, out_dir, plan)
        elif report:
            tell("no report.html: no entry has a result (summary.csv lists why)")
    run.elapsed_s = time.perf_counter() - start
    return run


def _prepare(plan: BatchPlan, out_dir: Path | None, log: bool, log_file, log_create: bool,
             force: bool) -> list[_Job]:
    """Hash the inputs and check log names and output folders; every problem at once."""
    from cavchar.provenance import sha256_of_file

    problems: list[InputError] = []
    jobs = []
    for entry in plan.entries:
        try:
            hashes = [sha256_of_file(p) for p in entry.inputs]
        except InputError as exc:
            problems.append(exc)
            continue
        folder = out_dir / entry.label if out_dir is not None else None
        jobs.append(_Job(entry, hashes, entry.key(hashes), folder))
    if log:
        problems += _log_problems(plan, log_file, log_create)
    for job in jobs:
        if job.folder is not None and job.folder.exists() and not force:
            state = _state(job.folder)
            if not (state and state.get("key") == job.key):
                problems.append(InputError(
                    f"entry {job.entry.label}: its output folder holds a fit of other inputs or "
                    "settings", path=job.folder, line=None,
                    hint="pass --force to refit and replace it, or choose another -o folder"))
    if problems:
        raise BatchFileError(problems, plan.path)
    return jobs


def _log_problems(plan: BatchPlan, log_file, log_create: bool) -> list[InputError]:
    from cavchar.tracking import open_log

    problems = []
    for entry in plan.entries:
        if not entry.cavity or not entry.cooldown:
            problems.append(InputError(
                f"entry {entry.label}: logging needs a cavity and a cooldown",
                path=plan.path, line=entry.line,
                hint='set cavity = "..." and cooldown = "..." in the entry or [defaults]'))
    if log_create or problems:
        return problems
    with open_log(log_file) as logbook:
        for name, kind in sorted({(e.cavity, "cavity") for e in plan.entries}
                                 | {(e.cooldown, "cooldown") for e in plan.entries}):
            try:
                logbook.cavity(name) if kind == "cavity" else logbook.cooldown(name)
            except InputError as exc:
                problems.append(InputError(
                    f"{kind} {name!r} is not in the log ({exc.hint or exc.message})",
                    path=plan.path, hint=f"add it with `cavchar log {kind} {name}` or pass "
                    "--log-create"))
    return problems


def _skip_done(jobs: list[_Job], logbook, log: bool, log_create: bool, tell) -> list[str]:
    from cavchar.result import FitResult

    skipped = []
    for job in jobs:
        in_folder = _done_in_folder(job)
        logged = _logged(logbook, job)
        if not in_folder and logged is None:
            continue
        if log and not in_folder and job.folder is not None:
            continue  # in the log but its folder is gone: refit to make the files again
        result = None
        if in_folder:
            result = FitResult.from_json(job.folder / "result.json")
            if log and logged is None:
                _log_one(logbook, job, result, log_create)
        state = _state(job.folder) if in_folder else {}
        job.result = result
        job.row = summary_row(job.entry, STATUS_SKIPPED, 0, result,
                              wall_s=float(state.get("wall_s", math.nan)),
                              attempts=int(state.get("attempts", 0)),
                              folder=str(job.folder) if in_folder else "",
                              message="" if in_folder else f"in the log as fit {logged.id}")
        skipped.append(job.entry.label)
    return skipped


def _log_one(logbook, job: _Job, result, log_create: bool) -> int:
    from cavchar.tracking import entry_from_result

    entry = entry_from_result(result, source=_source_tag(job))
    return logbook.add_fit(entry, job.entry.cavity, job.entry.cooldown, create=log_create,
                           on_duplicate="skip")


def _run(todo: list[_Job], client, workers, scheduler, out_dir, logbook, log_create, force,
         figures, progress) -> None:
    own: list = []
    if client is None:
        client, own = open_client(workers, scheduler)
    run_id = uuid.uuid4().hex
    bar = _Progress(len(todo), progress)
    try:
        from distributed import wait

        futures = {}
        for job in todo:
            task = {"label": job.entry.label, "kind": job.entry.kind,
                    "argv": list(job.entry.argv), "seed": job.entry.seed,
                    "check_every": job.entry.check_every, "outputs": out_dir is not None,
                    "figures": figures, "run": run_id}
            future = client.submit(run_entry, task, pure=False,
                                   key=f"cavchar-batch-{job.entry.label}-{run_id[:8]}")
            futures[future] = job
        threads = max(1, sum(client.nthreads().values()))
        pending = set(futures)
        fitted = failed = 0
        bar.show(0, 0, min(threads, len(pending)))
        while pending:
            try:
                done, pending = wait(pending, timeout=1.0, return_when="FIRST_COMPLETED")
            except TimeoutError:
                bar.show(fitted, failed, min(threads, len(pending)))
                continue
            for future in done:
                job = futures[future]
                outcome = _outcome(future, job)
                future.release()
                _finish(job, outcome, _attempts(client, run_id, job.entry.label), out_dir,
                        logbook, log_create, force)
                if job.row["exit_class"] == 0:
                    fitted += 1
                else:
                    failed += 1
            bar.show(fitted, failed, min(threads, len(pending)), final=not pending)
    finally:
        for thing in own:
            thing.close()


def _outcome(future, job: _Job) -> dict:
    try:
        return future.result()
    except Exception as exc:  # the scheduler gave up on the task: its workers kept dying
        name = type(exc).__name__
        status = STATUS_WORKER_DIED if name == "KilledWorker" else STATUS_ERROR
        return {"label": job.entry.label, "status": status, "exit_class": 1,
                "message": f"{name}: {exc}", "result": None, "files": {}, "warnings": [],
                "wall_s": math.nan, "cpu_s": math.nan, "worker": None}


def _attempts(client, run_id: str, label: str) -> int:
    try:
        events = client.get_events(EVENT_TOPIC)
    except Exception:
        return 0
    return sum(1 for _, msg in events
               if isinstance(msg, dict) and msg.get("label") == label
               and msg.get("run", run_id) == run_id)


def _finish(job: _Job, outcome: dict, attempts: int, out_dir, logbook, log_create,
            force) -> None:
    """Write the entry's folder, log it and make its summary row."""
    status, exit_class = outcome["status"], outcome["exit_class"]
    message = outcome["message"]
    result = outcome["result"]
    folder = ""
    if result is not None and exit_class == 0:
        job.result = result
        if job.folder is not None:
            from cavchar.result_types import utc_timestamp

            state = {"label": job.entry.label, "kind": job.entry.kind, "key": job.key,
                     "status": STATUS_OK, "seed": job.entry.seed,
                     "command": job.entry.command,
                     "inputs": [{"path": p, "sha256": h}
                                for p, h in zip(job.entry.inputs, job.hashes)],
                     "wall_s": outcome["wall_s"], "cpu_s": outcome.get("cpu_s", math.nan),
                     "attempts": attempts,
                     "worker": outcome["worker"], "warnings": outcome["warnings"],
                     "written_at": utc_timestamp()}
            try:
                _write_folder(job.folder, outcome["files"], state, force)
                folder = str(job.folder)
            except InputError as exc:
                status, exit_class, message = "not written", exc.exit_code, str(exc)
        if exit_class == 0 and logbook is not None:
            try:
                _log_one(logbook, job, result, log_create)
            except InputError as exc:
                status, exit_class, message = STATUS_NOT_LOGGED, exc.exit_code, str(exc)
    if exit_class == 0 and outcome["warnings"]:
        message = "; ".join(outcome["warnings"])
    job.row = summary_row(job.entry, status, exit_class,
                          result if exit_class == 0 or status == STATUS_NOT_LOGGED else None,
                          wall_s=outcome["wall_s"], attempts=attempts, folder=folder,
                          message=message)


def _write_report(jobs: list[_Job], table, out_dir: Path, plan: BatchPlan) -> Path:
    from cavchar.batch.summary import summary_section
    from cavchar.report import write_report

    with_result = [j for j in jobs if j.result is not None]
    name = Path(plan.path).name if plan.path else "batch"
    fitted = len(with_result)
    intro = (f"{len(jobs)} entries of {name}: {fitted} with a result, "
             f"{len(jobs) - fitted} without. Each entry's figures are in its own folder.")
    return write_report([j.result for j in with_result], out_dir / REPORT_NAME, force=True,
                        title=f"Batch fit: {name}",
                        labels=[j.entry.label for j in with_result],
                        figures=[False] * len(with_result),
                        extra_sections=[summary_section(table)], intro=intro)

