"""Probe-record likelihood (cavchar.models.probes.likelihood, cavchar.models.probes.blocks).

Outside references:
* a plain numpy forward recursion with one scipy.linalg.expm per probe
  interval and the Ramsey-fringe formula written out here (Rabiner 1989, eq. 19-21);
* the two-state continuous-time Markov chain likelihood of a fully observed
  path, ``U log a + D log b - a T_0 - b T_1`` (Norris, *Markov Chains*, 1997,
  section 2.6 / Guttorp, *Stochastic Modeling of Scientific Data*, 1995, ch. 3;
  from memory), for the perfect-response limit.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import linalg

from cavchar.errors import InputError
from cavchar.models.probes.blocks import BlockedProbeLikelihood, bias_check
from cavchar.models.probes.likelihood import (
    TRUNCATION_VISITS,
    ProbeLikelihood,
    choose_levels,
    probe_steps,
)
from cavchar.models.probes.response import FringeResponse, TableResponse
from cavchar.priors import Uniform
from cavchar.records import JumpRecord, ProbeRecord
from cavchar.simulate import probes_on_path, simulate_probe_record


def generator(kappa, n_th, n):
    """Birth-death rates written out independently: up kappa n_th (m+1), down kappa (1+n_th) m."""
    q = np.zeros((n, n))
    for m in range(n - 1):
        q[m, m + 1] = kappa * n_th * (m + 1)
        q[m + 1, m] = kappa * (1 + n_th) * (m + 1)
    return q - np.diag(q.sum(axis=1))


def brute_force(record, lifetime, n_th, n, vis, phi0, phir, e0, e1):
    """Forward recursion in numpy, one expm per interval, fringe response by hand."""
    q = generator(1 / lifetime, n_th, n)
    pi = (n_th / (1 + n_th)) ** np.arange(n)
    pi /= pi.sum()
    setting = np.zeros(len(record)) if record.setting is None else record.setting
    total = 0.0
    for a, b in zip(record.bounds[:-1], record.bounds[1:], strict=True):
        alpha = pi.copy()
        for t in range(a, b):
            if t > a:
                alpha = alpha @ linalg.expm(q * (record.time[t] - record.time[t - 1]))
            y = record.outcome[t]
            if not np.isnan(y):
                p1 = e0 + (1 - e0 - e1) * (1 + vis * np.cos(phi0 * np.arange(n) + phir
                                                            + setting[t])) / 2
                alpha = alpha * (p1 if y == 1 else 1 - p1)
            s = alpha.sum()
            total += np.log(s)
            alpha /= s
    return total


RESPONSE = dict(visibility=0.85, phase_per_photon=2.1, phase_offset=0.4, readout_error_0=0.03,
                readout_error_1=0.05)


def small_record(spacing="regular", seed=1, t=300, settings=(0.0, 1.3), loss=0.1):
    rng = np.random.default_rng(seed)
    dt = 2e-3
    if spacing == "regular":
        times = dt * np.arange(t)
    elif spacing == "gaps":  # equal spacing with rows dropped: a few distinct intervals
        times = dt * np.sort(rng.choice(2 * t, t, replace=False))
    else:  # Poisson probe times
        times = np.cumsum(rng.exponential(dt, t))
    rec, _ = simulate_probe_record(0.02, 0.7, times, FringeResponse(**RESPONSE),
                                   settings=list(settings), loss=loss, seed=seed,
                                   segment=(np.arange(t) >= t // 3).astype(int))
    return rec


@pytest.mark.parametrize("spacing,kind", [("regular", "regular"), ("gaps", "indexed"),
                                          ("poisson", "irregular")])
def test_likelihood_matches_brute_force_forward(spacing, kind):
    rec = small_record(spacing)
    model = ProbeLikelihood(rec, FringeResponse(**RESPONSE), n_levels=8)
    assert model.steps.kind == kind
    theta = np.array([[0.02, 0.7], [0.035, 0.4]])
    got = model(theta)
    for i in range(2):
        expected = brute_force(rec, *theta[i], 8, **{
            "vis": 0.85, "phi0": 2.1, "phir": 0.4, "e0": 0.03, "e1": 0.05})
        assert got[i] == pytest.approx(expected, rel=1e-10)


def test_free_response_parameters_enter_the_likelihood():
    rec = small_record()
    resp = FringeResponse(**{**RESPONSE, "visibility": Uniform(0, 1),
                             "readout_error_0": Uniform(0, 0.5)})
    model = ProbeLikelihood(rec, resp, n_levels=8)
    assert model.names == ("lifetime", "n_thermal", "visibility", "readout_error_0")
    theta = np.array([[0.02, 0.7, 0.6, 0.1], [0.02, 0.7, 1.2, 0.1], [0.02, -1.0, 0.6, 0.1]])
    got = model(theta)
    expected = brute_force(rec, 0.02, 0.7, 8, 0.6, 2.1, 0.4, 0.1, 0.05)
    assert got[0] == pytest.approx(expected, rel=1e-10)
    assert got[1] == -np.inf and got[2] == -np.inf  # V > 1 and n_th < 0: outside the support


def test_automatic_truncation_agrees_with_a_generous_one():
    """The automatic truncation keeps the expected number of visits above the top level
    below TRUNCATION_VISITS = 0.01; log L changes by about the probability of such
    paths, so the two likelihoods agree to about 0.01 nats (tolerance: twice that)."""
    rec, _ = simulate_probe_record(0.05, 0.3, 1e-3 * np.arange(20000),
                                   FringeResponse(**RESPONSE), seed=4)
    auto = ProbeLikelihood(rec, FringeResponse(**RESPONSE))
    wide = ProbeLikelihood(rec, FringeResponse(**RESPONSE), n_levels=30)
    theta = np.array([[0.05, 0.3], [0.03, 0.5], [0.08, 0.15]])
    levels = auto.levels_for(theta[:, 0], theta[:, 1])
    assert np.all(levels < 30) and np.all(levels % 2 == 0)
    np.testing.assert_allclose(auto(theta), wide(theta), atol=2 * TRUNCATION_VISITS)
    assert choose_levels(0.3, 2, 100) > choose_levels(0.3, 0, 100)


def test_probe_steps_classification():
    t = np.r_[0.0, 1e-3 * np.arange(1, 6) * (1 + 1e-13 * np.arange(1, 6))]
    assert probe_steps(t, [0, t.size]).kind == "regular"
    t2 = np.r_[0.0, 1.0, 3.0, 4.0, 100.0, 101.0]
    s = probe_steps(t2, [0, 4, 6])  # the jump 4 -> 100 is a segment boundary
    assert s.kind == "indexed" and s.dts[4] == 0.0
    np.testing.assert_allclose(s.steps[s.step_index[[1, 2, 3, 5]]], [1, 2, 1, 1])


def test_table_response_must_cover_the_truncation():
    rec = small_record()
    table = TableResponse(np.array([0.9, 0.1, 0.8]))
    model = ProbeLikelihood(rec, table)  # automatic truncation stops at the table's end
    assert model.max_levels == 3
    with pytest.raises(InputError, match="missing photon numbers: 3, 4, 5"):
        ProbeLikelihood(rec, table, n_levels=6)


def two_state_path(lifetime, n_th, duration, rng) -> JumpRecord:
    """Path of the chain on {0, 1} (the damped mode truncated to two levels): exponential
    dwells with rate a = kappa n_th in 0 and b = kappa (1 + n_th) in 1, starting in 0."""
    a, b = n_th / lifetime, (1 + n_th) / lifetime
    t, n, times, photons = 0.0, 0, [], []
    while t < duration:
        times.append(t)
        photons.append(n)
        t += rng.exponential(1 / (a if n == 0 else b))
        n = 1 - n
    return JumpRecord(np.array(times), np.array(photons), duration)


def two_state_loglik(path, lifetime, n_th):
    """Fully observed two-state chain 0 <-> 1 (a = kappa n_th, b = kappa (1 + n_th)),
    started from its stationary law, Norris (1997) section 2.6."""
    t, n, end = path.time, path.photons, float(path.end_time[0])
    dwell = np.diff(np.r_[t, end])
    t1 = float(np.sum(dwell[n == 1]))
    t0 = float(np.sum(dwell)) - t1
    up = int(np.sum(np.diff(n) == 1))
    down = int(np.sum(np.diff(n) == -1))
    kappa = 1 / lifetime
    a, b = kappa * n_th, kappa * (1 + n_th)
    first = np.log(b / (a + b)) if n[0] == 0 else np.log(a / (a + b))
    return up * np.log(a) + down * np.log(b) - a * t0 - b * t1 + first


def test_perfect_response_gives_the_jump_record_posterior():
    """V = 1, no readout error, phi0 = pi, hidden chain on {0, 1}: the probes see the path
    exactly at every probe, so the posterior equals that of the exact jump record of the
    path, up to the time resolution of the probes."""
    lifetime, n_th = 1.0, 0.3
    path = two_state_path(lifetime, n_th, 300.0, np.random.default_rng(5))
    dt = 1e-3
    response = FringeResponse(visibility=1.0, phase_per_photon=math.pi)
    rec, truth = probes_on_path(path, dt * np.arange(int(300.0 / dt)), response, seed=1)
    model = ProbeLikelihood(rec, response, n_levels=2)
    jumps = int(np.sum(np.diff(path.photons) != 0))
    assert jumps > 60
    # posterior on a grid in (ln T_c, ln n_th) with flat priors there, both models
    lt = np.log(lifetime) + np.linspace(-0.6, 0.6, 41)
    ln = np.log(n_th) + np.linspace(-0.7, 0.7, 41)
    g_t, g_n = np.meshgrid(lt, ln, indexing="ij")
    theta = np.column_stack([np.exp(g_t).ravel(), np.exp(g_n).ravel()])
    lp_probe = model(theta)
    lp_jump = np.array([two_state_loglik(path, *row) for row in theta])
    d_probe, d_jump = lp_probe - lp_probe.max(), lp_jump - lp_jump.max()
    inside = d_jump > -4.6  # the 99% region of a 2-d Gaussian posterior
    # The probes see the path on a grid of step dt: each jump time is known to within dt
    # and each jump's probability is P_01(dt) instead of a dt, a relative change of order
    # (a + b) dt.  So log L differs by at most about (jumps) x (a + b) x dt, with a + b at
    # its largest in the region compared.
    rate = (1 + 2 * theta[:, 1]) / theta[:, 0]
    bound = jumps * rate[inside].max() * dt
    diff = d_probe[inside] - d_jump[inside]
    assert np.max(np.abs(diff - diff.mean())) < bound
    w_p, w_j = np.exp(d_probe) / np.exp(d_probe).sum(), np.exp(d_jump) / np.exp(d_jump).sum()
    for coord in (g_t.ravel(), g_n.ravel()):
        m_p, m_j = w_p @ coord, w_j @ coord
        sd_j = math.sqrt(w_j @ (coord - m_j) ** 2)
        sd_p = math.sqrt(w_p @ (coord - m_p) ** 2)
        # same posterior: means within 5% and sds within 5% of the jump-record sd
        assert abs(m_p - m_j) < 0.05 * sd_j
        assert abs(sd_p - sd_j) < 0.05 * sd_j


def test_useless_response_carries_no_information():
    """V = 0: P(1 | n) does not depend on n, so log L is the same for every (T_c, n_th)."""
    rec, _ = simulate_probe_record(0.05, 0.3, 1e-3 * np.arange(5000),
                                   FringeResponse(visibility=0.6), seed=2)
    model = ProbeLikelihood(rec, FringeResponse(visibility=0.0, readout_error_0=0.1))
    theta = np.array([[0.05, 0.3], [0.001, 2.0], [3.0, 1e-3]])
    ll = model(theta)
    np.testing.assert_allclose(ll, ll[0], rtol=1e-12)
    seen = ~np.isnan(rec.outcome)
    ones = np.nansum(rec.outcome)
    assert ll[0] == pytest.approx(ones * np.log(0.55) + (seen.sum() - ones) * np.log(0.45),
                                  rel=1e-10)


def test_coarse_blocks_of_one_probe_are_exact_and_longer_blocks_are_close():
    rec, _ = simulate_probe_record(0.05, 0.2, 1e-4 * np.arange(50000),
                                   FringeResponse(visibility=0.9, phase_per_photon=math.pi),
                                   seed=3, loss=0.02, segment=np.repeat([0, 1], 25000))
    exact = ProbeLikelihood(rec, FringeResponse(visibility=0.9, phase_per_photon=math.pi))
    theta = np.array([[0.05, 0.2], [0.06, 0.2], [0.05, 0.25], [0.04, 0.16]])
    ll = exact(theta)
    one = BlockedProbeLikelihood(exact, 1)
    np.testing.assert_allclose(one(theta), ll, rtol=1e-11)
    coarse = BlockedProbeLikelihood(exact, 5)  # 0.5 ms blocks, dwell ~ 35 ms
    assert coarse.n_blocks == 10000 and coarse.block_span == pytest.approx(4e-4)
    d = ll - coarse(theta)
    # the offset log L_exact - log L_coarse is mostly common to all parameter points; its
    # spread over +-20% in the parameters stays well under 1 nat (the scale on which the
    # posterior changes).  The real control of the coarse mode is bias_check.
    assert np.ptp(d) < 0.5
    assert np.ptp(ll) > 1.0


def test_bias_check_reports_a_bound_that_covers_the_shifts():
    rec, _ = simulate_probe_record(0.05, 0.2, 1e-4 * np.arange(40000),
                                   FringeResponse(visibility=0.9, phase_per_photon=math.pi),
                                   seed=6)
    exact = ProbeLikelihood(rec, FringeResponse(visibility=0.9, phase_per_photon=math.pi))
    coarse = BlockedProbeLikelihood(exact, 8)
    rng = np.random.default_rng(0)
    draws = np.exp(np.log([0.05, 0.2]) + 0.15 * rng.standard_normal((64, 2)))
    check = bias_check(coarse, draws, max_draws=64)
    assert check["n_checked"] == 64
    for name in ("lifetime", "n_thermal"):
        # Cauchy-Schwarz on the weighted sample: |shift| <= CV(w) sqrt((n-1)/n)
        assert abs(check["shift_sd"][name]) <= check["bias_bound_sd"] + 1e-12
    assert 1 <= check["weight_ess"] <= 64


def test_bad_inputs():
    rec = ProbeRecord(np.arange(4.0), np.array([0, 1, np.nan, 1.0]))
    with pytest.raises(InputError):
        ProbeLikelihood(rec, FringeResponse(), initial="hot")
    with pytest.raises(ValueError):
        ProbeLikelihood(rec, FringeResponse())(np.ones((2, 3)))


@pytest.mark.parametrize("spacing", ["regular", "poisson"])
def test_batch_with_mixed_truncations_equals_single_evaluations(spacing):
    """Rows needing different truncations share one kernel call, padded with unreachable
    levels; each must equal its own evaluation."""
    rec = small_record(spacing, t=2000)
    model = ProbeLikelihood(rec, FringeResponse(**RESPONSE))
    theta = np.array([[0.02, 0.05], [0.02, 0.7], [0.03, 1.5], [0.01, 0.3]])
    levels = model.levels_for(theta[:, 0], theta[:, 1])
    assert np.unique(levels).size >= 3
    batch = model(theta)
    single = np.array([model(row[None])[0] for row in theta])
    np.testing.assert_allclose(batch, single, rtol=1e-12)
