"""``cavchar demo``: the whole job on an invented scenario, ending in one HTML report."""

from __future__ import annotations

import argparse

from cavchar.cli.common import add_command, whole

EXAMPLES = """examples:
  cavchar demo                      # writes ./cavchar-demo/ and prints where the report is
  cavchar demo --out demo-run --quick
  cavchar demo --out demo-run --force

The scenario is invented (lab, cavity, mirror set, every number): a ring-down of a
new mirror set, a raw probe record and a jump record from a first cooldown, jump
records from a second (worse lifetime) and a third cooldown (better filtering,
colder mode, with a stage-temperature sweep).  The demo simulates them at fixed
seeds, fits each by MCMC, logs the fits in a fresh SQLite file, computes the
trend across cooldowns with the probability that the lifetime fell, qualifies
the mirror set against an example spec (spec.toml) and fits the thermal budget.
--quick (for CI) takes well under a minute on 2 cores; the full demo a few minutes.
"""


DESCRIPTION = """
Simulate an invented data set, fit it, log it, follow the trend, qualify against an example
spec, fit the thermal budget and write one self-contained HTML report.
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``demo`` (the whole job on an invented scenario) to the sub-commands."""
    parser = add_command(
        subparsers, "demo",
        "run the whole job on an invented scenario and write an HTML report", DESCRIPTION, EXAMPLES)
    parser.add_argument("-o", "--out", metavar="DIR", default="cavchar-demo",
                        help="folder for the data, results, log, spec and report")
    parser.add_argument("--quick", action="store_true",
                        help="shorter records and fewer figures (for CI)")
    parser.add_argument("--force", action="store_true",
                        help="replace the files of an earlier demo run in DIR")
    parser.add_argument("--seed", type=whole(0, 2**63 - 1), default=None,
                        help="base seed of the simulations and fits (default: the demo's)")
    parser.set_defaults(func=handle)


def handle(args: argparse.Namespace) -> int:
    """Run ``cavchar demo``.

    Simulate, fit, log, qualify and write the report; return the exit code."""
    from cavchar.demo.run import DEFAULT_SEED, run_demo

    outcome = run_demo(args.out, quick=args.quick,
                       seed=DEFAULT_SEED if args.seed is None else args.seed,
                       force=args.force, progress=lambda text: print(text, flush=True))
    print(f"demo finished in {outcome.elapsed_s:.0f} s")
    print(f"report: {outcome.report.resolve()}")
    return 0
