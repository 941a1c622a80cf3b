"""``cavchar prepare-kernels``: compile the numerical kernels into the on-disk cache once."""

from __future__ import annotations

import argparse

from cavchar.cli.common import add_command

EXAMPLES = """examples:
  cavchar prepare-kernels                 # every fit kind (about a minute the first time)
  cavchar prepare-kernels --kind ringdown
"""

#: the kinds of cavchar.kernel_cache.KINDS (listed here so that --help stays light)
KIND_CHOICES = ("jumps", "sampled", "probes", "probes-irregular", "ringdown")


DESCRIPTION = """
Fit a tiny invented record of each kind, which compiles every numba kernel the fits use and
stores the machine code in numba's on-disk cache (beside the installed package, or in
$NUMBA_CACHE_DIR; the generated probe-record kernels in $CAVCHAR_KERNEL_DIR or
~/.cache/cavchar/kernels).  Later processes load it in milliseconds.  Nothing else is written.
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``prepare-kernels`` (fill the compiled-kernel cache) to the sub-commands."""
    parser = add_command(
        subparsers, "prepare-kernels",
        "compile the numerical kernels once, so the first fit of each kind starts at full "
        "speed", DESCRIPTION, EXAMPLES)
    parser.add_argument("--kind", action="append", choices=KIND_CHOICES, default=None,
                        help="prepare only this kind (repeatable); unset: every kind")
    parser.set_defaults(func=handle)


def handle(args: argparse.Namespace) -> int:
    """Prepare the kernels of the kinds asked for (all by default), printing each."""
    from cavchar.kernel_cache import KINDS, prepare_kernels

    def report(kind: str, seconds: float) -> None:
        print(f"  {kind:<18} ready ({seconds:.1f} s)", flush=True)

    kinds = args.kind or list(KINDS)
    print(f"preparing the kernels of {', '.join(kinds)} ...", flush=True)
    times = prepare_kernels(kinds, report)
    print(f"done in {sum(times.values()):.1f} s; later fits load the compiled kernels "
          "from the cache")
    return 0
