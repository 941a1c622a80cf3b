"""``cavchar plan jumps|probes|ringdown``: how much data a target precision needs."""

from __future__ import annotations

import argparse
import math
from pathlib import Path

from cavchar.cli.common import add_command, add_output_options, quantity, real, whole
from cavchar.cli.response import add_response_options, response_from_args
from cavchar.errors import InputError
from cavchar.units import format_quantity

EXAMPLES = """examples:
  cavchar plan jumps --lifetime 1.2ms --n-thermal 0.02 --freq 6.8GHz \\
      --target-lifetime 3% --target-n-thermal 20%
  cavchar plan jumps --lifetime 1.2ms --n-thermal 0.02 --record-length 2min
  cavchar plan probes --lifetime 1.2ms --n-thermal 0.02 --probe-interval 20us \\
      --visibility 0.85 --target-lifetime 5% -o plan_out
  cavchar plan ringdown --signal power --lifetime 1.2ms --noise 0.02 --span 6ms \\
      --points 2000 --target-lifetime 1%
"""

#: largest assumed n_th a plan accepts: the probe and sampled forecasts truncate the
#: photon number, which needs at most cavchar.dynamics.MAX_LEVELS levels up to here
MAX_N_THERMAL = 10.0
#: longest time a plan accepts for any time option (about three years): beyond it the
#: forecast is a unit mistake, not a plan
MAX_PLAN_TIME = 1e8
TIME = quantity("time", positive=True, maximum=MAX_PLAN_TIME)

_DIMENSION = {"lifetime": "time", "n_thermal": "dimensionless",
              "quality_factor": "dimensionless", "effective_temperature": "temperature"}
_LABEL = {"lifetime": "lifetime T_c", "n_thermal": "thermal photons n_th",
          "quality_factor": "quality factor Q", "effective_temperature": "temperature T_eff"}


def _signal_word(text: str) -> str:
    """``mean_n`` and ``Mean-N`` read as ``mean-n``, the word of every command."""
    return text.strip().lower().replace("_", "-")


def fraction(text: str) -> float:
    """A relative precision: ``3%`` or ``0.03``."""
    raw = text.strip()
    try:
        value = float(raw[:-1]) / 100 if raw.endswith("%") else float(raw)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a relative precision "
                                         "(write e.g. 3% or 0.03)") from None
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"the relative precision must be > 0, not {text!r}")
    return value


def count(text: str) -> int:
    """A whole number, also written as ``1e6``."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not (math.isfinite(value) and value >= 1 and value == round(value)):
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number >= 1")
    return int(value)


def _common(parser: argparse.ArgumentParser, n_thermal_required: bool = True) -> None:
    parser.add_argument("--lifetime", type=TIME, required=True,
                        help="assumed energy lifetime T_c, e.g. 1.2ms")
    parser.add_argument("--n-thermal", type=quantity("dimensionless", maximum=MAX_N_THERMAL),
                        required=n_thermal_required, default=None if n_thermal_required else 0.0,
                        help="assumed thermal photon number, e.g. 0.02")
    parser.add_argument("--freq", type=quantity("frequency", positive=True), default=None,
                        help="mode frequency (adds Q and the effective temperature), e.g. 6.8GHz")
    parser.add_argument("--target-lifetime", type=fraction, default=None,
                        help="target relative sd of T_c, e.g. 3%%")
    parser.add_argument("--target-n-thermal", type=fraction, default=None,
                        help="target relative sd of n_th, e.g. 20%%")
    parser.add_argument("--target-temperature", type=fraction, default=None,
                        help="target relative sd of the effective temperature (needs --freq)")
    parser.add_argument("--no-check", action="store_true",
                        help="skip the simulate-and-fit study that confirms the forecast")
    parser.add_argument("--check-records", type=whole(1, 1000), default=None,
                        help="records simulated by the study (default 40; 20 for probes)")
    parser.add_argument("--seed", type=whole(0, 2**63 - 1), default=1,
                        help="random seed of the simulations")
    parser.add_argument("--format", choices=("png", "pdf"), default="png",
                        help="figure format written with -o")
    add_output_options(parser)


DESCRIPTION = """
Forecast the precision of T_c, n_th (and Q, T_eff) from the Fisher information (Cramér–Rao
bound) of the likelihood the fits use, for a target relative sd (needed amount of data) or a
given amount (expected sd); confirmed by a short simulate-and-fit study.  All times in s unless
a unit is given.
"""

JUMPS_DESCRIPTION = """
Record length for a jump record (exact change points, or the photon number read every
--sample-interval).
"""

PROBES_DESCRIPTION = """
Number of probes for a raw probe record with a Ramsey-fringe response (or a calibrated
table).  The information per probe is estimated on long simulated records; the perfect-readout
column is the bound of a readout that reveals the photon number.
"""

RINGDOWN_DESCRIPTION = """
Number of averaged (or jointly fitted) ring-down traces.  Noise is per point of one trace (dB
for db; per quadrature for iq and amplitude).
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``plan`` (precision forecasts for jumps, probes and ring-down) to the sub-commands."""
    parser = add_command(
        subparsers, "plan",
        "how much data a target precision needs (or the reverse)", DESCRIPTION, EXAMPLES)
    kinds = parser.add_subparsers(dest="plan_kind", metavar="KIND")

    jumps = add_command(kinds, "jumps", "photon-number jump records", JUMPS_DESCRIPTION, EXAMPLES)
    _common(jumps)
    jumps.add_argument("--record-length", type=TIME, default=None,
                       help="forecast the precision of this total record length, e.g. 2min")
    jumps.add_argument("--sample-interval", type=TIME, default=None,
                       help="sampled record: time between photon-number readings, e.g. 50us")
    jumps.set_defaults(func=handle)

    probes = add_command(
        kinds, "probes",
        "raw QND probe records (hidden Markov model)", PROBES_DESCRIPTION, EXAMPLES)
    _common(probes)
    probes.add_argument("--probe-interval", type=TIME, required=True,
                        help="time between probes, e.g. 20us")
    probes.add_argument("--probes", type=count, default=None,
                        help="forecast the precision of this number of probes, e.g. 1e6")
    add_response_options(probes)
    probes.add_argument("--settings", default=None,
                        help="interleaved probe settings, comma separated, e.g. 0,1.57rad")
    probes.add_argument("--loss", type=real(0.0, 0.99), default=0.0,
                        help="probability a probe is lost")
    probes.set_defaults(func=handle)

    ring = add_command(kinds, "ringdown", "ring-down traces", RINGDOWN_DESCRIPTION, EXAMPLES)
    _common(ring, n_thermal_required=False)
    ring.add_argument("--signal", required=True, type=_signal_word,
                      choices=("power", "db", "amplitude", "iq", "mean-n", "populations"),
                      help="what the trace holds")
    ring.add_argument("--noise", type=real(0.0), default=0.0,
                      help="noise sd per point of one trace (value units)")
    ring.add_argument("--span", type=TIME, default=None,
                      help="time span sampled after the decay starts (default 5 lifetimes)")
    ring.add_argument("--points", type=whole(2, 10_000_000), default=1000,
                      help="points per trace")
    ring.add_argument("--amplitude", type=real(0.0, positive=True), default=1.0,
                      help="initial amplitude")
    ring.add_argument("--floor", type=real(0.0), default=0.0, help="power floor (power, db)")
    ring.add_argument("--initial", type=whole(0, 400), default=1,
                      help="prepared Fock number (mean_n, populations)")
    ring.add_argument("--shots", type=count, default=1000, help="shots per delay (populations)")
    ring.add_argument("--detuning", type=quantity("frequency", minimum=None), default=0.0,
                      help="IQ detuning, e.g. 2kHz")
    ring.add_argument("--fix", action="append", default=[], metavar="NUISANCE",
                      help="a nuisance the fit holds fixed (floor, amplitude, detuning, ...)")
    ring.add_argument("--traces", type=count, default=None,
                      help="forecast the precision of this number of traces")
    ring.set_defaults(func=handle)
    parser.set_defaults(func=lambda args: (parser.print_help(), 2)[1])


def _settings(text: str | None):
    from cavchar.units import parse_quantity

    if not text:
        return None
    return [parse_quantity(part, "phase") for part in text.split(",") if part.strip()]


def _run(args):
    from cavchar.plan.forecast import plan_jumps, plan_probes, plan_ringdown

    targets = dict(target_lifetime=args.target_lifetime, target_n_thermal=args.target_n_thermal,
                   target_temperature=args.target_temperature)
    common = dict(freq_hz=args.freq, check=not args.no_check, seed=args.seed, **targets)
    if args.check_records is not None:
        common["check_records"] = args.check_records
    if args.plan_kind == "jumps":
        return plan_jumps(args.lifetime, args.n_thermal, record_length=args.record_length,
                          sample_interval=args.sample_interval, **common)
    if args.plan_kind == "probes":
        if not 0 <= args.loss < 1:
            raise InputError(f"--loss must lie in [0, 1), not {args.loss}")
        return plan_probes(args.lifetime, args.n_thermal, args.probe_interval,
                           response_from_args(args), settings=_settings(args.settings),
                           loss=args.loss, n_probes=args.probes, **common)
    return plan_ringdown(args.signal, args.lifetime, noise=args.noise, span=args.span,
                         points=args.points, amplitude=args.amplitude, floor=args.floor,
                         n_thermal=args.n_thermal, initial=args.initial, shots=args.shots,
                         detuning=args.detuning, fixed=tuple(args.fix), n_traces=args.traces,
                         **common)


def _amount(value: float, table) -> str:
    if table.attrs["amount_unit"] == "s":
        return format_quantity(value, "time")
    unit = table.attrs["amount_unit"]
    return f"{value:.0f} {unit[:-1] if round(value) == 1 and unit.endswith('s') else unit}"


def format_table(table) -> str:
    """The plan as text, every number with its unit."""
    lines = []
    planned = table.attrs["planned_amount"]
    head = f"planned {table.attrs['amount_name']}: {_amount(planned, table)}"
    if "planned_record_length_s" in table.attrs and table.attrs["amount_unit"] != "s":
        length = format_quantity(table.attrs["planned_record_length_s"], "time")
        head += f" (record length {length})"
    if "expected_jumps" in table.attrs:
        head += f", about {table.attrs['expected_jumps']:.0f} jumps"
    lines.append(head)
    probes = table["perfect_readout_relative_sd"].notna().any()
    studied = table["simulated_sd"].notna().any()
    for _, row in table.iterrows():
        dim = _DIMENSION[row["quantity"]]
        text = (f"  {_LABEL[row['quantity']]:<22} {format_quantity(row['assumed'], dim):>10}  "
                f"expected sd {format_quantity(row['expected_sd'], dim):>10} "
                f"({100 * row['expected_relative_sd']:.3g} %)")
        if math.isfinite(row["target_relative_sd"]):
            text += (f"  target {100 * row['target_relative_sd']:.3g} % needs "
                     f"{_amount(row['needed_amount'], table)}")
        if probes:
            text += f"  perfect readout {100 * row['perfect_readout_relative_sd']:.3g} %"
        if math.isfinite(row["forecast_relative_error"]) and row["forecast_relative_error"] > 0:
            text += f"  (forecast MC error {100 * row['forecast_relative_error']:.2g} %)"
        lines.append(text)
    if studied:
        first = table.dropna(subset=["simulated_sd"]).iloc[0]
        lines.append(f"simulation study ({int(first['records'])} records, "
                     f"{int(first['failed_records'])} without estimate): simulated spread")
        for _, row in table.dropna(subset=["simulated_sd"]).iterrows():
            dim = _DIMENSION[row["quantity"]]
            lines.append(f"  {_LABEL[row['quantity']]:<22} "
                         f"{format_quantity(row['simulated_sd'], dim):>10} "
                         f"± {format_quantity(row['simulated_sd_error'], dim)}  "
                         f"= {row['simulated_to_expected']:.2f} x forecast")
    return "\n".join(lines)


def handle(args: argparse.Namespace) -> int:
    """Run ``cavchar plan <kind>``.

    Forecast, optionally confirm by simulation, print and write; return the exit code."""
    out = None
    if args.out:
        from cavchar.io.atomic import check_can_write

        out = Path(args.out)
        for name in ("plan.csv", f"plan.{args.format}"):
            check_can_write(out / name, args.force)
    if args.plan_kind == "ringdown" and args.signal != "populations" and not args.noise > 0:
        raise InputError("give the noise level per point with --noise",
                         hint="e.g. --noise 0.02 (value units of one trace)")
    table = _run(args)
    print(format_table(table))
    if out is not None:
        from cavchar.io.atomic import write_text_atomic
        from cavchar.plots.plan import plot_plan
        from cavchar.plots.posterior import save_figure

        out.mkdir(parents=True, exist_ok=True)
        header = "".join(f"# {k}: {v}\n" for k, v in table.attrs.items())
        write_text_atomic(out / "plan.csv", header + table.to_csv(index=False), force=args.force)
        save_figure(plot_plan(table), out / "plan", formats=(args.format,), force=args.force)
        print(f"wrote {out / 'plan.csv'} and {out / ('plan.' + args.format)}")
    return 0
