"""Option helpers shared by the sub-commands of the command line."""

from __future__ import annotations

import argparse
from collections.abc import Callable

from cavchar.units import parse_quantity

__all__ = ["quantity", "add_output_options", "add_sampler_options", "HelpFormatter"]


class HelpFormatter(argparse.ArgumentDefaultsHelpFormatter, argparse.RawDescriptionHelpFormatter):
    """Shows defaults (so help cannot drift from the code) and keeps example layout."""


def quantity(dimension: str) -> Callable[[str], float]:
    """An argparse ``type=`` that parses a number with an SI unit into SI (see cavchar.units)."""

    def parse(text: str) -> float:
        from cavchar.errors import InputError

        try:
            return parse_quantity(text, dimension)
        except InputError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None

    parse.__name__ = dimension
    return parse


def add_output_options(parser: argparse.ArgumentParser) -> None:
    """``-o/--out DIR`` and ``--force`` for commands that write files."""
    parser.add_argument("-o", "--out", metavar="DIR", default=None,
                        help="folder for the output files (created if missing)")
    parser.add_argument("--force", action="store_true",
                        help="overwrite existing output files")


def add_sampler_options(parser: argparse.ArgumentParser) -> None:
    """Seed and convergence options common to every fit."""
    parser.add_argument("--seed", type=int, default=1, help="random seed (stored in the result)")
    parser.add_argument("--walkers", type=int, default=32, help="number of ensemble walkers")
    parser.add_argument("--max-steps", type=int, default=20000,
                        help="largest number of sampler steps per walker")
    parser.add_argument("--allow-unconverged", action="store_true",
                        help="keep an unconverged chain (exit 0 with a warning instead of 3)")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")
