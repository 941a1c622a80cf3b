"""Benchmark: logging a fit and the trend over 1,000 logged fits.

Run: ``python tests/benchmarks/bench_tracking.py`` (prints medians and ratios).
Targets (cooldown log issue): logging a fit < 100 ms; ``trend`` over 1,000 logged
fits < 2 s.  Peers measured in the same run: writing the same result as JSON
(``FitResult.to_json``) for logging; ``np.quantile`` of the same draws already in
memory (the floor any trend must pay) for the trend.
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))


def _median_time(func, repeats):
    times = []
    for i in range(repeats):
        start = time.perf_counter()
        func(i)
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    from cavchar.tracking.entries import entry_from_result
    from cavchar.tracking.store import open_log
    from cavchar.tracking.trend import cooldown_trend
    from tests.test_tracking_store import random_result

    rng = np.random.default_rng(0)
    results = [random_result(rng, n=20_000, sha=f"{i:064x}") for i in range(21)]
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        log = open_log(folder / "bench.sqlite")
        log.add_cavity("A", freq_hz=6e9)
        for c in range(50):
            log.add_cooldown(f"cd{c:02d}", start_date=f"2026-{1 + c // 28:02d}-{1 + c % 28:02d}")

        def log_one(i):  # what `log add` does after reading the file: convert, thin, write
            log.add_fit(entry_from_result(results[i]), "A", "cd00")

        def peer_json(i):
            results[i].to_json(folder / f"r{i}.json")

        t_log = _median_time(log_one, 21)
        t_json = _median_time(peer_json, 21)
        print(f"log one fit (20,000 draws -> 4,000 stored, 3 parameters, fsync'd WAL commit): "
              f"{t_log * 1e3:.1f} ms (target < 100 ms); FitResult.to_json {t_json * 1e3:.1f} ms;"
              f" ratio log/json {t_log / t_json:.2f}")

        # fill to 1,000 fits over 50 cooldowns, in one transaction per fit as users would
        entries = [entry_from_result(r) for r in results]
        start = time.perf_counter()
        for k in range(len(log.fits()), 1000):
            base = entries[k % len(entries)]
            entry = type(base)(**{**base.__dict__, "input_sha256": f"{k:064x}"})
            log.add_fit(entry, "A", f"cd{k % 50:02d}")
        fill = time.perf_counter() - start
        print(f"filled the log to 1,000 fits in {fill:.1f} s ({fill / 979 * 1e3:.1f} ms per fit)")
        log.close()

        def trend_each(_):
            with open_log(folder / "bench.sqlite", create=False) as lg:
                cooldown_trend(lg, "A", reference="cd00", each_fit=True)

        def trend_latest(_):
            with open_log(folder / "bench.sqlite", create=False) as lg:
                cooldown_trend(lg, "A", reference="cd00")

        with open_log(folder / "bench.sqlite", create=False) as lg:
            draws = [lg.draws(f.id) for f in lg.fits()]

        def peer_quantiles(_):
            for d in draws:
                for v in d.values():
                    np.quantile(v, [0.5, 0.16, 0.84, 0.025, 0.975])

        t_each = _median_time(trend_each, 5)
        t_latest = _median_time(trend_latest, 5)
        t_q = _median_time(peer_quantiles, 5)
        print(f"trend over 1,000 fits, one row per fit, drop probabilities vs a reference: "
              f"{t_each:.3f} s (target < 2 s); in-memory quantiles of the same draws "
              f"{t_q:.3f} s; ratio {t_each / t_q:.1f}")
        print(f"trend over 1,000 fits, latest fit of each of 50 cooldowns: {t_latest:.3f} s")


if __name__ == "__main__":
    main()
