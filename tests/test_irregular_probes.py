"""Probe records at irregular times (Poisson probe times, gaps): the grid route.

Outside references named at each check: a brute-force forward recursion with
one ``scipy.linalg.expm`` matrix per interval (generator and response written
out here, independently of cavchar); the Poisson tail of ``scipy.stats``; a
hidden photon path from QuTiP's quantum-jump Monte Carlo solver ``mcsolve``
(as in tests/test_fit_probes.py) recovered by a whole fit.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import linalg, stats

from cavchar.fits.probes import fit_probes
from cavchar.inference import SamplerSettings
from cavchar.models.probes import hmm_kernels as hk
from cavchar.models.probes import likelihood as probes_module
from cavchar.models.probes.likelihood import ProbeLikelihood, probe_steps, route_text
from cavchar.models.probes.response import FringeResponse
from cavchar.records import ProbeRecord
from cavchar.simulate import probes_on_path
from tests.test_fit_probes import mcsolve_path  # hidden path from QuTiP's mcsolve

PARITY = dict(visibility=0.9, phase_per_photon=math.pi, readout_error_0=0.02,
              readout_error_1=0.03)


def generator(kappa, n_th, n):
    """Damped-mode birth-death generator on 0..n-1 (textbook rates, written out)."""
    q = np.zeros((n, n))
    for m in range(n):
        if m + 1 < n:
            q[m, m + 1] = kappa * n_th * (m + 1)
        if m > 0:
            q[m, m - 1] = kappa * (1 + n_th) * m
        q[m, m] = -q[m].sum()
    return q


def brute_force_loglik(time, outcome, setting, starts, lifetime, n_th, n, resp):
    """Forward recursion with one scipy expm per interval; thermal start law renormalised
    on 0..n-1; P(1 | m, s) = e0 + (1 - e0 - e1) (1 + V cos(phi0 m + s)) / 2."""
    q = generator(1.0 / lifetime, n_th, n)
    m = np.arange(n)
    r = n_th / (1 + n_th)
    p0 = r ** m / np.sum(r ** m)
    total = 0.0
    for g in range(len(starts) - 1):
        alpha = None
        for t in range(starts[g], starts[g + 1]):
            p1 = resp["readout_error_0"] + (1 - resp["readout_error_0"] - resp["readout_error_1"]) \
                * (1 + resp["visibility"] * np.cos(resp["phase_per_photon"] * m + setting[t])) / 2
            e = np.ones(n) if np.isnan(outcome[t]) else (p1 if outcome[t] == 1 else 1 - p1)
            if alpha is None:
                alpha = p0 * e
            else:
                alpha = (alpha @ linalg.expm(q * (time[t] - time[t - 1]))) * e
            s = alpha.sum()
            total += math.log(s)
            alpha = alpha / s
    return total


def poisson_record(n_probes, mean_interval, seed):
    """Poisson probe times with 5% lost probes, a long gap (beyond the grid's table), two
    segments and two interleaved settings; outcomes random (the check is the likelihood)."""
    rng = np.random.default_rng(seed)
    dts = rng.exponential(mean_interval, n_probes)
    dts[n_probes // 3] = 40 * mean_interval
    time = np.cumsum(dts)
    outcome = rng.integers(0, 2, n_probes).astype(float)
    outcome[rng.random(n_probes) < 0.05] = np.nan
    setting = np.where(np.arange(n_probes) % 2 == 0, 0.0, math.pi / 2)
    segment = np.where(np.arange(n_probes) < 2 * n_probes // 3, 0, 1)
    return ProbeRecord(time, outcome, setting, segment)


@pytest.mark.parametrize("n_levels, eigen_basis", [(8, True), (8, False), (20, False)])
def test_grid_route_matches_a_per_interval_expm_product(n_levels, eigen_basis, monkeypatch):
    # unrolled kernels (N <= 12) with the remainder in the eigen basis or by the
    # uniformization series; the loop kernel (N = 20)
    monkeypatch.setattr(probes_module, "EIGEN_GRID", eigen_basis)
    # the eigen basis needs max |lambda| h <= 6.5e-3 for every set: dense probes
    rec = poisson_record(400, 2e-5 if eigen_basis else 2e-3, seed=5)
    resp = FringeResponse(**PARITY)
    like = ProbeLikelihood(rec, resp, n_levels=n_levels)
    assert like.steps.kind == "irregular" and np.any(like.steps.step_index < 0)
    tr = like.transitions(np.array([20.0]), np.array([0.3]), n_levels)
    assert (tr.eigen_table is not None) == eigen_basis
    theta = np.array([[0.05, 0.3], [0.02, 1.2], [0.2, 0.05]])
    got = like(theta)
    starts = list(rec.bounds)
    for row, value in zip(theta, got, strict=True):
        expected = brute_force_loglik(rec.time, rec.outcome, rec.setting, starts, row[0], row[1],
                                      n_levels, PARITY)
        assert value == pytest.approx(expected, rel=1e-10, abs=1e-9)
    # the interval-by-interval eigen route is kept and agrees
    eig = ProbeLikelihood(rec, resp, n_levels=n_levels, irregular="eigen")(theta)
    np.testing.assert_allclose(got, eig, rtol=1e-11)


def test_grid_split_of_the_intervals():
    rng = np.random.default_rng(2)
    time = np.cumsum(rng.exponential(1e-3, 5000))
    steps = probe_steps(time, [0, time.size])
    h = steps.grid_step
    inside = steps.step_index >= 0
    # dt = j h + r with 0 <= r < h; the table covers the 99.9% quantile of the intervals
    np.testing.assert_allclose(steps.step_index[inside] * h + steps.remainder[inside],
                               steps.dts[inside], rtol=1e-12, atol=1e-18)
    assert np.all((steps.remainder >= 0) & (steps.remainder < h * (1 + 1e-12)))
    assert 0 < np.mean(~inside) <= 2e-3


def test_route_recorded_for_the_result(monkeypatch):
    """The route a record takes, with the grid and the series length at a parameter point:
    the series length checked against the Poisson tail (scipy.stats) at the largest exit
    rate of the generator written out here."""
    rng = np.random.default_rng(4)
    time = np.cumsum(rng.exponential(1e-4, 3000))  # dense enough for the eigen basis
    resp = FringeResponse(**PARITY)
    like = ProbeLikelihood(ProbeRecord(time, rng.integers(0, 2, time.size).astype(float)), resp)
    route = like.interval_route([0.05, 0.3])
    assert route["route"] == "exact grid" and route["bound"].startswith("none: exact")
    assert route["grid_step_s"] == pytest.approx(np.mean(np.diff(time)) / 8, rel=1e-12)
    assert route["table_matrices"] == like.steps.steps.size
    assert 0 < route["beyond_table_fraction"] <= 2e-3
    # eigen-basis remainder: |lambda| h from scipy's eigenvalues of the generator
    lam = linalg.eigvals(generator(1 / 0.05, 0.3, route["levels"])).real
    assert route["remainder"].startswith("eigen basis")
    assert route["largest_lambda_h"] == pytest.approx(np.max(-lam) * route["grid_step_s"],
                                                      rel=1e-9)
    assert route["largest_lambda_h"] ** 6 / math.factorial(6) <= hk.SERIES_TOLERANCE
    assert "exact grid route" in route_text(route)
    # the uniformization series where the eigen basis is not used
    monkeypatch.setattr(probes_module, "EIGEN_GRID", False)
    route = like.interval_route([0.05, 0.3])
    rate = np.max(-np.diag(generator(1 / 0.05, 0.3, route["levels"])))
    k = route["series_terms"]
    assert stats.poisson.sf(k, rate * route["grid_step_s"]) <= hk.SERIES_TOLERANCE
    assert stats.poisson.sf(k - 2, rate * route["grid_step_s"]) > hk.SERIES_TOLERANCE
    eig = ProbeLikelihood(like.record, resp, irregular="eigen").interval_route()
    assert eig["route"] == "per-interval eigen"
    clock = ProbeLikelihood(ProbeRecord(1e-3 * np.arange(100), np.zeros(100)), resp)
    assert route_text(clock.interval_route()) == "probe intervals: regular clock, 1 ms (exact)"


@pytest.mark.parametrize("z", [1e-6, 1e-3, 0.05, 0.7, 4.0])
def test_series_length_meets_the_poisson_tail(z):
    """The uniformization series stops where the Poisson tail (scipy.stats) is below
    2^-53, and not later than one term after the first such point."""
    k = int(hk.uniformization_terms(z)[0])
    assert stats.poisson.sf(k, z) <= hk.SERIES_TOLERANCE
    assert k == 0 or stats.poisson.sf(k - 2, z) > hk.SERIES_TOLERANCE


@pytest.mark.slow  # a whole fit of 10^4 irregular probes: over 20 s on 2 cores
def test_recovery_with_poisson_timed_probes_on_a_qutip_mcsolve_path():
    # invented scenario: T_c = 50 ms, n_th = 0.25, parity probes at Poisson times (mean
    # 1 ms) for 10 s, 3% lost; the hidden path comes from QuTiP, not from cavchar
    lifetime, n_th = 0.05, 0.25
    path = mcsolve_path(lifetime, n_th, 10.5, seed=7)
    assert path.photons.max() < 10 and len(path.time) > 100
    rng = np.random.default_rng(8)
    times = np.cumsum(rng.exponential(1e-3, 10000))
    times = times[times < 10.4]
    resp = FringeResponse(**PARITY)
    rec, _ = probes_on_path(path, times, resp, seed=9, loss=0.03)
    result = fit_probes(rec, response=resp, seed=3, mode="exact",
                        settings=SamplerSettings(n_walkers=12, quiet=True))
    summary = result.summary()
    for name, truth in (("lifetime", lifetime), ("n_thermal", n_th)):
        assert summary.loc[name, "lo95"] <= truth <= summary.loc[name, "hi95"], name
