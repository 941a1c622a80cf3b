"""Interval-quantized likelihood for probes at irregular times (cavchar.models.probes.quantized).

Outside references named at each check: a brute-force forward recursion with one
``scipy.linalg.expm`` matrix per interval (tests/test_irregular_probes.py, generator and
response written out there, independently of cavchar); bins rebuilt here with
``numpy.geomspace`` / ``numpy.digitize``; the importance-weight bound of Owen, *Monte
Carlo theory, methods and examples*, ch. 9 (negative control); a hidden photon path from
QuTiP's quantum-jump Monte Carlo solver ``mcsolve`` recovered by a whole fit.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from cavchar.fits.probes import QUANTIZE_BIAS_LIMIT_SD, fit_probes
from cavchar.inference import SamplerSettings
from cavchar.models.probes import quantized as quantized_module
from cavchar.models.probes.blocks import bias_check
from cavchar.models.probes.likelihood import ProbeLikelihood, route_text
from cavchar.models.probes.quantized import QuantizedProbeLikelihood, quantize_intervals
from cavchar.models.probes.response import FringeResponse
from cavchar.records import ProbeRecord
from cavchar.simulate import probes_on_path, simulate_probe_record
from tests.test_fit_probes import mcsolve_path  # hidden path from QuTiP's mcsolve
from tests.test_irregular_probes import PARITY, brute_force_loglik

THETA = np.array([[0.05, 0.3], [0.02, 1.2], [0.2, 0.05]])


def few_valued_record(n_probes: int, n_values: int, seed: int) -> ProbeRecord:
    """Intervals drawn from ``n_values`` distinct values (more than the 32 the exact
    "distinct intervals" route takes, so the exact model takes the grid route), 5% lost
    probes, two segments, two settings; outcomes random (the check is the likelihood)."""
    rng = np.random.default_rng(seed)
    values = 1e-3 * np.geomspace(0.05, 6.0, n_values)
    time = np.cumsum(rng.choice(values, n_probes))
    outcome = rng.integers(0, 2, n_probes).astype(float)
    outcome[rng.random(n_probes) < 0.05] = np.nan
    setting = np.where(np.arange(n_probes) % 2 == 0, 0.0, math.pi / 2)
    segment = np.where(np.arange(n_probes) < n_probes // 2, 0, 1)
    return ProbeRecord(time, outcome, setting, segment)


def test_quantization_is_exact_when_the_intervals_take_at_most_k_values(monkeypatch):
    rec = few_valued_record(300, 40, seed=1)
    resp = FringeResponse(**PARITY)
    exact = ProbeLikelihood(rec, resp, n_levels=8)
    assert exact.steps.kind == "irregular"  # 40 > 32 distinct intervals: the grid route
    quant = QuantizedProbeLikelihood(exact, 64)
    assert quant.info["exact"] and quant.info["bins"] == 40
    assert quant.info["largest_relative_change"] <= 1e-9  # equal up to STEP_RTOL
    got = quant(THETA)
    for row, value in zip(THETA, got, strict=True):  # scipy.linalg.expm per interval
        expected = brute_force_loglik(rec.time, rec.outcome, rec.setting, list(rec.bounds),
                                      row[0], row[1], 8, PARITY)
        assert value == pytest.approx(expected, rel=1e-10, abs=1e-9)
    np.testing.assert_allclose(got, exact(THETA), rtol=1e-11)
    # parameter sets evaluated one at a time (memory cap on the tables): the same values
    monkeypatch.setattr(quantized_module, "TABLE_BYTES", 1)
    np.testing.assert_allclose(quant(THETA), got, rtol=1e-13)


def test_quantized_likelihood_is_the_expm_product_over_bin_means():
    """With more distinct intervals than bins: the likelihood equals the brute-force expm
    product (scipy) over intervals replaced by their bin means, the bins rebuilt here
    (numpy geomspace edges between the shortest and longest interval)."""
    rng = np.random.default_rng(3)
    time = np.cumsum(rng.exponential(1e-3, 250))
    outcome = rng.integers(0, 2, time.size).astype(float)
    rec = ProbeRecord(time, outcome)
    resp = FringeResponse(**PARITY)
    quant = QuantizedProbeLikelihood(ProbeLikelihood(rec, resp, n_levels=6), 16)
    assert not quant.info["exact"]
    dts = np.diff(time)
    edges = np.geomspace(dts.min(), dts.max(), 17)
    label = np.clip(np.digitize(dts, edges) - 1, 0, 15)
    means = np.array([dts[label == b].mean() if np.any(label == b) else 0 for b in range(16)])
    q_time = np.concatenate([[0.0], np.cumsum(means[label])])
    assert quant.info["bins"] == np.unique(label).size
    np.testing.assert_allclose(quant.info["largest_ratio"], edges[1] / edges[0], rtol=1e-12)
    assert q_time[-1] == pytest.approx(time[-1] - time[0], rel=1e-12)  # total time kept
    for row, value in zip(THETA, quant(THETA), strict=True):
        expected = brute_force_loglik(q_time, outcome, np.zeros(time.size), [0, time.size],
                                      row[0], row[1], 6, PARITY)
        assert value == pytest.approx(expected, rel=1e-10, abs=1e-9)


def test_quantize_intervals_rejects_zero_bins():
    with pytest.raises(ValueError, match="at least one"):
        quantize_intervals([0.0, 1.0, 3.0], [0, 3], 0)


def test_bias_check_flags_a_coarse_quantization():
    """Negative control: two bins must fail the importance-weight bound (Owen ch. 9) that
    128 bins pass.  Probes at a quarter of the lifetime on average, where an interval's
    transition matrix is far from linear in its length; the draws spread like a posterior
    of this record (log-normal, 5% in T_c and n_th around the truth).  Measured: 2 bins
    7.3 sd, 128 bins 0.006 sd at a 3% spread (margins of 7x and 16x)."""
    resp = FringeResponse(**PARITY)
    rng = np.random.default_rng(11)
    times = np.cumsum(rng.exponential(5e-3, 20000))
    rec, _ = simulate_probe_record(0.02, 0.3, times, resp, seed=12)
    exact = ProbeLikelihood(rec, resp, n_levels=8)
    draws = np.column_stack([0.02 * np.exp(0.05 * rng.standard_normal(64)),
                             0.3 * np.exp(0.05 * rng.standard_normal(64))])
    coarse = bias_check(QuantizedProbeLikelihood(exact, 2), draws, max_draws=64)
    fine = bias_check(QuantizedProbeLikelihood(exact, 128), draws, max_draws=64)
    assert coarse["route"] == "quantized intervals" and coarse["bins_used"] == 2
    assert coarse["bias_bound_sd"] >= 10 * QUANTIZE_BIAS_LIMIT_SD
    assert fine["bias_bound_sd"] < QUANTIZE_BIAS_LIMIT_SD
    assert coarse["n_checked"] == fine["n_checked"] == 64


def test_fit_of_poisson_timed_probes_takes_the_quantized_route():
    # invented scenario: T_c = 50 ms, n_th = 0.25, parity probes at Poisson times (mean
    # 1 ms) for 10 s; the hidden path comes from QuTiP, not from cavchar
    lifetime, n_th = 0.05, 0.25
    path = mcsolve_path(lifetime, n_th, 10.5, seed=7)
    rng = np.random.default_rng(8)
    times = np.cumsum(rng.exponential(1e-3, 10000))
    times = times[times < 10.4]
    resp = FringeResponse(**PARITY)
    rec, _ = probes_on_path(path, times, resp, seed=9, loss=0.03)
    result = fit_probes(rec, response=resp, seed=3,
                        settings=SamplerSettings(n_walkers=12, quiet=True))
    assert str(result.kind) == "probes-quantized"
    route = result.settings["fit"]["intervals"]
    check = result.checks["quantize_bias"]
    assert route["route"] == "quantized intervals" and route["exact_route"]["route"] == \
        "exact grid"
    assert route["bias_bound_sd"] == check["bias_bound_sd"] < QUANTIZE_BIAS_LIMIT_SD
    assert check["n_checked"] >= 200
    assert "bias bound" in route_text(route)
    summary = result.summary()
    for name, truth in (("lifetime", lifetime), ("n_thermal", n_th)):
        assert summary.loc[name, "lo95"] <= truth <= summary.loc[name, "hi95"], name


def _fit_poisson_record(lifetime: float, n_th: float, mean_interval: float, n_probes: int,
                        seed: int):
    """Fit (default mode) of a record simulated by cavchar with parity probes at Poisson
    times; seeds: ``seed`` for the times, ``seed + 1`` for the record, ``seed + 2`` for
    the fit."""
    resp = FringeResponse(**PARITY)
    times = np.cumsum(np.random.default_rng(seed).exponential(mean_interval, n_probes))
    rec, _ = simulate_probe_record(lifetime, n_th, times, resp, seed=seed + 1)
    return fit_probes(rec, response=resp, seed=seed + 2,
                      settings=SamplerSettings(n_walkers=12, quiet=True))


def test_fit_refines_then_falls_back_to_the_exact_route(monkeypatch):
    """Starting from 2 bins (negative control above) with one doubling allowed: the bias
    check fails twice (2 and 4 bins, probes at a quarter of the lifetime), so the fit
    samples the exact likelihood and says so."""
    import cavchar.fits.probes as fp

    monkeypatch.setattr(fp, "QUANTIZE_BINS", 2)
    monkeypatch.setattr(fp, "QUANTIZE_REFINES", 1)
    result = _fit_poisson_record(0.02, 0.3, 5e-3, 4000, seed=21)
    refits = result.checks["quantize_refits"]
    assert [r["bins"] for r in refits] == [2, 4]
    assert all(r["bias_bound_sd"] >= QUANTIZE_BIAS_LIMIT_SD for r in refits)
    assert str(result.kind) == "probes-exact"
    route = result.settings["fit"]["intervals"]
    assert route["route"] == "exact grid" and "exact likelihood" in route["quantized_fallback"]
    summary = result.summary()
    for name, truth in (("lifetime", 0.02), ("n_thermal", 0.3)):
        assert summary.loc[name, "lo95"] <= truth <= summary.loc[name, "hi95"], name


def test_cli_says_which_route_and_the_bound(tmp_path, run_cli):
    """The command prints the route and the bound and stores them; --exact keeps the
    exact grid route (the bound is read back from result.json, written by the json module)."""
    import json

    from cavchar.io.writers import write_probe_record

    rng = np.random.default_rng(31)
    rec, _ = simulate_probe_record(0.05, 0.2, np.cumsum(rng.exponential(1e-3, 5000)),
                                   FringeResponse(**PARITY), seed=32)
    src = write_probe_record(rec, tmp_path / "probes.csv")
    options = ("--visibility", "0.9", "--readout-error-0", "0.02", "--readout-error-1", "0.03",
               "--walkers", "16", "--quiet")
    code, stdout, stderr = run_cli("fit", "probes", src, *options, "-o", tmp_path / "q")
    assert code == 0, stderr
    stored = json.loads((tmp_path / "q" / "result.json").read_text())
    route = stored["settings"]["fit"]["intervals"]
    assert stored["settings"]["fit"]["mode"] == "quantized"
    assert route["route"] == "quantized intervals"
    assert f"bias bound {route['bias_bound_sd']:.3f} posterior sd" in stdout
    assert "probe intervals: irregular, quantized route" in stdout
    code, stdout, stderr = run_cli("fit", "probes", src, *options, "--exact")
    assert code == 0, stderr
    assert "exact grid route" in stdout and "quantized" not in stdout


def test_sets_of_different_truncations_in_separate_chunks(monkeypatch):
    """Regression: sets of neighbouring truncations share one call of the forward pass;
    with the tables split into chunks of one set, each chunk's emission table must have
    that chunk's levels.  The values equal those of the whole batch at once and, the
    quantization being exact here (40 interval values <= 64 bins), the exact model's."""
    rec = few_valued_record(300, 40, seed=2)
    exact = ProbeLikelihood(rec, FringeResponse(**PARITY))
    theta = np.column_stack([np.full(12, 0.05), np.geomspace(0.5, 3.0, 12)])
    quant = QuantizedProbeLikelihood(exact, 64)
    spans = []
    forward = QuantizedProbeLikelihood._forward

    def spy(self, levels, *args):
        spans.append((int(levels.min()), int(levels.max())))
        return forward(self, levels, *args)

    monkeypatch.setattr(QuantizedProbeLikelihood, "_forward", spy)
    whole = quant(theta)
    assert any(lo < hi for lo, hi in spans)  # one call holds different truncations
    monkeypatch.setattr(quantized_module, "TABLE_BYTES", 1)
    np.testing.assert_allclose(quant(theta), whole, rtol=1e-12)
    np.testing.assert_allclose(whole, exact(theta), rtol=1e-10)


def test_budget_of_a_long_irregular_record_times_the_quantized_route(monkeypatch):
    """A record "long" enough for the coarse mode (threshold lowered to 1,000 probes,
    blocks as long as a dwell):
    the budget times the likelihood auto would run instead, here the quantized one,
    and, affordable, that route runs."""
    import cavchar.fits.probes as fp

    monkeypatch.setattr(fp, "AUTO_COARSE_PROBES", 1000)
    monkeypatch.setattr(fp, "BLOCK_FRACTION", 1.0)  # blocks of a dwell: >= 4 probes
    result = _fit_poisson_record(0.05, 0.2, 1e-3, 3000, seed=31)
    budget = result.checks["exact_budget"]
    assert budget["route_timed"] == "quantized intervals" and budget["affordable"]
    assert str(result.kind) == "probes-quantized"
