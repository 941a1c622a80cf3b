"""Exact jump-record posterior against its closed form (conjugate Gamma laws)."""

import numpy as np

from cavchar.inference import SamplerSettings, sample_posterior
from cavchar.models.jumps import JumpStatistics, exact_log_likelihood
from cavchar.parameters import ParameterSpec
from cavchar.priors import LogUniform


def test_mcmc_matches_gamma_posterior_of_the_rates():
    # source: conjugate Gamma posterior of Poisson-process rates (Gelman et al., Bayesian Data
    # Analysis, 3rd ed., ch. 2): with flat priors on a = kappa n_th and b = kappa (1 + n_th)
    # the posterior is Gamma(U + 1, A_1) x Gamma(D + 1, A_0) restricted to b > a.
    # Flat on (a, b) is p(T_c, n_th) ∝ T_c^-3 (Jacobian |d(a,b)/d(T_c,n)| = T_c^-3); the
    # log-uniform priors give 1/(T_c n_th), so the likelihood is multiplied by n_th / T_c^2.
    stats = JumpStatistics(up=38, down=41, time_n_plus_1=3.1, time_n=0.42, constant=0.0,
                           duration=2.7, initial_states=np.array([0]), n_max=3)
    specs = (ParameterSpec("lifetime", "s", "T_c", LogUniform(1e-5, 10.0), log_scale=True),
             ParameterSpec("n_thermal", "", "n_th", LogUniform(1e-5, 100.0), log_scale=True))

    def loglike(theta):
        t_c, n = theta[:, 0], theta[:, 1]
        return exact_log_likelihood(stats, t_c, n) + np.log(n) - 2 * np.log(t_c)

    run = sample_posterior(loglike, specs, [0.01, 0.1],
                           SamplerSettings(seed=11, quiet=True, target_ess=4000))
    t_c, n = run.draws[:, 0], run.draws[:, 1]
    a, b = n / t_c, (1 + n) / t_c
    ess = min(run.diagnostics["ess_bulk"].values())
    # exact law by rejection from the two Gamma laws (b > a almost always holds here)
    rng = np.random.default_rng(5)
    a_ref = rng.gamma(stats.up + 1, 1 / stats.time_n_plus_1, 400_000)
    b_ref = rng.gamma(stats.down + 1, 1 / stats.time_n, 400_000)
    keep = b_ref > a_ref
    references = {"a": (a, a_ref[keep]), "b": (b, b_ref[keep]),
                  "lifetime": (t_c, 1 / (b_ref - a_ref)[keep]),
                  "n_thermal": (n, (a_ref / (b_ref - a_ref))[keep])}
    for name, (mcmc, exact) in references.items():
        assert _largest_deviation(mcmc, exact, ess) < 4.0, name
    # negative control: the same check rejects the law of a with 30% more exposure time
    wrong = rng.gamma(stats.up + 1, 1 / (1.3 * stats.time_n_plus_1), 400_000)
    assert _largest_deviation(a, wrong, ess) > 4.0


def _largest_deviation(mcmc, exact, ess):
    """Largest |F_exact(MCMC quantile) - q| in units of its Monte Carlo sd sqrt(q(1-q)/ESS).

    4 sd leaves a ~1e-4 false-alarm chance per quantile."""
    exact_sorted = np.sort(exact)
    worst = 0.0
    for q in (0.05, 0.25, 0.5, 0.75, 0.95):
        cdf = np.searchsorted(exact_sorted, np.quantile(mcmc, q)) / exact_sorted.size
        worst = max(worst, abs(cdf - q) / np.sqrt(q * (1 - q) / ess))
    return worst
