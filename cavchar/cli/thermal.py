"""``cavchar thermal``: Planck occupation and effective temperature of a mode."""

from __future__ import annotations

import argparse

from cavchar.cli.common import add_command, quantity
from cavchar.errors import InputError
from cavchar.units import format_quantity

EXAMPLES = """examples:
  cavchar thermal --freq 6.8GHz --temp 40mK          # thermal photon number at 40 mK
  cavchar thermal --freq 6.8GHz --n-thermal 0.01     # effective temperature of n_th = 0.01
  cavchar thermal --freq 6.8GHz --temp 20mK --temp 60mK --temp 0.1K
"""


DESCRIPTION = """
Mean thermal photon number n = 1/(exp(h nu / k_B T) - 1) of a mode at frequency nu, and the
effective temperature T_eff = h nu / (k_B ln(1 + 1/n)) of a measured n_th.  Constants are exact
(2019 SI).
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``thermal`` (Planck occupation and effective temperature) to the sub-commands."""
    parser = add_command(
        subparsers, "thermal",
        "Planck occupation of a mode and its inverse, the effective temperature",
        DESCRIPTION, EXAMPLES)
    parser.add_argument("--freq", type=quantity("frequency", positive=True), required=True,
                        help="mode frequency, e.g. 6.8GHz")
    parser.add_argument("--temp", type=quantity("temperature"), action="append", default=None,
                        help="bath temperature, e.g. 40mK (repeat for several)")
    parser.add_argument("--n-thermal", type=quantity("dimensionless"), action="append",
                        default=None, help="measured thermal photon number (repeat for several)")
    parser.set_defaults(func=handle)


def handle(args: argparse.Namespace) -> int:
    """Run ``cavchar thermal``.

    Print n_th for each temperature and T_eff for each n_th; return 0."""
    from cavchar.thermal import H_OVER_KB, effective_temperature, planck_occupation

    if not args.temp and not args.n_thermal:
        raise InputError("give --temp and/or --n-thermal", hint="see cavchar thermal --help")
    nu = args.freq
    if nu <= 0:
        raise InputError("--freq must be positive")
    print(f"mode frequency {format_quantity(nu, 'frequency', 6)}; "
          f"h nu / k_B = {format_quantity(H_OVER_KB * nu, 'temperature', 6)}")
    for temp in args.temp or []:
        if temp < 0:
            raise InputError(f"--temp {temp} K is negative")
        n = float(planck_occupation(nu, temp))
        print(f"  T = {format_quantity(temp, 'temperature', 4):>10}   n_th = {n:.6g}")
    for n in args.n_thermal or []:
        if n < 0:
            raise InputError(f"--n-thermal {n} is negative")
        t_eff = float(effective_temperature(nu, n))
        print(f"  n_th = {n:<10.6g}   T_eff = {format_quantity(t_eff, 'temperature', 6)}")
    return 0
