"""Crash safety and concurrency of the cooldown log, with real separate processes.

* A writer killed with SIGKILL in the middle of a transaction (after it wrote
  several MB of uncommitted pages to the write-ahead log) leaves a log that
  passes SQLite's integrity check with every earlier fit intact and no trace
  of the interrupted one (SQLite's documented atomic commit, sqlite.org/atomiccommit.html
  and sqlite.org/wal.html).
* Two processes logging at the same time both succeed (WAL + busy timeout).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time

import numpy as np
import pytest

from cavchar.tracking.entries import entry_from_result
from cavchar.tracking.store import open_log
from tests.conftest import REPO
from tests.test_tracking_store import fresh_log, random_result

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="needs SIGKILL")

WRITER = textwrap.dedent("""
    import sys, time
    from pathlib import Path
    import numpy as np
    import cavchar.tracking.store as store
    from cavchar.tracking.entries import FitEntry

    log_path, marker = sys.argv[1], Path(sys.argv[2])
    original = store._write_draws

    def write_then_hang(con, fit_id, draws):
        original(con, fit_id, draws)          # rows are written, not committed
        marker.write_text("inside the transaction")
        time.sleep(600)                       # killed here

    store._write_draws = write_then_hang
    n = 1_500_000                              # 3 x 6 MB of float32: spills to the WAL file
    rng = np.random.default_rng(0)
    entry = FitEntry(kind="jumps", input_sha256="9" * 64, settings={"big": True},
                     draws={"lifetime": rng.uniform(1e-3, 2e-3, n),
                            "n_thermal": rng.uniform(1e-3, 2e-3, n),
                            "effective_temperature": rng.uniform(0.04, 0.05, n)})
    with store.open_log(log_path) as log:
        log.add_fit(entry, "A", "cd1")
""")

ADDER = textwrap.dedent("""
    import sys, time
    from pathlib import Path
    import numpy as np
    from cavchar.tracking.entries import FitEntry
    from cavchar.tracking.store import open_log

    log_path, start, tag, count = sys.argv[1], Path(sys.argv[2]), sys.argv[3], int(sys.argv[4])
    rng = np.random.default_rng(int(tag, 16))
    while not start.exists():                 # both processes begin together
        time.sleep(0.005)
    for i in range(count):
        entry = FitEntry(kind="jumps", input_sha256=f"{tag}{i:063x}", settings={"i": i},
                         draws={"lifetime": rng.normal(2e-3, 1e-4, 4000)})
        with open_log(log_path, busy_timeout_s=60) as log:
            log.add_fit(entry, "A", "cd1")
""")


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = str(REPO) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def test_sigkill_mid_transaction_leaves_a_consistent_log(tmp_path):
    path = tmp_path / "log.sqlite"
    rng = np.random.default_rng(1)
    before = {}
    with fresh_log(path) as log:
        for i in range(3):
            fit_id = log.add_fit(entry_from_result(random_result(rng, sha=f"{i:064x}")), "A",
                                 "cd1")
            before[fit_id] = (log.fit(fit_id), log.draws(fit_id))
    script = tmp_path / "writer.py"
    script.write_text(WRITER)
    marker = tmp_path / "inside"
    proc = subprocess.Popen([sys.executable, str(script), str(path), str(marker)], env=_env(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 120
        while not marker.exists():
            assert proc.poll() is None, proc.stderr.read().decode()
            assert time.monotonic() < deadline, "the writer never reached its transaction"
            time.sleep(0.02)
        wal = path.with_name(path.name + "-wal")
        assert wal.stat().st_size > 4_000_000  # uncommitted pages really are on disk
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
    assert proc.returncode == -signal.SIGKILL

    with open_log(path, create=False) as log:
        assert log.integrity_check() == "ok"
        fits = log.fits()
        assert [f.id for f in fits] == sorted(before)  # the interrupted fit is not there
        for fit in fits:
            old_fit, old_draws = before[fit.id]
            assert fit == old_fit
            new_draws = log.draws(fit.id)
            assert set(new_draws) == set(old_draws)
            for name in old_draws:
                np.testing.assert_array_equal(new_draws[name], old_draws[name])
        assert log._query("SELECT COUNT(*) FROM draws WHERE fit_id NOT IN "
                          "(SELECT id FROM fits)")[0][0] == 0
        # and the log takes new fits afterwards
        log.add_fit(entry_from_result(random_result(rng, sha="e" * 64)), "A", "cd2")
        assert len(log.fits()) == 4


def test_two_concurrent_writers_both_land(tmp_path):
    path = tmp_path / "log.sqlite"
    fresh_log(path).close()
    script = tmp_path / "adder.py"
    script.write_text(ADDER)
    start = tmp_path / "go"
    count = 15
    procs = [subprocess.Popen([sys.executable, str(script), str(path), str(start), tag,
                               str(count)], env=_env(), stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE) for tag in ("a", "b")]
    time.sleep(0.5)  # let both import and wait at the start line
    start.write_text("go")
    for proc in procs:
        _, err = proc.communicate(timeout=180)
        assert proc.returncode == 0, err.decode()
    with open_log(path, create=False) as log:
        assert log.integrity_check() == "ok"
        fits = log.fits()
        assert len(fits) == 2 * count
        tags = sorted(f.input_sha256[0] for f in fits)
        assert tags == ["a"] * count + ["b"] * count
        assert all(len(log.draws(f.id)["lifetime"]) == 4000 for f in fits)
