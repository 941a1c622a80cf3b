"""Option helpers shared by the sub-commands of the command line."""

from __future__ import annotations

import argparse
from collections.abc import Callable

from cavchar.units import parse_quantity

__all__ = ["quantity", "add_output_options", "add_sampler_options", "add_fit_context_options",
           "settings_from_args", "rate_priors_from_args", "check_outputs", "finish_fit_command",
           "HelpFormatter"]


class HelpFormatter(argparse.ArgumentDefaultsHelpFormatter, argparse.RawDescriptionHelpFormatter):
    """Shows defaults (so help cannot drift from the code) and keeps example layout."""


def quantity(dimension: str) -> Callable[[str], float]:
    """An argparse ``type=`` that parses a number with an SI unit into SI (see cavchar.units)."""

    def parse(text: str) -> float:
        from cavchar.errors import InputError

        try:
            return parse_quantity(text, dimension)
        except InputError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None

    parse.__name__ = dimension
    return parse


def add_output_options(parser: argparse.ArgumentParser) -> None:
    """``-o/--out DIR`` and ``--force`` for commands that write files."""
    parser.add_argument("-o", "--out", metavar="DIR", default=None,
                        help="folder for the output files (created if missing)")
    parser.add_argument("--force", action="store_true",
                        help="overwrite existing output files")


def add_sampler_options(parser: argparse.ArgumentParser) -> None:
    """Seed and convergence options common to every fit."""
    parser.add_argument("--seed", type=int, default=1, help="random seed (stored in the result)")
    parser.add_argument("--walkers", type=int, default=32, help="number of ensemble walkers")
    parser.add_argument("--max-steps", type=int, default=20000,
                        help="largest number of sampler steps per walker")
    parser.add_argument("--allow-unconverged", action="store_true",
                        help="keep an unconverged chain (exit 0 with a warning instead of 3)")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")


def add_fit_context_options(parser: argparse.ArgumentParser) -> None:
    """Mode frequency, stage temperature, logging and report options of every fit."""
    parser.add_argument("--freq", type=quantity("frequency"), default=None,
                        help="mode frequency, e.g. 6.8GHz (for Q, linewidth, T_eff)")
    parser.add_argument("--stage-temp", type=quantity("temperature"), default=None,
                        help="stage (mixing-chamber) temperature, e.g. 20mK (Planck check)")
    parser.add_argument("--log", action="store_true",
                        help="add the result to the cooldown log (needs --cavity, --cooldown)")
    parser.add_argument("--cavity", default=None, help="cavity name for --log")
    parser.add_argument("--cooldown", default=None, help="cooldown label for --log")
    parser.add_argument("--log-file", default=None, metavar="PATH",
                        help="cooldown log file (default: $CAVCHAR_LOG or ./cavchar.sqlite)")
    parser.add_argument("--report", action="store_true",
                        help="also write a self-contained HTML report into the output folder")


def settings_from_args(args: argparse.Namespace):
    """:class:`cavchar.inference.SamplerSettings` from the sampler options."""
    from cavchar.inference import SamplerSettings

    return SamplerSettings(n_walkers=args.walkers, max_steps=args.max_steps, seed=args.seed,
                           allow_unconverged=args.allow_unconverged, quiet=args.quiet)


def rate_priors_from_args(args: argparse.Namespace, priors_class):
    """``priors_class(lifetime=..., n_thermal=...)`` from ``--prior-lifetime`` and
    ``--prior-n-thermal`` (``stage``: log-normal around the stage's Planck occupation);
    options not given keep the class defaults."""
    from cavchar.errors import InputError
    from cavchar.priors import parse_prior, stage_occupation_prior

    priors = priors_class()
    lifetime, n_thermal = priors.lifetime, priors.n_thermal
    if args.prior_lifetime:
        lifetime = parse_prior(args.prior_lifetime, "time")
    if args.prior_n_thermal:
        if args.prior_n_thermal.strip().lower() == "stage":
            if args.freq is None or args.stage_temp is None:
                raise InputError("--prior-n-thermal stage needs --freq and --stage-temp")
            n_thermal = stage_occupation_prior(args.freq, args.stage_temp)
        else:
            n_thermal = parse_prior(args.prior_n_thermal, "dimensionless", freq_hz=args.freq)
    return priors_class(lifetime=lifetime, n_thermal=n_thermal)


def check_outputs(args: argparse.Namespace) -> None:
    """Fail before a long fit when its main output exists and --force is not given."""
    if args.out:
        from pathlib import Path

        from cavchar.io.atomic import check_can_write

        check_can_write(Path(args.out) / "result.json", args.force)
        if args.report:
            check_can_write(Path(args.out) / "report.html", args.force)
    if args.log and (not args.cavity or not args.cooldown):
        from cavchar.errors import InputError

        raise InputError("--log needs --cavity NAME and --cooldown LABEL")


def finish_fit_command(result, args: argparse.Namespace) -> int:
    """Print the summary, write the outputs, log and report; return the exit code."""
    from cavchar.fits.outputs import print_summary, write_fit_outputs

    print_summary(result)
    if args.out:
        written = write_fit_outputs(result, args.out, force=args.force)
        print(f"wrote {len(written)} files to {args.out}")
    if args.log:
        from cavchar.errors import InputError

        if not args.cavity or not args.cooldown:
            raise InputError("--log needs --cavity NAME and --cooldown LABEL")
        from cavchar.tracking import log_fit_result

        log_fit_result(result, args.cavity, args.cooldown, path=args.log_file)
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
