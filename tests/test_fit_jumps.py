"""End-to-end jump-record fits: recovery, outside simulator, warnings, CLI behaviour."""

import json
import warnings

import numpy as np
import pytest

from cavchar.errors import PriorDominatedWarning
from cavchar.fits.jumps import fit_jumps
from cavchar.inference import SamplerSettings
from cavchar.records import JumpRecord
from cavchar.result_types import FitKind
from cavchar.simulate import simulate_jump_record, simulate_sampled_record

QUICK = SamplerSettings(quiet=True, seed=4)


def _covers(result, name, truth, level=95):
    row = result.summary().loc[name]
    return row[f"lo{level}"] <= truth <= row[f"hi{level}"]


def _qutip_record(lifetime, n_th, duration, n_traj, seed):
    """Exact jump records from QuTiP's quantum-jump Monte Carlo solver (an outside simulator):
    collapse operator 0 = sqrt(kappa (1+n_th)) a (down), 1 = sqrt(kappa n_th) a† (up)."""
    qutip = pytest.importorskip("qutip")
    n_levels = 12
    a = qutip.destroy(n_levels)
    # solved in units of the lifetime (kappa = 1) for the ODE tolerances, then rescaled
    c_ops = [np.sqrt(1 + n_th) * a, np.sqrt(n_th) * a.dag()]
    result = qutip.mcsolve(0 * a.dag() * a, qutip.basis(n_levels, 0), [0.0, duration / lifetime],
                           c_ops,
                           ntraj=n_traj, seeds=list(range(seed, seed + n_traj)),
                           options={"keep_runs_results": True, "progress_bar": False})
    times, photons, segment, ends = [], [], [], []
    for k in range(n_traj):
        t0 = k * (duration + 1.0)
        n = 0
        times.append(t0)
        photons.append(0)
        segment.append(k)
        for t, which in zip(result.col_times[k], result.col_which[k]):
            n += -1 if which == 0 else 1
            times.append(t0 + t * lifetime)
            photons.append(n)
            segment.append(k)
        ends.append(t0 + duration)
    return JumpRecord(time=np.array(times), photons=np.array(photons), end_time=np.array(ends),
                      segment=np.array(segment))


def test_records_from_qutip_mcsolve_are_covered():
    # source: QuTiP mcsolve (quantum-jump Monte Carlo) of the thermally damped mode
    lifetime, n_th = 1.5e-3, 0.15
    record = _qutip_record(lifetime, n_th, duration=0.4, n_traj=3, seed=21)
    assert record.n_jumps > 100
    result = fit_jumps(record, freq_hz=6.0e9, stage_temp_k=0.02, settings=QUICK)
    assert result.converged
    assert _covers(result, "lifetime", lifetime)
    assert _covers(result, "n_thermal", n_th)


def test_exact_record_recovery_and_planck_check():
    lifetime, n_th = 4e-3, 0.05
    record = simulate_jump_record(lifetime, n_th, duration=6.0, segments=2, gap=1.0, seed=8)
    result = fit_jumps(record, freq_hz=5e9, stage_temp_k=0.02, settings=QUICK)
    assert _covers(result, "lifetime", lifetime) and _covers(result, "n_thermal", n_th)
    # n_th = 0.05 at 5 GHz is about 80 mK: far hotter than a 20 mK stage (n = 6e-6)
    assert result.planck.prob_hotter_than_stage > 0.999
    assert result.checks["dwell_times"]["misfit"] is False
    assert min(result.diagnostics.ess_bulk.values()) > 1000
    q = result.summary().loc["quality_factor", "median"]
    assert q == pytest.approx(2 * np.pi * 5e9 * result.summary().loc["lifetime", "median"],
                              rel=1e-3)


def test_dwell_check_flags_a_record_that_is_not_a_damped_mode():
    # negative control: dwell times in n = 0 are all equal (a clocked, non-Markov source)
    rng = np.random.default_rng(2)
    times, photons, t = [], [], 0.0
    for _ in range(300):
        times += [t, t + 2e-3]
        photons += [0, 1]
        t += 2e-3 + rng.exponential(1e-3)
    record = JumpRecord(time=np.array(times), photons=np.array(photons), end_time=t)
    with pytest.warns(Warning, match="dwell-time check"):
        result = fit_jumps(record, settings=QUICK)
    assert result.checks["dwell_times"]["misfit"] is True


def test_record_without_jumps_warns_and_reflects_the_prior():
    record = JumpRecord(time=np.array([0.0]), photons=np.array([0]), end_time=1e-3)
    with pytest.warns(PriorDominatedWarning):
        result = fit_jumps(record, settings=SamplerSettings(quiet=True, seed=1,
                                                            allow_unconverged=True))
    # 1 ms without an up jump says little: n_th/T_c below ~1/1 ms; T_c still spans decades
    row = result.summary().loc["lifetime"]
    assert row["hi95"] / row["lo95"] > 100


def test_sampled_record_recovery():
    lifetime, n_th = 2e-3, 0.3
    times = np.arange(0, 3.0, 0.5e-3)
    record = simulate_sampled_record(lifetime, n_th, times, seed=5)
    result = fit_jumps(record, settings=QUICK)
    assert result.kind == FitKind("jumps", "sampled")
    assert _covers(result, "lifetime", lifetime) and _covers(result, "n_thermal", n_th)
    trunc = result.checks["truncation"]
    assert trunc["log_likelihood_change_with_more_levels"] < 1e-9


def test_same_seed_same_result():
    record = simulate_jump_record(3e-3, 0.1, duration=1.0, seed=3)
    first = fit_jumps(record, settings=QUICK).samples
    second = fit_jumps(record, settings=QUICK).samples
    assert first.equals(second)


def _write_record(tmp_path):
    from cavchar.io.writers import write_jump_record

    record = simulate_jump_record(3e-3, 0.1, duration=2.0, seed=3)
    path = tmp_path / "record.csv"
    write_jump_record(record, path)
    return path


def test_cli_fit_writes_outputs_and_refuses_overwrite(tmp_path, run_cli):
    path = _write_record(tmp_path)
    out = tmp_path / "fit"
    code, stdout, stderr = run_cli("fit", "jumps", path, "--freq", "6GHz", "--stage-temp",
                                   "30mK", "-o", out, "--quiet")
    assert code == 0, stderr
    assert "T_c" in stdout and "ms" in stdout and "hotter than its 30 mK stage" in stdout
    data = json.loads((out / "result.json").read_text())
    assert data["provenance"]["inputs"][0]["sha256"]
    # the command line the CLI was given (``main(argv)``), as argv strings
    assert data["provenance"]["command_line"][:3] == ["cavchar", "fit", "jumps"]
    assert data["settings"]["sampler"]["seed"] == 1
    assert (out / "corner.png").exists() and (out / "dwell_check.png").exists()
    assert not list(out.glob("*.pdf"))  # PNG only by default
    assert "writing figures (png)" in stderr
    code, _, stderr = run_cli("fit", "jumps", path, "-o", out, "--quiet")
    assert code == 2 and "--force" in stderr and "Traceback" not in stderr


def test_cli_not_converged_exit_3(tmp_path, run_cli):
    path = _write_record(tmp_path)
    # the ensemble sampler cannot meet its convergence rules in 100 steps
    code, _, stderr = run_cli("fit", "jumps", path, "--max-steps", "100", "--quiet",
                              "--sampler", "ensemble")
    assert code == 3 and "Traceback" not in stderr
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        code, _, _ = run_cli("fit", "jumps", path, "--max-steps", "100", "--quiet",
                             "--sampler", "ensemble", "--allow-unconverged")
    assert code == 0


def test_cli_bad_inputs_exit_2(tmp_path, run_cli):
    bad = tmp_path / "bad.csv"
    bad.write_text("time,photons\n0,0\n1e-3,2\n2e-3,\n")
    code, _, stderr = run_cli("fit", "jumps", bad, "--quiet")
    assert code == 2 and "one photon at a time" in stderr and "--sampled" in stderr
    code, _, stderr = run_cli("fit", "jumps", tmp_path / "missing.csv", "--quiet")
    assert code == 2 and "Traceback" not in stderr
    code, _, stderr = run_cli("fit", "jumps", bad, "--prior", "lifetime=loguniform:1s,1ms")
    assert code == 2 and "Traceback" not in stderr


def test_cli_figure_options(tmp_path, run_cli):
    path = _write_record(tmp_path)
    code, _, stderr = run_cli("fit", "jumps", path, "-o", tmp_path / "bare", "--no-figures",
                              "--quiet")
    assert code == 0, stderr
    assert sorted(p.suffix for p in (tmp_path / "bare").iterdir()) in (
        [".json", ".parquet"], [".csv", ".json"])  # result and draws, no figure
    assert "writing figures" not in stderr
    code, _, stderr = run_cli("fit", "jumps", path, "-o", tmp_path / "both", "--quiet",
                              "--figure-format", "png+pdf")
    assert code == 0, stderr
    names = {p.name for p in (tmp_path / "both").iterdir()}
    assert {"corner.png", "corner.pdf", "dwell_check.png", "dwell_check.pdf"} <= names
    assert stderr.count("writing figures (png+pdf)") == 1  # one progress line


def test_settings_outside_any_cavity_are_named_as_unit_slips(tmp_path, run_cli):
    """A mode frequency of 7.412 Hz (the prefix forgotten) and a stage at 22 K (mK meant)
    are outside the documented plausible ranges (100 MHz .. 1 THz; at most 10 K): the fit
    warns, names the likely slip and records it in the result. Control: the same record
    with 7.412 GHz and 22 mK gives no such warning."""
    from cavchar.io import write_jump_record
    from cavchar.simulate import simulate_jump_record

    path = write_jump_record(simulate_jump_record(0.02, 0.1, 20.0, seed=8),
                             tmp_path / "record.csv")
    common = ["--max-steps", "200", "--allow-unconverged", "--quiet", "--no-figures", "-o"]
    code, _, err = run_cli("fit", "jumps", path, "--freq", "7.412Hz", "--stage-temp", "22K",
                           *common, tmp_path / "slipped")
    assert code == 0
    assert "frequency 7.41 Hz is outside what a superconducting cavity has" in err
    assert "write e.g. 6.8GHz" in err and "20mK" in err
    result = json.loads((tmp_path / "slipped" / "result.json").read_text())
    assert len(result["checks"]["plausibility"]["problems"]) == 2
    code, _, err = run_cli("fit", "jumps", path, "--freq", "7.412GHz", "--stage-temp", "22mK",
                           *common, tmp_path / "plain")
    assert code == 0 and "superconducting cavity has" not in err
    result = json.loads((tmp_path / "plain" / "result.json").read_text())
    assert "plausibility" not in result["checks"]
