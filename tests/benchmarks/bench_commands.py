"""Benchmark: whole ``cavchar`` commands as a user runs them (issue targets in brackets).

Each command runs in a fresh process (``python -m cavchar.cli.main``), so the time
includes the interpreter, every import, reading the file, the fit, the printed
summary and the files written; compiled kernels come from the on-disk cache (one
warm-up run first):

* ``cavchar --help`` [< 0.5 s] and a fit of a missing file [< 0.5 s];
* ``cavchar fit jumps`` on an exact record of about 10^3 change points, and
  ``cavchar fit ringdown`` on a power trace of 10^3 samples: without output
  files, with ``-o DIR --no-figures`` [< 1.5 s] and with the figures [< 4 s];
* ``cavchar demo --quick`` [< 30 s on a quiet machine].

The 1-minute load average is printed beside each median: on a shared machine a
load above the number of cores makes every wall time longer, so the CPU time of
the command's process (user + system) is printed too; it depends little on the load.

Run: ``python tests/benchmarks/bench_commands.py [--repeats 5] [--only NAME]``.
``--profile`` also writes a pyinstrument profile (text) of each fit command.
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(ROOT), env.get("PYTHONPATH")]))
    env["MPLBACKEND"] = "Agg"
    env.pop("CAVCHAR_LOG", None)
    return env


def _cavchar(args: list[str], cwd: Path, prefix: list[str] | None = None
             ) -> tuple[float, float]:
    """(wall time, CPU time of the child process) of one command, in seconds."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    result = subprocess.run([*(prefix or [sys.executable]), "-m", "cavchar.cli.main", *args],
                            cwd=cwd, env=_env(), capture_output=True, text=True)
    elapsed = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    if result.returncode not in (0, 2) or "Traceback" in result.stderr:
        raise SystemExit(f"cavchar {' '.join(args)} failed:\n{result.stderr[-2000:]}")
    return elapsed, cpu


def _supports(option: str, cwd: Path) -> bool:
    out = subprocess.run([sys.executable, "-m", "cavchar.cli.main", "fit", "jumps", "--help"],
                         cwd=cwd, env=_env(), capture_output=True, text=True).stdout
    return option in out


def _make_inputs(folder: Path) -> None:
    # about 10^3 change points: stationary jump rate 2 n_th (1 + n_th) / T_c = 6.9 /s
    _cavchar(["simulate", "jumps", "--lifetime", "25ms", "--n-thermal", "0.08",
              "--duration", "145s", "--freq", "6.8GHz", "-o", ".", "--file", "record.csv"],
             folder)
    _cavchar(["simulate", "ringdown", "--signal", "power", "--lifetime", "4ms",
              "--duration", "30ms", "--points", "1000", "--amplitude", "2", "--floor",
              "0.05", "--noise", "0.02", "-o", ".", "--file", "power.csv"], folder)


def _load() -> str:
    return f"{os.getloadavg()[0]:.2f}"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--only", default=None, help="run only the cases whose name has this")
    parser.add_argument("--profile", metavar="DIR", default=None,
                        help="write pyinstrument text profiles of the fits into DIR")
    options = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        _make_inputs(folder)
        no_figures = ["--no-figures"] if _supports("--no-figures", folder) else None
        fits = {"jumps": ["fit", "jumps", "record.csv", "--freq", "6.8GHz", "--quiet"],
                "ringdown": ["fit", "ringdown", "power.csv", "--freq", "6.8GHz", "--quiet"]}
        cases = {"cavchar --help": ["--help"],
                 "fit of a missing file": ["fit", "jumps", "missing.csv"]}
        for kind, words in fits.items():
            cases[f"fit {kind}, no output files"] = words
            if no_figures:
                cases[f"fit {kind}, -o DIR --no-figures"] = [*words, "-o", "out", "--force",
                                                              *no_figures]
            cases[f"fit {kind}, -o DIR with figures"] = [*words, "-o", "out", "--force"]
        # the quick demo [< 30 s]: simulations, every fit kind through the batch path,
        # log, report and figures; fewer repeats are enough for a half-minute command
        cases["cavchar demo --quick"] = ["demo", "--quick", "-o", "demo", "--force"]
        for words in fits.values():  # warm-up: compiled-kernel cache, file cache
            _cavchar(words, folder)
        print(f"{'command':<40}{'wall median [s]':>16}{'min [s]':>9}{'CPU median [s]':>16}"
              "  load (1 min)")
        for name, words in cases.items():
            if options.only and options.only not in name:
                continue
            walls, cpus, loads = [], [], []
            for _ in range(options.repeats):
                wall, cpu = _cavchar(words, folder)
                walls.append(wall)
                cpus.append(cpu)
                loads.append(_load())
            print(f"{name:<40}{statistics.median(walls):>16.2f}{min(walls):>9.2f}"
                  f"{statistics.median(cpus):>16.2f}  {' '.join(loads)}", flush=True)
        if options.profile:
            out = Path(options.profile).absolute()
            out.mkdir(parents=True, exist_ok=True)
            for kind, words in fits.items():
                for suffix, extra in (("", ["-o", "out", "--force"]),
                                      ("-no-figures", ["-o", "out", "--force",
                                                       *(no_figures or [])])):
                    if suffix and not no_figures:
                        continue
                    target = out / f"profile-{kind}{suffix}.txt"
                    _cavchar([*words, *extra], folder,
                             prefix=[sys.executable, "-m", "pyinstrument", "-o", str(target)])
                    print(f"profile: {target}")


if __name__ == "__main__":
    main()
