"""fit_probes end to end: recovery, limits, coarse mode, trajectory export, CLI.

Outside references named at each check: records simulated from known rates
(cavchar's Gillespie simulator, and QuTiP's quantum-jump Monte Carlo solver
``mcsolve`` for the hidden path: QuTiP documentation, "Monte Carlo solver";
Johansson, Nation, Nori, Comput. Phys. Commun. 184, 1234 (2013)); a useless probe must return
the prior; the coarse mode's bias is compared with the exact fit.

Single-record coverage: each recovery test fits one seeded record; a 95%
interval misses the truth with probability 5% per parameter, so the seeds are
fixed (the slow study below checks the coverage rate over many records).
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest

from cavchar.errors import InputError, PriorDominatedWarning
from cavchar.fits.probe_trajectory import viterbi_jump_record
from cavchar.fits.probes import ProbePriors, fit_probes, fit_probes_with_trajectory
from cavchar.inference import SamplerSettings
from cavchar.models.probes.response import FringeResponse, TableResponse
from cavchar.priors import LogUniform, Uniform
from cavchar.records import JumpRecord
from cavchar.simulate import probes_on_path, simulate_probe_record

QUICK = SamplerSettings(n_walkers=12, quiet=True)
PARITY = dict(visibility=0.9, phase_per_photon=math.pi, readout_error_0=0.02,
              readout_error_1=0.03)


def covers(result, name, truth):
    row = result.summary().loc[name]
    return row["lo95"] <= truth <= row["hi95"]


def test_recovery_with_fixed_response_and_trajectory():
    # invented scenario: T_c = 50 ms, n_th = 0.2, parity probe every 1 ms for 10 s
    lifetime, n_th = 0.05, 0.2
    resp = FringeResponse(**PARITY)
    rec, truth = simulate_probe_record(lifetime, n_th, 1e-3 * np.arange(10000), resp, seed=11,
                                       loss=0.02)
    result, traj = fit_probes_with_trajectory(rec, response=resp, seed=1, settings=QUICK,
                                              freq_hz=5e9, stage_temp_k=0.05)
    assert str(result.kind) == "probes-exact" and result.converged
    assert covers(result, "lifetime", lifetime) and covers(result, "n_thermal", n_th)
    assert result.planck is not None and "truncation" in result.checks
    assert {"quality_factor", "effective_temperature"} <= set(result.samples.columns)
    # trajectory: a parity probe tells the parity; with a 90% visibility the most likely
    # path has the right parity at nearly every probe (misses: dwells of a few probes)
    assert np.mean(traj.path % 2 == truth.photons % 2) > 0.97
    assert np.mean(np.abs(traj.mean - truth.photons)) < 0.15
    excerpt = result.extras["trajectory_excerpt"]
    assert len(excerpt["time"]) == 4000 and excerpt["draws_used"] == 8


def test_recovery_with_visibility_fitted():
    lifetime, n_th, vis = 0.04, 0.3, 0.75
    true = FringeResponse(visibility=vis, phase_per_photon=math.pi, readout_error_0=0.02)
    rec, _ = simulate_probe_record(lifetime, n_th, 1e-3 * np.arange(10000), true, seed=22)
    fitted = FringeResponse(visibility=Uniform(0.3, 1.0), phase_per_photon=math.pi,
                            readout_error_0=0.02, readout_error_1=0.0)
    result = fit_probes(rec, response=fitted, seed=2, settings=QUICK)
    assert result.parameter_names == ["lifetime", "n_thermal", "visibility"]
    for name, value in (("lifetime", lifetime), ("n_thermal", n_th), ("visibility", vis)):
        assert covers(result, name, value), name
    # the visibility is well determined by 10,000 probes: its 95% interval is narrow
    row = result.summary().loc["visibility"]
    assert row["hi95"] - row["lo95"] < 0.15


def mcsolve_path(lifetime, n_th, duration, seed, n_levels=12):
    """Hidden path from QuTiP's quantum-jump Monte Carlo solver (QuTiP ``mcsolve``): collapse
    operators sqrt(kappa (1+n_th)) a (index 0, n -> n-1) and sqrt(kappa n_th) a^dag
    (index 1, n -> n+1), H = 0, start in the vacuum; each recorded collapse is a jump."""
    qutip = pytest.importorskip("qutip")
    kappa = 1.0 / lifetime
    a = qutip.destroy(n_levels)
    c_ops = [np.sqrt(kappa * (1 + n_th)) * a, np.sqrt(kappa * n_th) * a.dag()]
    res = qutip.mcsolve(qutip.qzero(n_levels), qutip.basis(n_levels, 0), [0.0, duration],
                        c_ops, ntraj=1, seeds=[seed],
                        options={"keep_runs_results": True, "progress_bar": False})
    times = np.asarray(res.col_times[0], dtype=float)
    which = np.asarray(res.col_which[0])
    photons = np.concatenate([[0], np.cumsum(np.where(which == 1, 1, -1))])
    return JumpRecord(np.concatenate([[0.0], times]), photons, duration)


def test_recovery_on_a_qutip_mcsolve_path():
    lifetime, n_th = 0.05, 0.25
    path = mcsolve_path(lifetime, n_th, 10.0, seed=3)
    assert path.photons.max() < 10 and len(path.time) > 100
    resp = FringeResponse(**PARITY)
    rec, truth = probes_on_path(path, 1e-3 * np.arange(10000), resp, seed=4)
    result, traj = fit_probes_with_trajectory(rec, response=resp, seed=3, settings=QUICK)
    assert covers(result, "lifetime", lifetime) and covers(result, "n_thermal", n_th)
    assert np.mean(traj.path % 2 == truth.photons % 2) > 0.97


def test_useless_response_returns_the_prior():
    """V = 0: the outcomes do not depend on the photon number; the posterior is the prior.
    Priors log-uniform on [10 ms, 100 ms] and [0.05, 0.5]: ln x is uniform, so the
    posterior quantiles of ln x must sit at the prior's (tolerance 0.06 of the range:
    quantile error of ~ 300 effective draws, 2 sd)."""
    rec, _ = simulate_probe_record(0.05, 0.2, 1e-3 * np.arange(3000), FringeResponse(**PARITY),
                                   seed=5)
    priors = ProbePriors(lifetime=LogUniform(0.01, 0.1), n_thermal=LogUniform(0.05, 0.5))
    with pytest.warns(PriorDominatedWarning):
        result = fit_probes(rec, response=FringeResponse(visibility=0.0, readout_error_0=0.0,
                                                         readout_error_1=0.0),
                            priors=priors, seed=4, settings=QUICK, mode="exact")
    for name, (lo, hi) in (("lifetime", (0.01, 0.1)), ("n_thermal", (0.05, 0.5))):
        u = (np.log(result.samples[name]) - math.log(lo)) / math.log(hi / lo)
        np.testing.assert_allclose(np.quantile(u, [0.1, 0.5, 0.9]), [0.1, 0.5, 0.9], atol=0.06)
    # the same seed gives the same draws
    with pytest.warns(PriorDominatedWarning):
        again = fit_probes(rec, response=FringeResponse(visibility=0.0, readout_error_0=0.0,
                                                        readout_error_1=0.0),
                           priors=priors, seed=4, settings=QUICK, mode="exact")
    np.testing.assert_array_equal(again.samples["lifetime"], result.samples["lifetime"])


def grid_posterior(model, center, half_width, n=25):
    """Exact-mode posterior of (ln T_c, ln n_th) by quadrature on a grid (log-uniform priors
    are flat there): means and sds of both coordinates."""
    axes = [c + np.linspace(-w, w, n) for c, w in zip(center, half_width, strict=True)]
    g0, g1 = np.meshgrid(*axes, indexing="ij")
    ll = np.concatenate([model(np.exp(np.column_stack([g0.ravel(), g1.ravel()]))[i:i + 32])
                         for i in range(0, n * n, 32)])
    w = np.exp(ll - ll.max())
    w /= w.sum()
    out = []
    for g in (g0.ravel(), g1.ravel()):
        m = w @ g
        out.append((m, math.sqrt(w @ (g - m) ** 2)))
    return out


def test_coarse_mode_agrees_with_exact_within_its_reported_bound():
    """The coarse posterior means sit within the reported bias bound of the exact-mode
    posterior means (here by quadrature of the exact likelihood on a grid), plus the Monte
    Carlo error of a sample mean: 2 sd / sqrt(ESS) with ESS > 150, i.e. 0.17 sd."""
    from cavchar.models.probes.likelihood import ProbeLikelihood

    lifetime, n_th = 0.05, 0.2
    resp = FringeResponse(**PARITY)
    rec, _ = simulate_probe_record(lifetime, n_th, 5e-5 * np.arange(60000), resp, seed=6)
    coarse = fit_probes(rec, response=resp, seed=5, settings=QUICK, mode="coarse")
    assert coarse.kind.variant == "coarse"
    check = coarse.checks["coarse_bias"]
    assert check["block_probes"] >= 4 and check["n_checked"] > 100
    assert check["bias_bound_sd"] < 0.2
    logs = np.log(coarse.samples[["lifetime", "n_thermal"]].to_numpy())
    center, sd = logs.mean(axis=0), logs.std(axis=0)
    exact = grid_posterior(ProbeLikelihood(rec, resp), center, 5 * sd)
    ess = min(coarse.diagnostics.ess_bulk.values())
    assert ess > 150
    for i, (m, s) in enumerate(exact):
        assert abs(center[i] - m) / s < check["bias_bound_sd"] + 2 / math.sqrt(ess), i
        assert abs(sd[i] / s - 1) < 0.2  # widths agree (sd of an sd estimate ~ 1/sqrt(2 ESS))


def test_response_table_that_misses_photon_numbers_is_an_input_error(tmp_path):
    path = tmp_path / "response.csv"
    path.write_text("photons,p_one\n0,0.95\n1,0.05\n")
    rec, _ = simulate_probe_record(0.05, 0.5, 5e-4 * np.arange(4000), FringeResponse(**PARITY),
                                   seed=7)
    with pytest.raises(InputError, match="missing photon numbers: 2, 3"):
        fit_probes(rec, response=str(path), seed=1, settings=QUICK)
    assert TableResponse.from_file(path).max_photons == 1


def test_viterbi_path_exports_as_an_exact_jump_record(tmp_path):
    from cavchar.io.readers import read_jump_record
    from cavchar.io.writers import write_jump_record

    rec, truth = simulate_probe_record(0.05, 0.3, 1e-3 * np.arange(3000),
                                       FringeResponse(visibility=1.0), seed=8,
                                       segment=np.repeat([0, 1], 1500))
    path = truth.photons.copy()
    path[10] = path[9] + 2  # a change by two photons between probes becomes two steps
    jumps = viterbi_jump_record(rec, path)
    assert np.all(np.abs(np.diff(jumps.photons)[np.diff(jumps.segment) == 0]) <= 1)
    out = write_jump_record(jumps, tmp_path / "viterbi.csv")
    back = read_jump_record(out)
    np.testing.assert_allclose(back.time, jumps.time)
    np.testing.assert_array_equal(back.photons, jumps.photons)
    # the record says path[t] at every probe time t
    from cavchar.simulate import photons_at

    seg = np.repeat([0, 1], 1500)
    np.testing.assert_array_equal(photons_at(back, rec.time, seg), path)


def test_cli_fit_probes_writes_result_trajectory_and_jump_record(tmp_path, run_cli):
    from cavchar.io.writers import write_probe_record

    rec, _ = simulate_probe_record(0.05, 0.2, 1e-3 * np.arange(10000), FringeResponse(**PARITY),
                                   seed=9)
    src = write_probe_record(rec, tmp_path / "probes.csv")
    out = tmp_path / "out"
    code, stdout, stderr = run_cli("fit", "probes", src, "--phase-per-photon", "180deg",
                                   "--visibility", "0.9", "--readout-error-0", "0.02",
                                   "--readout-error-1", "0.03", "--walkers", "16", "--quiet",
                                   "--freq", "5GHz", "-o", out)
    assert code == 0, stderr
    assert "lifetime" in stdout or "T_c" in stdout
    assert "probe intervals: regular clock, 1 ms (exact)" in stdout
    for name in ("result.json", "trajectory.csv", "viterbi_jumps.csv", "trajectory.png"):
        assert (out / name).exists(), name
    stored = json.loads((out / "result.json").read_text())["settings"]["fit"]["intervals"]
    assert stored["route"] == "regular clock" and stored["interval_s"] == pytest.approx(1e-3)
    # a second run without --force refuses to overwrite (exit 2, no traceback)
    code, _, stderr = run_cli("fit", "probes", src, "-o", out, "--quiet")
    assert code == 2 and "Traceback" not in stderr
    code, _, stderr = run_cli("fit", "probes", src, "--visibility", "fast", "--quiet")
    assert code == 2 and "visibility" in stderr


@pytest.mark.slow
def test_coverage_over_many_records():
    """95% intervals cover the truth in about 95% of 40 records, visibility fitted
    (binomial: at least 34 of 40 has probability 0.97 when the coverage is 95%)."""
    true = FringeResponse(visibility=0.75, phase_per_photon=math.pi, readout_error_0=0.02)
    fitted = FringeResponse(visibility=Uniform(0.3, 1.0), phase_per_photon=math.pi,
                            readout_error_0=0.02, readout_error_1=0.0)
    truth = {"lifetime": 0.04, "n_thermal": 0.3, "visibility": 0.75}
    hits = dict.fromkeys(truth, 0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for seed in range(40):
            rec, _ = simulate_probe_record(0.04, 0.3, 1e-3 * np.arange(10000), true,
                                           seed=100 + seed)
            result = fit_probes(rec, response=fitted, seed=seed, settings=QUICK)
            for name, value in truth.items():
                hits[name] += covers(result, name, value)
    assert min(hits.values()) >= 34, hits
