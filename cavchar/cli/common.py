"""Option helpers shared by the sub-commands of the command line."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from typing import TYPE_CHECKING

from cavchar.units import parse_quantity

if TYPE_CHECKING:
    from cavchar.result import FitResult

__all__ = ["quantity", "add_output_options", "add_sampler_options", "add_fit_context_options",
           "settings_from_args", "fit_options_from_args", "rate_priors_from_args",
           "check_input_files", "check_outputs", "finish_fit_command", "HelpFormatter",
           "add_layout_options", "laid_out", "for_option", "add_prior_option",
           "priors_from_args", "add_command", "add_fit_options"]


class HelpFormatter(argparse.ArgumentDefaultsHelpFormatter, argparse.RawDescriptionHelpFormatter):
    """Shows defaults (so help cannot drift from the code) and keeps example layout.

    A default is shown once: not when the help text already speaks of it
    ("default", "unset"), and never for an unset option (None), a flag (False)
    or an empty list or text."""

    def _get_help_string(self, action: argparse.Action) -> str:
        text = action.help or ""
        default = action.default
        lowered = text.lower()
        if (default is None or default is False or default == [] or default == ""
                or default is argparse.SUPPRESS
                or action.nargs == 0
                or "default" in lowered or "unset" in lowered or "%(default)" in text
                or action.option_strings == []):
            return text
        return text + " (default: %(default)s)"


def add_command(group: argparse._SubParsersAction, name: str, summary: str, description: str,
                epilog: str | None = None) -> argparse.ArgumentParser:
    """Add the sub-command ``name`` to ``group`` with the project's help layout.

    ``summary`` is the one-line help shown in the parent's list, ``description``
    the paragraph at the top of the command's own help (it may be written wrapped
    over several lines; they are joined with single spaces) and ``epilog`` its
    examples, kept as laid out; the parser shows defaults through
    :class:`HelpFormatter`."""
    paragraph = " ".join(line.strip() for line in description.strip().splitlines())
    return group.add_parser(name, help=summary, description=paragraph, epilog=epilog,
                            formatter_class=HelpFormatter)


def quantity(dimension: str, *, minimum: float | None = 0.0, positive: bool = False,
             maximum: float | None = None) -> Callable[[str], float]:
    """An argparse ``type=`` that parses a number with an SI unit into SI (see cavchar.units).

    A dimensioned quantity needs its unit (``--freq 7.412`` is refused and the
    message shows ``7.412GHz``); the value must be finite and lie in the range:
    ``minimum`` (default 0, None for signed quantities such as phases),
    ``positive`` (strictly above ``minimum``) and ``maximum``.
    """

    def parse(text: str) -> float:
        from cavchar.errors import InputError

        try:
            return parse_quantity(text, dimension, require_unit=True, minimum=minimum,
                                  strict_minimum=positive, maximum=maximum)
        except InputError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None

    parse.__name__ = dimension
    return parse


def whole(minimum: int = 0, maximum: int | None = None) -> Callable[[str], int]:
    """An argparse ``type=`` for a whole number in ``[minimum, maximum]`` (``1e6`` allowed)."""

    def parse(text: str) -> int:
        from cavchar.units import _shorten

        try:
            value = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{_shorten(text)} is not a whole number") from None
        if not (value == value and abs(value) < 2**63 and value == round(value)):
            raise argparse.ArgumentTypeError(f"{_shorten(text)} is not a whole number")
        number = int(value)
        if number < minimum or (maximum is not None and number > maximum):
            upper = "" if maximum is None else f" and <= {maximum:,}"
            raise argparse.ArgumentTypeError(
                f"{_shorten(text)} is out of range; it must be >= {minimum}{upper}")
        return number

    parse.__name__ = "whole number"
    return parse


def real(minimum: float | None = None, maximum: float | None = None,
         positive: bool = False) -> Callable[[str], float]:
    """An argparse ``type=`` for a finite plain number in a range (no unit)."""
    return quantity("dimensionless", minimum=minimum, maximum=maximum, positive=positive)


#: limits of the sampler options (a larger run is a typo, not a plan)
MAX_SEED = 2**63 - 1
MAX_WALKERS = 2000
MAX_STEPS = 1_000_000


def add_output_options(parser: argparse.ArgumentParser) -> None:
    """``-o/--out DIR`` and ``--force`` for commands that write files."""
    parser.add_argument("-o", "--out", metavar="DIR", default=None,
                        help="folder for the output files (created if missing)")
    parser.add_argument("--force", action="store_true",
                        help="overwrite existing output files")


def add_sampler_options(parser: argparse.ArgumentParser) -> None:
    """Seed and convergence options common to every fit."""
    parser.add_argument("--seed", type=whole(0, MAX_SEED), default=1,
                        help="random seed (stored in the result)")
    parser.add_argument("--walkers", type=whole(4, MAX_WALKERS), default=None,
                        help="number of ensemble walkers (unset: 32)")
    parser.add_argument("--max-steps", type=whole(100, MAX_STEPS), default=None,
                        help="largest number of sampler steps per walker (unset: 20000)")
    parser.add_argument("--allow-unconverged", action="store_true",
                        help="keep an unconverged chain (exit 0 with a warning instead of 3)")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")
    parser.add_argument("--sampler", choices=("importance", "ensemble"), default="importance",
                        help="importance: Pareto-smoothed importance sampling from the Laplace "
                        "approximation (falls back to the ensemble when its k-hat diagnostic "
                        "says the approximation is poor); ensemble: emcee throughout")


def add_fit_context_options(parser: argparse.ArgumentParser) -> None:
    """Mode frequency, stage temperature, logging and report options of every fit."""
    parser.add_argument("--freq", type=quantity("frequency", positive=True), default=None,
                        help="mode frequency, e.g. 6.8GHz (for Q, linewidth, T_eff)")
    parser.add_argument("--stage-temp", type=quantity("temperature", positive=True),
                        default=None,
                        help="stage (mixing-chamber) temperature, e.g. 20mK (Planck check)")
    parser.add_argument("--log", action="store_true",
                        help="add the result to the cooldown log (needs --cavity, --cooldown)")
    parser.add_argument("--cavity", default=None, help="cavity name for --log")
    parser.add_argument("--cooldown", default=None, help="cooldown label for --log")
    parser.add_argument("--log-file", default=None, metavar="PATH",
                        help="cooldown log file (default: $CAVCHAR_LOG or ./cavchar.sqlite)")
    parser.add_argument("--log-create", action="store_true",
                        help="with --log: create the log file, the cavity and the cooldown "
                        "when they are new (without it they must exist; checked before the fit)")
    parser.add_argument("--report", action="store_true",
                        help="also write a self-contained HTML report into the output folder")
    parser.add_argument("--figure-format", choices=("png", "pdf", "png+pdf"), default="png",
                        help="file format of the figures written with -o")
    parser.add_argument("--no-figures", action="store_true",
                        help="write no figures with -o (the result and the draws only)")


def add_layout_options(parser: argparse.ArgumentParser, *, trace: bool = False,
                       exact_rows: bool = False) -> None:
    """How to read an instrument's file: ``--column``, ``--skip-rows``, ``--delimiter``,
    ``--decimal`` (and ``--trace`` for ring-downs, ``--rows-are-changes`` for exact
    jump records); see :class:`cavchar.io.tables.layout.FileLayout`."""
    group = parser.add_argument_group(
        "file layout", "what cannot be detected in an instrument's file (by default the "
        "header row, delimiter and decimal mark are found by themselves)")
    group.add_argument("--column", action="append", default=[], metavar="NAME=HEADER",
                       help='read the file\'s column HEADER as cavchar\'s column NAME, e.g. '
                       '--column time="Time (s)" (repeatable; other columns are then ignored)')
    group.add_argument("--skip-rows", type=whole(0, 10**6), default=None, metavar="N",
                       help="lines above the header to skip (an instrument's preamble); "
                       "unset: the header row is found")
    group.add_argument("--delimiter", default=None, metavar="SEP",
                       help="comma, semicolon, tab or whitespace; unset: detected")
    group.add_argument("--decimal", default=None, metavar="MARK",
                       help="decimal mark: point or comma; unset: detected")
    if trace:
        group.add_argument("--trace", default=None, metavar="ID|HEADER",
                           help="fit one trace of a file with several: an id of the trace "
                           "column or the header of a value column")
    if exact_rows:
        group.add_argument("--rows-are-changes", action="store_true",
                           help="the rows are exact change points even though they are evenly "
                           "spaced and repeat photon numbers")


def add_fit_options(parser: argparse.ArgumentParser, **layout: bool) -> None:
    """The options every ``cavchar fit`` command shares, in this order: file layout
    (:func:`add_layout_options` with ``layout``), fit context, sampler and outputs."""
    add_layout_options(parser, **layout)
    add_fit_context_options(parser)
    add_sampler_options(parser)
    add_output_options(parser)


def laid_out(path: str, args: argparse.Namespace):
    """``path`` with the layout the options give (:class:`LaidOutPath`), or ``path``
    itself when no layout option is given."""
    from cavchar.io.tables.layout import FileLayout, LaidOutPath, parse_column_option

    columns = dict(parse_column_option(text) for text in getattr(args, "column", []) or [])
    layout = FileLayout(columns=columns, skip_rows=getattr(args, "skip_rows", None),
                        delimiter=getattr(args, "delimiter", None),
                        decimal=getattr(args, "decimal", None),
                        trace=getattr(args, "trace", None),
                        exact_rows=bool(getattr(args, "rows_are_changes", False)))
    return LaidOutPath(path, layout) if layout.given else path


def for_option(flag: str, function: Callable, *args, **kwargs):
    """``function(*args, **kwargs)``; an :class:`InputError` it raises names ``flag``
    (``--prior lifetime: cannot read prior ...``), so the user knows which option to fix."""
    from cavchar.errors import InputError

    try:
        return function(*args, **kwargs)
    except InputError as exc:
        if exc.path is not None or exc.message.startswith(flag):
            raise
        raise InputError(f"{flag}: {exc.message}", line=exc.line, hint=exc.hint) from None


def settings_from_args(args: argparse.Namespace, kind: str | None = None):
    """:class:`cavchar.inference.SamplerSettings` of fit ``kind`` from the sampler options:
    options left unset keep the defaults of :meth:`SamplerSettings.for_fit`."""
    from cavchar.inference import SamplerSettings

    given = {"n_walkers": args.walkers, "max_steps": args.max_steps}
    return SamplerSettings.for_fit(kind, seed=args.seed, allow_unconverged=args.allow_unconverged,
                                   quiet=args.quiet,
                                   **{k: v for k, v in given.items() if v is not None})


def fit_options_from_args(args: argparse.Namespace, kind: str | None = None) -> dict:
    """Keyword arguments that the shared options of :func:`add_fit_options` give every
    fit function: ``freq_hz`` (Hz) and ``stage_temp_k`` (K) of the fit context,
    ``settings`` (:func:`settings_from_args` of fit ``kind``), ``sampler`` and the
    ``command_line`` the command line interface stores (None from Python)."""
    return {"freq_hz": args.freq, "stage_temp_k": args.stage_temp,
            "settings": settings_from_args(args, kind), "sampler": args.sampler,
            "command_line": getattr(args, "command_line", None)}


#: dimension of each parameter a ``--prior`` may name (others are dimensionless)
PRIOR_DIMENSIONS = {"lifetime": "time", "lifetime_fast": "time", "detuning": "frequency",
                    "n_thermal": "dimensionless"}


def add_prior_option(parser: argparse.ArgumentParser, names: str, defaults: str) -> None:
    """The one prior option of every fit command: ``--prior NAME=SPEC``, repeatable."""
    parser.add_argument("--prior", action="append", default=[], metavar="NAME=SPEC",
                        help=f"prior of a parameter ({names}), e.g. "
                        "lifetime=loguniform:10us,1s, lifetime=normal:1.2ms,0.1ms, "
                        "n_thermal=uniform:0,0.5 or n_thermal=stage (log-normal around the "
                        f"stage's Planck occupation; needs --freq, --stage-temp); repeatable; "
                        f"unset: {defaults}")


def priors_from_args(args: argparse.Namespace, names: tuple[str, ...] | None = None) -> dict:
    """``{name: Prior}`` from the ``--prior NAME=SPEC`` options (:func:`add_prior_option`);
    ``names`` are the parameters this fit kind accepts (None: the fit checks the names
    against its model); ``n_thermal=stage`` is the log-normal around the stage's Planck
    occupation."""
    from cavchar.errors import InputError
    from cavchar.priors import parse_prior, stage_occupation_prior

    out: dict = {}
    for item in args.prior or []:
        name, sep, text = item.partition("=")
        name, text = name.strip(), text.strip()
        if not sep or not name or not text:
            raise InputError(f"cannot read --prior {item!r}",
                             hint="NAME=SPEC, e.g. lifetime=loguniform:10us,1s")
        if names is not None and name not in names:
            raise InputError(f"--prior names {name!r}, which this fit does not have",
                             hint=f"the parameters here: {', '.join(names)}")
        if name in out:
            raise InputError(f"--prior {name} is given twice", hint="give each prior once")
        if name == "n_thermal" and text.lower() == "stage":
            if args.freq is None or args.stage_temp is None:
                raise InputError("--prior n_thermal=stage needs --freq and --stage-temp")
            out[name] = stage_occupation_prior(args.freq, args.stage_temp)
            continue
        out[name] = for_option(f"--prior {name}", parse_prior, text,
                               PRIOR_DIMENSIONS.get(name, "dimensionless"), freq_hz=args.freq)
    return out


def rate_priors_from_args(args: argparse.Namespace, priors_class):
    """``priors_class(lifetime=..., n_thermal=...)`` from ``--prior lifetime=...`` and
    ``--prior n_thermal=...``; parameters not named keep the class defaults."""
    priors = priors_class()
    given = priors_from_args(args, ("lifetime", "n_thermal"))
    return priors_class(lifetime=given.get("lifetime", priors.lifetime),
                        n_thermal=given.get("n_thermal", priors.n_thermal))


def check_input_files(paths) -> None:
    """Fail at once when an input file is missing: called by each fit command before it
    imports the fit modules, so a mistyped path answers in a fraction of a second."""
    from pathlib import Path

    from cavchar.errors import InputError

    for name in paths:
        if not Path(name).exists():
            raise InputError("file not found", path=name, hint="check the path")


def check_outputs(args: argparse.Namespace) -> None:
    """Fail before a long fit when its main output exists and --force is not given."""
    if getattr(args, "report", False) and not args.out:
        from cavchar.errors import InputError

        raise InputError("--report needs -o/--out DIR for the report file")
    if args.out:
        from pathlib import Path

        from cavchar.io.atomic import check_can_write

        check_can_write(Path(args.out) / "result.json", args.force)
        if args.report:
            check_can_write(Path(args.out) / "report.html", args.force)
    if args.log and (not args.cavity or not args.cooldown):
        from cavchar.errors import InputError

        raise InputError("--log needs --cavity NAME and --cooldown LABEL")
    check_log_target(args)


def check_log_target(args: argparse.Namespace) -> None:
    """With ``--log``: fail before the fit when the log file, the cavity or the cooldown
    is missing (``--log-create`` makes them instead, after the fit)."""
    from cavchar.errors import InputError

    if not getattr(args, "log", False):
        for flag in ("cavity", "cooldown", "log_create"):
            if getattr(args, flag, None):
                raise InputError(f"--{flag.replace('_', '-')} is only used with --log",
                                 hint="add --log to log the fit, or leave the option out")
        return
    if getattr(args, "log_create", False):
        from cavchar.tracking.store import resolve_log_path

        folder = resolve_log_path(args.log_file).absolute().parent
        if not folder.is_dir():
            raise InputError("the folder of the log does not exist", path=folder,
                             hint="give --log-file in an existing folder")
        return
    from cavchar.tracking import open_log

    create = "or add --log-create to make it with this fit"
    try:
        with open_log(args.log_file, create=False) as log:
            log.cavity(args.cavity)
            log.cooldown(args.cooldown)
    except InputError as exc:
        raise InputError(exc.message, path=exc.path, line=exc.line,
                         hint=f"{exc.hint}; {create}" if exc.hint else create) from None


def finish_fit_command(result: FitResult, args: argparse.Namespace) -> int:
    """Print the summary, write the outputs, log and report; return the exit code."""
    from cavchar.outputs import print_summary, write_fit_outputs

    print_summary(result)
    if args.out:
        written = write_fit_outputs(
            result, args.out, force=args.force, figures=not getattr(args, "no_figures", False),
            figure_formats=tuple(getattr(args, "figure_format", "png").split("+")),
            progress=True)
        print(f"wrote {len(written)} files to {args.out}")
    if args.log:
        from cavchar.errors import InputError

        if not args.cavity or not args.cooldown:
            raise InputError("--log needs --cavity NAME and --cooldown LABEL")
        from cavchar.tracking import log_fit_result

        log_fit_result(result, args.cavity, args.cooldown, path=args.log_file,
                       create=getattr(args, "log_create", False))
        print(f"logged as cavity {args.cavity!r}, cooldown {args.cooldown!r}")
    if args.report:
        from pathlib import Path

        from cavchar.errors import InputError
        from cavchar.report import write_report

        if not args.out:
            raise InputError("--report needs -o/--out DIR for the report file")
        path = write_report([result], Path(args.out) / "report.html", force=args.force)
        print(f"report: {path}")
    return 0
