"""Simulation-based calibration of the probe-record and ring-down fits.

Source of the method: Talts et al., arXiv 1804.06788 (2018); tests as in
test_sbc_jumps.py (calibration_tools: chi-square on equal rank bins and the normal-score
scale test, level 1e-3, fixed seeds, factor-2 negative controls).

Ring-downs (power): the lifetime is drawn from the prior given to fit_ringdown; the
fit marginalizes the amplitude (uniform on [0, A_max], A_max far above the data) and
the floor (flat) analytically.  The floor's flat prior makes the lifetime's posterior
independent of the true floor, so any floor serves; the amplitude is drawn from
U(0.5, 2), where the fit's prior is flat and the data pin it down (SNR > 30), so the
posterior is the one of the drawn prior to far below the tests' resolution.  The
noise sd is known (written as the trace's sigma column).
"""

from __future__ import annotations

import numpy as np
import pytest
from calibration_tools import check_sbc, thin_to


def _quick_settings():
    from cavchar.inference import SamplerSettings

    # as in test_sbc_jumps: a one- or two-parameter near-Gaussian posterior started at its
    # MAP; 25 autocorrelation times after burn-in, stable tau, R-hat < 1.03
    return SamplerSettings(n_walkers=32, chunk=100, min_tau_multiple=25, tau_tol=0.2,
                           rhat_max=1.03, quiet=True)


def _ringdown_ranks(n_sims: int, n_draws: int, seed: int, settings):
    from cavchar.fits.ringdown import fit_ringdown
    from cavchar.priors import LogUniform
    from cavchar.simulate import simulate_ringdown

    prior = LogUniform(0.5e-3, 2e-3)
    rng = np.random.default_rng(seed)
    times = np.linspace(0.0, 6e-3, 300)
    truth, draws = [], []
    for i in range(n_sims):
        t_c = float(prior.sample(rng, 1)[0])
        trace = simulate_ringdown("power", times, t_c, amplitude=rng.uniform(0.5, 2.0),
                                  floor=rng.uniform(-0.05, 0.05), noise=0.03,
                                  known_sigma=True, seed=rng)
        result = fit_ringdown(trace, priors={"lifetime": prior}, settings=settings,
                              seed=seed + i, compare=False)
        truth.append([t_c])
        draws.append(thin_to(result.samples[["lifetime"]].to_numpy(), n_draws))
    return np.array(truth), draws


def test_sbc_power_ringdown_quick():
    truth, draws = _ringdown_ranks(40, 49, seed=61, settings=_quick_settings())
    check_sbc(truth, draws, 49, bins=5)


@pytest.mark.slow
def test_sbc_power_ringdown_full():
    from cavchar.inference import SamplerSettings

    truth, draws = _ringdown_ranks(200, 99, seed=71, settings=SamplerSettings(quiet=True))
    check_sbc(truth, draws, 99, bins=10, controls=False, label="fit_ringdown power")


def _probe_ranks(n_sims: int, n_draws: int, seed: int, settings):
    from cavchar.fits.probes import ProbePriors, fit_probes
    from cavchar.models.probes.response import FringeResponse
    from cavchar.priors import LogUniform
    from cavchar.simulate import simulate_probe_record

    priors = ProbePriors(lifetime=LogUniform(0.5e-3, 2e-3), n_thermal=LogUniform(0.03, 0.3))
    response = FringeResponse(visibility=0.9, readout_error_0=0.02, readout_error_1=0.04)
    rng = np.random.default_rng(seed)
    times = 0.3e-3 * np.arange(3000)
    truth, draws = [], []
    for i in range(n_sims):
        t_c = float(priors.lifetime.sample(rng, 1)[0])
        n = float(priors.n_thermal.sample(rng, 1)[0])
        record, _ = simulate_probe_record(t_c, n, times, response, seed=rng)
        result = fit_probes(record, response=response, priors=priors, settings=settings,
                            seed=seed + i)
        truth.append([t_c, n])
        draws.append(thin_to(result.samples[["lifetime", "n_thermal"]].to_numpy(), n_draws))
    return np.array(truth), draws


@pytest.mark.slow
def test_sbc_fit_probes_full():
    # 100 records of 3000 probes (0.9 s, about 60-300 jumps) through fit_probes with its
    # default sampler settings (about 30 s each on a shared 2-core machine)
    from cavchar.inference import SamplerSettings

    truth, draws = _probe_ranks(100, 49, seed=81, settings=SamplerSettings(quiet=True))
    check_sbc(truth, draws, 49, bins=5, label="fit_probes")
