"""``cavchar fit jumps``: lifetime and thermal photon number from a photon-number jump record."""

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
    laid_out,
    quantity,
    rate_priors_from_args,
)

EXAMPLES = """examples:
  cavchar fit jumps record.csv --freq 6.8GHz --stage-temp 20mK -o fit_out
  cavchar fit jumps samples.csv --sampled --freq 6.8GHz -o fit_out --force
  cavchar fit jumps record.csv --end-time 2.5s --prior lifetime=loguniform:10us,1s

The record formats are described in docs/data-formats.md.  An exact record holds
change points (time, photons) and its end time; --sampled reads photon numbers at
probe times, where several jumps may happen between samples.
"""


DESCRIPTION = """
Posterior of the energy lifetime T_c = 1/kappa and the thermal photon number n_th of a damped
mode from its photon-number record, by MCMC; with the mode frequency also Q, linewidth and
effective temperature, and with the stage temperature the Planck check.
"""


def register_fit(kinds: argparse._SubParsersAction) -> None:
    """Add ``jumps`` to the ``cavchar fit`` group."""
    parser = add_command(
        kinds, "jumps",
        "exact or sampled photon-number jump records", DESCRIPTION, EXAMPLES)
    parser.add_argument("record", help="record file (CSV/TSV, .gz, NPZ, Parquet)")
    parser.add_argument("--sampled", action="store_true",
                        help="photon numbers at probe times (not exact change points)")
    parser.add_argument("--end-time", type=quantity("time", minimum=None), default=None,
                        help="end of an exact record when the file does not give it, e.g. 2.5s")
    add_prior_option(parser, "lifetime, n_thermal",
                     "lifetime=loguniform:1us,1000s, n_thermal=loguniform:1e-6,100")
    parser.add_argument("--stationary-start", action="store_true",
                        help="score each segment's first photon number with the thermal "
                        "(Bose-Einstein) law; only for records starting in equilibrium")
    add_fit_options(parser, exact_rows=True)
    parser.set_defaults(func=handle)


def handle(args: argparse.Namespace) -> int:
    """Run ``cavchar fit jumps``.

    Read the records, fit, print and write the result; return the exit code."""
    check_input_files([args.record])
    from cavchar.fits.jumps import JumpPriors, fit_jumps

    check_outputs(args)
    priors = rate_priors_from_args(args, JumpPriors)
    result = fit_jumps(
        laid_out(args.record, args),
        sampled=args.sampled,
        end_time=args.end_time,
        priors=priors,
        stationary_start=args.stationary_start,
        **fit_options_from_args(args),
    )
    return finish_fit_command(result, args)
