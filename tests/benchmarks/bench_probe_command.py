"""Benchmark: the whole ``cavchar fit probes`` command (a fresh process, no figures).

Run: ``python tests/benchmarks/bench_probe_command.py [--probes 10000 100000]
[--repeats 5] [--samplers ensemble importance]``.

For each record size: the command with each sampler (``--sampler ensemble``, the
emcee ensemble of before; ``--sampler importance``, Pareto-smoothed importance
sampling from the Laplace approximation, cavchar.inference.importance), each run in a
fresh process with the kernel cache already warm, and in the same run the peer: one
exact hmmlearn ``CategoricalHMM.score`` pass over the same record, read from the same
file (a fresh process too, imports included; the ratio is whole fit / one peer pass).
Medians of ``--repeats``; wall time and the CPU time of the process (children
included) with the 1-minute load average before and after each run, because the
development machine is shared.

Invented scenario: T_c = 25 ms, n_th = 0.08, parity probe (V = 0.9) every 100 us.
Targets (issue "interactive speed"): 10^4 probes < 5 s, 10^5 probes < 15 s, 10^6 probes
(exact) < 90 s, with bulk ESS >= 1000 for T_c and n_th (read from the written result,
printed beside each row).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

LIFETIME, N_TH, INTERVAL = 0.025, 0.08, 1e-4

PEER = r"""
import sys, time
import numpy as np
t0 = time.perf_counter()
from hmmlearn.hmm import CategoricalHMM
from cavchar.dynamics import stationary_distribution, transition_matrices_batch
from cavchar.io.readers import read_probe_record
rec = read_probe_record(sys.argv[1])
n = 6
p1 = (1 + 0.9 * np.cos(np.pi * np.arange(n))) / 2  # parity probe, V = 0.9
ref = CategoricalHMM(n_components=n, n_features=2, init_params="", implementation="scaling")
ref.startprob_ = stationary_distribution(float(sys.argv[3]), n)
ref.transmat_ = transition_matrices_batch([1 / float(sys.argv[2])], [float(sys.argv[3])], n,
                                          [float(sys.argv[4])])[0, 0]
ref.emissionprob_ = np.column_stack([1 - p1, p1])
ll = ref.score(rec.outcome.astype(int)[:, None])
print(ll)
"""


def _load() -> float:
    return os.getloadavg()[0]


def timed(cmd: list[str]) -> dict:
    """Wall and CPU time (s) of a child process, with the load average around it."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    load0 = _load()
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    if proc.returncode not in (0, 3):
        sys.stderr.write(proc.stdout + proc.stderr)
        raise SystemExit(f"command failed: {' '.join(cmd)}")
    return {"wall_s": wall, "cpu_s": cpu, "load_before": load0, "load_after": _load(),
            "stdout": proc.stdout}


def make_record(n: int, folder: Path) -> Path:
    path = folder / f"probes_{n}.csv"
    if not path.exists():
        duration = n * INTERVAL
        subprocess.run([sys.executable, "-m", "cavchar.cli.main", "simulate", "probes",
                        "--lifetime", f"{LIFETIME * 1e3:g}ms", "--n-thermal", str(N_TH),
                        "--duration", f"{duration:g}s", "--interval", f"{INTERVAL * 1e6:g}us",
                        "--visibility", "0.9", "--phase-per-photon", "180deg", "--seed", "7",
                        "-o", str(folder / f"sim_{n}")], check=True, capture_output=True)
        (folder / f"sim_{n}" / "probes.csv").rename(path)
    return path


def fit_command(path: Path, sampler: str) -> list[str]:
    """The fit, writing its result (no figures) beside the record: ``--force`` each time."""
    return [sys.executable, "-m", "cavchar.cli.main", "fit", "probes", str(path),
            "--phase-per-photon", "180deg", "--visibility", "0.9", "--quiet", "--seed", "1",
            "--sampler", sampler, "-o", str(_out(path)), "--no-figures", "--force",
            *(["--exact"] if _probes(path) >= 1_000_000 else [])]


def _probes(path: Path) -> int:
    return int(path.stem.split("_")[-1])


def _out(path: Path) -> Path:
    return path.with_name(path.stem + "_fit")


def bulk_ess(path: Path) -> dict:
    """Bulk effective sample sizes of T_c and n_th from the written result."""
    result = json.loads((_out(path) / "result.json").read_text())
    ess = result["diagnostics"].get("ess_bulk") or result["diagnostics"].get("ess", {})
    return {name: round(float(ess[name])) for name in ("lifetime", "n_thermal") if name in ess}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--probes", type=int, nargs="+", default=[10_000, 100_000])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--samplers", nargs="+", default=["ensemble", "importance"])
    parser.add_argument("--json", default=None, help="write the numbers to this file")
    args = parser.parse_args()
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for n in args.probes:
            path = make_record(n, folder)
            timed(fit_command(path, "importance"))  # warm the caches
            for sampler in [*args.samplers, "hmmlearn"]:
                runs = []
                for _ in range(args.repeats):
                    if sampler == "hmmlearn":
                        runs.append(timed([sys.executable, "-c", PEER, str(path), str(LIFETIME),
                                           str(N_TH), str(INTERVAL)]))
                    else:
                        runs.append(timed(fit_command(path, sampler)))
                        runs[-1]["bulk_ess"] = bulk_ess(path)
                row = {"probes": n, "sampler": sampler,
                       "wall_s_median": statistics.median(r["wall_s"] for r in runs),
                       "cpu_s_median": statistics.median(r["cpu_s"] for r in runs),
                       "load_range": [min(r["load_before"] for r in runs),
                                      max(r["load_after"] for r in runs)],
                       "runs": [{k: v for k, v in r.items() if k != "stdout"} for r in runs]}
                rows.append(row)
                ess = runs[-1].get("bulk_ess", "")
                print(f"{n:>8,} probes  {sampler:<10}  wall {row['wall_s_median']:7.1f} s  "
                      f"cpu {row['cpu_s_median']:7.1f} s  (median of {args.repeats}; load "
                      f"{row['load_range'][0]:.1f}-{row['load_range'][1]:.1f})"
                      f"{'  bulk ESS ' + str(ess) if ess else ''}", flush=True)
            peer = next(r for r in rows if r["probes"] == n and r["sampler"] == "hmmlearn")
            for r in rows:
                if r["probes"] == n and r["sampler"] != "hmmlearn":
                    print(f"{'':>8}         ratio whole fit / one hmmlearn pass ({r['sampler']}): "
                          f"wall {r['wall_s_median'] / peer['wall_s_median']:.1f}, "
                          f"cpu {r['cpu_s_median'] / peer['cpu_s_median']:.1f}")
    if args.json:
        Path(args.json).write_text(json.dumps(rows, indent=1))


if __name__ == "__main__":
    main()
