"""Batch fits (docs/batch.md): reproducibility across clusters, failures per entry,
resumption, the batch-file check, the documented commands.

Outside references: the single-record fits these results are compared with are the
project's own, so the check here is *sameness*, not accuracy: the same entry must give
the same bytes whether Dask fits it on 1 or 2 worker processes or this process fits it
(the accuracy of each fit is tested against outside sources in test_fit_*.py).
The entry seed rule is checked against hashlib's SHA-256 (Python standard library).
Records are tiny and the sampler runs 100 steps (``allow_unconverged``) to keep the
whole module cheap; convergence does not matter for sameness.  One LocalCluster of 2
processes is shared by the module (through ``client=`` and ``$CAVCHAR_SCHEDULER``);
the tests of the default path start their own.
"""

from __future__ import annotations

import hashlib
import json
import os
import platform
import re
import shlex
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from cavchar.cli.main import main

REPO = Path(__file__).resolve().parents[1]
EXAMPLE = REPO / "examples" / "batch"

#: fields of result.json that describe the run, not the result (docs/batch.md)
RUN_FIELDS = ("created_at", "elapsed_s")

SIMULATE = {
    "jumps.csv": ["jumps", "--lifetime", "20ms", "--n-thermal", "0.1", "--duration", "4s",
                  "--seed", "3"],
    "sampled.csv": ["sampled", "--lifetime", "20ms", "--n-thermal", "0.1", "--duration", "2s",
                    "--interval", "2ms", "--seed", "4"],
    "probes.csv": ["probes", "--lifetime", "20ms", "--n-thermal", "0.1", "--duration", "1s",
                   "--interval", "1ms", "--visibility", "0.9", "--phase-per-photon", "180deg",
                   "--seed", "5"],
    "ringdown.csv": ["ringdown", "--signal", "power", "--lifetime", "4ms", "--duration", "30ms",
                     "--points", "200", "--noise", "0.01", "--seed", "6"],
}

MIXED = """\
seed = 11

[defaults]
freq = "6.8GHz"
stage_temp = "20mK"
max_steps = 100
allow_unconverged = true
cavity = "C1"
cooldown = "CD1"

[[entry]]
kind = "jumps"
file = "jumps.csv"

[[entry]]
kind = "sampled"
file = "sampled.csv"

[[entry]]
kind = "probes"
file = "probes.csv"
phase_per_photon = "180deg"
visibility = 0.9

[[entry]]
kind = "ringdown"
file = "ringdown.csv"
signal = "power"
"""


def _simulate(folder: Path, names=tuple(SIMULATE)) -> None:
    for name in names:
        assert main(["simulate", *SIMULATE[name], "-o", str(folder), "--file", name]) == 0


def _without_run_fields(path: Path) -> bytes:
    """result.json with the values of the run fields blanked (the rest byte for byte)."""
    text = path.read_text(encoding="utf-8")
    for name in RUN_FIELDS:
        text, count = re.subn(rf'"{name}": [^,\n}}]+', f'"{name}": null', text)
        assert count >= 1, f"{name} not in {path}"
    return text.encode()


@pytest.fixture(scope="module")
def mixed(tmp_path_factory):
    folder = tmp_path_factory.mktemp("mixed")
    _simulate(folder)
    (folder / "batch.toml").write_text(MIXED)
    return folder


@pytest.fixture(scope="module")
def cluster():
    """A LocalCluster of 2 single-threaded worker processes, as `batch run` starts."""
    from distributed import Client, LocalCluster

    from cavchar.batch.runner import _quiet_dask

    _quiet_dask()
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address=None) as local, Client(local) as client:
        yield client


@pytest.fixture
def on_cluster(cluster, monkeypatch):
    """`cavchar batch run` without --workers sends its work to the shared cluster."""
    monkeypatch.setenv("CAVCHAR_SCHEDULER", cluster.scheduler.address)
    return cluster


@pytest.fixture(scope="module")
def two_workers(mixed, cluster):
    from cavchar.batch import fit_many

    return fit_many(mixed / "batch.toml", cluster, out=mixed / "out2", figures=False,
                    report=False)


def test_entry_seed_is_sha256_of_batch_seed_and_label():
    from cavchar.batch import entry_seed

    # docs/batch.md: first 31 bits of SHA-256("<batch seed>:<label>") (hashlib reference)
    digest = hashlib.sha256(b"11:jumps").digest()
    assert entry_seed(11, "jumps") == int.from_bytes(digest[:4], "big") >> 1
    assert entry_seed(11, "jumps") != entry_seed(12, "jumps")


def test_two_workers_one_worker_and_in_process_give_the_same_bytes(mixed, two_workers):
    from threadpoolctl import threadpool_limits

    from cavchar.batch import fit_many, read_batch_file
    from cavchar.batch.options import fit_from_argv

    assert two_workers.exit_code == 0, two_workers.summary[["label", "status", "message"]]
    assert set(two_workers.summary["status"]) == {"fitted"}
    assert len(two_workers.summary["label"]) == 4
    # the default path: fit_many starts (and closes) its own LocalCluster of 1 process
    one = fit_many(mixed / "batch.toml", out=mixed / "out1", workers=1, figures=False,
                   report=False)
    assert one.exit_code == 0
    plan = read_batch_file(mixed / "batch.toml")
    assert [e.kind for e in plan.entries] == ["jumps", "sampled", "probes", "ringdown"]
    for entry in plan.entries:
        a = _without_run_fields(mixed / "out2" / entry.label / "result.json")
        b = _without_run_fields(mixed / "out1" / entry.label / "result.json")
        assert a == b, entry.label
        # the same entry fitted in this process, written by the same writer, with one
        # BLAS thread as on the workers (several split sums differently: last digits of
        # a few log-posterior values change; threadpoolctl comes with the test extra)
        with threadpool_limits(1):
            result, _ = fit_from_argv(entry.kind, list(entry.argv), entry.seed,
                                      entry.check_every)
        alone = mixed / "alone" / entry.label
        alone.mkdir(parents=True)
        result.to_json(alone / "result.json")
        assert _without_run_fields(alone / "result.json") == a, entry.label
        # the seed the summary reports is the one in the result
        stored = json.loads(a)
        assert stored["settings"]["sampler"]["seed"] == entry.seed
        assert shlex.join(stored["provenance"]["command_line"]) == entry.command


def test_batch_result_equals_the_printed_single_record_command(mixed, two_workers, run_cli,
                                                               monkeypatch):
    """`batch check` prints the `cavchar fit` command of each entry; run as a command it
    gives the batch's numbers (only the provenance of the command line differs)."""
    from cavchar.batch import read_batch_file

    entry = read_batch_file(mixed / "batch.toml").entries[0]
    code, out, _ = run_cli("batch", "check", mixed / "batch.toml")
    assert code == 0 and entry.command in out
    words = entry.command.split()[1:]
    # the command line recorded is the argv given to the command, never sys.argv
    monkeypatch.setattr("sys.argv", ["some-other-program", "--flag"])
    from threadpoolctl import threadpool_limits

    argv = [*words, "--quiet", "-o", str(mixed / "cli-alone")]
    with threadpool_limits(1):
        code, _, err = run_cli(*argv)
    assert code == 0, err
    mine = json.loads(_without_run_fields(mixed / "cli-alone" / "result.json"))
    theirs = json.loads(_without_run_fields(mixed / "out2" / entry.label / "result.json"))
    assert mine["provenance"]["command_line"] == ["cavchar", *argv]
    for data in (mine, theirs):
        data["provenance"].pop("command_line")
    assert mine == theirs


def test_summary_has_one_row_per_entry_with_units(mixed, two_workers):
    table = pd.read_csv(mixed / "out2" / "summary.csv")
    assert list(table["label"]) == ["jumps", "sampled", "probes", "ringdown"]
    # T_c of 20 ms / 4 ms simulated: the medians are in seconds (not ms)
    assert table["lifetime_median_s"].between(1e-3, 0.2).all()
    assert (table["exit_class"] == 0).all()
    assert table.loc[table["kind"] == "ringdown", "n_thermal_median"].isna().all()


BAD = """\
[defaults]
freq = "6.8GHz"
max_steps = 100
allow_unconverged = true

[[entry]]
kind = "jumps"
file = "jumps.csv"

[[entry]]
kind = "jumps"
file = "no-such-record.csv"

[[entry]]
kind = "spectrum"
file = "jumps.csv"
label = "wrong-kind"

[[entry]]
kind = "jumps"
file = "jumps.csv"
label = "bad-unit"
stage_temp = "20 parsec"

[[entry]]
kind = "ringdown"
file = "ringdown.csv"
sigal = "power"
"""


def test_check_reports_every_bad_entry_at_once_with_its_line(tmp_path, run_cli):
    _simulate(tmp_path, ["jumps.csv", "ringdown.csv"])
    batch = tmp_path / "bad.toml"
    batch.write_text(BAD)
    for action in ("check", "run"):
        extra = ["-o", tmp_path / "out"] if action == "run" else []
        code, out, err = run_cli("batch", action, batch, *extra)
        assert code == 2
        lines = err.strip().splitlines()
        assert lines[0].startswith(f"cavchar batch {action}: error: 4 problems")
        assert len(lines) == 5 and "Traceback" not in err
        assert "line 12: no such file: no-such-record.csv" in lines[1]
        assert "line 15: unknown kind 'spectrum'" in lines[2]
        assert "line 23: option stage-temp" in lines[3] and "stage" in lines[3]
        assert "line 28: unknown option 'sigal'" in lines[4] and "did you mean signal" in err
        assert not (tmp_path / "out").exists()  # nothing written, nothing fitted


FAILING = """\
[defaults]
freq = "6.8GHz"
max_steps = 100

[[entry]]
kind = "jumps"
file = "jumps.csv"
allow_unconverged = true

[[entry]]
kind = "jumps"
file = "garbled.csv"

[[entry]]
kind = "ringdown"
file = "ringdown.csv"
signal = "power"
sampler = "ensemble"
"""


def test_failed_entries_are_reported_and_the_others_fitted(tmp_path, run_cli, on_cluster):
    _simulate(tmp_path, ["jumps.csv", "ringdown.csv"])
    (tmp_path / "garbled.csv").write_text("time,photons\n0,0\n0.5,one\n1.0,0\n")
    batch = tmp_path / "failing.toml"
    batch.write_text(FAILING)
    code, out, err = run_cli("batch", "run", batch, "-o", tmp_path / "out", "--no-figures",
                             "--quiet")
    assert code == 6, err  # docs/batch.md: some entries without a result
    assert "Traceback" not in out + err
    table = pd.read_csv(tmp_path / "out" / "summary.csv").set_index("label")
    assert table.loc["jumps", "status"] == "fitted"
    assert table.loc["garbled", "status"] == "bad input"
    assert table.loc["garbled", "exit_class"] == 2
    # the record's own error names the record file and its line
    assert "garbled.csv, line 3" in table.loc["garbled", "message"]
    assert table.loc["garbled", "line"] == 10  # the entry's line in the batch file
    # 100 steps cannot meet the convergence rules (50 autocorrelation times)
    assert table.loc["ringdown", "status"] == "not converged"
    assert table.loc["ringdown", "exit_class"] == 3
    assert "2 of 3 entries failed: garbled, ringdown" in err
    assert "failing.toml, line 10: garbled: bad input" in out
    # only the fitted entry has a folder, and no partial folder is left behind
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == [
        "jumps", "report.html", "summary.csv"]
    assert (tmp_path / "out" / "jumps" / "result.json").is_file()


def test_nothing_fitted_is_exit_6_with_a_summary(tmp_path, run_cli, on_cluster):
    (tmp_path / "garbled.csv").write_text("time,photons\n0,zero\n")
    batch = tmp_path / "none.toml"
    batch.write_text('[[entry]]\nkind = "jumps"\nfile = "garbled.csv"\n')
    code, out, err = run_cli("batch", "run", batch, "-o", tmp_path / "out", "--quiet")
    assert code == 6 and "Traceback" not in out + err
    assert "1 of 1 entries failed" in err
    table = pd.read_csv(tmp_path / "out" / "summary.csv")
    assert list(table["status"]) == ["bad input"]
    assert "garbled.csv, line 2" in table.loc[0, "message"]
    assert "no report.html: no entry has a result" in out
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == ["summary.csv"]


def test_resume_skips_done_entries_and_refits_only_a_deleted_one(mixed, two_workers, run_cli,
                                                                   monkeypatch):
    out = mixed / "resume"
    shutil.copytree(mixed / "out2", out)
    before = {p.name: (p / "result.json").read_bytes() for p in out.iterdir() if p.is_dir()}
    code, text, err = run_cli("batch", "run", mixed / "batch.toml", "-o", out, "--quiet",
                              "--no-figures")
    assert code == 0, err
    assert "skipped 4 of 4 entries done before" in text
    assert {p.name: (p / "result.json").read_bytes()
            for p in out.iterdir() if p.is_dir()} == before  # untouched
    shutil.rmtree(out / "probes")
    # --workers beats $CAVCHAR_SCHEDULER (docs/batch.md): this address is never tried
    monkeypatch.setenv("CAVCHAR_SCHEDULER", "tcp://127.0.0.1:9")
    code, text, err = run_cli("batch", "run", mixed / "batch.toml", "-o", out, "--quiet",
                              "--no-figures", "--workers", "1")
    assert code == 0, err
    assert "skipped 3 of 4 entries done before" in text
    table = pd.read_csv(out / "summary.csv").set_index("label")
    assert table.loc["probes", "status"] == "fitted"
    assert (table.drop(index="probes")["status"] == "skipped (done before)").all()
    for name, data in before.items():
        now = out / name / "result.json"
        if name == "probes":  # refitted: the same bytes apart from the run fields
            assert _without_run_fields(now) == _without_run_fields(
                mixed / "out2" / name / "result.json")
        else:
            assert now.read_bytes() == data


def test_other_settings_in_an_output_folder_need_force(mixed, two_workers, run_cli):
    out = mixed / "other"
    shutil.copytree(mixed / "out2", out)
    code, _, err = run_cli("batch", "run", mixed / "batch.toml", "-o", out, "--seed", "12",
                           "--quiet")
    assert code == 2
    assert err.count("its output folder holds a fit of other inputs or settings") == 4


def test_scheduler_and_workers_exclude_each_other(mixed, run_cli):
    code, _, err = run_cli("batch", "run", mixed / "batch.toml", "-o", mixed / "x",
                           "--workers", "2", "--scheduler", "tcp://127.0.0.1:9")
    assert code == 2 and "exclude each other" in err
    assert not (mixed / "x").exists()


def _text_lines(path: Path) -> list[str]:
    import gzip

    data = path.read_bytes()
    return (gzip.decompress(data) if path.suffix == ".gz" else data).decode().splitlines()


def test_example_records_are_what_the_script_writes(tmp_path):
    """examples/batch/make_records.py writes the committed records byte for byte."""
    import runpy

    script = runpy.run_path(str(EXAMPLE / "make_records.py"))
    assert script["main"]([str(tmp_path)]) == 0
    made = sorted(p.name for p in (tmp_path / "records").iterdir())
    assert made == sorted(p.name for p in (EXAMPLE / "records").iterdir())
    for name in made:
        # the same text, numbers equal to 1e-12 relative: numpy builds may differ in the
        # last digit of log10/exp (SIMD code paths), which the written shortest repr shows
        ours = _text_lines(tmp_path / "records" / name)
        committed = _text_lines(EXAMPLE / "records" / name)
        assert len(ours) == len(committed), name
        for a, b in zip(ours, committed, strict=True):
            if a != b:
                x = np.array([float(v) for v in a.split(",")])
                y = np.array([float(v) for v in b.split(",")])
                assert np.allclose(x, y, rtol=1e-12, atol=0), (name, a, b)


def test_documented_commands_on_the_example(tmp_path, run_cli, monkeypatch, on_cluster):
    """The commands of docs/batch.md and examples/batch/README.md, on a copy of the example
    with a 100-step sampler (the verbatim run is the slow test below)."""
    code, out, err = run_cli("batch", "check", EXAMPLE / "cooldown.toml")
    assert code == 0, err
    assert "6 entries (2 jumps, 2 ringdown, 1 sampled, 1 probes), batch seed 2031" in out
    copy = tmp_path / "example"
    shutil.copytree(EXAMPLE, copy)
    text = (copy / "cooldown.toml").read_text()
    text = text.replace('stage_temp = "18mK"\n',
                        'stage_temp = "18mK"\nmax_steps = 100\nallow_unconverged = true\n')
    (copy / "cooldown.toml").write_text(text)
    monkeypatch.chdir(tmp_path)
    code, out, err = run_cli("batch", "run", copy / "cooldown.toml", "-o", "batch-out",
                             "--no-figures")
    assert code == 0, out + err
    assert "all 6 entries have a result" in out
    assert (tmp_path / "batch-out" / "report.html").is_file()
    code, out, err = run_cli("batch", "run", copy / "cooldown.toml", "-o", "batch-out", "--log",
                             "--log-file", "lab.sqlite", "--log-create")
    assert code == 0, err
    assert "skipped 6 of 6 entries done before" in out
    from cavchar.tracking import open_log

    with open_log(tmp_path / "lab.sqlite") as log:
        assert len(log.fits(cavity="Kestrel", cooldown="2031-D", summaries=False)) == 3
        assert len(log.fits(cavity="Harrier", cooldown="2031-D", summaries=False)) == 3


@pytest.mark.slow
def test_example_verbatim(tmp_path, run_cli, monkeypatch):
    """docs/batch.md: `cavchar batch run examples/batch/cooldown.toml -o batch-out`, as
    written (full sampler; the example's true T_c within the 95% intervals)."""
    monkeypatch.chdir(tmp_path)
    code, out, err = run_cli("batch", "run", EXAMPLE / "cooldown.toml", "-o", "batch-out")
    assert code == 0, out + err
    table = pd.read_csv(tmp_path / "batch-out" / "summary.csv").set_index("label")
    truth = {"kestrel": 0.046, "harrier": 0.012}  # examples/batch/README.md (invented)
    for label, row in table.iterrows():
        true = truth[label.split("-")[0]]
        assert row["lifetime_lo95_s"] <= true <= row["lifetime_hi95_s"], label


_FAULTS = """
import resource
import numpy as np
from cavchar.batch.worker import _reuse_freed_memory

def faults():
    start = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    for _ in range(200):
        block = np.ones(1 << 17)  # 1 MiB, above glibc's initial 128 KiB mmap threshold
        del block
    return resource.getrusage(resource.RUSAGE_SELF).ru_minflt - start

before = faults()
tuned = _reuse_freed_memory()
faults()  # the heap grows once
print(tuned, before, faults())
"""


@pytest.mark.skipif(platform.libc_ver()[0] != "glibc", reason="mallopt is glibc's")
def test_a_worker_reuses_freed_memory_despite_the_nannys_trim_setting():
    # Dask's nanny starts workers with MALLOC_TRIM_THRESHOLD_=65536; then every large
    # array is a fresh mmap whose pages fault in again.  Outside reference: the
    # kernel's own count of minor page faults (getrusage).  200 arrays of 1 MiB are
    # 51,200 pages of 4 KiB to fault in without reuse, almost none with it.
    env = {**os.environ, "MALLOC_TRIM_THRESHOLD_": "65536",
           "PYTHONPATH": os.pathsep.join([str(Path(__file__).resolve().parents[1]),
                                          *filter(None, [os.environ.get("PYTHONPATH")])])}
    done = subprocess.run([sys.executable, "-c", _FAULTS], env=env, capture_output=True,
                          text=True, timeout=120, check=True)
    tuned, before, after = done.stdout.split()
    assert tuned == "True"
    assert int(before) > 40_000  # the nanny's setting: every array faulted in anew
    assert int(after) < int(before) / 20
