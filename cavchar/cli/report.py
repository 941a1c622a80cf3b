"""``cavchar report``: one self-contained HTML file from fit result files."""

from __future__ import annotations

import argparse

from cavchar.cli.common import add_command

EXAMPLES = """examples:
  cavchar report fit_out/result.json -o report.html
  cavchar report cd1/result.json cd2/result.json -o compare.html --title "Mirror set B"
  cavchar report cd2/result.json -o report.html --force \\
      --log-file lab.sqlite --cavity "cavity A" --reference cd1
  cavchar report cd2/result.json -o two.html --log-file lab.sqlite --cavity A --cavity B

The page holds everything (figures embedded as PNG, styles inline) and needs no
network to open.  Numbers are shown in readable units (ms, mK, kHz); intervals
are equal-tailed 68% and 95% credible intervals of the posterior draws.
"""


DESCRIPTION = """
Write one HTML file with the summary (lifetime, Q, linewidth, n_th, effective temperature with
68% and 95% intervals), the Planck check in words, the data with the fit, model checks, corner
plot, chain traces, convergence diagnostics and provenance of each result; with several results
also a comparison.
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``report`` (self-contained HTML report of result files) to the sub-commands."""
    parser = add_command(
        subparsers, "report",
        "self-contained HTML report of fit results", DESCRIPTION, EXAMPLES)
    parser.add_argument("results", nargs="+", metavar="RESULT.json",
                        help="result files written by `cavchar fit ... -o DIR`")
    parser.add_argument("-o", "--out", required=True, metavar="FILE",
                        help="the HTML file to write")
    parser.add_argument("--force", action="store_true", help="overwrite an existing file")
    parser.add_argument("--title", default=None, help="page title")
    parser.add_argument("--label", action="append", default=None, metavar="TEXT",
                        help="short name of a result, once per result in order "
                        "(without it: fit kind and input file name)")
    parser.add_argument("--log-file", default=None, metavar="PATH",
                        help="cooldown log: with --cavity adds the trend across cooldowns")
    parser.add_argument("--cavity", default=None, action="append",
                        help="cavity whose trend to add (with a log); repeat to show several "
                        "side by side with P(T_c of the first > T_c of each other)")
    parser.add_argument("--reference", default=None, metavar="COOLDOWN",
                        help="reference cooldown of the trend's drop probability")
    parser.add_argument("--drop", type=_fraction, default=0.1, metavar="FRACTION",
                        help="relative drop of the lifetime the trend asks about (0.1 = 10%%)")
    parser.set_defaults(func=handle)


def _fraction(text: str) -> float:
    from cavchar.cli.common import real

    return real(0.0, 1.0, positive=True)(text)


def handle(args: argparse.Namespace) -> int:
    """Run ``cavchar report``.

    Read the result files and write the HTML report; return the exit code."""
    from cavchar.errors import InputError
    from cavchar.io.atomic import check_can_write
    from cavchar.report import write_report

    check_can_write(args.out, args.force)  # fail before any work
    if args.label is not None and len(args.label) != len(args.results):
        raise InputError(f"{len(args.label)} --label given for {len(args.results)} results",
                         hint="give one --label per result, or none")
    sections = []
    if args.cavity is not None:
        from cavchar.tracking import cooldown_trend, open_log
        from cavchar.tracking.trend import compare_cavities

        with open_log(args.log_file, readonly=True) as log:
            trends = [cooldown_trend(log, cavity, reference=args.reference, fraction=args.drop)
                      for cavity in dict.fromkeys(args.cavity)]
        sections.append(trends[0] if len(trends) == 1 else compare_cavities(trends))
    elif args.reference is not None:
        raise InputError("--reference needs --cavity (and a log)")
    path = write_report(args.results, args.out, force=args.force, title=args.title,
                        labels=args.label, extra_sections=sections)
    print(f"report: {path}")
    return 0
