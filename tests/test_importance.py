"""Pareto-smoothed importance sampling (cavchar.inference.importance).

Outside references:
* scipy.stats.genpareto.fit (maximum likelihood) for the generalized Pareto fit;
* the tail of the importance ratio of N(0, s^2) over N(0, 1) is Pareto with shape
  k = 1 - 1/s^2 (P(w > t) = P(x^2 > 2 ln t / (1 - 1/s^2)) ~ t^(-1/(1 - 1/s^2)); the known
  case used in Vehtari et al., JMLR 25 (2024), sect. 3);
* closed form: with a log-uniform prior on an exponential rate lambda and n waiting
  times summing to T the posterior is Gamma(n, T) (mean n/T, variance n/T^2);
* closed form: a uniform prior on [0, 1/2] and a likelihood exp(-x/s) give a truncated
  exponential posterior, P(x <= q) = (1 - e^(-q/s)) / (1 - e^(-1/(2s))), piled against
  the bound 0 (as a fitted readout error with no error in the data);
* simulation-based calibration (Talts et al. 2018, arXiv:1804.06788) of the probe fit, with
  a negative control (a fit told the wrong probe interval) that must fail.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from cavchar.inference import SamplerSettings
from cavchar.inference.importance import (
    ImportanceSettings,
    fit_generalized_pareto,
    khat_limit,
    psis_smooth,
    sample_importance,
)
from cavchar.parameters import ParameterSpec
from cavchar.priors import LogUniform, Uniform


@pytest.mark.parametrize("shape", [0.2, 0.5, 0.9])
def test_generalized_pareto_fit_matches_scipy_mle(shape):
    # scipy's maximum-likelihood fit on 2000 draws; the two estimators differ by far less
    # than their sampling sd (about (1 + k)/sqrt(n) = 0.03-0.04), 0.03 allowed
    x = stats.genpareto.rvs(shape, scale=2.0, size=2000, random_state=3)
    k, sigma = fit_generalized_pareto(x)
    k_ref, _, sigma_ref = stats.genpareto.fit(x, floc=0)
    assert abs(k - k_ref) < 0.03
    assert abs(sigma / sigma_ref - 1) < 0.05


def test_khat_small_when_proposal_is_the_target():
    rng = np.random.default_rng(5)
    x = rng.standard_normal(4000)
    # exactly equal densities: no tail at all
    _, k = psis_smooth(stats.norm.logpdf(x) - stats.norm.logpdf(x))
    assert k == -math.inf
    # a proposal slightly wider than the target: bounded ratios, k <= 0 in theory
    x = 1.1 * rng.standard_normal(4000)
    _, k = psis_smooth(stats.norm.logpdf(x) - stats.norm.logpdf(x, scale=1.1))
    assert k < 0.2


def test_khat_large_for_narrow_proposal_of_heavy_tailed_target():
    # Cauchy target, N(0, 0.1^2) proposal: infinite-variance weights (tail shape 1 in the
    # limit, lower at finite S through slowly varying factors); the mean over 4 seeds of
    # 4000 draws is well above 0.7
    rng = np.random.default_rng(6)
    ks = []
    for _ in range(4):
        x = 0.1 * rng.standard_normal(4000)
        ks.append(psis_smooth(stats.cauchy.logpdf(x) - stats.norm.logpdf(x, scale=0.1))[1])
    assert np.mean(ks) > 0.75


def test_khat_tracks_known_pareto_tail():
    # N(0, 1.5^2) target, N(0, 1) proposal: k = 1 - 1/1.5^2 = 0.556.  Over 5 seeds of
    # 10^4 draws the mean estimate is within 0.1 (sd of one estimate ~ (1+k)/sqrt(300) = 0.09,
    # so 0.04 for the mean, plus the slowly varying factor of the tail)
    rng = np.random.default_rng(7)
    ks = []
    for _ in range(5):
        x = rng.standard_normal(10_000)
        ks.append(psis_smooth(stats.norm.logpdf(x, scale=1.5) - stats.norm.logpdf(x))[1])
    assert abs(np.mean(ks) - (1 - 1 / 1.5**2)) < 0.1
    assert khat_limit(10_000) == pytest.approx(0.7)


def test_smoothed_weights_are_normalized_and_keep_minus_inf():
    rng = np.random.default_rng(8)
    lr = rng.standard_normal(1000)
    lr[:10] = -np.inf
    lw, _ = psis_smooth(lr)
    assert np.all(lw[:10] == -np.inf)
    assert np.exp(lw).sum() == pytest.approx(1.0, rel=1e-12)


def _exponential_rate_model(waits):
    n, total = waits.size, float(waits.sum())

    def loglike(theta):
        lam = theta[:, 0]
        return n * np.log(lam) - lam * total

    return loglike, n, total


def test_posterior_moments_match_gamma_posterior():
    rng = np.random.default_rng(9)
    waits = rng.exponential(1 / 3.0, size=30)
    loglike, n, total = _exponential_rate_model(waits)
    specs = [ParameterSpec("rate", "1/s", "lambda", LogUniform(1e-3, 1e3), log_scale=True)]
    run = sample_importance(loglike, specs, [1.0], SamplerSettings(seed=2, quiet=True))
    assert run.diagnostics["sampler"] == "importance"
    assert run.diagnostics["importance"]["k_hat"] < 0.5
    draws = run.draws[:, 0]
    mean, sd = n / total, math.sqrt(n) / total
    # Monte Carlo error of the mean: sd / sqrt(ESS); 4 sigma allowed
    ess = run.diagnostics["importance"]["ess_weights"]
    assert abs(draws.mean() - mean) < 4 * sd / math.sqrt(ess)
    assert abs(draws.std() / sd - 1) < 4 / math.sqrt(2 * ess) + 0.02
    # a tail quantile too (Gamma(n, T) 95% point)
    q95 = stats.gamma.ppf(0.95, n, scale=1 / total)
    assert abs(np.mean(draws <= q95) - 0.95) < 4 * math.sqrt(0.95 * 0.05 / ess)


def test_poor_approximation_falls_back_to_the_ensemble():
    # Cauchy posterior, Laplace Student-t (df 5) proposal without adaptation: the weights
    # grow as |x|^4 where the proposal falls as |x|^-6, P(w > t) ~ t^(-5/4), k = 0.8 > 0.7,
    # so the ensemble sampler takes over and says so
    def loglike(theta):
        return stats.cauchy.logpdf(theta[:, 0])

    specs = [ParameterSpec("x", "", "x", Uniform(-1000, 1000))]
    run = sample_importance(loglike, specs, [0.0],
                            SamplerSettings(seed=3, quiet=True, max_steps=2000, chunk=200,
                                            allow_unconverged=True),
                            ImportanceSettings(n_draws=4000, df=5.0, adapt=0))
    assert run.diagnostics["sampler"].startswith("ensemble (fallback")
    info = run.diagnostics["importance"]
    assert info["used"] is False and info["k_hat"] > 0.7
    assert "k-hat" in info["reason"]


def _piled_at_zero(scale: float):
    """x ~ exponential of mean ``scale`` truncated to [0, 1/2] (uniform prior) next to a
    Gaussian y ~ N(1, 0.1^2): a posterior on its prior bound, the other coordinate not."""
    def loglike(theta):
        return -theta[:, 0] / scale - 0.5 * ((theta[:, 1] - 1.0) / 0.1) ** 2

    specs = [ParameterSpec("x", "", "x", Uniform(0.0, 0.5)),
             ParameterSpec("y", "", "y", Uniform(-10.0, 10.0))]
    return loglike, specs


def test_posterior_on_a_prior_bound_is_sampled_in_unbounded_coordinates():
    scale = 0.01
    loglike, specs = _piled_at_zero(scale)
    run = sample_importance(loglike, specs, [0.05, 0.5], SamplerSettings(seed=4, quiet=True))
    info = run.diagnostics["importance"]
    assert run.diagnostics["sampler"] == "importance"
    assert info["unbounded_coordinates"] == {"x": "logit"}
    assert info["k_hat"] < info["k_hat_limit"] and info["ess_weights"] >= 1000
    x, y = run.draws[:, 0], run.draws[:, 1]
    assert x.min() >= 0.0 and x.max() <= 0.5
    norm = 1 - math.exp(-0.5 / scale)
    ess = info["ess_weights"]
    for p in (0.05, 0.5, 0.95):  # closed-form quantiles, 4 binomial errors at the ESS
        q = -scale * math.log(1 - p * norm)
        assert abs(np.mean(x <= q) - p) < 4 * math.sqrt(p * (1 - p) / ess)
    assert abs(y.mean() - 1.0) < 4 * 0.1 / math.sqrt(ess)


def test_posterior_on_a_bound_in_sampler_coordinates_wastes_half_the_draws():
    # control: the same posterior with the proposal left in u (the bound ignored, as
    # before): a Laplace proposal centred on the bound puts about half its draws outside
    # the support, so the weights' effective sample size per draw is about halved
    from cavchar.inference import importance

    loglike, specs = _piled_at_zero(0.01)
    ess_per_draw = {}
    saved = importance.NEAR_BOUND_SD
    try:
        for near in (saved, -math.inf):  # -inf: never "near a bound"
            importance.NEAR_BOUND_SD = near
            run = sample_importance(loglike, specs, [0.05, 0.5],
                                    SamplerSettings(seed=4, quiet=True, allow_unconverged=True),
                                    ImportanceSettings(fallback=False, max_draws=4000))
            info = run.diagnostics["importance"]
            ess_per_draw[near] = info["ess_weights"] / info["n_proposal_draws"]
            assert bool(info["unbounded_coordinates"]) == (near == saved)
    finally:
        importance.NEAR_BOUND_SD = saved
    assert ess_per_draw[-math.inf] < 0.6 < ess_per_draw[saved]


def test_one_mode_unseen_is_a_known_limit():
    # k-hat judges the proposal against the posterior only where the proposal puts draws: a
    # second, separated mode is not seen (a documented limit of the method); the weights
    # are then those of the one mode
    def loglike(theta):
        x = theta[:, 0]
        return np.logaddexp(-0.5 * ((x + 3) / 0.3) ** 2, -0.5 * ((x - 3) / 0.3) ** 2)

    specs = [ParameterSpec("x", "", "x", Uniform(-10, 10))]
    run = sample_importance(loglike, specs, [-3.0], SamplerSettings(seed=3, quiet=True))
    assert run.diagnostics["sampler"] == "importance"
    assert np.all(run.draws[:, 0] < 0)


# ------------------------------------------------------------------ SBC of the probe fit
def _probe_sbc(replicates: int, seed: int, stretch: float = 1.0) -> dict[str, float]:
    """Rank of the true (T_c, n_th) among 99 posterior draws for each replicate
    (Talts et al. 2018); returns the KS p-value of the ranks against uniformity per
    parameter.  ``stretch`` != 1: the fit is told probe times ``stretch`` times the real
    ones (a mis-specified model; the negative control)."""
    from cavchar.models.probes.likelihood import ProbeLikelihood
    from cavchar.models.probes.response import FringeResponse
    from cavchar.records import ProbeRecord
    from cavchar.simulate.probes import simulate_probe_record

    response = FringeResponse(visibility=0.9, phase_per_photon=math.pi)
    prior_t, prior_n = LogUniform(0.005, 0.05), LogUniform(0.1, 1.0)
    specs = [ParameterSpec("lifetime", "s", "T_c", prior_t, log_scale=True),
             ParameterSpec("n_thermal", "", "n_th", prior_n, log_scale=True)]
    rng = np.random.default_rng(seed)
    times = np.arange(8000) * 2e-4
    ranks = {"lifetime": [], "n_thermal": []}
    for r in range(replicates):
        truth = (float(prior_t.sample(rng, 1)[0]), float(prior_n.sample(rng, 1)[0]))
        record, _ = simulate_probe_record(truth[0], truth[1], times, response, seed=seed + r)
        if stretch != 1.0:
            record = ProbeRecord(record.time * stretch, record.outcome)
        model = ProbeLikelihood(record, response, max_levels=16)
        run = sample_importance(model, specs, [0.017, 0.3],
                                SamplerSettings(seed=r, quiet=True, allow_unconverged=True),
                                ImportanceSettings(n_draws=1000, max_draws=2000,
                                                   target_ess=300, fallback=False))
        pick = np.random.default_rng(r).choice(run.draws.shape[0], 99, replace=False)
        for d, name in enumerate(ranks):
            ranks[name].append(int(np.sum(run.draws[pick, d] < truth[d])))
    out = {}
    for name, values in ranks.items():
        u = (np.asarray(values) + rng.random(len(values))) / 100.0  # jittered to continuous
        out[name] = float(stats.kstest(u, "uniform").pvalue)
    return out


def test_probe_fit_sbc_quick_with_negative_control():
    # 16 replicates of 8000 probes: KS p-values of the ranks above 0.01 for the true model;
    # the fit told a clock four times too slow (every T_c four times the truth) fails
    good = _probe_sbc(16, seed=100)
    assert min(good.values()) > 0.01, good
    bad = _probe_sbc(8, seed=100, stretch=4.0)
    assert bad["lifetime"] < 0.01, bad


@pytest.mark.slow
def test_probe_fit_sbc_long():
    good = _probe_sbc(100, seed=300)
    assert min(good.values()) > 0.01, good
    bad = _probe_sbc(100, seed=300, stretch=1.5)
    assert bad["lifetime"] < 0.01, bad
