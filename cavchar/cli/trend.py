"""``cavchar trend``: lifetime, n_th and effective temperature of a cavity per cooldown."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from cavchar.cli.common import add_command, add_output_options
from cavchar.cli.log import add_log_file_option, add_selection_options, interval_text
from cavchar.errors import InputError

EXAMPLES = """examples:
  cavchar trend --cavity mirrors-B
  cavchar trend --cavity mirrors-B --reference CD10 --drop 10%
  cavchar trend --cavity mirrors-B --reference CD10 --kind ringdown -o trend/
  cavchar trend --cavity mirrors-B --each-fit --max-stage-temp 30mK
  cavchar trend --cavity mirrors-B --cavity mirrors-C      # side by side, P(T_c,B > T_c,C)

Each cooldown is summarised by the fits at its base stage temperature (the lowest logged,
within 20% + 1 mK), the most precise one per quantity; a fit marked with
`cavchar log prefer` replaces that choice, one marked with `cavchar log exclude` is never
used.  Every row names the fits it used and why; --why also lists the fits set aside.
Medians and 95% intervals come from each fit's own summary (all its draws).  The drop
probability is P(T_c < (1 - drop) T_c,reference) from all pairs of stored draws of the two
(independent) posteriors; with several cavities, P(T_c of the first > T_c of each other)
likewise.  With -o DIR: trend-<cavity>.csv, .json and .png (trend-<A>-<B>... for several).
"""


def parse_fraction(text: str) -> float:
    """"10%" or "0.1" -> 0.1 (an argparse type)."""
    stripped = text.strip()
    try:
        value = float(stripped[:-1]) / 100 if stripped.endswith("%") else float(stripped)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a fraction (e.g. 10% or 0.1)") from None
    if not 0 <= value < 1:
        raise argparse.ArgumentTypeError(f"{text!r} must lie in [0, 1) (e.g. 10%)")
    return value


DESCRIPTION = """
Trend of one or more cavities across cooldowns from the cooldown log: median and 95% intervals
of the lifetime [s], n_th and effective temperature [K] from the fits that stand for each
cooldown (named in every row), and the posterior probability that the lifetime fell by more than
a fraction relative to a reference cooldown.
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``trend`` (lifetime, n_th and T_eff per cooldown) to the sub-commands."""
    parser = add_command(
        subparsers, "trend",
        "lifetime, n_th and effective temperature per cooldown, with the "
        "probability that the lifetime fell; several cavities side by side", DESCRIPTION, EXAMPLES)
    add_log_file_option(parser)
    parser.add_argument("--cavity", required=True, action="append",
                        help="cavity name (repeat to compare cavities side by side)")
    parser.add_argument("--reference", default=None, metavar="COOLDOWN",
                        help="reference cooldown for the drop probability")
    parser.add_argument("--drop", type=parse_fraction, default=0.1,
                        help="relative drop of the lifetime that counts, e.g. 10%% or 0.1")
    add_selection_options(parser)
    parser.add_argument("--each-fit", action="store_true",
                        help="one row per fit, sweep points included (default: the fits that "
                        "stand for each cooldown)")
    parser.add_argument("--why", action="store_true",
                        help="also list each cooldown's fits that were set aside, and why")
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")
    add_output_options(parser)
    parser.set_defaults(func=handle)


def _temp(value) -> str:
    from cavchar.units import format_quantity

    return "-" if value is None else format_quantity(value, "temperature")


def _cell(row, name: str, dimension: str) -> str:
    """Median [95%] of a quantity, or its one-sided limit when its posterior reaches a
    prior bound (``> 997 s (limit)``)."""
    limit = row.limits.get(name)
    if limit is None:
        return interval_text(row.stats.get(name), dimension)
    from cavchar.tracking.trend import limit_text
    from cavchar.units import format_quantity

    return limit_text(limit, dimension, format_quantity)


def print_trend(trend, why: bool = False) -> None:
    """The trend as a table on stdout, with the fits each row uses and why."""
    from cavchar.derived import format_probability_error

    print(f"cavity {trend.cavity}: {trend.selection}; median [95% interval]")
    head = (f"{'cooldown':<12} {'fits':<8} {'stage':>8} {'lifetime':<26} {'n_th':<30} "
            f"{'T_eff':<24}")
    if trend.reference is not None:
        head += f" P(drop > {100 * trend.fraction:g}%)"
    print(head)
    for r in trend.rows:
        ids = ",".join(str(i) for i in r.fit_ids)
        line = (f"{r.cooldown:<12} {ids:<8} {_temp(r.stage_temp_k):>8} "
                f"{_cell(r, 'lifetime', 'time'):<26} "
                f"{_cell(r, 'n_thermal', 'dimensionless'):<30} "
                f"{_cell(r, 'effective_temperature', 'temperature'):<24}")
        if r.fit_id == trend.reference_fit and "lifetime" in r.sources:
            line += " reference"
        elif r.drop_probability is not None:
            line += f" {format_probability_error(r.drop_probability, r.drop_mc_error)}"
        print(line)
    print("fits used:")
    for r in trend.rows:
        for q, c in r.sources.items():
            if q == "effective_temperature":
                continue
            name = {"lifetime": "T_c", "n_thermal": "n_th and T_eff"}[q]
            print(f"  {r.cooldown}: {name} from fit {c.fit_id} ({c.kind}, stage "
                  f"{_temp(c.stage_temp_k)}): {c.reason}")
        if why:
            for i, reason in r.set_aside:
                print(f"  {r.cooldown}: fit {i} set aside: {reason}")
        for note in r.notes:
            print(f"  {r.cooldown}: note: {note}")
    for note in trend.notes:
        print(f"note: {note}")


def print_comparison(comparison, why: bool = False) -> None:
    """Several cavities' trends, then P(T_c of the first > T_c of each other)."""
    from cavchar.derived import format_probability_error

    for trend in comparison.trends:
        print_trend(trend, why)
        print()
    print("lifetime comparison (independent posteriors, all pairs of stored draws):")
    for r in comparison.rows:
        print(f"  P(T_c {r.cavity_a} [{r.cooldown_a}, fit {r.fit_a}] > T_c {r.cavity_b} "
              f"[{r.cooldown_b}, fit {r.fit_b}]) = "
              f"{format_probability_error(r.probability, r.mc_error)} "
              f"({r.basis})")
    if not comparison.rows:
        print("  no cooldown of the cavities has lifetimes to compare")


def handle(args: argparse.Namespace) -> int:
    """Run ``cavchar trend``.

    Print the per-cooldown table and the probability of a drop; return the exit code."""
    from cavchar.tracking.store import open_log
    from cavchar.tracking.trend import compare_cavities, cooldown_trend

    out = None
    if args.out is not None:
        out = Path(args.out)
        if out.exists() and not out.is_dir():
            raise InputError("--out must be a folder", path=out)
    cavities = list(dict.fromkeys(args.cavity))
    with open_log(args.log_file, readonly=True) as log:
        trends = [cooldown_trend(log, cavity, reference=args.reference, fraction=args.drop,
                                 kind=args.kind, each_fit=args.each_fit,
                                 min_stage_k=args.min_stage_temp,
                                 max_stage_k=args.max_stage_temp) for cavity in cavities]
    shown = trends[0] if len(trends) == 1 else compare_cavities(trends)
    if args.json:
        print(json.dumps(shown.to_dict(), indent=1))
    elif len(trends) == 1:
        print_trend(shown, args.why)
    else:
        print_comparison(shown, args.why)
    if out is not None:
        write_outputs(shown, out, args.force)
    return 0


def write_outputs(trend, out: Path, force: bool) -> None:
    """trend-<cavity>.csv / .json / .png in ``out`` (atomic, no overwrite without force);
    for a comparison of cavities the name joins theirs."""
    import io

    from cavchar.io.atomic import check_can_write, write_bytes_atomic, write_text_atomic
    from cavchar.plots.trend import plot_trend

    names = ([trend.cavity] if hasattr(trend, "cavity")
             else [t.cavity for t in trend.trends])
    safe = "-".join("".join(c if c.isalnum() or c in "-_." else "_" for c in n) for n in names)
    paths = [out / f"trend-{safe}.{ext}" for ext in ("csv", "json", "png")]
    for path in paths:
        check_can_write(path, force)
    write_text_atomic(paths[0], trend.table().to_csv(index=False), force=force)
    write_text_atomic(paths[1], json.dumps(trend.to_dict(), indent=1), force=force)
    buffer = io.BytesIO()
    plot_trend(trend).savefig(buffer, format="png", dpi=120)
    write_bytes_atomic(paths[2], buffer.getvalue(), force=force)
    for path in paths:
        print(f"wrote {path}")
