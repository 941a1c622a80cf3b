"""Chain diagnostics on chains with known answers.

Sources: AR(1) integrated autocorrelation time tau = (1 + rho)/(1 - rho) (closed form,
e.g. Sokal 1996; Goodman & Weare 2010); rank-normalized split R-hat and ESS behaviour
from Vehtari et al., Bayesian Analysis 16, 667 (2021); emcee.autocorr.integrated_time
(emcee 3) as an independent implementation of the same windowed estimator.
"""

from __future__ import annotations

import numpy as np
import pytest

from cavchar.inference import diagnostics as diag


def ar1(rho: float, n: int, m: int, seed: int) -> np.ndarray:
    """m independent stationary AR(1) chains of length n, shape (n, m), unit variance."""
    rng = np.random.default_rng(seed)
    eps = rng.standard_normal((n, m)) * np.sqrt(1 - rho**2)
    x = np.empty((n, m))
    x[0] = rng.standard_normal(m)
    for t in range(1, n):
        x[t] = rho * x[t - 1] + eps[t]
    return x


@pytest.mark.parametrize("rho", [0.0, 0.5, 0.9])
def test_integrated_time_of_ar1_matches_closed_form(rho):
    tau_true = (1 + rho) / (1 - rho)
    x = ar1(rho, 20000, 16, seed=7)
    tau = diag.integrated_time(x)[0]
    # Sokal's variance of the windowed estimator: var(tau)/tau^2 ~ 2(2M+1)/N with M ~ 5 tau
    # and N = 16 * 20000 draws -> relative sd <= 1.7% for rho = 0.9; 5 sd allowed, plus the
    # window truncation bias exp(-M/tau) which is negligible here.
    rel_sd = np.sqrt(2 * (2 * 5 * tau_true + 1) / (16 * 20000))
    assert abs(tau / tau_true - 1) < 5 * rel_sd


def test_integrated_time_agrees_with_emcee():
    emcee = pytest.importorskip("emcee")
    x = ar1(0.8, 5000, 8, seed=3)
    chain = np.stack([x, ar1(0.3, 5000, 8, seed=4)], axis=2)  # (n, walkers, 2)
    ours = diag.integrated_time(chain)
    theirs = emcee.autocorr.integrated_time(chain, c=5, tol=0)
    np.testing.assert_allclose(ours, theirs, rtol=1e-10)


def test_ess_of_ar1_matches_closed_form():
    rho = 0.7
    x = ar1(rho, 10000, 8, seed=11).T  # (chains, draws)
    expected = x.size * (1 - rho) / (1 + rho)
    ess = diag.effective_sample_size(x)
    # relative error of the ESS estimate is about that of tau (~2% here); allow 10%
    assert abs(ess / expected - 1) < 0.10
    assert abs(diag.ess_bulk(x) / expected - 1) < 0.10


def test_ess_of_iid_draws_is_close_to_n():
    x = np.random.default_rng(5).standard_normal((8, 5000))
    assert abs(diag.effective_sample_size(x) / x.size - 1) < 0.08
    assert abs(diag.ess_tail(x) / x.size - 1) < 0.15


def test_split_rhat_is_one_for_iid_chains():
    # 32 iid chains of 2000 draws: R-hat - 1 is of order 1/(2 * n_split) ~ 5e-4 (Vehtari
    # et al. 2021, sec. 3); the paper's threshold 1.01 must not be reached.
    x = np.random.default_rng(1).standard_normal((32, 2000))
    assert 0.995 < diag.split_rhat(x) < 1.005


def test_split_rhat_flags_shifted_means():
    # negative control: chains with means shifted by 0.3 sd (half of them) must be flagged
    x = np.random.default_rng(1).standard_normal((32, 2000))
    x[:16] += 0.3
    assert diag.split_rhat(x) > 1.01


def test_split_rhat_flags_a_trend_inside_chains():
    # splitting catches a drift that whole-chain R-hat misses (each chain drifts the same)
    x = np.random.default_rng(2).standard_normal((8, 2000)) + np.linspace(0, 1.0, 2000)
    assert diag.potential_scale_reduction(x) < 1.01  # classic, unsplit: blind to it
    assert diag.split_rhat(x) > 1.01


def test_split_rhat_flags_different_scales():
    # the folded (tail) part of rank-normalized R-hat catches equal means, unequal widths
    x = np.random.default_rng(3).standard_normal((8, 4000))
    x[:4] *= 2.0
    assert diag.split_rhat(x) > 1.01


def test_constant_chain_gives_nan_not_error():
    x = np.ones((4, 100))
    assert np.isnan(diag.integrated_time(x.T)[0])
    assert np.isnan(diag.effective_sample_size(x))


def test_average_ranks_match_scipy_rankdata():
    # outside reference: scipy.stats.rankdata(method="average"), with many ties
    from scipy import stats

    from cavchar.inference.diagnostics import average_ranks

    rng = np.random.default_rng(5)
    for values in (rng.normal(size=(4, 250)), rng.integers(0, 7, size=(3, 101)).astype(float),
                   np.zeros((2, 5)), np.array([[3.0, 1.0, 2.0, 1.0]])):
        expected = stats.rankdata(values, method="average").reshape(values.shape)
        np.testing.assert_array_equal(average_ranks(values), expected)
