"""Benchmark: a batch of 20 records on 1 and 2 Dask worker processes vs a plain loop.

Run: ``python tests/benchmarks/bench_batch.py`` (a few minutes on 2 quiet cores).
Records: 16 exact jump records of about 10^4 change points and 4 power ring-downs of
10^4 samples, fitted with the default sampler settings.  Three ways, in one run:

* the plain sequential loop of in-process fits (fit, then write result.json and the
  draws, as the batch does; no figures);
* ``fit_many`` on a LocalCluster of 1 worker process;
* ``fit_many`` on a LocalCluster of 2 worker processes (one per core here).

Printed: wall times, the speed-up of 2 workers over the loop (target >= 1.7 on a
2-core machine), the per-record overhead of the batch path, ``(T_1 worker - T_loop) /
records``, as a fraction of the mean fit time ``T_loop / records`` (target < 10%;
it includes starting the cluster and each worker's imports), and the throughput in
records per minute per core.

On a machine shared with other work, wall times measure the share of the cores
each process gets more than cavchar: a loop whose numba and BLAS calls run on
several threads takes a larger share than one single-threaded worker.  So the
script also prints CPU time (all threads of the loop's process; every worker
process's own CPU time, read on the workers before and after, plus this process's
while it waits), which the load does not inflate, and the 1-minute load average
beside the numbers.
"""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

JUMP_RECORDS = 16
RINGDOWNS = 4


def _records(folder: Path) -> Path:
    from cavchar.cli.main import main

    for i in range(JUMP_RECORDS):
        # about 2 n_th (1 + n_th) / T_c = 11 change points per s: 900 s gives ~10^4
        assert main(["simulate", "jumps", "--lifetime", "20ms", "--n-thermal", "0.1",
                     "--duration", "900s", "--seed", str(100 + i), "-o", str(folder),
                     "--file", f"jumps-{i:02d}.csv"]) == 0
    for i in range(RINGDOWNS):
        assert main(["simulate", "ringdown", "--signal", "power", "--lifetime", "4ms",
                     "--duration", "30ms", "--points", "10000", "--floor", "0.002",
                     "--noise", "0.01", "--seed", str(200 + i), "-o", str(folder),
                     "--file", f"ringdown-{i}.csv"]) == 0
    batch = folder / "batch.toml"
    batch.write_text('seed = 5\n[defaults]\nfreq = "6.8GHz"\nstage_temp = "20mK"\n'
                     '[[entry]]\nkind = "jumps"\nfile = "jumps-*.csv"\n'
                     '[[entry]]\nkind = "ringdown"\nfile = "ringdown-*.csv"\nsignal = "power"\n')
    return batch


def _loop(batch: Path, out: Path) -> tuple[float, float]:
    """Wall time and CPU time (s) of the plain loop of in-process fits."""
    from cavchar.batch import read_batch_file
    from cavchar.batch.options import fit_from_argv
    from cavchar.outputs import write_fit_outputs

    start, cpu = time.perf_counter(), time.process_time()
    for entry in read_batch_file(batch).entries:
        result, _ = fit_from_argv(entry.kind, list(entry.argv), entry.seed, entry.check_every)
        write_fit_outputs(result, out / entry.label, figures=False)
    return time.perf_counter() - start, time.process_time() - cpu


def _warm(batch: Path, out: Path) -> None:
    from cavchar.batch import read_batch_file
    from cavchar.batch.options import fit_from_argv

    seen = set()
    for entry in read_batch_file(batch).entries:
        if entry.kind not in seen:
            seen.add(entry.kind)
            fit_from_argv(entry.kind, list(entry.argv), entry.seed, entry.check_every)
    shutil.rmtree(out, ignore_errors=True)


def _batch(batch: Path, out: Path, workers: int) -> tuple[float, float, float, float]:
    """Wall time of the whole batch (cluster start to close), of starting the cluster,
    the sum of the fits' wall times inside the workers, and the CPU time (s) of the
    workers and this process during the fits."""
    from distributed import Client, LocalCluster

    from cavchar.batch import fit_many
    from cavchar.batch.runner import _quiet_dask

    _quiet_dask()
    start = time.perf_counter()
    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cluster, Client(cluster) as client:
        started = time.perf_counter() - start
        cpu0 = sum(client.run(time.process_time).values()) + time.process_time()
        run = fit_many(batch, client, out=out, figures=False, report=False)
        cpu = sum(client.run(time.process_time).values()) + time.process_time() - cpu0
    wall = time.perf_counter() - start
    assert run.exit_code == 0, run.summary[["label", "status", "message"]]
    return wall, started, float(run.summary["wall_s"].sum()), cpu


def main() -> None:
    import warnings

    warnings.simplefilter("ignore")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        batch = _records(folder)
        n = JUMP_RECORDS + RINGDOWNS
        # warm the on-disk numba cache and this process's imports (not timed): one fit
        # of each kind; the workers' own imports stay in the batch times (a real cost)
        _warm(batch, folder / "warm")
        load0 = os.getloadavg()[0]
        t_loop, c_loop = _loop(batch, folder / "loop")
        t_one, s_one, fits_one, c_one = _batch(batch, folder / "one", 1)
        t_two, s_two, fits_two, c_two = _batch(batch, folder / "two", 2)
        load1 = os.getloadavg()[0]
    per_fit = t_loop / n
    overhead = (t_one - t_loop) / n
    print(f"{n} records ({JUMP_RECORDS} exact jump records of ~10^4 change points, "
          f"{RINGDOWNS} power ring-downs of 10^4 samples), default sampler settings")
    print(f"1-minute load average: {load0:.1f} before, {load1:.1f} after, on "
          f"{os.cpu_count()} cores")
    print(f"sequential in-process loop: {t_loop:.1f} s wall ({per_fit:.2f} s per record), "
          f"{c_loop:.1f} s CPU")
    print(f"batch, 1 worker:  {t_one:.1f} s wall (cluster start {s_one:.1f} s, fits inside "
          f"the workers {fits_one:.1f} s), {c_one:.1f} s CPU during the fits")
    print(f"batch, 2 workers: {t_two:.1f} s wall (cluster start {s_two:.1f} s, fits inside "
          f"the workers {fits_two:.1f} s), {c_two:.1f} s CPU during the fits")
    print(f"wall-time speed-up of 2 workers over the loop: {t_loop / t_two:.2f}x "
          "(target >= 1.7x on a quiet 2-core machine)")
    print(f"per-record overhead of the batch path, wall (1 worker vs loop): {overhead:.2f} s "
          f"= {overhead / per_fit:.1%} of a fit (target < 10%)")
    print(f"per-record overhead, wall outside the fits (1 worker): "
          f"{(t_one - fits_one) / n:.2f} s = {(t_one - fits_one) / fits_one:.1%} of a fit")
    print(f"per-record overhead, CPU (1 worker vs loop): {(c_one - c_loop) / n:.2f} s = "
          f"{(c_one - c_loop) / c_loop:.1%} of a fit's CPU time")
    print(f"throughput, 2 workers, wall: {n / (t_two / 60) / 2:.1f} records per minute per "
          f"core; per CPU-minute: {n / (c_two / 60):.1f} records (loop: "
          f"{n / (c_loop / 60):.1f})")


if __name__ == "__main__":
    main()
