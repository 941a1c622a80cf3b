"""``cavchar budget``: thermal budget of a mode from n_th at several stage temperatures."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from cavchar.cli.common import add_command, add_output_options, quantity
from cavchar.cli.log import add_log_file_option, add_selection_options, interval_text
from cavchar.errors import InputError

EXAMPLES = """examples:
  cavchar budget --cavity mirrors-B                       # one budget per cooldown
  cavchar budget --cavity mirrors-B --cooldown CD12 -o budget/
  cavchar budget --cavity mirrors-B --pool                # also all cooldowns together
  cavchar budget --result a.json --stage-temp 20mK --result b.json --stage-temp 80mK \\
                 --result c.json --stage-temp 150mK --freq 6.8GHz

Models: two-bath n_th = (1-f) n(nu, T_stage) + f n(nu, T_hot), and stage occupation
plus a constant excess n_th = n(nu, T_stage) + n_x.  The two-bath model is stated when
T_hot is identifiable (95% interval within a factor 10, clear of its prior bounds);
otherwise the excess model is, and the output says so.  Each fit's n_th posterior serves
as its likelihood (normal or kernel-density approximation in ln n_th, see --approximation).
From the log, each cooldown gets its own budget (its own excess and, where identifiable,
hot-bath temperature) from one fit per stage temperature (the most precise, or the one
marked with `cavchar log prefer`); every fit used or set aside is listed with why.
--pool adds one budget of all cooldowns together, with a likelihood-ratio check that
they share one excess (and a clear statement when they do not).
With -o DIR: budget.json and budget.png.
"""


DESCRIPTION = """
Fit n_th measured at several stage temperatures [K] with a two-bath model (or the stage
occupation plus a constant excess when the hot bath's temperature is not identifiable), with
credible intervals by MCMC.
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``budget`` (thermal budget fit over stage temperatures) to the sub-commands."""
    parser = add_command(
        subparsers, "budget",
        "thermal budget: hot because the stage is warm, or because something "
        "hot leaks in?", DESCRIPTION, EXAMPLES)
    add_log_file_option(parser)
    parser.add_argument("--cavity", default=None, help="cavity name (data from the log)")
    parser.add_argument("--cooldown", action="append", default=None,
                        help="only fits of this cooldown (repeatable)")
    add_selection_options(parser)
    parser.add_argument("--pool", action="store_true",
                        help="also fit all cooldowns together (with a check that they agree)")
    parser.add_argument("--result", action="append", default=None, metavar="RESULT.json",
                        help="result file instead of the log (repeatable)")
    parser.add_argument("--stage-temp", type=quantity("temperature"), action="append",
                        default=None, help="stage temperature of each --result, in order, "
                        "e.g. 20mK (default: the result's own setting)")
    parser.add_argument("--freq", type=quantity("frequency"), default=None,
                        help="mode frequency, e.g. 6.8GHz (default: from the data)")
    parser.add_argument("--approximation", choices=("auto", "lognormal", "kde"),
                        default="auto", help="how each n_th posterior becomes a likelihood")
    parser.add_argument("--t-hot-max", type=quantity("temperature"), default=300.0,
                        help="upper bound of the prior on T_hot, e.g. 300K")
    parser.add_argument("--seed", type=int, default=1, help="random seed of the sampler")
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")
    add_output_options(parser)
    parser.set_defaults(func=handle)


def _points_from_results(args: argparse.Namespace):
    from cavchar.fits.budget import BudgetPoint
    from cavchar.tracking.budget import n_thermal_prior
    from cavchar.tracking.entries import read_result_file

    temps = args.stage_temp or []
    if temps and len(temps) != len(args.result):
        raise InputError(f"{len(args.result)} --result but {len(temps)} --stage-temp",
                         hint="give one --stage-temp per --result, or none")
    points, freqs = [], set()
    for i, path in enumerate(args.result):
        entry = read_result_file(path)
        if "n_thermal" not in entry.draws:
            raise InputError("the result has no n_th draws", path=path)
        temp = temps[i] if temps else entry.stage_temp_k
        if temp is None:
            raise InputError("the result has no stage temperature", path=path,
                             hint="give --stage-temp for each --result")
        if entry.freq_hz is not None:
            freqs.add(entry.freq_hz)
        points.append(BudgetPoint(str(path), float(temp), entry.draws["n_thermal"],
                                  *n_thermal_prior(entry.parameters)))
    return points, (max(freqs) if freqs else None)


def _dim(name: str) -> str:
    return "temperature" if "temperature" in name else "dimensionless"


def print_budget(budget, indent: str = "") -> None:
    """One budget (points, stated model and why, parameters) on stdout."""
    from cavchar.units import format_quantity

    print(f"{indent}thermal budget at {format_quantity(budget.freq_hz, 'frequency', 6)}")
    print(f"{indent}  {'data':<28} {'stage':>9}  {'n_th median [95%]':<30} Planck n(stage)")
    for p in budget.points:
        stats = _Point(p)
        print(f"{indent}  {p['label']:<28} "
              f"{format_quantity(p['stage_temp_k'], 'temperature'):>9}  "
              f"{interval_text(stats, 'dimensionless'):<30} "
              f"{format_quantity(p['planck_occupation'], 'dimensionless')}")
    print(f"{indent}stated model: {budget.model}")
    print(f"{indent}  why: {budget.reason}")
    x = budget.excess.parameters["excess_photons"]
    if budget.excess_is_upper_limit:
        print(f"{indent}  excess photons n_x < {format_quantity(x.hi95, 'dimensionless')} "
              "(95% upper limit; no excess detected)")
    else:
        print(f"{indent}  excess photons n_x = {interval_text(x, 'dimensionless')} "
              "(median [95%])")
    if budget.two_bath is not None:
        tb = budget.two_bath.parameters
        lead = "" if budget.model == budget.two_bath.model else " (not identified)"
        print(f"{indent}  two-bath{lead}, median [95%]: T_hot = "
              f"{interval_text(tb['hot_temperature'], 'temperature')}; hot fraction f = "
              f"{interval_text(tb['hot_fraction'], 'dimensionless')}")
        print(f"{indent}  share of n_th from the hot side at the coldest stage: "
              f"{interval_text(tb['excess_share_at_coldest'], 'dimensionless')}")
    for note in budget.notes:
        print(f"{indent}note: {note}")


class _Point:
    """Interval fields from a budget point's flat ``n_thermal_*`` keys."""

    def __init__(self, p: dict) -> None:
        self.median, self.lo68, self.hi68 = (p["n_thermal_median"], p["n_thermal_lo68"],
                                                  p["n_thermal_hi68"])
        self.lo95, self.hi95 = p["n_thermal_lo95"], p["n_thermal_hi95"]


def print_budgets(report) -> None:
    """Per-cooldown budgets (with the fits used and set aside), then the pooled one."""
    from cavchar.units import format_quantity

    print(f"cavity {report.cavity}: one thermal budget per cooldown")
    for c in report.per_cooldown:
        print(f"\ncooldown {c.cooldown}: fits {', '.join(str(i) for i in c.fit_ids)}")
        for i, t, why in c.selection.used:
            print(f"  uses fit {i} at {format_quantity(t, 'temperature')}: {why}")
        for i, why in c.selection.set_aside:
            print(f"  sets aside fit {i}: {why}")
        print_budget(c.budget, indent="  ")
    if report.pooled is not None:
        print("\nall cooldowns pooled (on request):")
        print_budget(report.pooled, indent="  ")
    for note in report.notes:
        print(f"note: {note}")


def handle(args: argparse.Namespace) -> int:
    """Run ``cavchar budget``: fit the two-bath model and print it; return the exit code."""
    from cavchar.fits.budget import thermal_budget
    from cavchar.tracking.budget import cooldown_budgets

    if (args.result is None) == (args.cavity is None):
        raise InputError("give either --cavity (data from the log) or --result files")
    out = None if args.out is None else Path(args.out)
    if out is not None and out.exists() and not out.is_dir():
        raise InputError("--out must be a folder", path=out)
    if out is not None:
        from cavchar.io.atomic import check_can_write

        for name in ("budget.json", "budget.png"):
            check_can_write(out / name, args.force)
    if args.result is not None:
        if args.pool or args.kind or args.min_stage_temp is not None \
                or args.max_stage_temp is not None:
            raise InputError("--pool, --kind and the stage-temperature filters select logged "
                             "fits; they do not go with --result")
        points, freq = _points_from_results(args)
        freq = args.freq or freq
        if freq is None:
            raise InputError("the mode frequency is unknown", hint="give --freq, e.g. 6.8GHz")
        budget = thermal_budget(points, freq, approximation=args.approximation,
                                t_hot_max_k=args.t_hot_max, seed=args.seed)
    else:
        if args.stage_temp:
            raise InputError("--stage-temp goes with --result; logged fits carry their own")
        from cavchar.tracking.store import open_log

        with open_log(args.log_file, readonly=True) as log:
            budget = cooldown_budgets(log, args.cavity, cooldowns=args.cooldown,
                                      kind=args.kind, pool=args.pool,
                                      min_stage_k=args.min_stage_temp,
                                      max_stage_k=args.max_stage_temp, freq_hz=args.freq,
                                      approximation=args.approximation,
                                      t_hot_max_k=args.t_hot_max, seed=args.seed)
    if args.json:
        print(json.dumps(budget.to_dict(), indent=1))
    elif args.result is not None:
        print_budget(budget)
    else:
        print_budgets(budget)
    if out is not None:
        import io

        from cavchar.io.atomic import write_bytes_atomic, write_text_atomic
        from cavchar.plots.trend import plot_budget

        write_text_atomic(out / "budget.json", json.dumps(budget.to_dict(), indent=1),
                          force=args.force)
        buffer = io.BytesIO()
        plot_budget(budget).savefig(buffer, format="png", dpi=120)
        write_bytes_atomic(out / "budget.png", buffer.getvalue(), force=args.force)
        print(f"wrote {out / 'budget.json'} and {out / 'budget.png'}")
    return 0
