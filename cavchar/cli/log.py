"""``cavchar log``: the cooldown log (cavities, cooldowns, fits with their posterior draws).

Also :func:`log_fit_result` (re-exported from :mod:`cavchar.tracking.store`)
for the ``--log`` option of the fit commands, and :func:`add_log_file_option`
shared by ``log``, ``trend``, ``qualify`` and ``budget``.
"""

from __future__ import annotations

import argparse
import json
from datetime import date
from typing import TYPE_CHECKING

from cavchar.cli.common import add_command, quantity
from cavchar.errors import InputError

if TYPE_CHECKING:
    from cavchar.result import FitResult

__all__ = ["register", "add_log_file_option", "add_fit_log_options", "log_from_args",
           "log_fit_result", "fit_id_arg", "add_selection_options", "interval_text"]


def open_log(*args, **kwargs):
    """:func:`cavchar.tracking.store.open_log`, imported when a command runs (so that
    ``cavchar --help`` does not load the log's dependencies)."""
    from cavchar.tracking.store import open_log as open_store

    return open_store(*args, **kwargs)


def log_fit_result(*args, **kwargs):
    """:func:`cavchar.tracking.store.log_fit_result`, imported when called."""
    from cavchar.tracking.store import log_fit_result as log_result

    return log_result(*args, **kwargs)

EXAMPLES = """examples:
  cavchar log cavity mirrors-B --freq 6.8GHz --notes "second mirror set"
  cavchar log cooldown CD12 --start 2026-03-01 --stage-temp 12mK --stage still=0.9K
  cavchar log add results/fit.json --cavity mirrors-B --cooldown CD12
  cavchar log add fit.json --cavity new-cavity --cooldown CD13 --create
  cavchar log list --cavity mirrors-B
  cavchar log show 7
  cavchar log prefer 7 --reason "cleanest ring-down of the cooldown"
  cavchar log exclude 9 --reason "wrong attenuator setting"
  cavchar log unmark 9
  cavchar log note 7 --text "after re-seating the mirrors" --tag mirrors --tag cd12
  cavchar log export all.json          # or all.csv; re-import with `cavchar log import`
  cavchar log delete 7 --confirm

The log is an SQLite file: --log-file, else $CAVCHAR_LOG, else ./cavchar.sqlite.
Which fits stand for a cooldown (trend, qualify): the fits at the cooldown's base stage
temperature (lowest logged, within 20% + 1 mK), the most precise per quantity; a fit
marked with `log prefer` replaces that choice, one marked with `log exclude` is never used.
Kinds (--kind): jumps, probes, ringdown (every variant) or a full kind such as jumps-exact.
"""


def fit_id_arg(text: str) -> int:
    """An argparse ``type=`` for a fit id: a whole number from 1 to 2**63 - 1."""
    from cavchar.tracking.store import check_fit_id

    try:
        return check_fit_id(text.strip())
    except InputError as exc:
        raise argparse.ArgumentTypeError(exc.message) from None


def add_selection_options(parser: argparse.ArgumentParser) -> None:
    """``--kind``, ``--min-stage-temp`` and ``--max-stage-temp``: which logged fits count."""
    parser.add_argument("--kind", default=None,
                        help="only fits of this kind: jumps, probes, ringdown (all variants) "
                        "or a full kind such as ringdown-power")
    parser.add_argument("--min-stage-temp", type=quantity("temperature"), default=None,
                        metavar="TEMP", help="only fits at this stage temperature or above, "
                        "e.g. 10mK")
    parser.add_argument("--max-stage-temp", type=quantity("temperature"), default=None,
                        metavar="TEMP", help="only fits at this stage temperature or below, "
                        "e.g. 30mK")


def interval_text(stats, dimension: str) -> str:
    """``"1.21 [1.15 – 1.28] ms"``: median and 95 % interval with the decimals of the
    report (:func:`cavchar.report.text.format_interval_row`); ``"-"`` for None."""
    from cavchar.report.text import format_interval_row

    if stats is None:
        return "-"
    text = format_interval_row({"median": stats.median, "lo68": stats.lo68,
                                "hi68": stats.hi68, "lo95": stats.lo95,
                                "hi95": stats.hi95}, dimension)
    unit = f" {text['unit']}" if text["unit"] else ""
    return f"{text['median']} [{text['interval95']}]{unit}"


def add_log_file_option(parser: argparse.ArgumentParser) -> None:
    """``--log-file PATH`` (default: $CAVCHAR_LOG or ./cavchar.sqlite)."""
    parser.add_argument("--log-file", metavar="PATH", default=None,
                        help="cooldown log file (default: $CAVCHAR_LOG, else ./cavchar.sqlite)")


def add_fit_log_options(parser: argparse.ArgumentParser) -> None:
    """``--log CAVITY COOLDOWN``, ``--log-file PATH`` and ``--log-create`` for a fit command.

    After the fit, call :func:`log_from_args` with the result.
    """
    parser.add_argument("--log", nargs=2, metavar=("CAVITY", "COOLDOWN"), default=None,
                        help="log the fit in the cooldown log under this cavity and cooldown")
    add_log_file_option(parser)
    parser.add_argument("--log-create", action="store_true",
                        help="with --log: create the cavity and cooldown if they are new")


def log_from_args(result: FitResult, args: argparse.Namespace) -> int | None:
    """Log ``result`` if ``--log`` was given (see :func:`add_fit_log_options`); prints and
    returns the fit id (the earlier id, with a warning, when it is already logged)."""
    if getattr(args, "log", None) is None:
        return None
    cavity, cooldown = args.log
    fit_id = log_fit_result(result, cavity, cooldown, getattr(args, "log_file", None),
                            create=bool(getattr(args, "log_create", False)))
    print(f"logged as fit {fit_id} (cavity {cavity}, cooldown {cooldown})")
    return fit_id


DESCRIPTION = """
Keep fits of each cavity across cooldowns in an SQLite log, with a compact copy of the posterior
draws of lifetime [s], n_th and effective temperature [K] for later comparisons.
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``log`` (the cooldown log and its actions) to the sub-commands."""
    parser = add_command(
        subparsers, "log",
        "cooldown log: cavities, cooldowns and logged fits", DESCRIPTION, EXAMPLES)
    actions = parser.add_subparsers(dest="log_action", metavar="ACTION")

    def sub(name: str, help_text: str) -> argparse.ArgumentParser:
        p = add_command(
            actions, name, help_text,
            help_text,
            EXAMPLES)
        add_log_file_option(p)
        return p

    p = sub("add", "log fit result files (JSON written by a fit) for a cavity and cooldown")
    p.add_argument("results", nargs="+", metavar="RESULT.json", help="result file(s)")
    p.add_argument("--cavity", required=True, help="cavity name")
    p.add_argument("--cooldown", required=True, help="cooldown label")
    p.add_argument("--stage-temp", type=quantity("temperature"), default=None,
                   help="stage temperature of the measurement, e.g. 20mK (default: the fit's "
                   "setting, else the cooldown's base temperature)")
    p.add_argument("--create", action="store_true",
                   help="create the cavity and cooldown if they are not in the log yet")
    p.add_argument("--keep-duplicate", action="store_true",
                   help="log a fit again even if the same input and settings are logged")
    p.add_argument("--force-freq", action="store_true",
                   help="log a fit whose mode frequency differs from the cavity's by more "
                   "than 0.1%% (only if it really is the same mode)")
    p.set_defaults(func=_add)

    p = sub("cavity", "register a cavity (or show the registered ones without NAME)")
    p.add_argument("name", nargs="?", help="cavity name")
    p.add_argument("--freq", type=quantity("frequency"), default=None,
                   help="mode frequency, e.g. 6.8GHz")
    p.add_argument("--notes", default="", help="free text")
    p.set_defaults(func=_cavity)

    p = sub("cooldown", "register a cooldown (or show the registered ones without LABEL)")
    p.add_argument("label", nargs="?", help="cooldown label")
    p.add_argument("--start", default=None, help="start date, YYYY-MM-DD")
    p.add_argument("--stage-temp", type=quantity("temperature"), default=None,
                   help="base stage temperature, e.g. 12mK")
    p.add_argument("--stage", action="append", default=[], metavar="NAME=TEMP",
                   help="another stage temperature, e.g. still=0.9K (repeatable)")
    p.add_argument("--notes", default="", help="free text")
    p.set_defaults(func=_cooldown)

    p = sub("list", "list logged fits with medians and their role in their cooldown")
    p.add_argument("--cavity", default=None, help="only this cavity")
    p.add_argument("--cooldown", default=None, help="only this cooldown")
    add_selection_options(p)
    p.add_argument("--tag", default=None, help="only fits with this tag")
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.set_defaults(func=_list)

    p = sub("show", "show one logged fit: settings, provenance and intervals")
    p.add_argument("fit_id", type=fit_id_arg, metavar="FIT_ID")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=_show)

    p = sub("export", "export the log (or one cavity) to JSON or CSV (re-importable)")
    p.add_argument("file", metavar="FILE", help="output file, .json or .csv")
    p.add_argument("--format", choices=("json", "csv"), default=None,
                   help="file format (default: from the suffix)")
    p.add_argument("--cavity", default=None, help="only this cavity's fits")
    p.add_argument("--force", action="store_true", help="overwrite an existing file")
    p.set_defaults(func=_export)

    p = sub("import", "add the contents of an export file (JSON or CSV) to the log")
    p.add_argument("file", metavar="FILE")
    p.set_defaults(func=_import)

    p = sub("prefer", "mark a fit as the one that stands for its cooldown (for the "
            "quantities it measures)")
    p.add_argument("fit_id", type=fit_id_arg, metavar="FIT_ID")
    p.add_argument("--reason", default="", help="why (shown wherever the fit is used)")
    p.set_defaults(func=_mark, mark="preferred")

    p = sub("exclude", "mark a fit as never to be used (trend, qualify, budget)")
    p.add_argument("fit_id", type=fit_id_arg, metavar="FIT_ID")
    p.add_argument("--reason", default="", help="why (shown where the fit is set aside)")
    p.set_defaults(func=_mark, mark="excluded")

    p = sub("unmark", "remove a prefer or exclude mark: the rule chooses again")
    p.add_argument("fit_id", type=fit_id_arg, metavar="FIT_ID")
    p.set_defaults(func=_mark, mark=None, reason="")

    p = sub("note", "set a fit's notes and add or remove tags")
    p.add_argument("fit_id", type=fit_id_arg, metavar="FIT_ID")
    p.add_argument("--text", default=None, help="the fit's notes (replaces earlier notes)")
    p.add_argument("--tag", action="append", default=[], help="add a tag (repeatable)")
    p.add_argument("--untag", action="append", default=[], help="remove a tag (repeatable)")
    p.set_defaults(func=_note)

    p = sub("delete", "delete logged fits (needs --confirm)")
    p.add_argument("fit_ids", type=fit_id_arg, nargs="+", metavar="FIT_ID")
    p.add_argument("--confirm", action="store_true",
                   help="really delete (without it nothing is deleted)")
    p.set_defaults(func=_delete)

    p = sub("check", "check the log file's integrity (SQLite integrity check)")
    p.set_defaults(func=_check)

    parser.set_defaults(func=lambda args: (parser.print_help(), 2)[1])


def _add(args: argparse.Namespace) -> int:
    from cavchar.tracking.entries import read_result_file

    entries = [read_result_file(path) for path in args.results]  # read all before writing
    on_duplicate = "keep" if args.keep_duplicate else "error"
    if not args.create:
        from cavchar.errors import InputError
        from cavchar.tracking.store import resolve_log_path

        file = resolve_log_path(args.log_file)
        if not file.exists():
            raise InputError("there is no cooldown log here", path=file,
                             hint="add --create to start a new log with these fits, or give "
                             "--log-file")
    with open_log(args.log_file, create=args.create) as log:
        with log.transaction() as con:  # all files or none
            ids = [log._add_fit_locked(con, entry, args.cavity, args.cooldown,
                                       stage_temp_k=args.stage_temp, create=args.create,
                                       on_duplicate=on_duplicate, logged_at=None,
                                       force_freq=args.force_freq)[0]
                   for entry in entries]
        for path, fit_id in zip(args.results, ids, strict=True):
            print(f"logged {path} as fit {fit_id} (cavity {args.cavity}, cooldown "
                  f"{args.cooldown}) in {log.path}")
    return 0


def _cavity(args: argparse.Namespace) -> int:
    from cavchar.units import format_quantity

    with open_log(args.log_file, create=args.name is not None,
                  readonly=args.name is None) as log:
        if args.name is not None:
            cav = log.add_cavity(args.name, freq_hz=args.freq, notes=args.notes)
            print(f"added cavity {cav.name} to {log.path}")
            return 0
        for cav in log.cavities():
            freq = "-" if cav.freq_hz is None else format_quantity(cav.freq_hz, "frequency", 7)
            print(f"{cav.name:<20} {freq:>14}  {cav.notes}")
    return 0


def _cooldown(args: argparse.Namespace) -> int:
    from cavchar.units import format_quantity, parse_quantity

    if args.start is not None:
        try:
            date.fromisoformat(args.start)
        except ValueError:
            raise InputError(f"--start {args.start!r} is not a date",
                             hint="write YYYY-MM-DD") from None
    stages = {}
    for text in args.stage:
        name, sep, value = text.partition("=")
        if not sep or not name.strip():
            raise InputError(f"--stage {text!r} must read NAME=TEMP", hint="e.g. still=0.9K")
        stages[name.strip()] = parse_quantity(value, "temperature")
    with open_log(args.log_file, create=args.label is not None,
                  readonly=args.label is None) as log:
        if args.label is not None:
            cool = log.add_cooldown(args.label, start_date=args.start,
                                    stage_temp_k=args.stage_temp, stage_temps=stages,
                                    notes=args.notes)
            print(f"added cooldown {cool.label} to {log.path}")
            return 0
        for cool in log.cooldowns():
            base = ("-" if cool.stage_temp_k is None
                    else format_quantity(cool.stage_temp_k, "temperature"))
            others = ", ".join(f"{k} {format_quantity(v, 'temperature')}"
                               for k, v in cool.stage_temps.items())
            print(f"{cool.label:<14} {cool.start_date or '-':<11} {base:>9}  {others}  "
                  f"{cool.notes}")
    return 0


def _medians(log, fits) -> dict[int, dict[str, float]]:
    import numpy as np

    from cavchar.tracking.trend import fit_draws

    return {i: {k: float(np.median(v)) for k, v in d.items()}
            for i, d in fit_draws(log, fits).items()}


def _short(name: str) -> str:
    from cavchar.quantities import short_label

    return short_label(name)


def _roles(log, fits) -> dict[int, str]:
    """Per fit: what it does for its cooldown under the rule (all kinds, all stages)."""
    from cavchar.tracking.trend import cooldown_selections

    roles: dict[int, str] = {}
    for cavity in sorted({f.cavity for f in fits}):
        for sel in cooldown_selections(log, cavity)[0]:
            stands: dict[int, list[str]] = {}
            for q, c in sel.choices.items():
                if q != "effective_temperature":
                    stands.setdefault(c.fit_id, []).append(_short(q))
            for i, names in stands.items():
                roles[i] = "stands for its cooldown (" + ", ".join(names) + ")"
            for i, why in sel.set_aside:
                roles.setdefault(i, "set aside: " + why)
    return roles


def _list(args: argparse.Namespace) -> int:
    from cavchar.tracking.rules import check_kind, kind_matches
    from cavchar.units import format_quantity

    with open_log(args.log_file, readonly=True) as log:
        fits = log.fits(cavity=args.cavity, cooldown=args.cooldown, summaries=False)
        check_kind(args.kind, {f.kind for f in fits})
        roles = _roles(log, fits)
        fits = [f for f in fits if kind_matches(f.kind, args.kind)
                and (args.min_stage_temp is None or (f.stage_temp_k is not None
                                                     and f.stage_temp_k >= args.min_stage_temp))
                and (args.max_stage_temp is None or (f.stage_temp_k is not None
                                                     and f.stage_temp_k <= args.max_stage_temp))
                and (args.tag is None or args.tag in f.tags)]
        medians = _medians(log, fits)
    if args.json:
        print(json.dumps([{"id": f.id, "cavity": f.cavity, "cooldown": f.cooldown,
                           "kind": f.kind, "logged_at": f.logged_at,
                           "stage_temp_k": f.stage_temp_k, "mark": f.mark,
                           "mark_reason": f.mark_reason, "notes": f.notes,
                           "tags": list(f.tags), "role": roles.get(f.id, ""),
                           "medians": medians[f.id]} for f in fits], indent=1))
        return 0
    if not fits:
        print("no fits logged" + (" for this selection" if args.cavity or args.cooldown
                                  or args.kind or args.tag or args.min_stage_temp is not None
                                  or args.max_stage_temp is not None else ""))
        return 0
    print(f"{'id':>5}  {'cavity':<16} {'cooldown':<12} {'kind':<16} {'lifetime':>10} "
          f"{'n_th':>10} {'T_eff':>9} {'stage':>9}  role")
    for f in fits:
        m = medians[f.id]
        life = format_quantity(m["lifetime"], "time") if "lifetime" in m else "-"
        nth = f"{m['n_thermal']:.3g}" if "n_thermal" in m else "-"
        teff = (format_quantity(m["effective_temperature"], "temperature")
                if "effective_temperature" in m else "-")
        stage = "-" if f.stage_temp_k is None else format_quantity(f.stage_temp_k, "temperature")
        extra = f"  [{', '.join(f.tags)}]" if f.tags else ""
        mark = f" (marked {f.mark})" if f.mark else ""
        print(f"{f.id:>5}  {f.cavity:<16} {f.cooldown:<12} {f.kind:<16} {life:>10} {nth:>10} "
              f"{teff:>9} {stage:>9}  {roles.get(f.id, '')}{mark}{extra}")
    print("(medians of the stored posterior draws; role: what the fit does for its cooldown "
          "in trend and qualify)")
    return 0


def _mark(args: argparse.Namespace) -> int:
    with open_log(args.log_file, create=False) as log:
        fit = log.set_mark(args.fit_id, args.mark, args.reason)
    what = {"preferred": "now stands for its cooldown (for the quantities it measures)",
            "excluded": "is now never used", None: "has no mark: the rule chooses again"}
    print(f"fit {fit.id} ({fit.kind}, cavity {fit.cavity}, cooldown {fit.cooldown}) "
          f"{what[fit.mark]}")
    return 0


def _note(args: argparse.Namespace) -> int:
    if args.text is None and not args.tag and not args.untag:
        raise InputError("nothing to change", hint="give --text, --tag or --untag")
    with open_log(args.log_file, create=False) as log:
        fit = log.set_notes(args.fit_id, notes=args.text, add_tags=args.tag,
                            remove_tags=args.untag)
    print(f"fit {fit.id}: notes {fit.notes!r}; tags {', '.join(fit.tags) or 'none'}")
    return 0


def _show(args: argparse.Namespace) -> int:
    from cavchar.quantities import interval
    from cavchar.tracking.trend import TREND_QUANTITIES, fit_draws
    from cavchar.units import format_quantity

    with open_log(args.log_file, readonly=True) as log:
        fit = log.fit(args.fit_id)
        draws = fit_draws(log, [fit])[fit.id]
        role = _roles(log, [fit]).get(fit.id, "")
    stats = {k: interval(v) for k, v in draws.items()}
    if args.json:
        from dataclasses import asdict

        print(json.dumps({**asdict(fit), "intervals": {k: v.as_dict() for k, v in stats.items()}},
                         indent=1, sort_keys=True))
        return 0
    freq = "-" if fit.freq_hz is None else format_quantity(fit.freq_hz, "frequency", 7)
    stage = "-" if fit.stage_temp_k is None else format_quantity(fit.stage_temp_k, "temperature")
    print(f"fit {fit.id}: {fit.kind} (model {fit.model or '-'}) of cavity {fit.cavity}, "
          f"cooldown {fit.cooldown}")
    print(f"  mode frequency {freq}, stage temperature {stage}")
    print(f"  fitted {fit.fitted_at or '-'}, logged {fit.logged_at}, cavchar "
          f"{fit.tool_version or '-'}, seed {fit.seed}")
    print(f"  input SHA-256 {fit.input_sha256 or '-'}")
    print(f"  source {fit.source or '-'}")
    print(f"  role: {role or '-'}" + (f" (marked {fit.mark}"
                                      + (f": {fit.mark_reason}" if fit.mark_reason else "")
                                      + ")" if fit.mark else ""))
    if fit.notes or fit.tags:
        print(f"  notes: {fit.notes or '-'}; tags: {', '.join(fit.tags) or '-'}")
    print(f"  draws stored {next(iter(stats.values())).n_draws} of {fit.n_draws_total}")
    print("  median [95% interval] of the stored draws:")
    for name, (_, _, dim) in TREND_QUANTITIES.items():
        if name in stats:
            print(f"  {name:<22} {interval_text(stats[name], dim)}")
    print("  settings: " + json.dumps(fit.settings, sort_keys=True))
    return 0


def _export(args: argparse.Namespace) -> int:
    from cavchar.tracking.exchange import export_log

    with open_log(args.log_file, readonly=True) as log:
        if args.cavity is not None:
            log.cavity(args.cavity)
        count = export_log(log, args.file, fmt=args.format, cavity=args.cavity,
                           force=args.force)
    print(f"exported {count} fit(s) to {args.file}")
    return 0


def _import(args: argparse.Namespace) -> int:
    from cavchar.tracking.exchange import import_log, read_export
    from cavchar.tracking.store import resolve_log_path

    document = read_export(args.file)  # checked whole before the log is touched
    target = resolve_log_path(args.log_file)
    new_file = not target.exists()
    try:
        with open_log(args.log_file) as log:
            report = import_log(log, args.file, document=document)
    except BaseException:
        if new_file:  # a failed import into a new log leaves no empty log behind
            for suffix in ("", "-wal", "-shm", "-journal"):
                target.with_name(target.name + suffix).unlink(missing_ok=True)
        raise
    print(f"imported {report.fits_added} fit(s), skipped {report.fits_skipped} already logged; "
          f"new cavities {report.cavities_added}, new cooldowns {report.cooldowns_added}")
    return 0


def _delete(args: argparse.Namespace) -> int:
    with open_log(args.log_file, create=False) as log:
        fits = [log.fit(i) for i in args.fit_ids]
        if not args.confirm:
            listed = ", ".join(f"{f.id} ({f.cavity}, {f.cooldown}, {f.kind})" for f in fits)
            raise InputError(f"nothing deleted: would delete fit(s) {listed}",
                             hint="add --confirm to delete them")
        count = log.delete_fits(args.fit_ids)
    print(f"deleted {count} fit(s)")
    return 0


def _check(args: argparse.Namespace) -> int:
    with open_log(args.log_file, readonly=True) as log:
        result = log.integrity_check()
        count = len(log.fits())
    if result != "ok":
        raise InputError(f"the log file is damaged: {result}", path=log.path,
                         hint="restore it from a backup or an export")
    print(f"{log.path}: ok ({count} fit(s))")
    return 0
