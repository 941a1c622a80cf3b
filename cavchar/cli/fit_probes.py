"""``cavchar fit probes``: lifetime, thermal photon number and trajectory of a probe record."""

from __future__ import annotations

import argparse
import math

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
    rate_priors_from_args,
    whole,
)

EXAMPLES = """examples:
  cavchar fit probes probes.csv --phase-per-photon 180deg --visibility 0.9 \\
      --readout-error-0 0.02 --readout-error-1 0.04 --freq 6.8GHz --stage-temp 20mK -o fit_out
  cavchar fit probes probes.csv --phase-per-photon 180deg -o fit_out
  cavchar fit probes probes.csv --response-table response.csv -o fit_out --exact

Probe records: columns time (s), outcome (0/1; an empty cell = lost probe), optional
setting (rad) and segment.  Each fringe parameter is a number (stated, calibrated) or a
prior such as uniform:0.5,1 (fitted).  A visibility or readout error you do not state is
fitted with its default prior (printed before the fit); a perfect probe is never assumed:
state --visibility 1 --readout-error-0 0 --readout-error-1 0 for one.  Every fit runs a
posterior predictive check of the outcomes (run lengths, frequencies, autocorrelation).
Besides result.json, draws and figures the output folder gets trajectory.csv (posterior
mean and most likely photon number per probe) and viterbi_jumps.csv (the most likely path
as an exact jump record, for `cavchar fit jumps`).  See docs/probe-records.md.
"""

#: largest Fock number accepted by --initial-photons (the truncation grows with it)
MAX_INITIAL_PHOTONS = 100

_FRINGE_OPTIONS = (
    ("visibility", "--visibility", "dimensionless",
     "fringe visibility V in [0, 1], a number or a prior, e.g. 0.9 or uniform:0.5,1; "
     "unset: fitted, prior uniform:0,1"),
    ("phase_per_photon", "--phase-per-photon", "phase",
     "phase per photon phi0 (rad or deg), e.g. 180deg (parity probe) or normal:3.1,0.05; "
     "unset: pi (parity probe), not fitted"),
    ("phase_offset", "--phase-offset", "phase",
     "fringe phase offset phi_r (rad or deg), a number or a prior; unset: 0, not fitted"),
    ("readout_error_0", "--readout-error-0", "dimensionless",
     "probability e0 of reading 1 when the ideal outcome is 0; unset: fitted, prior "
     "beta:1,5,0,0.5"),
    ("readout_error_1", "--readout-error-1", "dimensionless",
     "probability e1 of reading 0 when the ideal outcome is 1; unset: fitted, prior "
     "beta:1,5,0,0.5"),
)


DESCRIPTION = """
Posterior of the energy lifetime T_c = 1/kappa, the thermal photon number n_th and any fitted
response parameters from the raw outcome of every probe, through a hidden Markov model of the
photon number; with the mode frequency also Q, linewidth and effective temperature, with the
stage temperature the Planck check.  Also reconstructs the photon-number trajectory.
"""


def register_fit(kinds: argparse._SubParsersAction) -> None:
    """Add ``probes`` to the ``cavchar fit`` group."""
    parser = add_command(
        kinds, "probes",
        "raw QND probe records (0/1 outcome per probe)", DESCRIPTION, EXAMPLES)
    parser.add_argument("record", help="probe-record file (CSV/TSV, .gz, NPZ, Parquet)")
    parser.add_argument("--response", choices=("fringe", "table"), default=None,
                        help="probe response model; unset: table when --response-table is "
                        "given, else fringe")
    parser.add_argument("--response-table", default=None, metavar="FILE",
                        help="calibrated P(1 | n[, setting]): columns photons, p_one, setting")
    for _, flag, _, text in _FRINGE_OPTIONS:
        parser.add_argument(flag, default=None, metavar="VALUE|PRIOR", help=text)
    add_prior_option(parser, "lifetime, n_thermal",
                     "lifetime=loguniform:1us,1000s, n_thermal=loguniform:1e-6,20")
    mode = parser.add_mutually_exclusive_group()
    mode.add_argument("--exact", action="store_const", dest="mode", const="exact",
                      help="forward algorithm over every probe")
    mode.add_argument("--coarse", action="store_const", dest="mode", const="coarse",
                      help="blocks of probes (bias measured and reported); no mode flag: "
                      "coarse only for records of more than 300,000 probes that the exact "
                      "route cannot fit in time")
    mode.add_argument("--quantized", action="store_const", dest="mode", const="quantized",
                      help="irregular probe times: intervals mapped to 128 representatives "
                      "(bias measured and reported, refined or exact when not below 0.1 "
                      "posterior sd); no mode flag: used for irregular probe times")
    parser.set_defaults(mode="auto")
    parser.add_argument("--block-probes", type=whole(1), default=None, metavar="B",
                        help="probes per block in the coarse mode; unset: 1%% of the "
                        "typical dwell time")
    parser.add_argument("--initial-photons", type=whole(0, MAX_INITIAL_PHOTONS), default=None,
                        metavar="N",
                        help="segments start in Fock state N; unset: thermal equilibrium")
    add_fit_options(parser)
    parser.set_defaults(func=handle)


def _fringe_value(text: str, dimension: str, name: str):
    """A number (fixed) or a prior (fitted) for a fringe parameter."""
    from cavchar.errors import InputError
    from cavchar.priors import parse_prior
    from cavchar.units import parse_quantity

    text = str(text).strip()
    if text.lower() in ("pi", "+pi"):
        return math.pi
    if ":" in text:
        return for_option(f"--{name.replace('_', '-')}", parse_prior, text, dimension)
    try:
        return parse_quantity(text, dimension)
    except InputError as exc:
        raise InputError(f"--{name.replace('_', '-')}: {exc.message}",
                         hint="give a number (fixed) or a prior such as uniform:0.5,1") from None


def build_response(args: argparse.Namespace):
    """The response model from the options."""
    from cavchar.errors import InputError
    from cavchar.models.probes.response import FringeResponse, TableResponse

    kind = args.response or ("table" if args.response_table else "fringe")
    if kind == "table":
        if not args.response_table:
            raise InputError("--response table needs --response-table FILE")
        return TableResponse.from_file(args.response_table)
    if args.response_table:
        raise InputError("--response-table cannot be combined with --response fringe")
    values = {name: _fringe_value(getattr(args, name), dim, name)
              for name, _, dim, _ in _FRINGE_OPTIONS if getattr(args, name) is not None}
    try:
        return FringeResponse(**values)
    except InputError as exc:
        for name, flag, _, _ in _FRINGE_OPTIONS:
            if exc.message.startswith(name + " ") or exc.message.startswith(
                    name.replace("_", " ") + " "):
                raise InputError(f"{flag}: {exc.message}", hint=exc.hint) from None
        raise


def response_lines(description: dict) -> list[str]:
    """The probe response of a fit in words: which parameters were stated, which fitted
    (with their priors) and which left at a default value (``settings["fit"]["response"]``)."""
    from cavchar.models.probes.response import ROLE_TEXT
    from cavchar.report.text import prior_text

    if description.get("kind") != "fringe":
        return [f"probe response: calibrated table {description.get('source') or ''}".rstrip()
                + " (stated; nothing fitted)"]
    flags = {name: flag for name, flag, _, _ in _FRINGE_OPTIONS}
    roles = description.get("roles") or {}
    groups: dict[str, list[str]] = {}
    for name, flag in flags.items():
        value = description[name]
        role = roles.get(name, "stated prior" if isinstance(value, dict) else "stated")
        if isinstance(value, dict):
            dimension = "phase" if "phase" in name else "dimensionless"
            text = f"{flag[2:]} ~ {prior_text(value, dimension)}"
        else:
            text = f"{flag[2:]} = {value:.6g}" + (" rad" if "phase" in name else "")
        groups.setdefault(role, []).append(text)
    lines = ["probe response (Ramsey fringe):"]
    for role in ("stated", "stated prior", "default prior", "default", "absorbed"):
        if groups.get(role):
            lines.append(f"  {ROLE_TEXT[role]}: " + "; ".join(groups[role]))
    return lines


def check_lines(check: dict | None) -> list[str]:
    """The posterior predictive check of a probe fit in words."""
    if not check:
        return []
    if "skipped" in check:
        return [f"model check (posterior predictive) skipped: {check['skipped']}"]
    head = (f"model check (posterior predictive, {check['replicates']} replicated records, "
            f"{len(check['statistics'])} statistics, false-alarm rate "
            f"{check['family_alpha']:g}): ")
    if not check["misfit"]:
        worst = min(check["statistics"], key=lambda row: row["normal_tail_p_value"])
        return [head + f"no misfit (most extreme: {worst['statistic']}, z = "
                f"{worst['z'] if worst['z'] is not None else float('nan'):+.1f})"]
    lines = [head + "MISFIT - the record does not look like the fitted model"]
    lines += [f"  {flag}" for flag in check["flags"]]
    lines.append("  check the probe response (visibility, readout errors, phases): state only "
                 "what is calibrated and let the fit find the rest")
    return lines


def handle(args: argparse.Namespace) -> int:
    """Run ``cavchar fit probes``.

    Read the records, fit, print and write the result; return the exit code."""
    check_input_files([args.record])
    from pathlib import Path

    from cavchar.errors import InputError
    from cavchar.fits.probe_trajectory import viterbi_jump_record, write_trajectory
    from cavchar.fits.probes import ProbePriors, fit_probes_with_trajectory
    from cavchar.io.atomic import check_can_write
    from cavchar.io.writers import write_jump_record
    from cavchar.models.probes.likelihood import route_text

    check_outputs(args)
    if args.out:
        for name in ("trajectory.csv", "viterbi_jumps.csv"):
            check_can_write(Path(args.out) / name, args.force)
    response = build_response(args).for_fit()
    for line in response_lines(response.describe()):
        print(line)
    priors = rate_priors_from_args(args, ProbePriors)
    if args.block_probes is not None and args.block_probes < 1:
        raise InputError("--block-probes must be at least 1")
    result, trajectory = fit_probes_with_trajectory(
        laid_out(args.record, args),
        response=response,
        priors=priors,
        mode=args.mode,
        block_probes=args.block_probes,
        initial="stationary" if args.initial_photons is None else args.initial_photons,
        **fit_options_from_args(args),
    )
    route = result.settings["fit"].get("intervals")
    if route:
        print(route_text(route))
    if result.checks.get("quantize_fallback"):
        print(f"quantized route not used: {result.checks['quantize_fallback']}")
    bias = result.checks.get("coarse_bias")
    if bias:
        print(f"coarse mode: blocks of {bias['block_probes']} probes; bias bound "
              f"{bias['bias_bound_sd']:.3f} posterior sd (checked on {bias['n_checked']} draws)")
    for line in check_lines(result.checks.get("posterior_predictive")):
        print(line)
    code = finish_fit_command(result, args)
    if args.out:
        out = Path(args.out)
        write_trajectory(trajectory, out / "trajectory.csv", force=args.force)
        write_jump_record(viterbi_jump_record(trajectory), out / "viterbi_jumps.csv",
                          force=args.force)
        print(f"wrote trajectory.csv and viterbi_jumps.csv to {args.out}")
    return code
