"""Goodness of fit of Fock-population counts: the bootstrap p-value is calibrated.

Outside references: the true populations come from QuTiP ``mesolve`` of the
Lindblad equation of the damped mode (collapse operators sqrt(kappa(1+n_th)) a
and sqrt(kappa n_th) a†); the calibration requirement (p-values uniform under
the model, Efron & Tibshirani 1993, ch. 16) is tested with scipy's
Kolmogorov-Smirnov test, and the maximum-likelihood search against
``scipy.optimize.minimize`` on the same multinomial log-likelihood.
"""

import numpy as np
import pytest
from scipy import optimize, stats

from cavchar.fits.population_check import (
    fit_populations_mle,
    population_cell_probabilities,
    population_goodness_of_fit,
)
from cavchar.models.ringdown.photon_number import PopulationDecay

LIFETIME = 1.0e-3  # s
N_TH = 0.1
DELAYS = np.linspace(0.0, 3e-3, 24)
LEVELS = 6  # photon numbers 0..5 recorded
SHOTS = 150


def _qutip_probabilities(lifetime, n_th, initial=2, n_levels=16):
    qutip = pytest.importorskip("qutip")
    kappa = 1.0 / lifetime
    a = qutip.destroy(n_levels)
    c_ops = [np.sqrt(kappa * (1 + n_th)) * a, np.sqrt(kappa * n_th) * a.dag()]
    rho0 = qutip.fock_dm(n_levels, initial)
    projectors = [qutip.fock_dm(n_levels, n) for n in range(n_levels)]
    result = qutip.mesolve(a.dag() * a, rho0, DELAYS, c_ops, e_ops=projectors,
                           options={"atol": 1e-12, "rtol": 1e-10})
    pops = np.clip(np.array(result.expect).T, 0.0, None)  # (m, n_levels)
    recorded = pops[:, :LEVELS]
    return np.column_stack([recorded, np.clip(1.0 - recorded.sum(axis=1), 0.0, None)])


def _counts(rng, probabilities):
    probabilities = probabilities / probabilities.sum(axis=1, keepdims=True)
    return rng.multinomial(SHOTS, probabilities)[:, :LEVELS]


def test_mle_matches_scipy_minimize():
    rng = np.random.default_rng(11)
    counts = _counts(rng, _qutip_probabilities(LIFETIME, N_TH))
    model = PopulationDecay(DELAYS, counts, [0, 0, 1])
    table = np.concatenate([counts, np.zeros((counts.shape[0], 1))], axis=1)[None]

    def negative_ll(phi):
        return -float(np.sum(table * np.log(population_cell_probabilities(model, phi[None]))))

    ref = optimize.minimize(negative_ll, np.log([2e-3, 0.3]), method="Nelder-Mead",
                            options={"xatol": 1e-9, "fatol": 1e-10, "maxiter": 4000})
    ours = fit_populations_mle(model, table, np.log([2e-3, 0.3]))[0]
    # both maximize the same smooth function; agreement to 1e-4 in ln is far below
    # the statistical error (~0.05 in ln T_c at these counts)
    np.testing.assert_allclose(ours, ref.x, atol=1e-4)


def test_p_values_are_uniform_for_records_that_follow_the_model():
    rng = np.random.default_rng(2024)
    probabilities = _qutip_probabilities(LIFETIME, N_TH)
    p_values = []
    for _ in range(16):
        model = PopulationDecay(DELAYS, _counts(rng, probabilities), [0, 0, 1])
        check = population_goodness_of_fit(model, np.array([LIFETIME, N_TH]), rng,
                                           replicates=100)
        p_values.append(check["p_value"])
    # KS against U(0,1): with 16 records a calibrated check fails at 1% level with
    # probability 0.01; the former Pearson test with m*K - 2 degrees of freedom gave
    # p = 1.0000 on 8 of these 16 records (KS p = 3e-8, measured)
    assert stats.kstest(p_values, "uniform").pvalue > 0.01
    assert 0.2 < np.mean(p_values) < 0.8  # mean of 16 uniforms: 0.5 +- 0.072 (4 sd band)


def test_counts_from_another_law_are_flagged():
    # negative control: half the shots decay with T_c and half with 4 T_c, a mixture
    # the one-lifetime rate equations cannot follow
    rng = np.random.default_rng(7)
    mixture = 0.5 * _qutip_probabilities(LIFETIME, N_TH) + 0.5 * _qutip_probabilities(
        4 * LIFETIME, N_TH)
    model = PopulationDecay(DELAYS, rng.multinomial(4 * SHOTS, mixture)[:, :LEVELS],
                            [0, 0, 1])
    check = population_goodness_of_fit(model, np.array([LIFETIME, N_TH]), rng, replicates=100)
    assert check["p_value"] == pytest.approx(check["p_value_resolution"])
    assert check["scaled_chi2_p_value"] < 1e-3
    assert check["flag"] is not None and "do not follow" in check["flag"]


def test_sparse_cells_are_counted():
    rng = np.random.default_rng(3)
    model = PopulationDecay(DELAYS, _counts(rng, _qutip_probabilities(LIFETIME, N_TH)),
                            [0, 0, 1])
    check = population_goodness_of_fit(model, np.array([LIFETIME, N_TH]), rng, replicates=50)
    assert check["sparse_cells"] > 0  # late delays: most cells expect < 1 count
    assert check["cells"] == DELAYS.size * (LEVELS + 1)
    assert 0 < check["p_value"] <= 1
