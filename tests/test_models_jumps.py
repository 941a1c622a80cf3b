"""Jump-record likelihoods against hand computations and scipy.linalg.expm."""

import numpy as np
import pytest
from scipy import linalg

from cavchar.dynamics import rate_matrix
from cavchar.models.jumps import (
    dwell_times,
    exact_log_likelihood,
    jump_statistics,
    sampled_log_likelihood,
    sampled_transitions,
)

# two segments; n holds from its time to the next row, segment ends at 5.0 and 9.5 s
TIMES = np.array([0.0, 1.0, 1.5, 3.0, 6.0, 7.0, 8.0])
PHOTONS = np.array([0, 1, 2, 1, 1, 0, 1])
SEGMENTS = np.array([0, 0, 0, 0, 1, 1, 1])
ENDS = np.array([5.0, 9.5])


def test_sufficient_statistics_by_hand():
    stats = jump_statistics(TIMES, PHOTONS, ENDS, SEGMENTS)
    # segment 0: 0 for 1 s, 1 for 0.5 s, 2 for 1.5 s, 1 for 2 s; segment 1: 1, 0, 1 for 1, 1, 1.5 s
    assert stats.up == 3 and stats.down == 2
    assert stats.time_n == pytest.approx(0 + 0.5 + 3.0 + 2.0 + 1.0 + 0 + 1.5)
    assert stats.duration == pytest.approx(8.5)
    assert stats.time_n_plus_1 == pytest.approx(stats.time_n + 8.5)
    # ups from 0, 1 and 0 (log 1, log 2, log 1); downs from 2 and 1 (log 2, log 1)
    assert stats.constant == pytest.approx(2 * np.log(2))
    assert list(stats.initial_states) == [0, 1]


def _dwell_by_dwell(lifetime, n_th):
    """Independent computation: product over dwells of exit-time density × jump probability."""
    kappa = 1 / lifetime
    durations, states, complete = dwell_times(TIMES, PHOTONS, ENDS, SEGMENTS)
    total = 0.0
    for i, (d, n, done) in enumerate(zip(durations, states, complete)):
        up, down = kappa * n_th * (n + 1), kappa * (1 + n_th) * n
        total += -(up + down) * d  # survival over the dwell
        if done:
            total += np.log(up if PHOTONS[i + 1] > n else down)  # density of the jump taken
    return total


@pytest.mark.parametrize(("lifetime", "n_th"), [(2.0, 0.3), (0.7, 1.2), (5.0, 0.01)])
def test_exact_likelihood_against_dwell_by_dwell(lifetime, n_th):
    stats = jump_statistics(TIMES, PHOTONS, ENDS, SEGMENTS)
    ours = exact_log_likelihood(stats, [lifetime], [n_th])[0]
    assert ours == pytest.approx(_dwell_by_dwell(lifetime, n_th), rel=1e-13)


def test_exact_likelihood_support():
    stats = jump_statistics(TIMES, PHOTONS, ENDS, SEGMENTS)
    out = exact_log_likelihood(stats, [-1.0, 1.0, 1.0], [0.1, -0.1, 0.0])
    assert np.all(out == -np.inf)  # up jumps exist, so n_th = 0 is impossible


def test_stationary_initial_state_term():
    stats = jump_statistics(TIMES, PHOTONS, ENDS, SEGMENTS)
    n_th = 0.4
    extra = (exact_log_likelihood(stats, [1.0], [n_th], initial="stationary")
             - exact_log_likelihood(stats, [1.0], [n_th]))[0]
    # Bose–Einstein P(0) P(1) = 1/(1+n) * n/(1+n)^2
    assert extra == pytest.approx(np.log(1 / (1 + n_th)) + np.log(n_th / (1 + n_th) ** 2))


def _brute_force(times, photons, lifetime, n_th, n_levels):
    # source: scipy.linalg.expm (Padé scaling and squaring), one matrix per interval
    q = rate_matrix(1 / lifetime, n_th, n_levels)
    return sum(np.log(linalg.expm(q * (times[i + 1] - times[i]))[photons[i], photons[i + 1]])
               for i in range(times.size - 1))


@pytest.mark.parametrize("regular", [True, False])
@pytest.mark.parametrize(("lifetime", "n_th"), [(1e-3, 0.05), (2e-3, 0.6), (5e-4, 2.0)])
def test_sampled_likelihood_against_expm_products(regular, lifetime, n_th):
    rng = np.random.default_rng(7)
    m = 60
    times = np.arange(m) * 2e-4 if regular else np.cumsum(rng.exponential(2e-4, m))
    # a path with multi-photon steps between samples
    photons = np.clip(np.cumsum(rng.integers(-1, 2, m)) + 2, 0, 5)
    trans = sampled_transitions(times, photons)
    n_levels = 16
    ours = sampled_log_likelihood(trans, [lifetime], [n_th], n_levels)[0]
    ref = _brute_force(times, photons, lifetime, n_th, n_levels)
    assert abs(ours - ref) < 1e-10 * max(1.0, abs(ref))
    if regular:
        assert trans.steps.size == 1


def test_sampled_likelihood_is_batched():
    rng = np.random.default_rng(3)
    times = np.arange(40) * 1e-4
    photons = rng.integers(0, 3, 40)
    trans = sampled_transitions(times, photons)
    lifetimes = np.array([1e-3, 2e-3, -1.0, 3e-3])
    nths = np.array([0.1, 0.5, 0.2, 0.0])
    batch = sampled_log_likelihood(trans, lifetimes, nths, 12)
    assert batch.shape == (4,)
    assert batch[2] == -np.inf and batch[3] == -np.inf
    single = [sampled_log_likelihood(trans, [lt], [nt], 12)[0]
              for lt, nt in zip(lifetimes[:2], nths[:2])]
    np.testing.assert_allclose(batch[:2], single, rtol=1e-13)


def test_fisher_information_against_numerical_hessian():
    # source: closed form in exact_fisher_information's docstring vs a central-difference
    # Hessian of the log-likelihood with the sufficient statistics at their expectations
    # (the log-likelihood is linear in them, so E[-Hessian] is that Hessian)
    from cavchar.models.jumps import JumpStatistics, exact_fisher_information

    lifetime, n_th, duration = 2.5e-3, 0.08, 40.0
    kappa = 1 / lifetime
    a, b = kappa * n_th, kappa * (1 + n_th)
    stats = JumpStatistics(
        up=0, down=0, time_n_plus_1=duration * (1 + n_th), time_n=duration * n_th,
        constant=0.0, duration=duration, initial_states=np.array([0]), n_max=3,
    )

    def loglike(theta):
        t_c, n = theta
        k = 1 / t_c
        # U log a + D log b with U, D replaced by their expectations (floats)
        return ((a * stats.time_n_plus_1) * np.log(k * n) + (b * stats.time_n) * np.log(k * (1 + n))
                - k * n * stats.time_n_plus_1 - k * (1 + n) * stats.time_n)

    theta = np.array([lifetime, n_th])
    steps = theta * 1e-4
    hess = np.empty((2, 2))
    for i in range(2):
        for j in range(2):
            ei, ej = np.eye(2)[i] * steps[i], np.eye(2)[j] * steps[j]
            hess[i, j] = (loglike(theta + ei + ej) - loglike(theta + ei - ej)
                          - loglike(theta - ei + ej) + loglike(theta - ei - ej))
            hess[i, j] /= 4 * steps[i] * steps[j]
    np.testing.assert_allclose(exact_fisher_information(lifetime, n_th, duration), -hess, rtol=1e-5)
