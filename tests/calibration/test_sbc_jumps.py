"""Simulation-based calibration of the jump-record fits.

Source of the method: Talts, Betancourt, Simpson, Vehtari & Gelman, "Validating
Bayesian inference algorithms with simulation-based calibration", arXiv 1804.06788
(2018).  Each test draws parameters from the prior, simulates a record with
cavchar.simulate, computes the posterior, and tests the ranks of the true values
among the posterior draws for uniformity (calibration_tools: chi-square on equal
bins and a normal-score scale test, each at level 1e-3, fixed seeds).  Every quick form shows
that it catches a posterior sd off by a factor 2 either way (negative controls).
"""

from __future__ import annotations

import numpy as np
import pytest
from calibration_tools import (
    calibrated,
    check_sbc,
    gamma_rate_draws,
    lifetime_and_n,
    ranks,
    record_statistics,
    thin_to,
    uniformity,
    widen,
)

# Gamma priors on the rate coefficients (shape, rate in s): a = kappa n_th around 50/s,
# b = kappa (1 + n_th) around 1000/s, restricted to b > 2a (n_th < 1)
PRIOR = (3.0, 3.0 / 50.0, 3.0, 3.0 / 1000.0)


def _conjugate_ranks(n_sims: int, n_draws: int, duration: float, seed: int):
    rng = np.random.default_rng(seed)
    truth_ab = gamma_rate_draws(rng, *PRIOR, n_sims, min_ratio=2.0)
    truth, draws = lifetime_and_n(truth_ab), []
    sa, ra, sb, rb = PRIOR
    for t_c, n in truth:
        st = record_statistics(t_c, n, duration, rng)
        post = gamma_rate_draws(rng, sa + st.up, ra + st.time_n_plus_1, sb + st.down,
                                rb + st.time_n, n_draws, min_ratio=2.0)
        draws.append(lifetime_and_n(post))
    return truth, draws


def test_sbc_exact_records_conjugate_posterior():
    # quick form: 600 simulations, 99 exact posterior draws each (conjugate Gamma laws,
    # Gelman et al. BDA3 ch. 2), records of 0.2 s (about 20 jumps: small records are
    # where calibration is hardest to get right)
    truth, draws = _conjugate_ranks(600, 99, 0.2, seed=20)
    result = uniformity(ranks(truth, draws), 99, bins=10)
    assert calibrated(result), result
    for factor in (2.0, 0.5):  # negative controls: posterior sd off by a factor 2
        wrong = uniformity(ranks(truth, [widen(d, factor) for d in draws]), 99, bins=10)
        assert not calibrated(wrong), factor
        # and measures the factor: the scale estimate is 1/factor (capped for 0.5 by the
        # largest normal score of 99 draws)
        assert np.all(np.abs(np.log(wrong["scale"] * factor)) < 0.25), (factor, wrong["scale"])


def _mcmc_ranks(n_sims: int, n_draws: int, seed: int, settings, use_fit: bool,
                sampled: float | None = None):
    """SBC through the sampler with the fits' likelihood and log-uniform priors."""
    from cavchar.fits.jumps import JumpPriors, fit_jumps
    from cavchar.inference import sample_posterior
    from cavchar.models.jumps import exact_log_likelihood
    from cavchar.parameters import ParameterSpec
    from cavchar.priors import LogUniform
    from cavchar.simulate import probe_times, simulate_jump_record, simulate_sampled_record

    priors = JumpPriors(lifetime=LogUniform(0.5e-3, 2e-3), n_thermal=LogUniform(0.02, 0.2))
    specs = (ParameterSpec("lifetime", "s", "T_c", priors.lifetime, log_scale=True),
             ParameterSpec("n_thermal", "", "n_th", priors.n_thermal, log_scale=True))
    rng = np.random.default_rng(seed)
    truth = np.column_stack([priors.lifetime.sample(rng, n_sims),
                             priors.n_thermal.sample(rng, n_sims)])
    draws = []
    for i, (t_c, n) in enumerate(truth):
        if sampled is not None:
            times, seg = probe_times(0.5, sampled)
            record = simulate_sampled_record(t_c, n, times, segment=seg, seed=rng)
        else:
            record = simulate_jump_record(t_c, n, 0.5, seed=rng)
        if use_fit:
            result = fit_jumps(record, priors=priors, settings=settings, seed=seed + i)
            chain = result.samples[["lifetime", "n_thermal"]].to_numpy()
        else:
            from cavchar.models.jumps import jump_statistics

            st = jump_statistics(record.time, record.photons, record.end_time, record.segment)
            run = sample_posterior(
                lambda th, st=st: exact_log_likelihood(st, th[:, 0], th[:, 1]), specs,
                [1e-3, 0.06], settings.__class__(**{**settings.to_dict(), "seed": seed + i}))
            chain = run.draws
        draws.append(thin_to(chain, n_draws))
    return truth, draws


def _quick_settings():
    from cavchar.inference import SamplerSettings

    # short chains stay correct here: a 2-parameter, near-Gaussian posterior started at its
    # MAP; the driver still demands 25 autocorrelation times after burn-in, a stable tau
    # and R-hat < 1.03 (the defaults ask 50 tau and 1.01 for a margin on harder posteriors)
    return SamplerSettings(n_walkers=32, chunk=100, min_tau_multiple=25, tau_tol=0.2,
                           rhat_max=1.03, quiet=True, allow_unconverged=False)


def test_sbc_exact_records_through_the_sampler_quick():
    # quick form: 40 simulations (records of 0.5 s, about 100 jumps), the fits' exact
    # likelihood and log-uniform priors, emcee through cavchar.inference.sample_posterior;
    # 49 draws spaced through each chain; 5 bins of 10 ranks
    truth, draws = _mcmc_ranks(40, 49, seed=31, settings=_quick_settings(), use_fit=False)
    check_sbc(truth, draws, 49, bins=5)


@pytest.mark.slow
def test_sbc_fit_jumps_exact_full():
    # full form: 200 simulations through fit_jumps with its default sampler settings
    from cavchar.inference import SamplerSettings

    truth, draws = _mcmc_ranks(200, 99, seed=41, settings=SamplerSettings(quiet=True),
                               use_fit=True)
    check_sbc(truth, draws, 99, bins=10, controls=False, label="fit_jumps exact")


@pytest.mark.slow
def test_sbc_fit_jumps_sampled_full():
    # full form: 100 sampled records (photon number every 0.2 ms) through fit_jumps
    from cavchar.inference import SamplerSettings

    truth, draws = _mcmc_ranks(100, 99, seed=51, settings=SamplerSettings(quiet=True),
                               use_fit=True, sampled=0.2e-3)
    check_sbc(truth, draws, 99, bins=10, controls=False, label="fit_jumps sampled")
