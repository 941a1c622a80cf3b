"""The cooldown log in a read-only folder and on a full disk: reading works, writing is
refused with a line that says what is wrong (never "damaged"), and nothing is changed.

A read-only folder does not stop root (the DAC override capability), and the test
suite often runs as root (CI does).  The commands then run in a child process
whose capability bounding set lacks ``cap_dac_override`` and ``cap_dac_read_search``
(util-linux ``setpriv``), so the folder's permission bits apply to it as to any
user.  A full disk is made by SQLite itself: ``PRAGMA max_page_count`` caps the
file, and a write beyond it fails with SQLite's own SQLITE_FULL result code, the
code a full disk gives (sqlite.org/pragma.html#pragma_max_page_count,
sqlite.org/rescode.html#full).
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import sqlite3
import stat
import subprocess
import sys

import numpy as np
import pytest

from cavchar.errors import InputError
from cavchar.tracking.entries import entry_from_result
from cavchar.tracking.store import open_log
from tests.test_tracking_store import fresh_log, random_result

REPO = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def _prefix() -> list[str]:
    """How to run a child that the permission bits bind (see the module docstring)."""
    if os.geteuid() != 0:
        return []
    setpriv = shutil.which("setpriv")
    if setpriv is None:
        pytest.skip("running as root without util-linux setpriv: a read-only folder "
                    "cannot be made to bind this process")
    return [setpriv, "--bounding-set", "-dac_override,-dac_read_search", "--"]


def _cavchar(*argv, cwd) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [REPO, env.get("PYTHONPATH")]))
    env.pop("CAVCHAR_LOG", None)
    return subprocess.run([*_prefix(), sys.executable, "-m", "cavchar.cli.main",
                           *map(str, argv)], cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=120)


def _digest(folder) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.iterdir()) if p.is_file()}


@pytest.fixture
def read_only_log(tmp_path):
    """A log with two fits in a folder made read-only (r-x for everyone)."""
    folder = tmp_path / "logs"
    folder.mkdir()
    rng = np.random.default_rng(5)
    with fresh_log(folder / "cavchar.sqlite") as log:
        for i in range(2):
            log.add_fit(entry_from_result(random_result(rng, sha=str(i) * 64)), "A", "cd1")
    random_result(rng, sha="9" * 64).to_json(tmp_path / "new.json")
    assert sorted(p.name for p in folder.iterdir()) == ["cavchar.sqlite"]  # WAL checkpointed
    folder.chmod(stat.S_IRUSR | stat.S_IXUSR | stat.S_IRGRP | stat.S_IXGRP | stat.S_IROTH
                 | stat.S_IXOTH)
    yield folder
    folder.chmod(stat.S_IRWXU)


def test_a_log_in_a_read_only_folder_can_be_listed(read_only_log, tmp_path):
    before = _digest(read_only_log)
    # the child really cannot write there (else this test would prove nothing)
    touch = subprocess.run([*_prefix(), "touch", str(read_only_log / "probe")],
                           capture_output=True)
    assert touch.returncode != 0 and not (read_only_log / "probe").exists()
    done = _cavchar("log", "list", "--json", "--log-file", read_only_log / "cavchar.sqlite",
                    cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert [row["id"] for row in json.loads(done.stdout)] == [1, 2]
    done = _cavchar("log", "check", "--log-file", read_only_log / "cavchar.sqlite",
                    cwd=tmp_path)
    assert done.returncode == 0 and "ok (2 fit(s))" in done.stdout, done.stderr
    assert _digest(read_only_log) == before  # reading left no journal and changed nothing


def test_a_write_into_a_read_only_folder_says_so(read_only_log, tmp_path):
    before = _digest(read_only_log)
    done = _cavchar("log", "add", "new.json", "--cavity", "A", "--cooldown", "cd1",
                    "--log-file", read_only_log / "cavchar.sqlite", cwd=tmp_path)
    assert done.returncode == 2
    assert "Traceback" not in done.stderr and "damaged" not in done.stderr
    assert "read-only" in done.stderr and "cavchar.sqlite" in done.stderr
    assert len(done.stderr.strip().splitlines()) <= 3  # one message and its hint
    assert _digest(read_only_log) == before
    listed = _cavchar("log", "list", "--json", "--log-file", read_only_log / "cavchar.sqlite",
                      cwd=tmp_path)
    assert [row["id"] for row in json.loads(listed.stdout)] == [1, 2]


def test_a_full_disk_says_so_and_keeps_the_log(tmp_path):
    path = tmp_path / "cavchar.sqlite"
    rng = np.random.default_rng(6)
    with fresh_log(path) as log:
        log.add_fit(entry_from_result(random_result(rng, sha="1" * 64)), "A", "cd1")
    with open_log(path) as log:
        pages = log._con.execute("PRAGMA page_count").fetchone()[0]
        # the file may not grow: the next fit's thinned draws need new pages
        log._con.execute(f"PRAGMA max_page_count = {pages}")
        with pytest.raises(InputError) as caught:
            log.add_fit(entry_from_result(random_result(rng, sha="2" * 64)), "A", "cd1")
    message = str(caught.value)
    assert "disk is full" in message and "nothing was changed" in message
    assert "damaged" not in message
    with open_log(path, readonly=True) as log:
        assert [fit.id for fit in log.fits(summaries=False)] == [1]
        assert log.integrity_check() == "ok"
    # the error class comes from SQLite's own result code, not from its wording
    con = sqlite3.connect(":memory:")
    con.execute("PRAGMA max_page_count = 2")
    con.execute("CREATE TABLE t (x BLOB)")
    with pytest.raises(sqlite3.Error) as full:
        con.execute("INSERT INTO t VALUES (zeroblob(100000))")
    assert full.value.sqlite_errorcode & 0xFF == 13  # SQLITE_FULL
