"""Benchmark: a batch of 20 records on 1 and 2 Dask worker processes vs a plain loop.

Run: ``python tests/benchmarks/bench_batch.py`` (a few minutes on 2 quiet cores).
Records: 16 exact jump records of about 10^4 change points and 4 power ring-downs of
10^4 samples, fitted with the default sampler settings.  Three ways, in one run:

* the plain sequential loop of in-process fits (fit, then write result.json and the
  draws, as the batch does; no figures);
* ``fit_many`` on a LocalCluster of 1 worker process;
* ``fit_many`` on a LocalCluster of 2 worker processes (one per core here);
* the same two on a standing cluster, whose workers have already fitted one batch
  (imports done, kernels loaded), as a group's long-running cluster is;
* one ``cavchar fit`` command per record, one after the other (what a user without the
  batch command runs: a fresh process each, imports included).

Before them, the first fit on a fresh worker process, with the on-disk numba cache
and with an empty one (``NUMBA_CACHE_DIR`` pointing at a new folder, so every kernel
is compiled): one jump fit and one ring-down fit, each then repeated on the warm
worker; the difference is the cost of a fresh worker (imports, loading or compiling
the kernels).

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
while it waits), which the load inflates much less, the CPU time of the fits alone
(each fit's own thread, ``cpu_s`` of its ``batch-entry.json``) and the 1-minute load
average beside the numbers.
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


def _task(entry) -> dict:
    """The task of one entry, as :func:`cavchar.batch.runner.fit_many` submits it."""
    return {"label": entry.label, "kind": entry.kind, "argv": list(entry.argv),
            "seed": entry.seed, "check_every": entry.check_every, "outputs": True,
            "figures": False, "run": "bench"}


def _first_fits(batch: Path, cache_dir: str | None) -> dict[str, tuple[float, float, float,
                                                                      float]]:
    """First and second fit of one entry per kind on one fresh worker process:
    kind -> (first wall, first CPU, second wall, second CPU) in s (CPU: the worker
    process, all threads).  ``cache_dir``: an empty numba cache folder (compile
    everything) or None (the on-disk cache as the warm-up left it)."""
    from distributed import Client

    from cavchar.batch import read_batch_file
    from cavchar.batch.runner import _quiet_dask, start_local_cluster
    from cavchar.batch.worker import run_entry

    _quiet_dask()
    picks = {}
    for entry in read_batch_file(batch).entries:
        picks.setdefault(entry.kind, entry)
    saved = os.environ.get("NUMBA_CACHE_DIR")
    if cache_dir is not None:
        os.environ["NUMBA_CACHE_DIR"] = cache_dir  # the worker process inherits it
    try:
        with start_local_cluster(1) as cluster, Client(cluster) as client:
            out = {}
            for kind, entry in picks.items():
                times = []
                for _ in range(2):
                    cpu0 = sum(client.run(time.process_time).values())
                    start = time.perf_counter()
                    outcome = client.submit(run_entry, _task(entry), pure=False).result()
                    wall = time.perf_counter() - start
                    cpu = sum(client.run(time.process_time).values()) - cpu0
                    assert outcome["status"] == "fitted", outcome["message"]
                    times += [wall, cpu]
                out[kind] = tuple(times)
            return out
    finally:
        if cache_dir is not None:
            if saved is None:
                os.environ.pop("NUMBA_CACHE_DIR", None)
            else:
                os.environ["NUMBA_CACHE_DIR"] = saved


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


def _commands(batch: Path, out: Path) -> float:
    """Wall time (s) of one ``cavchar fit`` command per entry, one after the other, as a
    user without the batch command would run them (each a fresh process: imports,
    kernels from the on-disk cache, fit, files without figures)."""
    import subprocess

    from cavchar.batch import read_batch_file

    start = time.perf_counter()
    for entry in read_batch_file(batch).entries:
        done = subprocess.run([sys.executable, "-m", "cavchar.cli.main", "fit", entry.kind,
                               *entry.argv, "--seed", str(entry.seed), "--quiet",
                               "--no-figures", "-o", str(out / entry.label)],
                              capture_output=True, text=True)
        assert done.returncode == 0, done.stderr[-2000:]
    return time.perf_counter() - start


def _warm(batch: Path, out: Path) -> None:
    from cavchar.batch import read_batch_file
    from cavchar.batch.options import fit_from_argv

    seen = set()
    for entry in read_batch_file(batch).entries:
        if entry.kind not in seen:
            seen.add(entry.kind)
            fit_from_argv(entry.kind, list(entry.argv), entry.seed, entry.check_every)
    shutil.rmtree(out, ignore_errors=True)


def _batch(batch: Path, out: Path, workers: int) -> tuple[float, float, float, float, float,
                                                          float]:
    """Wall time of the whole batch (cluster start to close), of starting the cluster,
    the sum of the fits' wall times inside the workers, the CPU time (s) of the
    workers and this process during the fits, of this process alone (client and
    scheduler), and the sum of the fits' own CPU times (``cpu_s``)."""
    import json

    from distributed import Client

    from cavchar.batch import fit_many
    from cavchar.batch.runner import STATE_NAME, _quiet_dask, start_local_cluster

    _quiet_dask()
    start = time.perf_counter()
    with start_local_cluster(workers) as cluster, Client(cluster) as client:
        started = time.perf_counter() - start
        own0 = time.process_time()
        cpu0 = sum(client.run(time.process_time).values())
        run = fit_many(batch, client, out=out, figures=False, report=False)
        own = time.process_time() - own0
        cpu = sum(client.run(time.process_time).values()) - cpu0 + own
    wall = time.perf_counter() - start
    assert run.exit_code == 0, run.summary[["label", "status", "message"]]
    fits_cpu = sum(json.loads((out / label / STATE_NAME).read_text())["cpu_s"]
                   for label in run.summary["label"])
    return wall, started, float(run.summary["wall_s"].sum()), cpu, own, fits_cpu


def _standing(batch: Path, folder: Path, workers: int) -> float:
    """Wall time (s) of ``fit_many`` on a standing cluster whose workers have fitted
    before (imports done, kernels loaded): what a group's long-running cluster, or a
    second batch in one session, sees.  The warm-up batch writes to another folder."""
    from distributed import Client

    from cavchar.batch import fit_many
    from cavchar.batch.runner import _quiet_dask, start_local_cluster

    _quiet_dask()
    with start_local_cluster(workers) as cluster, Client(cluster) as client:
        fit_many(batch, client, out=folder / f"standing-warm-{workers}", figures=False,
                 report=False)
        start = time.perf_counter()
        run = fit_many(batch, client, out=folder / f"standing-{workers}", figures=False,
                       report=False)
        wall = time.perf_counter() - start
    assert run.exit_code == 0, run.summary[["label", "status", "message"]]
    return wall


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
        cold = _first_fits(batch, str(folder / "empty-numba-cache"))
        warm = _first_fits(batch, None)
        load_first = os.getloadavg()[0]
        t_loop, c_loop = _loop(batch, folder / "loop")
        t_one, s_one, fits_one, c_one, own_one, f_one = _batch(batch, folder / "one", 1)
        t_two, s_two, fits_two, c_two, own_two, f_two = _batch(batch, folder / "two", 2)
        t_commands = _commands(batch, folder / "commands")
        warm_one = _standing(batch, folder, 1)
        warm_two = _standing(batch, folder, 2)
        load1 = os.getloadavg()[0]
    per_fit = t_loop / n
    overhead = (t_one - t_loop) / n
    print(f"{n} records ({JUMP_RECORDS} exact jump records of ~10^4 change points, "
          f"{RINGDOWNS} power ring-downs of 10^4 samples), default sampler settings")
    print(f"1-minute load average: {load0:.1f} before, {load_first:.1f} after the first "
          f"fits, {load1:.1f} after, on {os.cpu_count()} cores")
    for kind in cold:
        for name, times in (("empty numba cache", cold[kind]), ("on-disk numba cache",
                                                                  warm[kind])):
            w1, c1, w2, c2 = times
            print(f"fresh worker, {kind}, {name}: first fit {w1:.2f} s wall, {c1:.2f} s CPU; "
                  f"the same fit again {w2:.2f} s wall, {c2:.2f} s CPU; first-fit cost "
                  f"{w1 - w2:.2f} s wall, {c1 - c2:.2f} s CPU")
    print(f"sequential in-process loop: {t_loop:.1f} s wall ({per_fit:.2f} s per record), "
          f"{c_loop:.1f} s CPU")
    print(f"batch, 1 worker:  {t_one:.1f} s wall (cluster start {s_one:.1f} s, fits inside "
          f"the workers {fits_one:.1f} s), {c_one:.1f} s CPU during the fits (the fits' own "
          f"threads {f_one:.1f} s, this process {own_one:.1f} s)")
    print(f"batch, 2 workers: {t_two:.1f} s wall (cluster start {s_two:.1f} s, fits inside "
          f"the workers {fits_two:.1f} s), {c_two:.1f} s CPU during the fits (the fits' own "
          f"threads {f_two:.1f} s, this process {own_two:.1f} s)")
    print(f"wall-time speed-up of 2 workers over the loop: {t_loop / t_two:.2f}x "
          "(target >= 1.7x on a quiet 2-core machine)")
    print(f"one `cavchar fit` command per record, one after the other: {t_commands:.1f} s "
          f"wall; the batch on a new local cluster of 2 workers is "
          f"{t_commands / t_two:.1f}x as fast")
    print(f"standing cluster (workers warm from an earlier batch): 1 worker {warm_one:.1f} s, "
          f"2 workers {warm_two:.1f} s wall; speed-up of 2 workers over the loop "
          f"{t_loop / warm_two:.2f}x; per-record overhead (1 worker vs loop) "
          f"{(warm_one - t_loop) / n:.3f} s = {(warm_one - t_loop) / t_loop:.1%} of a fit")
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
