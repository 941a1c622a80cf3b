"""Options of a batch entry, read by the single-record commands' own parsers.

An entry's options are the long options of ``cavchar fit jumps / probes /
ringdown`` written as TOML keys (``stage_temp = "20mK"`` is ``--stage-temp 20mK``).
They are turned into the argument list of the equivalent single-record command and
parsed by that command's parser, so units, choices and defaults cannot drift from
the command line.  The same argument list, parsed again on the worker, gives the
fit call (:func:`fit_from_argv`); it is also stored in the result as the command
that redoes the fit alone.
"""

from __future__ import annotations

import argparse
import dataclasses
import shlex
from functools import cache
from typing import Any

from cavchar.errors import InputError

__all__ = ["KINDS", "ENTRY_FIELDS", "BATCH_LEVEL_OPTIONS", "option_names", "build_argv",
           "parse_argv", "fit_from_argv", "command_argv", "command_text", "referenced_files"]

#: batch kind -> (``cavchar fit`` sub-command, extra flags)
KINDS: dict[str, tuple[str, tuple[str, ...]]] = {
    "jumps": ("jumps", ()),
    "sampled": ("jumps", ("--sampled",)),
    "probes": ("probes", ()),
    "ringdown": ("ringdown", ()),
}

#: keys of an entry that are not options of the fit command
ENTRY_FIELDS = ("kind", "file", "label", "cavity", "cooldown", "seed", "check_every")

#: options of the single-record commands that belong to the batch as a whole
BATCH_LEVEL_OPTIONS = {
    "out": "-o/--out of `cavchar batch run` (one folder per entry below it)",
    "force": "--force of `cavchar batch run`",
    "log": "--log of `cavchar batch run` (cavity and cooldown stay per entry)",
    "log_file": "--log-file of `cavchar batch run`",
    "log_create": "--log-create of `cavchar batch run`",
    "report": "the batch writes one overview report (--no-report turns it off)",
    "quiet": "--quiet of `cavchar batch run` (per-record progress bars are always off)",
    "help": "not an option of a fit",
    "no_figures": "--no-figures of `cavchar batch run`",
    "figure_format": "a batch draws its figures as PNG",
}

#: options every kind's fit call reads (besides the kind's own below)
_COMMON_DESTS = {"freq", "stage_temp", "seed", "walkers", "max_steps", "allow_unconverged",
                 "sampler", "prior",
                 "quiet", "log", "cavity", "cooldown", "log_file", "log_create", "report", "out",
                 "force", "no_figures", "figure_format",
                 "column", "skip_rows", "delimiter", "decimal",  # file layout
                 "func", "help"}
#: the options :func:`fit_from_argv` passes to each fit (others are refused, never ignored)
_KIND_DESTS = {
    "jumps": {"record", "sampled", "end_time",
              "stationary_start", "rows_are_changes"},
    "probes": {"record", "response", "response_table", "visibility", "phase_per_photon",
               "phase_offset", "readout_error_0", "readout_error_1", "mode",
               "block_probes", "initial_photons"},
    "ringdown": {"traces", "signal", "start_time", "time_unit", "initial", "n0",
                 "allow_negative", "no_compare", "trace"},
}


class _ParseError(Exception):
    pass


def _raise(message: str) -> None:
    raise _ParseError(message)


@cache
def _parser(command: str) -> argparse.ArgumentParser:
    """The parser of ``cavchar fit COMMAND`` (errors raise instead of exiting)."""
    from cavchar.cli.main import build_parser

    root = build_parser()
    fit = _subparser(root, "fit")
    parser = _subparser(fit, command)
    parser.error = _raise  # type: ignore[method-assign]
    return parser


def _subparser(parser: argparse.ArgumentParser, name: str) -> argparse.ArgumentParser:
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction) and name in action.choices:
            return action.choices[name]
    raise InputError(f"this cavchar has no `{parser.prog} {name}` command",
                     hint="the fit module of this kind is not installed")


def _actions(kind: str) -> dict[str, argparse.Action]:
    parser = _parser(KINDS[kind][0])
    return dict(parser._option_string_actions)


def option_names(kind: str) -> list[str]:
    """Batch keys accepted for ``kind`` (long option names with ``_`` for ``-``)."""
    names = set()
    for flag in _actions(kind):
        if flag.startswith("--"):
            key = flag[2:].replace("-", "_")
            if key not in BATCH_LEVEL_OPTIONS and key not in ENTRY_FIELDS:
                names.add(key)
    return sorted(names - {flag[2:] for flag in KINDS[kind][1]})


def build_argv(kind: str, files: list[str], options: dict[str, Any]) -> list[str]:
    """The argument list of ``cavchar fit ...`` for an entry (without ``--seed``).

    Raises
    ------
    InputError
        Unknown kind, unknown option or a value of the wrong type; the message
        names the option (the caller adds file and line).
    """
    if kind not in KINDS:
        raise InputError(f"unknown kind {kind!r}", hint="one of " + ", ".join(KINDS))
    actions = _actions(kind)
    argv = [*files, *KINDS[kind][1]]
    for key, value in options.items():
        flag = "--" + key.replace("_", "-")
        action = actions.get(flag)
        if key in BATCH_LEVEL_OPTIONS:
            raise InputError(f"option {key!r} cannot be set per entry",
                             hint=BATCH_LEVEL_OPTIONS[key])
        if action is None or flag in KINDS[kind][1]:
            raise InputError(f"unknown option {key!r} for kind {kind}",
                             hint=_closest(key, option_names(kind)))
        takes_value = action.nargs != 0
        if not takes_value:
            if not isinstance(value, bool):
                raise InputError(f"option {key!r} is a switch: write {key} = true")
            if value:
                argv.append(flag)
            continue
        values = value if isinstance(value, list) else [value]
        if isinstance(value, list) and not isinstance(action, argparse._AppendAction):
            raise InputError(f"option {key!r} takes one value, not a list")
        for item in values:
            if isinstance(item, bool) or not isinstance(item, str | int | float):
                raise InputError(f"option {key!r} needs a number or a text such as \"20mK\", "
                                 f"not {item!r}")
            argv += [flag, str(item)]
    return argv


def _closest(key: str, known: list[str]) -> str:
    import difflib

    near = difflib.get_close_matches(key, known, n=1)
    return (f"did you mean {near[0]}?" if near
            else "the options of `cavchar fit ... --help` with _ for -")


def parse_argv(kind: str, argv: list[str]) -> argparse.Namespace:
    """Parse an entry's argument list with the fit command's parser (InputError if bad)."""
    try:
        return _parser(KINDS[kind][0]).parse_args(argv)
    except _ParseError as exc:
        text = str(exc).replace("argument --", "option ").replace("argument ", "option ")
        raise InputError(text) from None


def command_argv(kind: str, argv: list[str], seed: int) -> list[str]:
    """The single-record command that redoes an entry's fit alone, as argv strings
    (recorded as the command line of the entry's result)."""
    return ["cavchar", "fit", KINDS[kind][0], *argv, "--seed", str(seed)]


def command_text(kind: str, argv: list[str], seed: int) -> str:
    """:func:`command_argv` as one shell-quoted text."""
    return shlex.join(command_argv(kind, argv, seed))


def _settings(settings, check_every: int | None):
    """An entry's sampler settings: quiet, checked every ``check_every`` steps if given."""
    if check_every is not None:
        settings = dataclasses.replace(settings, chunk=int(check_every))
    return dataclasses.replace(settings, quiet=True)


def _unhandled(kind: str, args: argparse.Namespace) -> list[str]:
    """Options set by the parser that :func:`fit_from_argv` would not pass on."""
    known = _COMMON_DESTS | _KIND_DESTS[KINDS[kind][0]]
    return sorted(d for d in vars(args) if d not in known and d != "command")


def fit_arguments(kind: str, argv: list[str], seed: int, check_every: int | None = None
                  ) -> tuple[str, dict[str, Any]]:
    """The fit function's name and keyword arguments of an entry (built, not run).

    Building them parses every prior and reads a response table, so a malformed
    option fails here, before any fit starts.
    """
    from cavchar.cli.common import fit_options_from_args, laid_out, rate_priors_from_args

    args = parse_argv(kind, [*argv, "--seed", str(seed)])
    extra = _unhandled(kind, args)
    if extra:
        raise InputError("this cavchar's fit command has options the batch does not pass on "
                         f"yet: {', '.join(extra)}", hint="fit this record on its own")
    common = fit_options_from_args(args, KINDS[kind][0])
    common.update(settings=_settings(common["settings"], check_every),
                  command_line=command_argv(kind, argv, seed))
    base = KINDS[kind][0]
    if base == "jumps":
        from cavchar.fits.jumps import JumpPriors

        return "jumps", {"record": laid_out(args.record, args), "sampled": args.sampled,
                         "end_time": args.end_time,
                         "priors": rate_priors_from_args(args, JumpPriors),
                         "stationary_start": args.stationary_start, **common}
    if base == "probes":
        from cavchar.cli.fit_probes import build_response
        from cavchar.fits.probes import ProbePriors

        if args.block_probes is not None and args.block_probes < 1:
            raise InputError("option block_probes must be at least 1")
        return "probes", {"record": laid_out(args.record, args),
                          "response": build_response(args),
                          "priors": rate_priors_from_args(args, ProbePriors),
                          "mode": args.mode, "block_probes": args.block_probes,
                          "initial": ("stationary" if args.initial_photons is None
                                      else args.initial_photons), **common}
    from cavchar.cli.common import priors_from_args
    from cavchar.cli.fit_ringdown import _initial

    return "ringdown", {"traces": [laid_out(path, args) for path in args.traces],
                        "signal": args.signal,
                        "start_time": args.start_time, "time_unit": args.time_unit,
                        "priors": priors_from_args(args),
                        "initial": _initial(args.initial), "n0": args.n0,
                        "allow_negative_power": args.allow_negative,
                        "compare": not args.no_compare, **common}


def fit_from_argv(kind: str, argv: list[str], seed: int, check_every: int | None = None):
    """Run an entry's fit in this process: ``(FitResult, extra)``, where ``extra`` is the
    probe trajectory of a probe fit and None otherwise."""
    base, kwargs = fit_arguments(kind, argv, seed, check_every)
    if base == "jumps":
        from cavchar.fits.jumps import fit_jumps

        return fit_jumps(kwargs.pop("record"), **kwargs), None
    if base == "probes":
        from cavchar.fits.probes import fit_probes_with_trajectory

        return fit_probes_with_trajectory(kwargs.pop("record"), **kwargs)
    from cavchar.fits.ringdown import fit_ringdown

    return fit_ringdown(kwargs.pop("traces"), **kwargs), None


def referenced_files(kind: str, argv: list[str]) -> list[str]:
    """Files other than the records that an entry reads (a probe response table)."""
    args = parse_argv(kind, [*argv, "--seed", "0"])
    table = getattr(args, "response_table", None)
    return [table] if table else []
