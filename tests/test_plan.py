"""Experiment planning: Fisher information per data shape, forecasts, studies, CLI, plot."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import integrate, optimize, stats

from cavchar.errors import InputError
from cavchar.inference.derivatives import numerical_hessian
from cavchar.models.jumps import SampledTransitions, sampled_log_likelihood
from cavchar.plan import fisher, study
from cavchar.plan.forecast import (
    StudyDisagreementWarning,
    plan_jumps,
    plan_probes,
    plan_ringdown,
    precision_curve,
)

T_C, N_TH = 1.2e-3, 0.05


# --------------------------------------------------------------------------- sampled records


def _expected_transitions(lifetime, n_thermal, interval, n_levels):
    """Expected counts pi_i P_ij(dt) of one stationary transition, as grouped transitions."""
    from cavchar.dynamics import stationary_distribution, transition_matrices_batch

    p = transition_matrices_batch([1 / lifetime], [n_thermal], n_levels, [interval])[0, 0]
    pi = stationary_distribution(n_thermal, n_levels)
    i, j = np.meshgrid(np.arange(n_levels), np.arange(n_levels), indexing="ij")
    counts = (pi[:, None] * p).ravel()
    # pairs with expected count < 1e-20 carry < 1e-17 of the information, but far-off-diagonal
    # probabilities that small are below the rounding error of the eigen route
    keep = counts > 1e-20
    return SampledTransitions(i.ravel()[keep], j.ravel()[keep], np.zeros(keep.sum(), np.int64),
                              counts[keep], np.array([interval]), np.array([0]), n_levels - 1)


@pytest.mark.parametrize("interval", [0.05e-3, 0.4e-3, 3e-3])
def test_sampled_information_is_minus_the_hessian_of_the_expected_loglik(interval):
    # source: definition of the Fisher information, I = -E[d2 log L] at the truth (Casella &
    # Berger, Statistical Inference, ch. 7).  The expected log-likelihood of one stationary
    # transition is sum_ij pi_i P_ij(theta0) log P_ij(theta); it is evaluated with the fits'
    # own likelihood (cavchar.models.jumps.sampled_log_likelihood, eigen route) and
    # differentiated numerically, independently of the Frechet-derivative formula.
    info = fisher.sampled_jump_information(T_C, N_TH, interval)
    levels = info.extra["levels"]
    trans = _expected_transitions(T_C, N_TH, interval, levels)

    def expected(theta):
        return sampled_log_likelihood(trans, theta[:, 0], theta[:, 1], levels)

    grad, hess, _ = numerical_hessian(expected, [T_C, N_TH], [1e-4 * T_C, 1e-4 * N_TH])
    # central differences with h = 1e-4 relative: truncation error ~h^2 ~ 1e-8, rounding
    # ~eps |log L| / h^2 ~ 1e-8 relative; 1e-4 leaves a wide margin
    np.testing.assert_allclose(info.matrix, -hess, rtol=1e-4, atol=1e-4 * abs(hess).max())
    # the score of the expected log-likelihood vanishes at the truth
    assert np.all(np.abs(grad * [T_C, N_TH]) < 1e-6)


def test_sampled_information_tends_to_the_exact_record_for_short_intervals():
    # source: closed form of the exact record (cavchar.models.jumps.exact_fisher_information,
    # derived in its docstring): sampling every dt loses O(dt / T_c) of the information
    exact = fisher.exact_jump_information(T_C, N_TH).matrix
    for dt, tol in ((1e-6, 2e-3), (1e-5, 2e-2)):
        per_second = fisher.sampled_jump_information(T_C, N_TH, dt).matrix / dt
        np.testing.assert_allclose(per_second, exact, rtol=tol)
    # and loses information for coarse sampling (data-processing inequality)
    coarse = fisher.sampled_jump_information(T_C, N_TH, 2e-3).matrix / 2e-3
    assert np.all(np.linalg.eigvalsh(exact - coarse) > 0)


# --------------------------------------------------------------------------- jump planner


def test_needed_record_length_follows_the_cramer_rao_closed_form():
    # source: var(n_th) = 2 n (1 + n) / (kappa T) and var(kappa) = kappa [(1+n)/n + n/(1+n)] / T
    # (inverse of the closed-form information, cavchar.models.jumps docstring)
    table = plan_jumps(T_C, N_TH, target_lifetime=0.03, target_n_thermal=0.2, check=False)
    kappa, n = 1 / T_C, N_TH
    need_t = ((1 + n) / n + n / (1 + n)) / kappa / 0.03**2
    need_n = 2 * (1 + n) / (n * kappa) / 0.2**2
    rows = table.set_index("quantity")
    assert rows.loc["lifetime", "needed_amount"] == pytest.approx(need_t, rel=1e-12)
    assert rows.loc["n_thermal", "needed_amount"] == pytest.approx(need_n, rel=1e-12)
    assert table.attrs["planned_amount"] == pytest.approx(max(need_t, need_n), rel=1e-12)
    assert rows.loc["lifetime", "expected_relative_sd"] == pytest.approx(0.03, rel=1e-12)
    # reverse question: a given record length gives the precision of the same law
    back = plan_jumps(T_C, N_TH, record_length=need_n, check=False).set_index("quantity")
    assert back.loc["n_thermal", "expected_relative_sd"] == pytest.approx(0.2, rel=1e-12)


def test_exact_jump_forecast_matches_the_simulated_spread():
    # source: Cramér–Rao bound, reached by the maximum-likelihood estimate of large records
    # (Casella & Berger ch. 10).  200 records: the sample sd has a relative Monte Carlo
    # error 1/sqrt(2 * 199) = 5%, so the required 15% is three standard errors.
    with warnings.catch_warnings():
        warnings.simplefilter("error", StudyDisagreementWarning)
        table = plan_jumps(T_C, N_TH, target_lifetime=0.04, target_n_thermal=0.05,
                           freq_hz=6.8e9, check_records=200, seed=4)
    rows = table.set_index("quantity")
    for name in ("lifetime", "n_thermal", "effective_temperature"):
        assert abs(rows.loc[name, "simulated_to_expected"] - 1) < 0.15, name
        # the per-record Laplace width (what a posterior sd matches) agrees more closely
        assert rows.loc[name, "fit_sd"] / rows.loc[name, "expected_sd"] == pytest.approx(
            1, abs=0.05), name
    assert rows.loc["lifetime", "failed_records"] == 0


def test_sampled_jump_forecast_matches_the_simulated_spread():
    # source: as above, for the sampled likelihood; 150 records give a 5.8% Monte Carlo error
    table = plan_jumps(T_C, N_TH, target_lifetime=0.08, sample_interval=0.6e-3,
                       check_records=150, seed=5)
    rows = table.set_index("quantity")
    for name in ("lifetime", "n_thermal"):
        assert abs(rows.loc[name, "simulated_to_expected"] - 1) < 0.18, name


def test_study_detects_a_forecast_that_is_too_optimistic():
    # negative control: a record of about 4 jumps, where many simulated records have no up
    # jump (no estimate of n_th exists) and the per-record widths miss the forecast
    with pytest.warns(StudyDisagreementWarning, match="gave no estimate"):
        table = plan_jumps(T_C, N_TH, record_length=0.05, check_records=60, seed=1)
    rows = table.set_index("quantity")
    assert rows.loc["lifetime", "failed_records"] > 5
    assert rows.loc["lifetime", "fit_sd"] < 0.85 * rows.loc["lifetime", "expected_sd"]


# --------------------------------------------------------------------------- probe records


def test_probe_information_lies_below_the_perfect_readout_bound():
    # source: data-processing inequality (outcomes are a noisy function of the photon
    # numbers at the probe times, so their information is at most the sampled record's)
    from cavchar.models.probes.response import FringeResponse

    response = FringeResponse(visibility=0.8, readout_error_0=0.03, readout_error_1=0.05)
    info = fisher.probe_information(T_C, 0.1, 0.2e-3, response, n_records=3,
                                    probes_per_record=30_000, seed=2)
    assert np.all((info.rel_error > 0) & (info.rel_error < 0.15))  # sane Monte Carlo error
    sd, bound = info.sd(1e5), fisher.Information(info.names, info.values, info.bound, "",
                                                 info.rel_error).sd(1e5)
    assert np.all(sd > bound)
    assert np.all(np.linalg.eigvalsh(info.bound - info.matrix) > 0)


def test_probe_forecast_matches_the_simulated_spread_quick():
    # quick form (30 records: relative Monte Carlo error 13% of the sd, so 3 errors = 39%);
    # the 15% check with 200 records is tests/calibration/test_plan_slow.py
    from cavchar.models.probes.response import FringeResponse

    response = FringeResponse(visibility=0.9, readout_error_0=0.02, readout_error_1=0.04)
    table = plan_probes(1e-3, 0.1, 0.3e-3, response, target_lifetime=0.2, check_records=30,
                        information_records=3, max_information_probes=60_000, seed=8)
    rows = table.set_index("quantity")
    for name in ("lifetime", "n_thermal"):
        assert abs(rows.loc[name, "simulated_to_expected"] - 1) < 0.39, name
        assert rows.loc[name, "perfect_readout_relative_sd"] < rows.loc[
            name, "expected_relative_sd"]
    assert table.attrs["planned_record_length_s"] == pytest.approx(
        table.attrs["planned_amount"] * 0.3e-3)


# --------------------------------------------------------------------------- ring-downs


def _curve_fit_study(signal, times, truth, model, sigma, n_traces, rng, **sim):
    """Fit each simulated trace with scipy.optimize.curve_fit; estimates and covariances."""
    from cavchar.simulate import simulate_ringdown

    trace = simulate_ringdown(signal, times, T_C, traces=n_traces, seed=rng, **sim)
    values = np.asarray(trace.value).reshape(n_traces, times.size)
    estimates, variances = [], []
    for y in values:
        if signal == "iq":
            x, ydata = np.r_[times, times], np.r_[y.real, y.imag]
        else:
            x, ydata = times, y
        popt, pcov = optimize.curve_fit(model, x, ydata, p0=truth, sigma=np.full(x.size, sigma),
                                        absolute_sigma=True)
        estimates.append(popt[0])
        variances.append(pcov[0, 0])
    return np.array(estimates), np.array(variances)


def _iq_model(x, t_c, c_re, c_im, detuning, o_re, o_im):
    m = x.size // 2
    t = x[:m]
    field = (c_re + 1j * c_im) * np.exp(-t / (2 * t_c) - 2j * np.pi * detuning * t)
    return np.r_[field.real + o_re, field.imag + o_im]


RINGDOWN_CASES = {
    "power": (dict(amplitude=1.0, floor=0.02, noise=0.03), [T_C, 1.0, 0.02],
              lambda t, tc, a, f: a * np.exp(-t / tc) + f),
    "db": (dict(amplitude=1.0, floor=0.01, noise=0.3), [T_C, 1.0, 0.01],
           lambda t, tc, a, f: 10 * np.log10(a * np.exp(-t / tc) + f)),
    "mean_n": (dict(n_th=0.1, initial=3, noise=0.05), [T_C, 0.1, 3.0],
               lambda t, tc, n, n0: n + (n0 - n) * np.exp(-t / tc)),
    "iq": (dict(amplitude=1.0, phase=0.5, detuning=400.0, offset=0.03 - 0.02j, noise=0.05),
           [T_C, math.cos(0.5), math.sin(0.5), 400.0, 0.03, -0.02], _iq_model),
}


@pytest.mark.parametrize("signal", sorted(RINGDOWN_CASES))
def test_ringdown_information_matches_curve_fit(signal):
    # source: scipy.optimize.curve_fit (absolute_sigma=True) on 300 simulated traces: its
    # covariance (J^T J / sigma^2 at each estimate, inverted: nuisances profiled) and the
    # spread of its estimates, against J^T J / sigma^2 with the Schur complement.
    sim, truth, model = RINGDOWN_CASES[signal]
    times = np.linspace(0, 4 * T_C, 400)
    kw = {k: v for k, v in sim.items() if k != "n_th"}
    info = fisher.ringdown_information(signal, times, T_C, n_thermal=sim.get("n_th", 0.0), **kw)
    sd = float(info.sd()[0])
    est, var = _curve_fit_study(signal, times, truth, model, sim["noise"], 300,
                                np.random.default_rng(11), **sim)
    # curve_fit's covariance depends on the data only through the estimate (relative spread
    # ~1%): the mean sd agrees to well within 3%
    assert np.sqrt(var).mean() / sd == pytest.approx(1, abs=0.03)
    # spread of 300 estimates: relative Monte Carlo error 1/sqrt(598) = 4%, 4 errors = 16%
    assert np.std(est, ddof=1) / sd == pytest.approx(1, abs=0.16)


def test_ringdown_forecast_scales_with_traces_and_profiles_nuisances():
    times = np.linspace(0, 5 * T_C, 300)
    free = fisher.ringdown_information("power", times, T_C, noise=0.02, floor=0.01)
    fixed = fisher.ringdown_information("power", times, T_C, noise=0.02, floor=0.01,
                                        fixed=("floor",))
    assert fixed.matrix[0, 0] > free.matrix[0, 0]  # knowing the floor helps
    table = plan_ringdown("power", T_C, noise=0.02, floor=0.01, times=times, n_traces=25,
                          check=False)
    assert table.loc[0, "expected_sd"] == pytest.approx(free.sd(25)[0], rel=1e-12)
    needed = plan_ringdown("power", T_C, noise=0.02, floor=0.01, times=times,
                           target_lifetime=0.001, check=False).loc[0, "needed_amount"]
    assert needed == math.ceil((free.sd()[0] / T_C / 0.001) ** 2)
    with pytest.raises(InputError, match="cannot separate"):
        fisher.ringdown_information("power", np.linspace(0, 1e-3 * T_C, 50), T_C, noise=0.02)
    with pytest.raises(InputError, match="no information on n_th"):
        plan_ringdown("power", T_C, noise=0.02, target_n_thermal=0.1, check=False)


def _rice_score_product(x, nu, sigma, a, b):
    """score_a * score_b * density of scipy.stats.rice (scores by central differences)."""
    h = 1e-5

    def lp(loc, s):
        return stats.rice.logpdf(x, loc / s, scale=s)

    score = ((lp(nu + h, sigma) - lp(nu - h, sigma)) / (2 * h),
             (lp(nu, sigma + h) - lp(nu, sigma - h)) / (2 * h))
    return score[a] * score[b] * stats.rice.pdf(x, nu / sigma, scale=sigma)


def test_rice_information_against_scipy():
    # source: scipy.stats.rice (its logpdf differentiated numerically, expectations by
    # scipy.integrate.quad), and the Rayleigh (nu = 0: I_ss = 4/s^2) and Gaussian
    # (nu >> s: 1/s^2, 2/s^2) limits
    sigma = 0.7
    ours = fisher.rice_information([0.0, 0.35, 1.4, 4.0, 30.0], sigma)
    for k, nu in ((0, 0.35), (2, 4.0)):
        ref = np.empty((2, 2))
        for a in range(2):
            for b in range(2):
                ref[a, b] = integrate.quad(_rice_score_product, 0, nu + 12 * sigma,
                                           args=(nu, sigma, a, b), limit=200)[0]
        np.testing.assert_allclose(ours[k + 1], ref, rtol=2e-5, atol=2e-6)
    np.testing.assert_allclose(ours[0], [[0, 0], [0, 4 / sigma**2]], atol=1e-9)
    # nu >> s: a Gaussian of sd s and mean sqrt(nu^2 + s^2), so I_ns -> 1 / (s nu)
    np.testing.assert_allclose(ours[-1], [[1 / sigma**2, 1 / (sigma * 30)],
                                          [1 / (sigma * 30), 2 / sigma**2]], rtol=2e-3)


def test_population_information_is_minus_the_hessian_of_the_expected_loglik():
    # source: definition of the Fisher information; the expected multinomial log-likelihood
    # sum_t shots sum_n p_n(theta0) log p_n(theta) uses cavchar.dynamics.populations (eigen
    # route), independent of the Frechet derivatives used by the forecast
    from cavchar.dynamics import populations

    times, shots, n_levels = np.linspace(0.1e-3, 4e-3, 12), 300, 16
    info = fisher.ringdown_information("populations", times, T_C, n_thermal=0.1, initial=2,
                                       shots=shots)
    p0 = np.array([0, 0, 1.0])
    truth = populations(1 / T_C, 0.1, p0, times, n_levels=n_levels)
    use = truth > 1e-20  # levels below carry no information worth the rounding

    def expected(theta):
        return np.array([shots * np.sum(truth[use] * np.log(populations(
            1 / t, n, p0, times, n_levels=n_levels)[use])) for t, n in theta])

    _g, hess, _ = numerical_hessian(expected, [T_C, 0.1], [1e-4 * T_C, 1e-4 * 0.1])
    np.testing.assert_allclose(info.matrix, -hess, rtol=1e-4)


def test_ringdown_study_agrees_with_the_forecast():
    # source: Cramér–Rao bound (maximum likelihood on 120 simulated sets of 4 traces;
    # relative Monte Carlo error of the spread 6.5%, 3 errors ~ 20%)
    for signal, kw in (("power", dict(noise=0.03, floor=0.02)),
                       ("populations", dict(n_thermal=0.1, initial=2, shots=200, points=25))):
        table = plan_ringdown(signal, T_C, n_traces=4, check_records=120, seed=3, **kw)
        assert (table["simulated_to_expected"] - 1).abs().max() < 0.2, signal


# --------------------------------------------------------------------------- study helper


def test_maximize_finds_a_gaussian_maximum_and_its_covariance():
    # closed form: the maximum and covariance of a Gaussian log-density
    cov = np.array([[4.0, 1.2], [1.2, 1.0]])
    mean = np.array([3.0, -2.0])
    prec = np.linalg.inv(cov)

    def loglik(x):
        d = x - mean
        return -0.5 * np.einsum("ki,ij,kj->k", d, prec, d)

    x, c, ok = study.maximize(loglik, [0.0, 0.0], [2.0, 1.0])
    assert ok
    np.testing.assert_allclose(x, mean, atol=1e-6)
    np.testing.assert_allclose(c, cov, rtol=1e-6)


def test_public_api_is_lazy_and_light(modules_loaded_by):
    import cavchar
    from cavchar.plan import forecast

    assert cavchar.plan_jumps is forecast.plan_jumps
    assert cavchar.plan_ringdown is forecast.plan_ringdown
    assert modules_loaded_by("cavchar.plan", ("pandas", "matplotlib", "scipy")) == []


def test_bad_input_is_an_input_error():
    with pytest.raises(InputError, match="target precision or an amount"):
        plan_jumps(T_C, N_TH, check=False)
    with pytest.raises(InputError):
        plan_jumps(-1.0, N_TH, target_lifetime=0.1)
    with pytest.raises(InputError, match="> 0"):
        plan_jumps(T_C, N_TH, target_lifetime=-0.1)
    with pytest.raises(InputError, match="temperature needs"):
        plan_jumps(T_C, N_TH, target_temperature=0.1)
    with pytest.raises(InputError, match="unknown signal"):
        plan_ringdown("voltage", T_C, noise=0.1, target_lifetime=0.1)


def test_precision_curve_falls_as_one_over_root_amount():
    table = plan_jumps(T_C, N_TH, target_lifetime=0.05, check=False)
    curve = precision_curve(table, amounts=[10.0, 40.0])
    life = curve[curve["quantity"] == "lifetime"]["expected_relative_sd"].to_numpy()
    assert life[0] / life[1] == pytest.approx(2.0, rel=1e-12)


# --------------------------------------------------------------------------- CLI and plot


def test_cli_plan_jumps_prints_units_and_writes_outputs(run_cli, tmp_path):
    out = tmp_path / "plan"
    code, text, err = run_cli("plan", "jumps", "--lifetime", "1.2ms", "--n-thermal", "0.05",
                              "--freq", "6.8GHz", "--target-lifetime", "5%",
                              "--target-n-thermal", "20%", "--check-records", "5",
                              "-o", out)
    assert code == 0, err
    assert "record length" in text and " s" in text and "mK" in text
    assert (out / "plan.csv").exists() and (out / "plan.png").exists()
    code, _, err = run_cli("plan", "jumps", "--lifetime", "1.2ms", "--n-thermal", "0.05",
                           "--target-lifetime", "5%", "--no-check", "-o", out)
    assert code == 2 and "--force" in err
    code, _, err = run_cli("plan", "jumps", "--lifetime", "1.2ms", "--n-thermal", "0.05",
                           "--target-lifetime", "5%", "--no-check", "-o", out, "--force")
    assert code == 0, err


def test_cli_plan_ringdown_and_probes(run_cli):
    code, text, err = run_cli("plan", "ringdown", "--signal", "power", "--lifetime", "1.2ms",
                              "--noise", "0.05", "--span", "6ms", "--points", "500",
                              "--traces", "10", "--no-check")
    assert code == 0, err
    assert "traces" in text and "µs" in text
    code, text, err = run_cli("plan", "probes", "--lifetime", "1ms", "--n-thermal", "0.1",
                              "--probe-interval", "0.3ms", "--visibility", "0.9",
                              "--target-lifetime", "30%", "--no-check")
    assert code == 0, err
    assert "probes" in text and "perfect readout" in text
    code, _, err = run_cli("plan", "jumps", "--lifetime", "1.2ms", "--n-thermal", "0.05")
    assert code == 2 and "target" in err


def test_plan_figure_under_agg():
    pytest.importorskip("matplotlib")
    import matplotlib

    matplotlib.use("Agg")
    from cavchar.plots.plan import plot_plan

    table = plan_jumps(T_C, N_TH, target_lifetime=0.05, target_n_thermal=0.2,
                       check_records=10, seed=1)
    fig = plot_plan(table)
    ax = fig.axes[0]
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    assert len(ax.lines) >= 2
    import matplotlib.pyplot as plt

    plt.close(fig)
