"""``cavchar batch check / run``: many records from one batch file, on a Dask cluster."""

from __future__ import annotations

import argparse
import sys

from cavchar.cli.common import add_command

EXAMPLES = """examples:
  cavchar batch check examples/batch/cooldown.toml
  cavchar batch run examples/batch/cooldown.toml -o batch-out
  cavchar batch run cooldown.toml -o batch-out --workers 2 --log --log-file lab.sqlite
  cavchar batch run cooldown.toml -o batch-out --scheduler tcp://10.0.0.5:8786

The batch file (TOML) lists one [[entry]] per record or glob pattern with shared
[defaults]; its format, resumption, failures and cluster use: docs/batch.md.
Exit codes: 0 every entry has a result, 2 bad batch file (nothing fitted),
6 some entries failed (the summary says which and why).
"""


DESCRIPTION = """
Fit every record listed in a batch file (TOML) in parallel on a local Dask cluster (one
single-threaded worker process per core) or an existing Dask cluster, with one output folder per
entry, a summary table and an overview report.
"""

CHECK_DESCRIPTION = """
Read the batch file and report every bad entry at once (missing file, unknown option, bad unit
or prior, missing response table) with its line; exit 2 if there is any.
"""

RUN_DESCRIPTION = """
Fit every entry; failures stay per entry.  Entries done before with the same inputs and settings
are skipped (--force refits them).
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``batch`` (with its actions ``check`` and ``run``) to the sub-commands."""
    parser = add_command(
        subparsers, "batch",
        "fit many records from one batch file, on this machine or a Dask cluster",
        DESCRIPTION, EXAMPLES)
    actions = parser.add_subparsers(dest="batch_command", metavar="ACTION")

    check = add_command(
        actions, "check",
        "check every entry of a batch file, fit nothing", CHECK_DESCRIPTION, EXAMPLES)
    check.add_argument("batch_file", help="the batch file (TOML, see docs/batch.md)")
    check.add_argument("--log", action="store_true",
                       help="also check that every entry has a cavity and a cooldown")
    check.add_argument("--seed", type=int, default=None,
                       help="batch seed (default: the file's seed, else 1)")
    check.set_defaults(func=handle_check)

    run = add_command(actions, "run", "fit every entry of a batch file", RUN_DESCRIPTION, EXAMPLES)
    run.add_argument("batch_file", help="the batch file (TOML, see docs/batch.md)")
    run.add_argument("-o", "--out", metavar="DIR", default=None,
                     help="output folder (default: <batch file name>-results in the current "
                     "folder): one folder per entry, summary.csv, report.html")
    run.add_argument("--force", action="store_true",
                     help="refit entries done before and replace their folders")
    run.add_argument("--workers", type=int, default=None, metavar="N",
                     help="local worker processes (default: one per core)")
    run.add_argument("--scheduler", default=None, metavar="tcp://HOST:PORT",
                     help="address of an existing Dask scheduler (default: "
                     "$CAVCHAR_SCHEDULER; unset: a local cluster)")
    run.add_argument("--seed", type=int, default=None,
                     help="batch seed (default: the file's seed, else 1); each entry's seed "
                     "follows from it and the entry's label")
    run.add_argument("--log", action="store_true",
                     help="log every result in the cooldown log (cavity, cooldown per entry)")
    run.add_argument("--log-file", default=None, metavar="PATH",
                     help="cooldown log file (default: $CAVCHAR_LOG or ./cavchar.sqlite)")
    run.add_argument("--log-create", action="store_true",
                     help="with --log: add cavities and cooldowns that are not in the log")
    run.add_argument("--no-figures", action="store_true",
                     help="no figures in the entry folders (faster)")
    run.add_argument("--no-report", action="store_true", help="no overview report.html")
    run.add_argument("--quiet", action="store_true", help="no progress line")
    run.set_defaults(func=handle_run)
    parser.set_defaults(func=lambda args: _usage(parser))


def _usage(parser: argparse.ArgumentParser) -> int:
    parser.print_help()
    return 2


def _print_problems(command: str, exc) -> int:
    """A batch file's problems, one line each (the file, the line, the fix); exit code 2."""
    from cavchar.cli.main import clean_text

    print(f"cavchar batch {command}: error: {clean_text(exc.head)}:", file=sys.stderr)
    for problem in exc.problems:
        print("  " + clean_text(str(problem)), file=sys.stderr)
    return exc.exit_code


def handle_check(args: argparse.Namespace) -> int:
    """Run ``cavchar batch check``.

    Report every bad entry of the batch file; exit 0, or 2 if any."""
    from cavchar.batch.spec import BatchFileError

    try:
        return _check(args)
    except BatchFileError as exc:
        return _print_problems("check", exc)


def _check(args: argparse.Namespace) -> int:
    from cavchar.batch.runner import _log_problems
    from cavchar.batch.spec import BatchFileError, read_batch_file

    plan = read_batch_file(args.batch_file, seed=args.seed)
    if args.log:
        problems = [p for p in _log_problems(plan, None, True)]
        if problems:
            raise BatchFileError(problems, plan.path)
    kinds: dict[str, int] = {}
    for entry in plan.entries:
        kinds[entry.kind] = kinds.get(entry.kind, 0) + 1
    print(f"{args.batch_file}: {len(plan.entries)} entries ("
          + ", ".join(f"{n} {k}" for k, n in kinds.items()) + f"), batch seed {plan.seed}; "
          "no problems found")
    for entry in plan.entries:
        print(f"  {entry.label}: {entry.command}")
    return 0


def handle_run(args: argparse.Namespace) -> int:
    """Run ``cavchar batch run``: fit every entry of the batch file and write the summary."""
    from cavchar.batch.spec import BatchFileError

    try:
        return _run(args)
    except BatchFileError as exc:
        return _print_problems("run", exc)


def _run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from cavchar.batch.runner import fit_many
    from cavchar.batch.summary import summary_text

    out = args.out or f"{Path(args.batch_file).stem}-results"
    run = fit_many(args.batch_file, out=out, workers=args.workers, scheduler=args.scheduler,
                   seed=args.seed, log=args.log, log_file=args.log_file,
                   log_create=args.log_create, force=args.force,
                   figures=not args.no_figures, report=not args.no_report,
                   progress=None if args.quiet else sys.stderr, say=print)
    print(summary_text(run.summary, str(args.batch_file)))
    print(f"summary: {run.summary_csv}")
    if run.report is not None:
        print(f"report: {run.report}")
    n = len(run.summary)
    if run.failed:
        print(f"{len(run.failed)} of {n} entries failed: {', '.join(run.failed)} "
              f"(exit code {run.exit_code})", file=sys.stderr)
    else:
        print(f"all {n} entries have a result ({len(run.skipped)} skipped as done before) "
              f"in {run.elapsed_s:.1f} s")
    return run.exit_code
