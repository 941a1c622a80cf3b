"""Entry point of the ``cavchar`` command.

Thin by design: each sub-command lives in its own module of this package and
exposes ``register(subparsers)``; the handler it installs parses options,
calls the public API, prints and returns an exit code.  This module only
collects the sub-commands and turns errors into messages and exit codes:

* 0 ok, 2 bad input or usage, 3 sampler not converged, 1 internal error;
* ``qualify`` adds 4 (FAIL) and 5 (UNDECIDED).
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import sys
import warnings
from collections.abc import Sequence

from cavchar import __version__
from cavchar.cli.common import HelpFormatter
from cavchar.errors import CavcharError, CavcharWarning

#: sub-command modules, in the order ``--help`` lists them
COMMAND_MODULES = (
    "demo", "fit", "simulate", "thermal", "plan", "report",
    "log", "trend", "qualify", "budget", "batch",
)


def build_parser() -> argparse.ArgumentParser:
    """The full argument parser with every installed sub-command."""
    parser = argparse.ArgumentParser(
        prog="cavchar",
        description=(
            "Energy lifetime, thermal photon number and effective temperature of "
            "high-Q superconducting microwave cavities, with credible intervals."
        ),
        epilog="Exit codes: 0 ok, 2 bad input, 3 not converged, 4/5 qualify FAIL/UNDECIDED, "
        "1 internal error.  Every command has --help with units and an example.",
        formatter_class=HelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"cavchar {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMAND_MODULES:
        module_name = f"cavchar.cli.{name}"
        if importlib.util.find_spec(module_name) is None:
            continue
        importlib.import_module(module_name).register(subparsers)
    return parser


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    stream = sys.stderr if file is None else file
    if issubclass(category, CavcharWarning):
        print(f"warning: {message}", file=stream)
    else:
        print(warnings.formatwarning(message, category, filename, lineno, line), end="",
              file=stream)


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line with ``argv`` (default: ``sys.argv[1:]``); return the exit code."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse: --help (0) or a usage error (2)
        return int(exc.code or 0)
    if getattr(args, "func", None) is None:
        parser.print_help()
        return 2
    with warnings.catch_warnings():
        warnings.showwarning = _show_warning
        try:
            return int(args.func(args) or 0)
        except CavcharError as exc:
            print(f"cavchar {args.command}: error: {exc}", file=sys.stderr)
            return exc.exit_code
        except KeyboardInterrupt:
            print("cavchar: interrupted", file=sys.stderr)
            return 130
        except Exception as exc:  # a bug in cavchar, not the user's fault
            import traceback

            traceback.print_exc()
            print(f"cavchar: internal error ({type(exc).__name__}); please report it with the "
                  "traceback above", file=sys.stderr)
            return 1


def run() -> None:
    """Console-script entry point."""
    sys.exit(main())


if __name__ == "__main__":
    run()
