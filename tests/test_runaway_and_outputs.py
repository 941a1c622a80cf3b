"""Runaway inputs answer at once within a memory bound; output sets are atomic as a set;
the same seed gives the same result file except the documented run-specific fields.

* Runaway work: a tiny sampled record whose posterior is the prior (it used to grow the
  truncation past 400 levels and run for hours) and single absurd numbers (durations,
  intervals, n_th, levels, points, response-table photon numbers, plan lengths) are
  refused with exit code 2 before anything large is allocated.  Memory is measured with
  :mod:`tracemalloc` (numpy reports its buffers to it) and must stay below
  :data:`MEMORY_LIMIT`; the sampled fit runs in a child process under a generous
  wall-clock guard (it fails only for a runaway, not as a speed test) and its peak
  resident memory is read from the operating system.
* Output set: a SIGKILL while the files are moved into place, and a full disk, leave
  no ``result.json`` without its draws and figures; a rerun without ``--force`` finishes
  the set; temporaries of crashed writers are cleaned, live ones are not.
* Reproducibility: two runs, same seed, byte-identical result files after removing
  exactly :data:`cavchar.provenance.RUN_SPECIFIC_FIELDS`.
"""

from __future__ import annotations

import errno
import json
import os
import re
import resource
import signal
import subprocess
import sys
import textwrap
import tracemalloc
from pathlib import Path

import numpy as np
import pytest

from cavchar.provenance import RUN_SPECIFIC_FIELDS

REPO = Path(__file__).resolve().parents[1]
FIXTURE = Path(__file__).parent / "fixtures" / "fit_result_v1.json"
#: peak memory allowed for the refusal of an absurd option (bytes)
MEMORY_LIMIT = 64 * 2**20
#: peak resident memory allowed for the child that fits the tiny sampled record (bytes)
CHILD_MEMORY_LIMIT = 1024 * 2**20


def _child_env() -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(REPO) + os.pathsep + env.get("PYTHONPATH", "")
    env.setdefault("OPENBLAS_NUM_THREADS", "1")
    env.setdefault("OMP_NUM_THREADS", "1")
    return env


def test_tiny_sampled_record_is_refused_not_run_for_hours(tmp_path):
    """Three samples, photon numbers 0, 5, 0: n_th is not constrained, the posterior runs
    to the prior's 100 photons; the fit says so instead of growing the truncation."""
    record = tmp_path / "three.csv"
    record.write_text("time,photons\n0,0\n1,5\n2,0\n", encoding="utf-8")
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    run = subprocess.run([sys.executable, "-m", "cavchar.cli.main", "fit", "jumps",
                          str(record), "--sampled", "--max-steps", "200", "--quiet",
                          "--allow-unconverged"], capture_output=True, text=True,
                         timeout=600, env=_child_env(), cwd=tmp_path)
    peak_kib = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    assert run.returncode == 2, run.stderr
    assert "Traceback" not in run.stderr
    error = [line for line in run.stderr.splitlines() if "error:" in line]
    assert len(error) == 1 and "prior on n_thermal" in error[0] and "150 levels" in error[0]
    if peak_kib > before:  # the largest child so far is this one
        assert peak_kib * 1024 < CHILD_MEMORY_LIMIT
    assert sorted(p.name for p in tmp_path.iterdir()) == ["three.csv"]


RUNAWAY = [
    ("duration", ["simulate", "jumps", "--lifetime", "1ms", "--n-thermal", "0.1",
                  "--duration", "1e12s", "--file", "o.csv"], "--duration"),
    ("interval", ["simulate", "sampled", "--lifetime", "1ms", "--n-thermal", "0.1",
                  "--duration", "1s", "--interval", "1e-12s", "--file", "o.csv"], "--interval"),
    ("n-thermal", ["simulate", "jumps", "--lifetime", "1ms", "--n-thermal", "1e6",
                   "--duration", "1s", "--file", "o.csv"], "--n-thermal"),
    ("levels", ["simulate", "ringdown", "--lifetime", "1ms", "--duration", "5ms", "--signal",
                "populations", "--levels", "100000", "--file", "o.csv"], "--levels"),
    ("points", ["simulate", "ringdown", "--lifetime", "1ms", "--duration", "5ms", "--signal",
                "power", "--points", "1e10", "--file", "o.csv"], "--points"),
    ("plan-length", ["plan", "jumps", "--lifetime", "1ms", "--n-thermal", "0.1",
                     "--record-length", "1e300s", "--no-check"], "--record-length"),
    ("probe-interval", ["simulate", "probes", "--lifetime", "1ms", "--n-thermal", "0.1",
                        "--duration", "1s", "--interval", "1e-15s", "--file", "o.csv"],
     "--interval"),
]


def _peak_memory(run_cli, argv):
    """Exit code, stderr and peak traced memory in bytes of one command; a first run
    beforehand keeps the imports outside the count."""
    run_cli(*argv)
    tracemalloc.start()
    try:
        code, _, err = run_cli(*argv)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    return code, err, peak


@pytest.mark.parametrize("case", RUNAWAY, ids=[c[0] for c in RUNAWAY])
def test_absurd_size_refused_before_allocating(case, tmp_path, run_cli, monkeypatch):
    _, argv, option = case
    monkeypatch.chdir(tmp_path)
    code, err, peak = _peak_memory(run_cli, argv)
    assert code == 2 and option in err and "Traceback" not in err
    assert peak < MEMORY_LIMIT, f"{peak / 2**20:.0f} MiB"
    assert list(tmp_path.iterdir()) == []


def test_huge_photon_number_in_a_response_table(tmp_path, run_cli):
    (tmp_path / "p.csv").write_text("time,outcome\n0,0\n1e-6,1\n", encoding="utf-8")
    (tmp_path / "t.csv").write_text("photons,p_one\n0,0.1\n1e10,0.9\n", encoding="utf-8")
    argv = ("fit", "probes", str(tmp_path / "p.csv"), "--response-table", str(tmp_path / "t.csv"))
    code, err, peak = _peak_memory(run_cli, argv)
    assert code == 2 and "t.csv, line 3" in err and "largest the models follow" in err
    assert peak < MEMORY_LIMIT


# ---------------------------------------------------------------------- out-of-range options

def test_start_time_inside_the_data_is_accepted_and_outside_refused(tmp_path, run_cli):
    """Control for the refusal: the same option inside the data runs the fit."""
    t = np.arange(40) * 1e-4
    noise = np.random.default_rng(1).normal(0, 0.01, t.size)
    lines = "".join(f"{float(a)!r},{float(b)!r}\n"
                    for a, b in zip(t, np.exp(-t / 1e-3) + 1e-3 + noise, strict=True))
    (tmp_path / "p.csv").write_text("time,power\n" + lines, encoding="utf-8")
    common = ["fit", "ringdown", str(tmp_path / "p.csv"), "--max-steps", "100", "--quiet",
              "--allow-unconverged", "--no-compare"]
    code, _, err = run_cli(*common, "--start-time", "-1us")
    assert code == 2 and "before the first sample" in err
    code, out, err = run_cli(*common, "--start-time", "0.2ms")
    assert code == 0, err
    assert "T_c" in out


def test_noise_free_trace_is_refused_not_an_internal_error(tmp_path, run_cli):
    """An exact exponential (a computed curve): the posterior collapses to a point, which an
    ensemble sampler cannot explore; one clear line, not emcee's traceback."""
    t = np.arange(40) * 1e-4
    lines = "".join(f"{float(a)!r},{float(b)!r}\n"
                    for a, b in zip(t, np.exp(-t / 1e-3) + 1e-3, strict=True))
    (tmp_path / "exact.csv").write_text("time,power\n" + lines, encoding="utf-8")
    code, _, err = run_cli("fit", "ringdown", str(tmp_path / "exact.csv"), "--max-steps",
                           "100", "--quiet", "--no-compare")
    assert code == 2 and "Traceback" not in err and "noise-free" in err


# ---------------------------------------------------------------------- output sets

def _result():
    from cavchar.result import FitResult

    return FitResult.from_json(FIXTURE)


def _names(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


def _complete() -> list[str]:
    from cavchar.result import default_draws_name

    return sorted([default_draws_name(), "result.json"])


KILLER = textwrap.dedent("""
    import os, signal, sys
    from cavchar.result import FitResult
    from cavchar import outputs

    real = os.replace
    calls = []

    def replace(src, dst):
        real(src, dst)
        calls.append(dst)
        if len(calls) == 1:  # one file moved, the rest not: killed mid-set
            os.kill(os.getpid(), signal.SIGKILL)

    os.replace = replace
    outputs.write_fit_outputs(FitResult.from_json(sys.argv[1]), sys.argv[2], figures=False)
""")


def test_kill_while_writing_leaves_no_result_without_its_set(tmp_path):
    from cavchar.outputs import INCOMPLETE_MARKER, write_fit_outputs

    out = tmp_path / "out"
    run = subprocess.run([sys.executable, "-c", KILLER, str(FIXTURE), str(out)],
                         capture_output=True, text=True, timeout=300, env=_child_env())
    assert run.returncode == -signal.SIGKILL, run.stderr
    left = _names(out)
    assert "result.json" not in left and INCOMPLETE_MARKER in left
    assert any(name.endswith(".tmp") for name in left)  # the killed writer's staging folder
    written = write_fit_outputs(_result(), out, figures=False)  # no --force needed
    assert sorted(p.name for p in written) == _complete()
    assert _names(out) == _complete()  # marker and crashed temporaries gone


def test_full_disk_leaves_a_set_a_rerun_finishes(tmp_path, monkeypatch):
    from cavchar.errors import InputError
    from cavchar.outputs import INCOMPLETE_MARKER, write_fit_outputs

    out = tmp_path / "out"
    real = os.replace
    calls = []

    def replace(src, dst):
        calls.append(dst)
        if len(calls) == 2:
            raise OSError(errno.ENOSPC, "No space left on device")
        real(src, dst)

    monkeypatch.setattr(os, "replace", replace)
    with pytest.raises(InputError, match="No space left on device"):
        write_fit_outputs(_result(), out, figures=False)
    monkeypatch.undo()
    assert "result.json" not in _names(out) and INCOMPLETE_MARKER in _names(out)
    assert not [n for n in _names(out) if n.endswith(".tmp")]  # own staging removed
    write_fit_outputs(_result(), out, figures=False)
    assert _names(out) == _complete()
    with pytest.raises(InputError, match="already exists"):  # a complete set needs --force
        write_fit_outputs(_result(), out, figures=False)


def test_live_writers_temporaries_are_left_alone(tmp_path):
    from cavchar.io.atomic import clean_stale_temporaries, temporary_name

    mine = tmp_path / temporary_name("result.json")  # this process: alive
    mine.write_text("x")
    dead = tmp_path / ".result.json.999999999-0123456789ab.tmp"  # no such process
    dead.write_text("x")
    other = tmp_path / ".notes.txt"  # not ours
    other.write_text("x")
    removed = clean_stale_temporaries(tmp_path)
    assert removed == [dead]
    assert mine.exists() and other.exists()


@pytest.mark.slow  # writes the figures (several seconds)
def test_command_line_outputs_after_a_crash(tmp_path, run_cli, monkeypatch):
    """A leftover marker from a crashed run: the fit command reruns without --force."""
    from cavchar.outputs import INCOMPLETE_MARKER

    monkeypatch.chdir(tmp_path)
    out = tmp_path / "fit_out"
    out.mkdir()
    (out / "draws.parquet").write_text("partial")
    (out / "draws.csv").write_text("partial")
    (out / INCOMPLETE_MARKER).write_text("draws.parquet\ndraws.csv\nresult.json\n")
    (tmp_path / "r.csv").write_text("time,photons\n0,0\n0.01,1\n0.02,0\n0.05,1\n0.08,\n")
    code, _, err = run_cli("fit", "jumps", "r.csv", "--max-steps", "100", "--quiet",
                           "--allow-unconverged", "-o", str(out))
    assert code == 0, err
    assert "result.json" in _names(out) and INCOMPLETE_MARKER not in _names(out)


# ---------------------------------------------------------------------- reproducibility

def _without_run_specific(path: Path) -> bytes:
    """The file's bytes with the value of each run-specific field blanked (each field must
    appear exactly once, in its documented block)."""
    raw = path.read_bytes()
    data = json.loads(raw)
    for dotted in RUN_SPECIFIC_FIELDS:
        block, key = dotted.split(".")
        assert key in data[block], dotted  # the documented field is really there
        pattern = re.compile(rb'"' + key.encode() + rb'": ("[^"]*"|[-+0-9.eE]+|null)')
        assert len(pattern.findall(raw)) == 1, dotted
        raw = pattern.sub(b'"' + key.encode() + b'": "(run-specific)"', raw)
    return raw


def test_same_seed_same_result_file_byte_for_byte(tmp_path):
    from cavchar.fits.jumps import fit_jumps
    from cavchar.inference import SamplerSettings
    from cavchar.io.writers import write_jump_record
    from cavchar.simulate import simulate_jump_record

    write_jump_record(simulate_jump_record(2e-3, 0.2, 0.5, seed=4), tmp_path / "r.csv")
    settings = SamplerSettings(max_steps=200, quiet=True, allow_unconverged=True, seed=9)
    files = []
    for name in ("a", "b"):
        result = fit_jumps(str(tmp_path / "r.csv"), settings=settings, freq_hz=6e9,
                           stage_temp_k=0.02)
        files.append(result.to_json(tmp_path / f"{name}.json"))
        result.write_draws(tmp_path / f"{name}.parquet")
    assert _without_run_specific(files[0]) == _without_run_specific(files[1])
    assert (tmp_path / "a.parquet").read_bytes() == (tmp_path / "b.parquet").read_bytes()


def test_a_different_seed_changes_the_draws(tmp_path):
    """Control: the comparison above can fail (a different seed gives other bytes)."""
    from cavchar.fits.jumps import fit_jumps
    from cavchar.inference import SamplerSettings
    from cavchar.io.writers import write_jump_record
    from cavchar.simulate import simulate_jump_record

    write_jump_record(simulate_jump_record(2e-3, 0.2, 0.5, seed=4), tmp_path / "r.csv")
    out = []
    for seed in (9, 10):
        settings = SamplerSettings(max_steps=200, quiet=True, allow_unconverged=True,
                                   seed=seed)
        out.append(fit_jumps(str(tmp_path / "r.csv"), settings=settings)
                   .to_json(tmp_path / f"s{seed}.json"))
    assert _without_run_specific(out[0]) != _without_run_specific(out[1])
