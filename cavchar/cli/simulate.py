"""``cavchar simulate <shape>``: invented, seeded data in exactly the formats the readers take."""

from __future__ import annotations

import argparse
from pathlib import Path

from cavchar.cli.common import add_command, add_output_options, quantity, real, whole
from cavchar.cli.response import add_response_options, response_from_args
from cavchar.errors import InputError
from cavchar.units import format_quantity, parse_quantity

EXAMPLES = {
    "jumps": """examples:
  cavchar simulate jumps --lifetime 25ms --n-thermal 0.08 --duration 60s -o sim
  cavchar simulate jumps --lifetime 3ms --n-thermal 0.3 --duration 2s --segments 4 --gap 0.5s \\
      --seed 7 -o sim --file jumps.parquet
""",
    "sampled": """examples:
  cavchar simulate sampled --lifetime 25ms --n-thermal 0.08 --duration 20s --interval 2ms -o sim
  cavchar simulate sampled --lifetime 25ms --n-thermal 0.08 --duration 20s --interval 2ms \\
      --spacing poisson -o sim --file sampled.csv.gz
""",
    "probes": """examples:
  cavchar simulate probes --lifetime 25ms --n-thermal 0.08 --duration 5s --interval 100us \\
      --visibility 0.9 --phase-per-photon 180deg --readout-error-0 0.02 \\
      --readout-error-1 0.04 --truth -o sim
  cavchar simulate probes --lifetime 25ms --n-thermal 0.08 --duration 5s --interval 100us \\
      --phase-per-photon 90deg --setting 0 --setting 90deg --loss 0.01 -o sim
  cavchar simulate probes --lifetime 25ms --n-thermal 0.08 --duration 5s --interval 100us \\
      --response-table response.csv -o sim
  cavchar simulate probes --path sim/jumps.csv --interval 100us --visibility 0.8 -o sim
""",
    "ringdown": """examples:
  cavchar simulate ringdown --signal power --lifetime 4ms --duration 30ms --points 3000 \\
      --amplitude 1nW --floor 2pW --noise 5pW -o sim
  cavchar simulate ringdown --signal db --lifetime 4ms --duration 30ms --noise 0.3 \\
      --floor 1e-4 -o sim
  cavchar simulate ringdown --signal iq --lifetime 4ms --duration 30ms --detuning 150Hz \\
      --noise 0.02 --traces 3 -o sim
  cavchar simulate ringdown --signal populations --lifetime 4ms --n-thermal 0.05 --initial 2 \\
      --duration 20ms --points 40 --shots 500 -o sim
""",
}

HELP = {
    "jumps": "exact jump record (change points, Gillespie algorithm)",
    "sampled": "photon number read at probe times",
    "probes": "raw 0/1 probe outcomes from a probe response",
    "ringdown": "ring-down traces (power, dB, amplitude, IQ, mean photon number, populations)",
}


DESCRIPTION = """
Simulate a thermally damped cavity mode (up rate kappa n_th (n+1), down rate kappa (1+n_th) n,
kappa = 1/lifetime) and write the data in the formats 'cavchar fit' reads (see
docs/data-formats.md).  Same seed, same file.
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``simulate`` and one sub-command per record shape to the sub-commands."""
    parser = add_command(
        subparsers, "simulate",
        "write invented, seeded data files (jumps, sampled, probes, ringdown)",
        DESCRIPTION, "Run 'cavchar simulate SHAPE --help' for the options of each shape.")
    shapes = parser.add_subparsers(dest="shape", metavar="SHAPE")
    for shape in ("jumps", "sampled", "probes", "ringdown"):
        sub = add_command(
            shapes, shape, HELP[shape],
            f"Simulate: {HELP[shape]}.",
            EXAMPLES[shape])
        _common(sub, shape)
        if shape != "ringdown":
            _record_options(sub, shape)
        if shape == "probes":
            _probe_options(sub)
        if shape == "ringdown":
            _ringdown_options(sub)
        sub.set_defaults(func=HANDLERS[shape])
    parser.set_defaults(func=lambda args: (parser.print_help(), 2)[1])


def _common(sub: argparse.ArgumentParser, shape: str) -> None:
    simulated = shape in ("jumps", "ringdown")  # sampled, probes may take --path instead
    sub.add_argument("--lifetime", type=quantity("time", positive=True), required=simulated,
                     help="energy lifetime T_c = 1/kappa, e.g. 25ms")
    sub.add_argument("--n-thermal", type=quantity("dimensionless"),
                     required=shape == "jumps", default=0.0 if shape == "ringdown" else None,
                     help="mean thermal photon number n_th, e.g. 0.08")
    sub.add_argument("--duration", type=quantity("time", positive=True), required=simulated,
                     help="length of each segment (trace), e.g. 60s")
    sub.add_argument("--freq", type=quantity("frequency", positive=True), default=None,
                     help="mode frequency, only written to the file's metadata, e.g. 6.8GHz")
    sub.add_argument("--seed", type=whole(0, 2**63 - 1), default=1,
                     help="random seed (written to the file)")
    sub.add_argument("--file", default=f"{shape}.csv",
                     help="output file name inside --out; its extension picks the format "
                     "(.csv, .tsv, .csv.gz, .tsv.gz, .npz, .parquet)")
    add_output_options(sub)


def _record_options(sub: argparse.ArgumentParser, shape: str) -> None:
    sub.add_argument("--segments", type=whole(1, 1_000_000), default=1,
                     help="number of independent segments")
    sub.add_argument("--gap", type=quantity("time"), default=0.0,
                     help="time between segments, e.g. 1s")
    sub.add_argument("--initial", type=whole(0, 1000), default=None,
                     help="initial photon number of each segment (default: drawn from the "
                     "stationary Bose-Einstein law)")
    if shape != "jumps":
        sub.add_argument("--interval", type=quantity("time", positive=True), required=True,
                         help="probe spacing (mean spacing for --spacing poisson), e.g. 2ms")
        sub.add_argument("--spacing", choices=("regular", "poisson"), default="regular",
                         help="regular probe times or a Poisson process")
        sub.add_argument("--path", default=None, metavar="FILE",
                         help="read the hidden photon number from this exact jump record "
                         "instead of simulating it (probes cover each of its segments; "
                         "--lifetime, --n-thermal, --duration, --segments are then unused)")
        sub.add_argument("--path-end-time", type=quantity("time", minimum=None), default=None,
                         help="end time of the --path record when the file does not give it")


def _probe_options(sub: argparse.ArgumentParser) -> None:
    group = sub.add_argument_group("probe response (Ramsey fringe unless --response-table)")
    add_response_options(group)
    group.add_argument("--setting", type=quantity("phase", minimum=None), action="append",
                       default=None,
                       help="probe phase setting (repeat to interleave settings cyclically)")
    group.add_argument("--loss", type=real(0.0, 0.99), default=0.0,
                       help="probability that a probe is lost (empty outcome)")
    group.add_argument("--truth", action="store_true",
                       help="also write the hidden photon number as a sampled record "
                       "(<file stem>-truth<extension>)")


def _ringdown_options(sub: argparse.ArgumentParser) -> None:
    sub.add_argument("--signal", required=True, type=lambda s: s.strip().lower().replace("_", "-"),
                     choices=("power", "db", "amplitude", "iq", "mean-n", "populations"),
                     help="signal kind")
    sub.add_argument("--points", type=whole(1, 20_000_000), default=1000,
                     help="number of points per trace, evenly spaced over --duration")
    sub.add_argument("--start", type=quantity("time", minimum=None), default=0.0,
                     help="time of the first point")
    sub.add_argument("--t0", type=quantity("time", minimum=None), default=0.0,
                     help="start of the decay")
    sub.add_argument("--amplitude", default="1",
                     help="initial power A (power, db; e.g. 1nW) or field amplitude "
                     "(amplitude, iq)")
    sub.add_argument("--floor", default="0", help="power floor (power, db), e.g. 2pW")
    sub.add_argument("--noise", default="0",
                     help="noise standard deviation in the value's unit (dB for db; per "
                     "quadrature for amplitude and iq)")
    sub.add_argument("--detuning", type=quantity("frequency", minimum=None), default=0.0,
                     help="IQ detuning, e.g. 150Hz")
    sub.add_argument("--phase", type=quantity("phase", minimum=None), default=0.0,
                     help="field phase at t0 (amplitude, iq)")
    sub.add_argument("--offset-real", type=real(), default=0.0, help="IQ offset, real part")
    sub.add_argument("--offset-imag", type=real(), default=0.0, help="IQ offset, imaginary part")
    sub.add_argument("--initial", type=whole(0, 400), default=1,
                     help="initial Fock number (mean-n, populations)")
    sub.add_argument("--shots", type=whole(1, 10**9), default=1000,
                     help="shots per delay (populations)")
    sub.add_argument("--levels", type=whole(2, 400), default=None,
                     help="photon-number columns (populations; default: tail < 1e-12)")
    sub.add_argument("--traces", type=whole(1, 100_000), default=1,
                     help="number of independent traces")
    sub.add_argument("--known-sigma", action="store_true",
                     help="write the noise level as a sigma column (always for mean-n)")


def _outputs(args: argparse.Namespace, truth: bool = False) -> tuple[Path, Path | None]:
    from cavchar.io.atomic import check_can_write

    folder = Path(args.out or ".")
    target = check_can_write(folder / args.file, args.force)
    other = None
    if truth:
        name = args.file
        stem, ext = name.split(".", 1) if "." in name else (name, "csv")
        other = check_can_write(folder / f"{stem}-truth.{ext}", args.force)
    return target, other


def _meta(args: argparse.Namespace) -> dict[str, str]:
    return {} if args.freq is None else {"frequency": format_quantity(args.freq, "frequency", 12)}


def _summary(args: argparse.Namespace, path=None) -> str:
    if path is not None:
        return f"photon numbers read from {args.path}, seed {args.seed}"
    text = f"lifetime {format_quantity(args.lifetime, 'time', 4)}"
    if args.n_thermal:
        text += f", n_th {args.n_thermal:.4g}"
    return text + f", seed {args.seed}"


def _times(args: argparse.Namespace, path=None):
    """Probe times (and segment ids): simulated segments, or the segments of ``path``."""
    import numpy as np

    from cavchar.simulate import probe_times

    rng = np.random.default_rng([args.seed, 1])
    if path is None:
        for name in ("lifetime", "n_thermal", "duration"):
            if getattr(args, name) is None:
                raise InputError(f"--{name.replace('_', '-')} is needed (or --path FILE)",
                                 hint=f"see cavchar simulate {args.shape} --help")
        return probe_times(args.duration, args.interval, segments=args.segments, gap=args.gap,
                           spacing=args.spacing, seed=rng)
    times, ids = [], []
    for part in path.segments():
        t, _ = probe_times(part.end_time - part.time[0], args.interval, start=part.time[0],
                           spacing=args.spacing, seed=rng)
        times.append(t[t < part.end_time])
        ids.append(np.full(times[-1].size, part.id))
    return np.concatenate(times), np.concatenate(ids)


def _path(args: argparse.Namespace):
    from cavchar.io.readers import read_jump_record

    return None if args.path is None else read_jump_record(args.path, args.path_end_time)


def handle_jumps(args: argparse.Namespace) -> int:
    """Run ``cavchar simulate jumps``: write an invented jump record (exact change points)."""
    from cavchar.io.writers import write_jump_record
    from cavchar.simulate import simulate_jump_record

    target, _ = _outputs(args)
    record = simulate_jump_record(args.lifetime, args.n_thermal, args.duration,
                                  segments=args.segments, gap=args.gap, initial=args.initial,
                                  seed=args.seed, metadata=_meta(args))
    write_jump_record(record, target, force=args.force)
    print(f"wrote {target}: {record.n_segments} segment(s), {record.n_jumps:,} jumps over "
          f"{format_quantity(record.observed_time, 'time', 4)} ({_summary(args)})")
    return 0


def handle_sampled(args: argparse.Namespace) -> int:
    """Run ``cavchar simulate sampled``.

    Write an invented photon-number record read at fixed intervals."""
    from cavchar.io.writers import write_sampled_record
    from cavchar.records import SampledRecord
    from cavchar.simulate import photons_at, simulate_sampled_record

    target, _ = _outputs(args)
    path = _path(args)
    times, segment = _times(args, path)
    if path is None:
        record = simulate_sampled_record(args.lifetime, args.n_thermal, times, segment=segment,
                                         initial=args.initial, seed=args.seed,
                                         metadata=_meta(args))
    else:
        record = SampledRecord(times, photons_at(path, times, segment), segment=segment,
                               metadata={**path.metadata, **_meta(args),
                                         "hidden_path": str(args.path)})
    write_sampled_record(record, target, force=args.force)
    print(f"wrote {target}: {len(record):,} samples in {record.n_segments} segment(s) "
          f"({_summary(args, path)})")
    return 0


def handle_probes(args: argparse.Namespace) -> int:
    """Run ``cavchar simulate probes``.

    Write an invented raw QND probe record and its response table."""
    from cavchar.io.writers import write_probe_record, write_sampled_record
    from cavchar.simulate import probes_on_path, simulate_probe_record

    target, truth_path = _outputs(args, truth=args.truth)
    response = response_from_args(args)
    path = _path(args)
    times, segment = _times(args, path)
    options = dict(settings=args.setting, segment=segment, loss=args.loss, seed=args.seed,
                   metadata=_meta(args))
    if path is None:
        record, truth = simulate_probe_record(args.lifetime, args.n_thermal, times, response,
                                              initial=args.initial, **options)
    else:
        record, truth = probes_on_path(path, times, response, **options)
    write_probe_record(record, target, force=args.force)
    print(f"wrote {target}: {len(record):,} probes ({record.n_lost:,} lost) in "
          f"{record.n_segments} segment(s) ({_summary(args, path)})")
    if truth_path is not None:
        write_sampled_record(truth, truth_path, force=args.force)
        print(f"wrote {truth_path}: the hidden photon number at each probe")
    return 0


def _number(text: str, dimension: str, option: str, minimum: float | None = 0.0) -> float:
    """A value in the trace's units; a bare number is allowed (invented data may be in
    arbitrary units), but it must be finite and >= ``minimum``."""
    text = text.strip()
    if dimension == "db" and text.lower().endswith("db"):
        text, dimension = text[:-2], "dimensionless"
    return parse_quantity(text, "dimensionless" if dimension == "db" else dimension,
                          minimum=minimum, name=option)


def handle_ringdown(args: argparse.Namespace) -> int:
    """Run ``cavchar simulate ringdown``: write invented ring-down traces of the chosen signal."""
    import numpy as np

    from cavchar.io.writers import write_ringdown
    from cavchar.simulate import simulate_ringdown

    signal = args.signal.replace("-", "_")
    target, _ = _outputs(args)
    unit = "power" if signal in ("power", "db") else "dimensionless"
    noise_unit = {"power": "power", "db": "db"}.get(signal, "dimensionless")
    if args.points < 1 or args.duration <= 0:
        raise InputError("--points must be >= 1 and --duration > 0")
    times = np.linspace(args.start, args.start + args.duration, args.points)
    trace = simulate_ringdown(
        signal, times, args.lifetime,
        amplitude=_number(args.amplitude, unit, "--amplitude"),
        floor=_number(args.floor, unit, "--floor"),
        t0=args.t0, noise=_number(args.noise, noise_unit, "--noise"), detuning=args.detuning,
        phase=args.phase, offset=complex(args.offset_real, args.offset_imag),
        n_th=args.n_thermal, initial=args.initial, shots=args.shots, n_levels=args.levels,
        traces=args.traces, known_sigma=True if args.known_sigma else None, seed=args.seed,
        metadata=_meta(args))
    write_ringdown(trace, target, force=args.force)
    print(f"wrote {target}: {trace.n_traces} {signal} trace(s) of {args.points:,} points "
          f"({_summary(args)})")
    return 0


HANDLERS = {"jumps": handle_jumps, "sampled": handle_sampled, "probes": handle_probes,
            "ringdown": handle_ringdown}
