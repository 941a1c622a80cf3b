"""Batch fits on a real Dask cluster over loopback, and a worker killed mid-fit.

The cluster is started with Dask's own commands, as docs/batch.md tells a group to
do: ``dask scheduler`` and two ``dask worker`` processes (one thread each) on
127.0.0.1 with free ports.  Every process is started in its own session and torn
down at the end of the module, also when a test fails.  Outside references: Dask's
scheduler does the retrying (``distributed.scheduler.allowed-failures``); SQLite's
own ``PRAGMA integrity_check`` judges the log.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import socket
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path

import pandas as pd
import pytest

from cavchar.cli.main import main

pytestmark = pytest.mark.cluster  # in the default run (CI); -m "not cluster" leaves it out

REPO = Path(__file__).resolve().parents[1]
START_TIMEOUT_S = 120.0  # scheduler and workers up (imports are slow on a busy machine)
BATCH_TIMEOUT_S = 600.0


def _dask() -> str:
    beside = Path(sys.executable).with_name("dask")
    found = str(beside) if beside.exists() else shutil.which("dask")
    assert found, "the `dask` command (installed with dask.distributed) is missing"
    return found


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _stop(process: subprocess.Popen) -> None:
    """SIGTERM to the process group we started, SIGKILL after 15 s."""
    if process.poll() is not None:
        return
    try:
        os.killpg(process.pid, signal.SIGTERM)
        process.wait(timeout=15)
    except (ProcessLookupError, subprocess.TimeoutExpired):
        try:
            os.killpg(process.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        process.wait(timeout=15)


@pytest.fixture(scope="module")
def loopback(tmp_path_factory):
    """``dask scheduler`` + 2 x ``dask worker`` on 127.0.0.1; yields (address, client)."""
    from distributed import Client

    from cavchar.batch.runner import _quiet_dask

    _quiet_dask()
    logs = tmp_path_factory.mktemp("cluster-logs")
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(
        [str(REPO), *filter(None, [os.environ.get("PYTHONPATH")])])}
    env.pop("CAVCHAR_SCHEDULER", None)
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    processes: list[subprocess.Popen] = []

    def start(name: str, *argv: str) -> None:
        out = open(logs / f"{name}.log", "wb")  # noqa: SIM115 - closed with the process
        processes.append(subprocess.Popen([_dask(), *argv], stdout=out, stderr=out, env=env,
                                          cwd=logs, start_new_session=True))

    client = None
    try:
        start("scheduler", "scheduler", "--host", "127.0.0.1", "--port", str(port),
              "--no-dashboard")
        for name in ("worker-1", "worker-2"):
            start(name, "worker", address, "--host", "127.0.0.1", "--nthreads", "1",
                  "--nworkers", "1", "--no-dashboard", "--name", name)
        client = Client(address, timeout=START_TIMEOUT_S)
        client.wait_for_workers(2, timeout=START_TIMEOUT_S)
        yield address, client
    finally:
        if client is not None:
            client.close()
        for process in reversed(processes):
            _stop(process)


SIMULATE = [
    ["jumps", "--lifetime", "20ms", "--n-thermal", "0.1", "--duration", "6s", "--seed", "21"],
    ["jumps", "--lifetime", "20ms", "--n-thermal", "0.1", "--duration", "6s", "--seed", "22"],
    ["jumps", "--lifetime", "20ms", "--n-thermal", "0.1", "--duration", "6s", "--seed", "23"],
    ["ringdown", "--signal", "power", "--lifetime", "4ms", "--duration", "30ms", "--points",
     "200", "--noise", "0.01", "--seed", "24"],
]

BATCH = """\
seed = 3

[defaults]
freq = "6.8GHz"
stage_temp = "20mK"
max_steps = {steps}
sampler = "{sampler}"
allow_unconverged = true
cavity = "C9"
cooldown = "CD9"

[[entry]]
kind = "jumps"
file = "jumps-*.csv"

[[entry]]
kind = "ringdown"
file = "ringdown.csv"
signal = "power"
"""


def _records(folder: Path, steps: int, sampler: str = "importance") -> Path:
    for i, argv in enumerate(SIMULATE):
        name = "ringdown.csv" if argv[0] == "ringdown" else f"jumps-{i + 1}.csv"
        assert main(["simulate", *argv, "-o", str(folder), "--file", name]) == 0
    batch = folder / "batch.toml"
    batch.write_text(BATCH.format(steps=steps, sampler=sampler))
    return batch


def _log_rows(path: Path) -> tuple[list[tuple], str]:
    with sqlite3.connect(path) as db:
        check = db.execute("PRAGMA integrity_check").fetchone()[0]
        rows = db.execute("SELECT source FROM fits").fetchall()
    return rows, check


def test_batch_on_a_loopback_cluster(loopback, tmp_path, capsys):
    address, client = loopback
    batch = _records(tmp_path, steps=100)
    workers = set(client.scheduler_info()["workers"])
    code = main(["batch", "run", str(batch), "-o", str(tmp_path / "out"), "--scheduler",
                 address, "--log", "--log-file", str(tmp_path / "lab.sqlite"), "--log-create",
                 "--no-figures", "--quiet"])
    out, err = capsys.readouterr()
    assert code == 0, out + err
    table = pd.read_csv(tmp_path / "out" / "summary.csv")
    assert list(table["status"]) == ["fitted"] * 4
    used = set()
    for label in table["label"]:
        state = json.loads((tmp_path / "out" / label / "batch-entry.json").read_text())
        used.add(state["worker"])
        assert (tmp_path / "out" / label / "result.json").is_file()
    assert used <= workers  # fitted by the `dask worker` processes, not by this one
    rows, check = _log_rows(tmp_path / "lab.sqlite")
    assert check == "ok" and len(rows) == 4
    # the same batch again: everything skipped, nothing logged twice
    code = main(["batch", "run", str(batch), "-o", str(tmp_path / "out"), "--scheduler",
                 address, "--log", "--log-file", str(tmp_path / "lab.sqlite"), "--quiet"])
    out, _ = capsys.readouterr()
    assert code == 0 and "skipped 4 of 4 entries done before" in out
    assert len(_log_rows(tmp_path / "lab.sqlite")[0]) == 4


def test_a_worker_killed_mid_fit_is_survived(loopback, tmp_path):
    from cavchar.batch import fit_many
    from cavchar.batch.worker import EVENT_TOPIC

    address, client = loopback
    # ensemble fits of a few seconds (importance sampling ends these in a tenth of one):
    # time to kill one
    batch = _records(tmp_path, steps=3000, sampler="ensemble")
    before = len(client.get_events(EVENT_TOPIC))
    outcome: list = []

    def run() -> None:
        try:
            outcome.append(fit_many(batch, scheduler=address, out=tmp_path / "out", log=True,
                                    log_file=tmp_path / "lab.sqlite", log_create=True,
                                    figures=False, report=False))
        except BaseException as exc:  # reported by the assertion below
            outcome.append(exc)

    thread = threading.Thread(target=run, daemon=True)
    thread.start()
    # the first entry a worker announces: kill that worker's process while it fits
    deadline = time.monotonic() + START_TIMEOUT_S
    victim = None
    while victim is None and time.monotonic() < deadline:
        events = client.get_events(EVENT_TOPIC)[before:]
        if events:
            victim = events[0][1]
        else:
            time.sleep(0.1)
    assert victim is not None, "no worker started a fit"
    time.sleep(0.5)  # inside the fit (imports done at the first task of the module)
    pid = client.run(os.getpid, workers=[victim["worker"]])[victim["worker"]]
    os.kill(pid, signal.SIGKILL)
    thread.join(BATCH_TIMEOUT_S)
    assert not thread.is_alive(), "the batch did not finish"
    run_result = outcome[0]
    assert not isinstance(run_result, BaseException), run_result
    assert run_result.exit_code == 0
    table = run_result.summary.set_index("label")
    assert (table["status"] == "fitted").all()
    assert table.loc[victim["label"], "attempts"] >= 2  # retried on a live worker
    rows, check = _log_rows(tmp_path / "lab.sqlite")
    assert check == "ok"
    assert len(rows) == len(table) == len(set(rows))  # every entry exactly once
    # no partial folder of the killed attempt
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == sorted(
        [*table.index, "summary.csv"])


DOC = REPO / "docs" / "batch.md"
DOC_ADDRESS = "tcp://HEAD:8786"
DOC_BATCH = "examples/batch/cooldown.toml"


def _doc_python_block() -> tuple[int, str]:
    """(line, code) of the Python block of docs/batch.md that connects to a scheduler."""
    lines = DOC.read_text(encoding="utf-8").splitlines()
    blocks, start = [], None
    for number, line in enumerate(lines, 1):
        if start is None and line.strip() == "```python":
            start = number
        elif start is not None and line.strip() == "```":
            blocks.append((start + 1, "\n".join(lines[start:number - 1]) + "\n"))
            start = None
    found = [(n, code) for n, code in blocks if f'Client("{DOC_ADDRESS}")' in code]
    assert len(found) == 1, f"docs/batch.md: expected one Python block with {DOC_ADDRESS}"
    return found[0]


def test_the_python_example_of_the_docs_runs_on_the_loopback_cluster(loopback, tmp_path,
                                                                     monkeypatch):
    # the block as docs/batch.md shows it, with the loopback scheduler for HEAD and this
    # module's small batch (100 sampler steps) for the example batch, so it stays cheap
    address, client = loopback
    batch = _records(tmp_path, steps=100)
    line, code = _doc_python_block()
    assert DOC_BATCH in code
    code = code.replace(DOC_ADDRESS, address).replace(DOC_BATCH, batch.as_posix())
    monkeypatch.chdir(tmp_path)
    namespace: dict = {}
    try:
        # blank lines in front keep the block's line numbers in a traceback
        exec(compile("\n" * (line - 1) + code, str(DOC), "exec"), namespace)
        run, doc_client = namespace["run"], namespace["client"]
        assert doc_client.status == "running"  # a client passed in stays open
    finally:
        if "client" in namespace:
            namespace["client"].close()
    table = run.summary
    assert isinstance(table, pd.DataFrame)
    assert list(table["status"]) == ["fitted"] * 4
    assert set(run.results) == set(table["label"])
    assert {type(r).__name__ for r in run.results.values()} == {"FitResult"}
    assert (tmp_path / "batch-out" / "summary.csv").is_file()
    workers = set(client.scheduler_info()["workers"])
    for label in table["label"]:
        state = json.loads((tmp_path / "batch-out" / label / "batch-entry.json").read_text())
        assert state["worker"] in workers  # fitted on the loopback cluster
