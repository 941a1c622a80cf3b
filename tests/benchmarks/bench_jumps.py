"""Benchmark: jump-record fits (issue targets in brackets).

* exact record, 10^6 change points: read + sufficient statistics [< 1 s], against
  pandas.read_csv of the same file (the peer: the bare cost of parsing it);
* the whole exact fit, converged with >= 4,000 effective draws [< 5 s];
* sampled record, 10^6 samples: whole fit [< 30 s];
* peak memory of reading a 10^7-row record and its statistics [< 2 GB]
  (``--memory``; measured in a child process with ru_maxrss).

Run: ``python tests/benchmarks/bench_jumps.py [--memory]``; medians of repeats.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

from timing import median_seconds


def _exact_file(folder: Path, rows: int) -> Path:
    from cavchar.io.writers import write_jump_record
    from cavchar.simulate import simulate_jump_record

    lifetime, n_th = 1e-3, 0.2
    rate = 2 * n_th * (1 + n_th) / lifetime  # stationary jump rate (up + down) per second
    record = simulate_jump_record(lifetime, n_th, duration=rows / rate, seed=1)
    path = folder / f"exact_{rows}.csv"
    write_jump_record(record, path)
    return path


def main() -> None:
    import numpy as np
    import pandas as pd

    from cavchar.fits.jumps import fit_jumps
    from cavchar.inference import SamplerSettings
    from cavchar.io.readers import read_jump_record
    from cavchar.models.jumps import jump_statistics
    from cavchar.simulate import simulate_sampled_record

    with tempfile.TemporaryDirectory() as tmp:
        path = _exact_file(Path(tmp), 1_000_000)
        record = read_jump_record(path)
        print(f"exact record: {len(record)} change points, {record.n_jumps} jumps")

        def read_and_stats():
            rec = read_jump_record(path)
            jump_statistics(rec.time, rec.photons, rec.end_time, rec.segment)

        t_ours = median_seconds(read_and_stats, 5)
        t_peer = median_seconds(lambda: pd.read_csv(path, comment="#"), 5)
        print(f"read + statistics: {t_ours:.3f} s (target < 1 s); pandas.read_csv alone "
              f"{t_peer:.3f} s; ratio {t_ours / t_peer:.2f}")

        settings = SamplerSettings(quiet=True, seed=1, target_ess=4000)
        t_fit = median_seconds(lambda: fit_jumps(path, settings=settings), 3)
        result = fit_jumps(path, settings=settings)
        ess = min(result.diagnostics["ess_bulk"].values())
        print(f"whole exact fit: {t_fit:.2f} s (target < 5 s), smallest bulk ESS {ess:.0f}")

    times = np.arange(1_000_000) * 2e-4
    sampled = simulate_sampled_record(1e-3, 0.2, times, seed=2)
    start = time.perf_counter()
    result = fit_jumps(sampled, settings=SamplerSettings(quiet=True, seed=1))
    t_sampled = time.perf_counter() - start
    print(f"whole sampled fit, 10^6 samples: {t_sampled:.2f} s (target < 30 s), levels "
          f"{result.checks['truncation']['levels']}")

    if "--memory" in sys.argv:
        with tempfile.TemporaryDirectory() as tmp:
            path = _exact_file(Path(tmp), 10_000_000)
            code = ("import resource, sys; from cavchar.io.readers import read_jump_record; "
                    "from cavchar.models.jumps import jump_statistics; "
                    f"r = read_jump_record({str(path)!r}); "
                    "jump_statistics(r.time, r.photons, r.end_time, r.segment); "
                    "print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)")
            peak = float(subprocess.run([sys.executable, "-c", code], capture_output=True,
                                        text=True, check=True).stdout)
            print(f"peak memory, 10^7 rows read + statistics: {peak:.0f} MB (target < 2048 MB)")


if __name__ == "__main__":
    main()
