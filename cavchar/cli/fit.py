"""``cavchar fit <kind>``: the group that holds the fit sub-commands.

Each fit kind lives in its own module (``fit_jumps``, ``fit_probes``,
``fit_ringdown``) exposing ``register_fit(fit_subparsers)``.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util

from cavchar.cli.common import add_command

FIT_MODULES = ("fit_jumps", "fit_probes", "fit_ringdown")



def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``fit`` and one sub-command per record kind (``FIT_MODULES``) to the sub-commands."""
    parser = add_command(
        subparsers, "fit", "fit a record: lifetime, thermal photon number, effective temperature",
        "Fit a jump record, a raw probe record or a ring-down trace by MCMC.")
    kinds = parser.add_subparsers(dest="fit_kind", metavar="KIND")
    for name in FIT_MODULES:
        importlib.import_module(f"cavchar.cli.{name}").register_fit(kinds)
    parser.set_defaults(func=lambda args: (parser.print_help(), 2)[1])
