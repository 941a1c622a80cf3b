"""Statistical efficiency: posterior sds of large records against the Cramér–Rao bound.

The bound comes from the closed-form Fisher information of exact records
(cavchar.models.jumps.exact_fisher_information, derived in its docstring and
checked there against a numerical Hessian) and, for sampled records, from the
expected information per transition (cavchar.plan.fisher, checked in
tests/test_plan.py against a numerical Hessian of the expected log-likelihood).
Source of the bound: Cramér–Rao (Casella & Berger, Statistical Inference, ch. 7);
posterior sds reach it for large records (Bernstein–von Mises).
"""

from __future__ import annotations

import numpy as np
import pytest
from calibration_tools import log_uniform_posterior, record_statistics

from cavchar.models.jumps import exact_fisher_information


def _bound(lifetime, n_thermal, duration):
    return np.sqrt(np.diag(np.linalg.inv(exact_fisher_information(lifetime, n_thermal,
                                                                  duration))))


@pytest.mark.parametrize("n_thermal, duration", [(0.01, 200.0), (0.05, 50.0), (0.5, 5.0)])
def test_exact_posterior_sd_reaches_the_bound(n_thermal, duration):
    # exact posterior of the fit's model (importance-weighted conjugate draws, 40000 draws:
    # sd of a weighted sd estimate < 1%); the record-to-record spread of the posterior sd
    # is ~1/sqrt(2 x jumps) < 2% for these records of 2000-5000 jumps: 10% is > 5 sd
    rng = np.random.default_rng(3)
    st = record_statistics(1.2e-3, n_thermal, duration, rng)
    draws, w = log_uniform_posterior(st, rng, 40_000)
    mean = w @ draws
    sd = np.sqrt(w @ (draws - mean) ** 2)
    np.testing.assert_allclose(sd / _bound(1.2e-3, n_thermal, duration), 1.0, atol=0.10)


def test_fit_jumps_posterior_sd_reaches_the_bound():
    # the fit itself (emcee, default settings): ~10000 jumps; the sd of the sd estimate from
    # an ESS of several thousand is ~1-2%, the record-to-record spread ~1%
    from cavchar.fits.jumps import fit_jumps
    from cavchar.inference import SamplerSettings
    from cavchar.simulate import simulate_jump_record

    record = simulate_jump_record(1.2e-3, 0.05, 100.0, seed=12)
    result = fit_jumps(record, settings=SamplerSettings(quiet=True), seed=5)
    sd = result.samples[["lifetime", "n_thermal"]].std().to_numpy()
    ratio = sd / _bound(1.2e-3, 0.05, 100.0)
    np.testing.assert_allclose(ratio, 1.0, atol=0.10)


@pytest.mark.slow
def test_fit_jumps_sampled_posterior_sd_reaches_the_bound():
    # sampled records (photon number every 0.3 ms, 60 s): posterior sd of fit_jumps against
    # the sampled-record information of cavchar.plan.fisher, averaged over 5 records
    from cavchar.fits.jumps import fit_jumps
    from cavchar.inference import SamplerSettings
    from cavchar.plan.fisher import sampled_jump_information
    from cavchar.simulate import probe_times, simulate_sampled_record

    dt, length = 0.3e-3, 60.0
    bound = sampled_jump_information(1.2e-3, 0.05, dt).sd(length / dt)
    ratios = []
    for seed in range(5):
        times, seg = probe_times(length, dt)
        rec = simulate_sampled_record(1.2e-3, 0.05, times, segment=seg, seed=seed)
        res = fit_jumps(rec, settings=SamplerSettings(quiet=True), seed=seed)
        ratios.append(res.samples[["lifetime", "n_thermal"]].std().to_numpy() / bound)
    ratio = np.mean(ratios, axis=0)
    print("sampled posterior sd / bound:", ratio)
    np.testing.assert_allclose(ratio, 1.0, atol=0.10)
