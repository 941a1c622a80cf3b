"""Benchmark: Gillespie simulation of exact jump records.

Run: ``python tests/benchmarks/bench_gillespie.py`` (prints medians and the ratio).
Target (foundation issue): 10^6 jumps simulated in < 1 s.  Peer: the same
algorithm as a plain-Python loop (the uncompiled kernel, which gives identical
records), measured in the same run on 10^5 jumps; the ratio compares time per
jump.  Also printed for orientation: writing and reading the 10^6-jump record as
CSV (the jump-record fit reads it back).
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np
from timing import median_time


def main() -> None:
    from cavchar.io import read_jump_record, write_jump_record
    from cavchar.simulate import jump_path, simulate_jump_record

    lifetime, n_th = 1e-3, 0.5  # invented values
    kappa = 1 / lifetime
    jump_rate = 2 * kappa * n_th * (1 + n_th)  # stationary mean jump rate, 1/s
    duration = 1e6 / jump_rate

    start = time.perf_counter()
    simulate_jump_record(lifetime, n_th, 1.0, seed=0)  # compiles (or loads the cache)
    print(f"first call (numba compile or cache load): {time.perf_counter() - start:.2f} s")

    t_fast, record = median_time(
        lambda: simulate_jump_record(lifetime, n_th, duration, seed=1), 7)
    print(f"Gillespie, {record.n_jumps:,} jumps: median {t_fast * 1e3:.1f} ms "
          f"({t_fast / record.n_jumps * 1e9:.1f} ns per jump); target < 1 s")

    small = duration / 10
    rng_args = (kappa, n_th, 0, 0.0, small)
    t_compiled, fast = median_time(lambda: jump_path(*rng_args, np.random.default_rng(2)), 7)
    t_python, slow = median_time(
        lambda: jump_path(*rng_args, np.random.default_rng(2), compiled=False), 3)
    assert np.array_equal(fast[0], slow[0]) and np.array_equal(fast[1], slow[1])
    jumps = fast[0].size - 1
    print(f"{jumps:,} jumps: compiled {t_compiled * 1e3:.1f} ms, plain-Python loop "
          f"{t_python * 1e3:.0f} ms (identical records), ratio {t_python / t_compiled:.0f}x")

    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "jumps.csv"
        t_write, _ = median_time(lambda: write_jump_record(record, path, force=True), 3)
        t_read, back = median_time(lambda: read_jump_record(path), 5)
        assert np.array_equal(back.time, record.time)
        size = path.stat().st_size / 1e6
        print(f"CSV of {len(record):,} rows ({size:.0f} MB): write {t_write * 1e3:.0f} ms, "
              f"read and validate {t_read * 1e3:.0f} ms")


if __name__ == "__main__":
    main()
