"""Posteriors against a prior bound are reported as one-sided limits, not measurements.

Outside reference: draws of known truncated normal laws (scipy.stats.truncnorm),
where the distance of the mode to the bound decides; and an exact jump record
whose rate likelihood (a Gamma kernel in kappa, Gelman et al., *Bayesian Data
Analysis*, 3rd ed., sec. 2.6) peaks far outside the prior range.
"""

import numpy as np
import pytest
from scipy import stats

from cavchar.errors import PriorDominatedWarning
from cavchar.fits.jumps import fit_jumps
from cavchar.inference import SamplerSettings
from cavchar.inference.prior_bounds import prior_bound_check
from cavchar.parameters import ParameterSpec
from cavchar.priors import LogUniform, Uniform
from cavchar.records import JumpRecord


def _spec(prior, log_scale=False):
    return ParameterSpec("lifetime", "s", "T_c", prior, log_scale=log_scale)


def _truncated_normal(mode, sd, low, high, size, seed):
    a, b = (low - mode) / sd, (high - mode) / sd
    return stats.truncnorm.rvs(a, b, loc=mode, scale=sd, size=size, random_state=seed)


@pytest.mark.parametrize(("distance_sd", "flagged"), [(0.0, True), (1.0, True), (4.0, False)])
def test_distance_of_the_mode_to_the_bound_decides(distance_sd, flagged):
    # criterion of the module: density next to the bound >= 10% of the peak, i.e. a
    # normal posterior within ~2.1 sd of the bound; 0 and 1 sd must be flagged, 4 sd
    # (density ratio exp(-8) = 3e-4) must not; 20,000 draws make the bin counts exact
    # to a few per cent
    draws = _truncated_normal(10.0 - distance_sd, 1.0, 0.0, 10.0, 20000, 3)
    out = prior_bound_check([_spec(Uniform(0.0, 10.0))], draws[:, None], warn=False)
    assert ("lifetime" in out["parameters"]) is flagged
    if flagged:
        entry = out["parameters"]["lifetime"]
        assert entry["side"] == "upper"
        assert entry["limit"] == pytest.approx(np.quantile(draws, 0.05))


def test_lower_bound_gives_an_upper_limit_and_a_flat_posterior_both():
    rng = np.random.default_rng(5)
    draws = np.exp(rng.uniform(np.log(1e-6), np.log(1e-2), 20000))  # flat in ln x up to 1e-2
    draws = np.where(draws > 1e-3, draws * np.exp(-(np.log(draws / 1e-3)) ** 2), draws)
    spec = _spec(LogUniform(1e-6, 10.0), log_scale=True)
    out = prior_bound_check([spec], draws[:, None], warn=False)
    entry = out["parameters"]["lifetime"]
    assert entry["side"] == "lower" and entry["limit"] == pytest.approx(np.quantile(draws, 0.95))
    assert "below" in entry["message"] and "T_c <" in entry["message"]
    flat = np.exp(rng.uniform(np.log(1e-6), np.log(10.0), 20000))
    assert prior_bound_check([spec], flat[:, None], warn=False)["parameters"]["lifetime"][
        "side"] == "both"


def test_jump_record_with_an_absurd_last_time_is_reported_as_a_limit():
    # a time column in the wrong unit: one photon that stays 5x10^5 "s" before its
    # down jump.  The likelihood of kappa (one down jump, exposure 5e5 s) peaks at
    # T_c = 5e5 s, far above the default prior bound of 1000 s, so the posterior
    # piles against the bound: it must be reported as a limit, not as ~990 s.
    record = JumpRecord(time=np.array([0.0, 5e5]), photons=np.array([1, 0]), end_time=5.1e5)
    with pytest.warns(PriorDominatedWarning, match="reaches the prior's upper bound"):
        result = fit_jumps(record, settings=SamplerSettings(quiet=True, seed=2,
                                                            allow_unconverged=True))
    entry = result.checks["prior_bounds"]["parameters"]["lifetime"]
    assert entry["side"] == "upper" and entry["bounds"][1] == pytest.approx(1000.0)
    assert entry["density_ratio"]["upper"] > 0.5  # piled, not a tail touching the bound
    assert entry["limit"] == pytest.approx(result.samples["lifetime"].quantile(0.05))


def test_a_well_measured_record_is_not_flagged():
    from cavchar.simulate import simulate_jump_record

    record = simulate_jump_record(4e-3, 0.05, duration=3.0, seed=8)
    result = fit_jumps(record, settings=SamplerSettings(quiet=True, seed=4))
    assert result.checks["prior_bounds"]["flags"] == []
