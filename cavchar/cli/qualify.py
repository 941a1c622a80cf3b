"""``cavchar qualify``: PASS / FAIL / UNDECIDED of a cavity against a spec file (TOML)."""

from __future__ import annotations

import argparse
import json

from cavchar.cli.common import add_command, quantity
from cavchar.cli.log import (
    add_log_file_option,
    add_selection_options,
    fit_id_arg,
    interval_text,
)
from cavchar.errors import InputError

EXAMPLES = """spec file (TOML), one table per requirement:
  title = "mirror set acceptance"
  [lifetime]
  at_least = "2 ms"
  credibility = 0.95
  [thermal_photons]
  at_most = 0.01
  credibility = 0.9
  [effective_temperature]
  at_most = "60 mK"
  credibility = 0.9
quantities: lifetime [s], thermal_photons, effective_temperature [K], quality_factor,
linewidth [Hz]; bounds: at_least or at_most (number in SI units or text with a unit).

examples:
  cavchar qualify spec.toml --cavity mirrors-B --cooldown CD12
  cavchar qualify spec.toml --result fit.json --freq 6.8GHz
  cavchar qualify spec.toml --cavity mirrors-B --fit 7 --json

From the log, the cooldown is represented by the fits that stand for it: those at its
base stage temperature (lowest logged, within 20% + 1 mK), the most precise per quantity,
unless a fit is marked with `cavchar log prefer` / `log exclude`; each verdict names its
fit and why.
PASS if P(met) >= credibility, FAIL if P(not met) >= credibility, else UNDECIDED.
Exit code 0 all PASS, 4 any FAIL, 5 otherwise any UNDECIDED (2 bad input).
"""


DESCRIPTION = """
Judge each requirement of a spec file from the posterior draws of a logged fit (or a result
file): the posterior probability that it is met, against its credibility level.
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``qualify`` (PASS / FAIL / UNDECIDED against a spec) to the sub-commands."""
    parser = add_command(
        subparsers, "qualify",
        "check a cavity against a spec: PASS / FAIL / UNDECIDED (exit 0/4/5)",
        DESCRIPTION, EXAMPLES)
    parser.add_argument("spec", metavar="SPEC.toml", help="spec file")
    add_log_file_option(parser)
    parser.add_argument("--cavity", default=None, help="cavity name (data from the log)")
    parser.add_argument("--cooldown", default=None,
                        help="the cooldown judged (default: the latest with fits of the "
                        "cavity); its fits at base stage temperature stand for it")
    add_selection_options(parser)
    parser.add_argument("--fit", type=fit_id_arg, default=None, metavar="FIT_ID",
                        help="use only this logged fit")
    parser.add_argument("--result", default=None, metavar="RESULT.json",
                        help="judge a result file instead of the log")
    parser.add_argument("--freq", type=quantity("frequency"), default=None,
                        help="mode frequency for Q and T_eff if the data lack it, e.g. 6.8GHz")
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")
    parser.set_defaults(func=handle)


class _Span:
    def __init__(self, v) -> None:
        self.median, self.lo95, self.hi95 = v.median, v.lo95, v.hi95
        self.lo68, self.hi68 = v.lo95, v.hi95  # decimals from the 95% interval


def print_qualification(report) -> None:
    """Print the verdict of every requirement of a qualification report and the overall verdict."""
    from cavchar.derived import format_probability_error
    from cavchar.tracking.qualify import QUANTITIES

    title = f" {report.spec.title!r}" if report.spec.title else ""
    print(f"spec{title} ({report.spec.path}): {report.status}")
    for v in report.verdicts:
        dim = QUANTITIES[v.requirement.quantity][0]
        print(f"  {v.status:<9} {v.requirement.describe()}")
        if v.probability is not None:
            p_met = format_probability_error(v.probability, v.mc_error)
            print(f"            P(met) = {p_met} (Monte Carlo); "
                  f"median [95%] {interval_text(_Span(v), dim)}")
        if v.evidence is not None:
            print(f"            data: {v.evidence.description}")
        if v.hint:
            print(f"            {v.hint}")


def handle(args: argparse.Namespace) -> int:
    """Run ``cavchar qualify``: judge the spec; exit 0 on PASS, 4 on FAIL, 5 on UNDECIDED."""
    from cavchar.tracking.qualify import evidence_from_entry, evidence_from_log, qualify, read_spec

    spec = read_spec(args.spec)
    if (args.result is None) == (args.cavity is None):
        raise InputError("give either --cavity (data from the log) or --result (a result file)")
    if args.result is not None:
        if (args.cooldown or args.fit is not None or args.kind
                or args.min_stage_temp is not None or args.max_stage_temp is not None):
            raise InputError("--cooldown and --fit select logged fits; they do not go with "
                             "--result")
        from cavchar.tracking.entries import read_result_file

        evidence = evidence_from_entry(read_result_file(args.result), freq_hz=args.freq)
    else:
        from cavchar.tracking.store import open_log

        with open_log(args.log_file, readonly=True) as log:
            evidence = evidence_from_log(log, args.cavity, cooldown=args.cooldown,
                                         fit_id=args.fit, freq_hz=args.freq, kind=args.kind,
                                         min_stage_k=args.min_stage_temp,
                                         max_stage_k=args.max_stage_temp)
    report = qualify(spec, evidence)
    if args.json:
        print(json.dumps(report.to_dict(), indent=1))
    else:
        print_qualification(report)
    return report.exit_code
