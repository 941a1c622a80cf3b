"""``cavchar trend``: lifetime, n_th and effective temperature of a cavity per cooldown."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from cavchar.cli.common import HelpFormatter, add_output_options
from cavchar.cli.log import add_log_file_option
from cavchar.errors import InputError

EXAMPLES = """examples:
  cavchar trend --cavity mirrors-B
  cavchar trend --cavity mirrors-B --reference CD10 --drop 10%
  cavchar trend --cavity mirrors-B --reference CD10 --kind ringdown --each-fit -o trend/

Intervals are equal-tailed 68% and 95% intervals of the stored posterior draws.
The drop probability is P(T_c < (1 - drop) T_c,reference) from all pairs of draws of
the two (independent) posteriors.  With -o DIR: trend-<cavity>.csv, .json and .png.
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


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "trend", help="lifetime, n_th and effective temperature per cooldown, with the "
        "probability that the lifetime fell",
        description="Trend of one cavity across cooldowns from the cooldown log: median and "
        "68%/95% intervals of the lifetime [s], n_th and effective temperature [K], and "
        "for each cooldown the posterior probability that the lifetime fell by more than a "
        "fraction relative to a reference cooldown.",
        epilog=EXAMPLES, formatter_class=HelpFormatter)
    add_log_file_option(parser)
    parser.add_argument("--cavity", required=True, help="cavity name")
    parser.add_argument("--reference", default=None, metavar="COOLDOWN",
                        help="reference cooldown for the drop probability")
    parser.add_argument("--drop", type=parse_fraction, default=0.1,
                        help="relative drop of the lifetime that counts, e.g. 10%% or 0.1")
    parser.add_argument("--kind", default=None, help="only fits of this kind")
    parser.add_argument("--each-fit", action="store_true",
                        help="one row per fit (default: the latest fit of each cooldown)")
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")
    add_output_options(parser)
    parser.set_defaults(func=handle)


def _span(s, dim: str) -> str:
    from cavchar.units import format_quantity

    if s is None:
        return "-"
    if dim == "dimensionless":
        return f"{s.median:.3g} [{s.low_95:.3g}, {s.high_95:.3g}]"
    return (f"{format_quantity(s.median, dim)} [{format_quantity(s.low_95, dim)}, "
            f"{format_quantity(s.high_95, dim)}]")


def print_trend(trend) -> None:
    """The trend as a table on stdout."""
    print(f"cavity {trend.cavity}: {trend.selection}; median [95% interval]")
    head = f"{'cooldown':<12} {'fit':>5} {'kind':<9} {'lifetime':<28} {'n_th':<28} {'T_eff':<28}"
    if trend.reference is not None:
        head += f" P(drop > {100 * trend.fraction:g}%)"
    print(head)
    for r in trend.rows:
        line = (f"{r.cooldown:<12} {r.fit_id:>5} {r.kind:<9} "
                f"{_span(r.stats.get('lifetime'), 'time'):<28} "
                f"{_span(r.stats.get('n_thermal'), 'dimensionless'):<28} "
                f"{_span(r.stats.get('effective_temperature'), 'temperature'):<28}")
        if r.fit_id == trend.reference_fit:
            line += " reference"
        elif r.drop_probability is not None:
            line += f" {r.drop_probability:.3f} +- {r.drop_mc_error:.3f}"
        print(line)
    for note in trend.notes:
        print(f"note: {note}")


def handle(args: argparse.Namespace) -> int:
    from cavchar.tracking.store import open_log
    from cavchar.tracking.trend import cooldown_trend

    out = None
    if args.out is not None:
        out = Path(args.out)
        if out.exists() and not out.is_dir():
            raise InputError("--out must be a folder", path=out)
    with open_log(args.log_file, create=False) as log:
        trend = cooldown_trend(log, args.cavity, reference=args.reference, fraction=args.drop,
                               kind=args.kind, each_fit=args.each_fit)
    if args.json:
        print(json.dumps(trend.to_dict(), indent=1))
    else:
        print_trend(trend)
    if out is not None:
        write_outputs(trend, out, args.force)
    return 0


def write_outputs(trend, out: Path, force: bool) -> None:
    """trend-<cavity>.csv / .json / .png in ``out`` (atomic, no overwrite without force)."""
    import io

    from cavchar.io.atomic import check_can_write, write_bytes_atomic, write_text_atomic
    from cavchar.plots.trend import plot_trend

    safe = "".join(c if c.isalnum() or c in "-_." else "_" for c in trend.cavity)
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
