"""The sampler on posteriors known in closed form.

Sources: a correlated bivariate normal (exact quantiles from scipy.stats.norm); the
conjugate Gamma posterior of a Poisson-process rate (Gelman et al., Bayesian Data
Analysis, 3rd ed., ch. 2: n exponential waits of total S with the Jeffreys prior
1/lambda give Gamma(n, S)); Monte Carlo error of a quantile estimate
sqrt(p(1-p)/ESS)/f(q_p) (asymptotic law of sample quantiles, e.g. van der Vaart,
Asymptotic Statistics, ch. 21, from memory).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats

from cavchar.errors import CavcharError, ConvergenceError, ConvergenceWarning, InputError
from cavchar.inference import SamplerSettings, sample_posterior
from cavchar.parameters import ParameterSpec
from cavchar.priors import LogUniform, Uniform

PROBS = np.array([0.025, 0.16, 0.5, 0.84, 0.975])
MU = np.array([1.0, -2.0])
COV = np.array([[1.0, 0.8], [0.8, 2.0]])
ICOV = np.linalg.inv(COV)


def gauss_loglike(x: np.ndarray) -> np.ndarray:
    d = x - MU
    return -0.5 * np.einsum("ki,ij,kj->k", d, ICOV, d)


GAUSS_SPECS = [ParameterSpec("a", "", "a", Uniform(-50, 50)),
               ParameterSpec("b", "", "b", Uniform(-50, 50))]


def quantile_misses(draws: np.ndarray, law, ess: float, n_sigma: float = 4.0) -> list[str]:
    """Quantiles of the draws outside n_sigma Monte Carlo errors of the exact ones."""
    exact = law.ppf(PROBS)
    est = np.quantile(draws, PROBS)
    err = np.sqrt(PROBS * (1 - PROBS) / ess) / law.pdf(exact)
    return [f"p={p}: {e:.4g} vs {x:.4g} (+-{s:.2g})"
            for p, e, x, s in zip(PROBS, est, exact, err, strict=True)
            if abs(e - x) > n_sigma * s]


def min_ess(run, name: str) -> float:
    d = run.diagnostics
    return min(d["ess_bulk"][name], d["ess_tail"][name])


@pytest.fixture(scope="module")
def gauss_run():
    return sample_posterior(gauss_loglike, GAUSS_SPECS, [0.5, 0.5],
                            SamplerSettings(seed=11, quiet=True))


def test_gaussian_quantiles_within_monte_carlo_error(gauss_run):
    run = gauss_run
    assert run.converged
    # 4 sigma per quantile, 10 quantiles: a correct sampler fails with probability ~6e-4
    for i, name in enumerate(["a", "b"]):
        law = stats.norm(MU[i], np.sqrt(COV[i, i]))
        assert quantile_misses(run.draws[:, i], law, min_ess(run, name)) == []
    # correlation 0.8/sqrt(2) = 0.5657; sd of r is (1 - r^2)/sqrt(ESS)
    r = np.corrcoef(run.draws.T)[0, 1]
    rho = 0.8 / np.sqrt(2.0)
    assert abs(r - rho) < 4 * (1 - rho**2) / np.sqrt(min_ess(run, "a"))


def test_negative_control_misscaled_interval_is_detected(gauss_run):
    # The same check must fail against a law 10% too wide: the 84% quantile moves by
    # 0.1 sd while its Monte Carlo error is ~0.02 sd at the ESS reached here.
    run = gauss_run
    wrong = stats.norm(MU[0], 1.1 * np.sqrt(COV[0, 0]))
    assert len(quantile_misses(run.draws[:, 0], wrong, min_ess(run, "a"))) >= 2


def test_stretch_move_also_recovers_gaussian():
    run = sample_posterior(gauss_loglike, GAUSS_SPECS, [0.5, 0.5],
                           SamplerSettings(seed=5, quiet=True, moves="stretch", n_walkers=16))
    assert run.converged
    law = stats.norm(MU[1], np.sqrt(COV[1, 1]))
    assert quantile_misses(run.draws[:, 1], law, min_ess(run, "b")) == []


def test_gamma_posterior_of_a_rate():
    # n = 25 waits with total S = 12.5 s, log-uniform prior (Jeffreys, 1/lambda) on the rate:
    # posterior Gamma(shape n, rate S) (Gelman et al., BDA3 ch. 2); sampled in log space.
    n, total = 25, 12.5

    def loglike(x):
        lam = x[:, 0]
        return n * np.log(lam) - lam * total

    specs = [ParameterSpec("rate", "1/s", "lambda", LogUniform(1e-4, 1e4), log_scale=True)]
    run = sample_posterior(loglike, specs, [5.0], SamplerSettings(seed=2, n_walkers=16,
                                                                  quiet=True))
    assert run.converged
    law = stats.gamma(n, scale=1.0 / total)
    assert quantile_misses(run.draws[:, 0], law, min_ess(run, "rate")) == []
    # the MAP in log coordinates of L(lambda) * (1/lambda) * lambda is the MLE n/S
    assert abs(run.map[0] - n / total) < 1e-4 * n / total
    # stored log-likelihood of each draw equals the model's
    np.testing.assert_allclose(run.log_likelihood, loglike(run.draws), rtol=1e-10)


def test_same_seed_gives_identical_draws():
    settings = SamplerSettings(seed=123, max_steps=300, chunk=300, quiet=True,
                               allow_unconverged=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        one = sample_posterior(gauss_loglike, GAUSS_SPECS, [0.0, 0.0], settings)
        two = sample_posterior(gauss_loglike, GAUSS_SPECS, [0.0, 0.0], settings)
        other = sample_posterior(gauss_loglike, GAUSS_SPECS, [0.0, 0.0],
                                 SamplerSettings(seed=124, max_steps=300, chunk=300,
                                                 quiet=True, allow_unconverged=True))
    assert np.array_equal(one.draws, two.draws)
    assert np.array_equal(one.log_posterior, two.log_posterior)
    assert not np.array_equal(one.draws, other.draws)


def test_unseeded_run_records_its_seed():
    settings = SamplerSettings(max_steps=200, chunk=200, quiet=True, allow_unconverged=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        run = sample_posterior(gauss_loglike, GAUSS_SPECS, [0.0, 0.0], settings)
        again = sample_posterior(gauss_loglike, GAUSS_SPECS, [0.0, 0.0], run.settings)
    assert isinstance(run.settings.seed, int)
    assert np.array_equal(run.draws, again.draws)


def test_too_few_steps_raise_convergence_error():
    with pytest.raises(ConvergenceError) as info:
        sample_posterior(gauss_loglike, GAUSS_SPECS, [0.0, 0.0],
                         SamplerSettings(seed=1, max_steps=100, quiet=True))
    assert info.value.exit_code == 3
    # the sampler speaks of settings; the command line adds its option names
    assert "--" not in str(info.value) and "autocorrelation" in str(info.value)
    suggested = info.value.suggested_max_steps
    assert suggested > 100 and f"{suggested} steps at most" in str(info.value)
    assert info.value.diagnostics["n_steps"] == 100


def test_allow_unconverged_warns_and_returns():
    with pytest.warns(ConvergenceWarning):
        run = sample_posterior(gauss_loglike, GAUSS_SPECS, [0.0, 0.0],
                               SamplerSettings(seed=1, max_steps=100, quiet=True,
                                               allow_unconverged=True))
    assert not run.converged and run.diagnostics["failed_checks"]
    assert run.draws.shape[1] == 2 and np.isfinite(run.draws).all()


def test_likelihood_sees_only_the_prior_support_in_batches():
    seen = []

    def loglike(x):
        seen.append(x.shape)
        assert np.all((x[:, 0] > 0) & (x[:, 0] < 1))
        return -0.5 * ((x[:, 0] - 0.5) / 0.1) ** 2

    specs = [ParameterSpec("p", "", "p", Uniform(0, 1))]
    sample_posterior(loglike, specs, [2.0],  # start outside the support: prior draws used
                     SamplerSettings(seed=3, n_walkers=8, quiet=True))
    assert all(len(s) == 2 and s[1] == 1 for s in seen)
    assert max(s[0] for s in seen) > 1  # batched calls


def test_nan_likelihood_is_reported_as_a_model_bug():
    specs = [ParameterSpec("p", "", "p", Uniform(0, 1))]
    with pytest.raises(CavcharError, match="(?i)nan"):
        sample_posterior(lambda x: np.full(x.shape[0], np.nan), specs, [0.5],
                         SamplerSettings(seed=1, n_walkers=8, quiet=True))


def test_bad_settings_are_input_errors():
    with pytest.raises(InputError):
        SamplerSettings(n_walkers=7)
    with pytest.raises(InputError):
        SamplerSettings(moves="hop")
    three = [*GAUSS_SPECS, ParameterSpec("c", "", "c", Uniform(-1, 1))]
    with pytest.raises(InputError, match="too few"):
        sample_posterior(lambda x: np.zeros(x.shape[0]), three, [0, 0, 0],
                         SamplerSettings(n_walkers=4, quiet=True))


def test_stuck_walkers_fail_the_checks():
    from cavchar.inference.sampler import _check

    chain = np.random.default_rng(1).standard_normal((400, 8, 2))
    chain[:, 3, 1] = 0.25  # one walker never moves in parameter b
    out = _check(chain, None, ["a", "b"], SamplerSettings(), final=True)
    assert any("not moving" in text and "b" in text for text in out["failed"])


def test_map_on_a_prior_bound_keeps_a_start_width():
    # regression: a likelihood peaking outside the prior box put every walker on the same
    # lifetime (zero start width), which differential-evolution moves can never leave
    from cavchar.models.jumps import JumpStatistics, exact_log_likelihood

    stats = JumpStatistics(up=10, down=10, time_n_plus_1=0.05, time_n=0.004, constant=0.0,
                           duration=0.045, initial_states=np.array([0]), n_max=2)
    specs = (ParameterSpec("lifetime", "s", "T_c", LogUniform(0.5e-3, 2e-3), log_scale=True),
             ParameterSpec("n_thermal", "", "n_th", LogUniform(1e-3, 10.0), log_scale=True))
    run = sample_posterior(lambda th: exact_log_likelihood(stats, th[:, 0], th[:, 1]), specs,
                           [1e-3, 0.1], SamplerSettings(seed=1, quiet=True))
    assert run.converged
    assert run.diagnostics["map"]["local_sd"]["lifetime"] > 1e-3
    assert np.ptp(run.draws[:, 0]) > 1e-5


def test_numerical_gradient_matches_the_closed_form_inside_and_at_a_bound():
    # f(x) = -(x0 - 1)^2 - 3 x1^2 + x0 x1: grad = (-2 (x0 - 1) + x1, -6 x1 + x0) (calculus)
    from cavchar.inference.derivatives import numerical_gradient

    calls = []

    def f(x):
        calls.append(x.shape[0])
        return -(x[:, 0] - 1.0) ** 2 - 3.0 * x[:, 1] ** 2 + x[:, 0] * x[:, 1]

    x = np.array([0.3, -0.7])
    grad, f0 = numerical_gradient(f, x, [-np.inf, -np.inf], [np.inf, np.inf])
    exact = np.array([-2 * (x[0] - 1) + x[1], -6 * x[1] + x[0]])
    np.testing.assert_allclose(grad, exact, rtol=1e-8)  # central: error O(h^2) only
    assert f0 == pytest.approx(f(x[None])[0]) and calls[0] == 5  # one batched call
    # x1 on its upper bound: no point beyond it is asked for, a one-sided difference
    # (error about 3 h = 3e-5 for the x1 term, whose second derivative is -6)
    seen = []
    grad, _ = numerical_gradient(lambda z: (seen.append(z), f(z))[1], x, [-1.0, -1.0],
                                 [1.0, -0.7])
    assert np.all(np.concatenate(seen)[:, 1] <= -0.7)
    assert abs(grad[1] - exact[1]) < 1e-4 and grad[0] == pytest.approx(exact[0], rel=1e-8)


def test_map_search_converges_on_open_and_one_sided_supports():
    """Regression: the gradient stage must also move coordinates whose prior is open on
    one or both sides (it once saw a zero gradient there and kept the loose simplex
    point, 1e-2 sd off).  Gaussian log posterior: the maximum is known in closed form."""
    from cavchar.inference.sampler import _Posterior
    from cavchar.inference.start import find_map
    from cavchar.parameters import ParameterSpace
    from cavchar.priors import Normal

    specs = [ParameterSpec("a", "", "a", Normal(0.0, 10.0)),
             ParameterSpec("b", "", "b", Normal(0.0, 10.0, low=-0.2))]

    def loglike(t):
        return -0.5 * ((t[:, 0] - 0.3) / 1e-3) ** 2 - 0.5 * ((t[:, 1] + 0.19) / 2e-3) ** 2

    space = ParameterSpace(specs)
    u, _lp, info = find_map(_Posterior(loglike, space), np.array([0.0, 0.0]), space,
                            np.random.default_rng(0))
    # the priors (sd 10) move the maximum by under 1e-8; accept 1e-4 posterior sd
    assert abs(u[0] - 0.3) < 1e-4 * 1e-3 and abs(u[1] + 0.19) < 1e-4 * 2e-3
    assert info["method"] == "L-BFGS-B"
