"""``cavchar fit ringdown``: energy lifetime (and n_th) from ring-down traces."""

from __future__ import annotations

import argparse

from cavchar.cli.common import (
    add_command,
    add_fit_options,
    add_prior_option,
    check_input_files,
    check_outputs,
    finish_fit_command,
    fit_options_from_args,
    for_option,
    laid_out,
    priors_from_args,
    quantity,
    real,
)

#: largest initial mean photon number accepted by --n0 (a cavity state, not a drive)
MAX_N0 = 1e6

SIGNAL_CHOICES = ("power", "power2", "db", "amplitude", "iq", "mean-n", "populations")

EXAMPLES = """examples:
  cavchar fit ringdown decay.csv --signal power --freq 6.8GHz -o fit_out
  cavchar fit ringdown zero_span.csv --signal db --start-time 20us --time-unit ms
  cavchar fit ringdown run1.csv run2.csv --signal power     (shared lifetime)
  cavchar fit ringdown iq.npz --signal iq --freq 6.8GHz --prior lifetime=loguniform:10us,1s
  cavchar fit ringdown counts.csv --signal populations --initial 2 --freq 6.8GHz \\
      --stage-temp 20mK -o fit_out

Signals: power (linear, A exp(-t/T_c) + floor), power2 (two exponentials), db
(10 log10 of power, Gaussian noise in dB), amplitude (field magnitude, decays in
2 T_c, Rice noise), iq (complex samples with detuning), mean-n (mean photon
number relaxing to n_th), populations (photon-number counts after a Fock state).
T_c is always the energy lifetime; the amplitude decay time 2 T_c is printed
separately.  File formats: docs/data-formats.md; the fit: docs/ringdown.md.
"""


DESCRIPTION = """
Posterior of the energy lifetime T_c = 1/kappa from ring-down traces by MCMC (amplitudes, floors
and unknown noise marginalized where exact), with Q, linewidth and the amplitude decay time 2
T_c; mean-n and populations also give n_th, the effective temperature and, with --stage-temp,
the Planck check.
"""


def register_fit(kinds: argparse._SubParsersAction) -> None:
    """Add ``ringdown`` to the ``cavchar fit`` group."""
    parser = add_command(
        kinds, "ringdown",
        "ring-down traces: power, dB, magnitude, IQ, mean photon number, populations",
        DESCRIPTION, EXAMPLES)
    parser.add_argument("traces", nargs="+",
                        help="trace file(s) (CSV/TSV, .gz, NPZ, Parquet); several files share "
                        "T_c")
    parser.add_argument("--signal", choices=SIGNAL_CHOICES, default=None,
                        help="signal kind (default: from the column names)")
    parser.add_argument("--start-time", type=quantity("time", minimum=None), default=None,
                        help="drop samples before this time (switch-off transient), e.g. 20us; "
                        "also the reference time of the amplitudes")
    parser.add_argument("--time-unit", default="s",
                        help="unit of the time column, e.g. ms or us")
    parser.add_argument("--initial", default=None, metavar="STATE",
                        help="populations: prepared Fock number (e.g. 2) or distribution "
                        "(e.g. 0,0.3,0.7); default: most frequent number at the first delay")
    parser.add_argument("--n0", type=real(minimum=0.0, maximum=MAX_N0), default=None,
                        help="mean-n: fix the initial mean photon number instead of fitting it")
    parser.add_argument("--allow-negative", action="store_true",
                        help="accept negative linear power (background-subtracted traces)")
    parser.add_argument("--no-compare", action="store_true",
                        help="skip the comparison of a power trace with two exponentials")
    add_prior_option(parser, "lifetime, n_thermal, lifetime_fast, detuning, ... as the "
                     "signal's model has them", "wide log-uniform ranges (uniform for signed "
                     "or bounded parameters)")
    add_fit_options(parser, trace=True)
    parser.set_defaults(func=handle)


def _initial(text: str | None):
    from cavchar.errors import InputError

    if text is None:
        return None
    import math

    from cavchar.dynamics import MAX_LEVELS

    hint = "a Fock number such as 2 or probabilities such as 0,0.3,0.7"
    try:
        parts = [float(x) for x in text.split(",")]
    except ValueError:
        raise InputError(f"cannot read --initial {text[:60]!r}", hint=hint) from None
    if not all(math.isfinite(x) and x >= 0 for x in parts) or len(parts) > MAX_LEVELS:
        raise InputError(f"--initial {text[:60]!r} is out of range: numbers must be finite "
                         f"and >= 0, at most {MAX_LEVELS} of them", hint=hint)
    if len(parts) == 1 and parts[0] > MAX_LEVELS:
        raise InputError(f"--initial {text[:60]!r} is out of range: a Fock number must be at "
                         f"most {MAX_LEVELS}", hint=hint)
    if len(parts) == 1:
        return int(parts[0]) if parts[0] == int(parts[0]) else parts
    return parts


def handle(args: argparse.Namespace) -> int:
    """Run ``cavchar fit ringdown``.

    Read the traces, fit, print and write the result; return the exit code."""
    check_input_files(args.traces)
    from cavchar.fits.ringdown import fit_ringdown
    from cavchar.fits.ringdown_data import time_factor

    check_outputs(args)
    for_option("--time-unit", time_factor, args.time_unit)
    options = fit_options_from_args(args, "ringdown")
    result = fit_ringdown(
        [laid_out(path, args) for path in args.traces],
        signal=args.signal,
        start_time=args.start_time,
        time_unit=args.time_unit,
        priors=priors_from_args(args),
        initial=_initial(args.initial),
        n0=args.n0,
        allow_negative_power=args.allow_negative,
        compare=not args.no_compare,
        **options,
    )
    code = finish_fit_command(result, args)
    comparison = result.checks.get("two_exponentials")
    if comparison:
        print("one or two exponentials: " + comparison["statement"])
    residuals = result.checks.get("residuals", {})
    for flag in residuals.get("flags", []):
        print("residual check: " + flag)
    return code
