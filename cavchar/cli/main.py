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
import os
import re
import sys
import warnings
from collections.abc import Sequence

# cavchar's matrices are small (a truncated Fock space of at most a few hundred levels):
# a multi-threaded BLAS only adds hand-over cost, and on a busy machine oversubscribes
# it (an eigen-decomposition measured 0.16 s with one thread, 15 s with two under load).
# Set before numpy is first imported; a user's own setting is kept.
for _variable in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_variable, "1")

from cavchar import __version__  # noqa: E402
from cavchar.cli.common import HelpFormatter  # noqa: E402
from cavchar.errors import CavcharError, CavcharWarning, ConvergenceError  # noqa: E402

#: sub-command modules, in the order ``--help`` lists them
COMMAND_MODULES = (
    "demo", "fit", "simulate", "thermal", "plan", "report",
    "log", "trend", "qualify", "budget", "batch", "kernels",
)


#: longest message printed as it is; longer ones are cut in the middle (an echoed cell)
MAX_MESSAGE_CHARS = 600

#: warnings of other libraries that valid input can raise and that say nothing to a user
QUIET_WARNINGS = (
    "No artists with labels found to put in legend",
    "Tight layout not applied",
)


class CommandParser(argparse.ArgumentParser):
    """argparse with cavchar's conventions: a usage error is one line on stderr naming
    the option (exit 2), and a negative number with a unit (``-5mK``) is read as a
    value, so that its range check can answer, not taken for an unknown option."""

    def __init__(self, *args, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        # argparse only treats "-5" and "-.5" as numbers; also "-5mK", "-1e3s"
        self._negative_number_matcher = re.compile(r"^-(\d|\.\d)")

    def error(self, message: str) -> None:  # type: ignore[override]
        """Print the usage error as one line on stderr naming the option, then exit with code 2."""
        print(f"{self.prog}: error: {clean_text(message)} (see {self.prog} --help)",
              file=sys.stderr)
        sys.exit(2)


def clean_text(text: str) -> str:
    """User text made safe for one terminal line: control characters (escape codes,
    newlines) shown escaped, and a very long text cut in the middle."""
    text = "".join(c if c.isprintable() else repr(c)[1:-1] for c in str(text))
    if len(text) > MAX_MESSAGE_CHARS:
        cut = len(text) - MAX_MESSAGE_CHARS
        text = (text[: MAX_MESSAGE_CHARS * 2 // 3] + f" ...[{cut:,} characters left out]... "
                + text[-MAX_MESSAGE_CHARS // 3:])
    return text


def build_parser() -> argparse.ArgumentParser:
    """The full argument parser with every installed sub-command."""
    parser = CommandParser(
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
        importlib.import_module(f"cavchar.cli.{name}").register(subparsers)
    return parser


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """Every warning as one line ``warning: ...`` without source paths (cavchar's own
    warnings are diagnostics for the user; another library's is marked as such)."""
    stream = sys.stderr if file is None else file
    text = clean_text(str(message))
    if not issubclass(category, CavcharWarning):
        text = f"{text} ({category.__name__} from a library cavchar uses)"
    print(f"warning: {text}", file=stream)


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line with ``argv`` (default: ``sys.argv[1:]``); return the exit code.

    The fit commands record ``["cavchar", *argv]`` as the command line of their result
    (``args.command_line``)."""
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse: --help (0) or a usage error (2)
        return int(exc.code or 0)
    if getattr(args, "func", None) is None:
        parser.print_help()
        return 2
    args.command_line = ["cavchar", *argv]
    with warnings.catch_warnings():
        warnings.showwarning = _show_warning
        for text in QUIET_WARNINGS:
            warnings.filterwarnings("ignore", message=re.escape(text))
        try:
            return int(args.func(args) or 0)
        except CavcharError as exc:
            print(f"{_prog(args)}: error: {clean_text(str(exc))}{_option_hint(exc)}",
                  file=sys.stderr)
            return exc.exit_code
        except RecursionError:
            print(f"{_prog(args)}: error: an input file is nested too deeply to read "
                  "(a crafted or damaged file?)", file=sys.stderr)
            return 2
        except MemoryError:
            print(f"{_prog(args)}: error: out of memory; the input or an option asks for "
                  "more than this machine has (reduce the size or the duration)",
                  file=sys.stderr)
            return 2
        except KeyboardInterrupt:
            print("cavchar: interrupted", file=sys.stderr)
            return 130
        except BrokenPipeError:  # the reader stopped early (`| head`): see run()
            raise
        except Exception as exc:  # a bug in cavchar, not the user's fault
            import traceback

            traceback.print_exc()
            print(f"cavchar: internal error ({type(exc).__name__}); please report it with the "
                  "traceback above", file=sys.stderr)
            return 1


def _option_hint(exc: CavcharError) -> str:
    """The command-line options that answer an unconverged run (the sampler's message
    speaks of settings, not of options)."""
    if not isinstance(exc, ConvergenceError):
        return ""
    steps = exc.suggested_max_steps
    return (f" [on the command line: --max-steps {steps}, or --allow-unconverged]"
            if steps else " [on the command line: --allow-unconverged]")


def _prog(args: argparse.Namespace) -> str:
    """``cavchar fit jumps`` etc.: the command the user ran, for error lines."""
    words = ["cavchar", args.command]
    for key in ("fit_kind", "shape", "plan_kind", "log_action"):
        value = getattr(args, key, None)
        if isinstance(value, str):
            words.append(value)
    return " ".join(words)


#: exit code of a command whose reader closed the pipe (128 + SIGPIPE, as the shell reports)
EXIT_BROKEN_PIPE = 141


def run() -> None:
    """Console-script entry point.

    A reader that stops early (``cavchar log list | head``) ends the command quietly
    with :data:`EXIT_BROKEN_PIPE`: standard output is pointed at the null device so the
    interpreter's final flush raises nothing (the recipe of the Python documentation,
    module ``signal``, "Note on SIGPIPE")."""
    try:
        code = main()
        sys.stdout.flush()
    except BrokenPipeError:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        code = EXIT_BROKEN_PIPE
    sys.exit(code)


if __name__ == "__main__":
    run()
