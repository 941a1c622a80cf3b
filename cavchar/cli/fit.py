"""``cavchar fit <kind>``: the group that holds the fit sub-commands.

Each fit kind lives in its own module (``fit_jumps``, ``fit_probes``,
``fit_ringdown``) exposing ``register_fit(fit_subparsers)``.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util

from cavchar.cli.common import HelpFormatter

FIT_MODULES = ("fit_jumps", "fit_probes", "fit_ringdown")


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "fit",
        help="fit a record: lifetime, thermal photon number, effective temperature",
        description="Fit a jump record, a raw probe record or a ring-down trace by MCMC.",
        formatter_class=HelpFormatter,
    )
    kinds = parser.add_subparsers(dest="fit_kind", metavar="KIND")
    for name in FIT_MODULES:
        importlib.import_module(f"cavchar.cli.{name}").register_fit(kinds)
    parser.set_defaults(func=lambda args: (parser.print_help(), 2)[1])
