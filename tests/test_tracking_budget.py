"""Thermal budget: simulate-and-recover of the two-bath model and of a constant excess,
the f = 0 limit, the likelihood approximations, and bad input.

Outside checks: the Planck occupation is recomputed from scipy.constants
(n = 1/expm1(h nu / k_B T), CODATA 2018 exact h, k_B); the prior division is
checked against the conjugate normal update (posterior precision = prior
precision + likelihood precision; Gelman et al., BDA3 ch. 2).

Simulated series (invented scenario): at each stage temperature the "fit
posterior" of ln n_th is normal with sd ``s`` around an observation that
scatters by ``s`` around the truth, as a well-sampled fit with a log-uniform
prior would give.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import constants

from cavchar.errors import InputError
from cavchar.fits.budget import (
    MODEL_EXCESS,
    MODEL_TWO_BATH,
    BudgetPoint,
    budget_occupation,
    occupation_likelihood,
    thermal_budget,
)
from cavchar.thermal import planck_occupation, two_bath_occupation
from cavchar.tracking.budget import n_thermal_prior
from cavchar.tracking.entries import entry_from_result
from cavchar.tracking.store import LOG_ENV


def planck_scipy(nu, temp):
    # source: Planck occupation with the exact SI constants of scipy.constants
    return 1.0 / np.expm1(constants.h * nu / (constants.k * np.asarray(temp)))


def series(nu, temps, h, t_hot, s, seed, n=4000):
    rng = np.random.default_rng(seed)
    points = []
    for temp in temps:
        truth = budget_occupation(nu, temp, h, t_hot)
        observed = math.log(truth) + rng.normal(0.0, s)
        points.append(BudgetPoint(f"{temp * 1e3:g} mK", temp,
                                  np.exp(rng.normal(observed, s, n))))
    return points


def test_occupation_model_limits():
    nu, temps = 6.0e9, np.array([0.01, 0.03, 0.05, 0.1, 0.2])
    # f = 0 (h = 0): the Planck occupation of the stage
    np.testing.assert_allclose(budget_occupation(nu, temps, 0.0, 3.0), planck_scipy(nu, temps),
                               rtol=1e-12)
    np.testing.assert_allclose(budget_occupation(nu, temps, 0.0), planck_scipy(nu, temps),
                               rtol=1e-12)
    # h = f n(nu, T_hot) gives the two-bath mixture (1 - f) n(T) + f n(T_hot)
    f, t_hot = 0.03, 2.5
    h = f * planck_scipy(nu, t_hot)
    expected = (1 - f) * planck_scipy(nu, temps) + f * planck_scipy(nu, t_hot)
    np.testing.assert_allclose(budget_occupation(nu, temps, h, t_hot), expected, rtol=1e-12)
    np.testing.assert_allclose(two_bath_occupation(nu, temps, t_hot, f), expected, rtol=1e-12)


def test_recovers_hot_fraction_and_temperature():
    # strongly coupled warm bath: f = 0.2 at T_hot = 0.6 K, mode at 5 GHz, 3 % precise n_th
    nu, f, t_hot = 5.0e9, 0.2, 0.6
    h = f * planck_scipy(nu, t_hot)
    temps = [0.02, 0.05, 0.08, 0.11, 0.14, 0.17, 0.2, 0.25]
    budget = thermal_budget(series(nu, temps, h, t_hot, 0.03, seed=40), nu, seed=3)
    assert budget.model == MODEL_TWO_BATH and "identified" in budget.reason
    p = budget.two_bath.parameters
    # truth inside the 95 % credible intervals (a 5 % miss rate per check for a calibrated
    # posterior; the seed is fixed)
    assert p["hot_fraction"].lo95 < f < p["hot_fraction"].hi95
    assert p["hot_temperature"].lo95 < t_hot < p["hot_temperature"].hi95
    assert p["hot_photons"].lo95 < h < p["hot_photons"].hi95
    assert budget.two_bath.converged


def test_recovers_constant_excess_when_t_hot_is_not_identifiable():
    # weakly coupled hot line: f = 1e-3 at 4 K changes the slope by 0.1 %: only h shows
    nu, f, t_hot = 6.0e9, 1e-3, 4.0
    h = f * planck_scipy(nu, t_hot)
    temps = [0.015, 0.03, 0.05, 0.07, 0.09, 0.12]
    budget = thermal_budget(series(nu, temps, h, t_hot, 0.05, seed=41), nu, seed=4)
    assert budget.model == MODEL_EXCESS and "not identifiable" in budget.reason
    x = budget.excess.parameters["excess_photons"]
    assert x.lo95 < h < x.hi95
    assert x.hi95 / x.lo95 < 1.3  # about 2 % precise from six 5 % points
    assert not budget.excess_is_upper_limit
    share = budget.two_bath.parameters["excess_share_at_coldest"]
    assert share.median > 0.99  # at 15 mK nearly all of n_th comes from the hot side


def test_f_zero_reduces_to_the_stage_occupation():
    nu, s = 6.0e9, 0.03
    temps = [0.04, 0.05, 0.06, 0.07, 0.09, 0.12]
    budget = thermal_budget(series(nu, temps, 0.0, None, s, seed=42), nu, seed=5)
    assert budget.model == MODEL_EXCESS
    assert budget.excess_is_upper_limit
    # the 95 % upper limit on the excess is below the data's resolution at the coldest point
    limit = budget.excess.parameters["excess_photons"].hi95
    assert limit < 3 * s * planck_scipy(nu, temps[0])
    band = budget.predicted(temps)
    # the stated model's n_th(T) is the Planck occupation of the stage, within the
    # per-point precision of the data (3 %; the fit pools six points)
    np.testing.assert_allclose(band["median"], planck_scipy(nu, temps), rtol=s)
    # the lower edge of the band sits on the Planck curve (h reaches down to its prior floor)
    np.testing.assert_allclose(band["lo95"], planck_scipy(nu, temps), rtol=1e-3)


def test_likelihood_approximations_agree_for_a_normal_posterior():
    rng = np.random.default_rng(43)
    mu, s = math.log(2e-3), 0.1
    point = BudgetPoint("p", 0.05, np.exp(rng.normal(mu, s, 4000)))
    normal = occupation_likelihood(point, "lognormal")
    kde = occupation_likelihood(point, "kde")
    assert occupation_likelihood(point, "auto").method == "lognormal"
    n = np.exp(mu + s * np.array([-2.0, -1.0, 0.0, 1.0, 2.0]))
    exact = -0.5 * ((np.log(n) - mu) / s) ** 2
    # sample mean/sd of 4000 draws: the normal form is exact up to their error (<1 % of s)
    np.testing.assert_allclose(normal(n) - normal(n[2]), exact, atol=0.1)
    # the KDE is broadened by Scott's bandwidth (factor sqrt(1 + 4000^-0.4) = 1.018 in sd)
    np.testing.assert_allclose(kde(n) - kde(n[2]), exact / 1.036, atol=0.15)
    far = np.exp(mu + s * np.array([-12.0, -8.0, 8.0, 12.0]))  # beyond the tabulated grid
    values = kde(far)
    assert np.all(np.isfinite(values)) and values[0] < values[1] and values[3] < values[2]
    assert normal(np.array([0.0, -1.0])).tolist() == [-np.inf, -np.inf]
    skewed = BudgetPoint("upper limit", 0.05, rng.exponential(1e-4, 4000) + 1e-9)
    assert occupation_likelihood(skewed, "auto").method == "kde"


def test_prior_is_divided_out():
    # posterior = prior x likelihood, both normal in y = ln n (conjugate update)
    from cavchar.priors import LogNormal

    rng = np.random.default_rng(44)
    mu0, s0 = math.log(1e-3), 0.5        # fit prior: log-normal around a stage occupation
    mu_l, s_l = math.log(3e-3), 0.2      # what the data alone say
    prec = 1 / s0**2 + 1 / s_l**2
    mu_p = (mu0 / s0**2 + mu_l / s_l**2) / prec
    draws = np.exp(rng.normal(mu_p, 1 / math.sqrt(prec), 200_000))
    like = occupation_likelihood(BudgetPoint("p", 0.05, draws, LogNormal(1e-3, s0)),
                                 "lognormal")
    y = mu_l + s_l * np.array([-2.0, -1.0, 1.0, 2.0])
    got = like(np.exp(y)) - like(np.exp(np.array([mu_l])))
    # tolerance: sampling error of mean and sd of 2e5 draws propagated through the
    # division (a few 1e-3 in these log-likelihood differences)
    np.testing.assert_allclose(got, -0.5 * ((y - mu_l) / s_l) ** 2, atol=0.02)
    # and the prior is read back from a fit's parameter specifications
    prior, known = n_thermal_prior([{"name": "n_thermal", "prior": LogNormal(1e-3, 0.5).to_dict()}])
    assert known and prior == LogNormal(1e-3, 0.5)
    assert n_thermal_prior([{"name": "n_thermal", "prior": {"family": "loguniform", "low": 1e-6,
                                                          "high": 100.0}}]) == (None, True)
    assert n_thermal_prior([]) == (None, False)


def test_bad_input():
    nu = 6e9
    good = series(nu, [0.02], 1e-3, None, 0.05, seed=45)
    with pytest.raises(InputError, match="mode frequency"):
        thermal_budget(good, 0.0)
    with pytest.raises(InputError, match="at least one"):
        thermal_budget([], nu)
    with pytest.raises(InputError, match="stage temperature must be positive"):
        thermal_budget([BudgetPoint("p", 0.0, good[0].n_thermal)], nu)
    with pytest.raises(InputError, match="at least 20 finite draws"):
        thermal_budget([BudgetPoint("p", 0.02, np.array([1e-3, np.nan] * 5))], nu)
    with pytest.raises(InputError, match="unknown approximation"):
        thermal_budget(good, nu, approximation="histogram")
    two = thermal_budget(series(nu, [0.02, 0.05], 1e-3, None, 0.05, seed=46), nu)
    assert two.two_bath is None and "needs at least 3" in two.reason


def test_cli_budget_from_the_log(tmp_path, run_cli, monkeypatch):
    from tests.test_tracking_store import fresh_log, make_result

    monkeypatch.setenv(LOG_ENV, str(tmp_path / "log.sqlite"))
    nu, h = 6.0e9, 2e-3
    rng = np.random.default_rng(47)
    temps = [0.02, 0.05, 0.08, 0.11]
    with fresh_log(tmp_path / "log.sqlite", cooldowns=("cd1",)) as log:
        for i, p in enumerate(series(nu, temps, h, None, 0.05, seed=48)):
            result = make_result(rng.normal(2e-3, 1e-4, p.n_thermal.size), p.n_thermal,
                                 freq=nu, stage=None, sha=f"{i:064x}")
            log.add_fit(entry_from_result(result), "A", "cd1", stage_temp_k=p.stage_temp_k)
        log.add_cooldown("cd0")
        no_stage = make_result(rng.normal(2e-3, 1e-4, 100), np.full(100, 1e-3), freq=nu,
                               stage=None, sha="f" * 64)
        bad_id = log.add_fit(entry_from_result(no_stage), "A", "cd0")
    code, _, err = run_cli("budget", "--cavity", "A", "--cooldown", "cd0")
    assert code == 2 and "no usable logged fit with n_th draws and a stage temperature" in err
    code, out, err = run_cli("budget", "--cavity", "A", "-o", tmp_path / "o")
    assert code == 0, err
    # the fit without a stage temperature is set aside and said so; cd0 has no budget
    assert (f"note: cooldown cd0 has no budget: fit {bad_id} set aside (no stage temperature "
            "logged)") in out
    assert "stated model: stage plus constant excess" in out and "not identifiable" in out
    assert "20 mK" in out and "excess photons n_x =" in out
    assert "uses fit 1 at 20 mK: the only fit at 20 mK" in out
    doc = json.loads((tmp_path / "o" / "budget.json").read_text())
    assert [c["cooldown"] for c in doc["per_cooldown"]] == ["cd1"]
    assert doc["fit_ids"] == [1, 2, 3, 4]
    x = doc["per_cooldown"][0]["budget"]["stage_plus_excess"]["parameters"]["excess_photons"]
    assert x["lo95"] < h < x["hi95"]
    assert (tmp_path / "o" / "budget.png").stat().st_size > 1000
    code, _, err = run_cli("budget", "--cavity", "A", "-o", tmp_path / "o")
    assert code == 2 and "already exists" in err
    code, _, err = run_cli("budget", "--cavity", "A", "--cooldown", "nope")
    assert code == 2 and "unknown cooldown 'nope'" in err
    assert run_cli("budget")[0] == 2


def test_plot_budget_smoke():
    pytest.importorskip("matplotlib")
    from cavchar.plots.trend import plot_budget

    nu = 6e9
    budget = thermal_budget(series(nu, [0.03, 0.06], 1e-3, None, 0.05, seed=49), nu)
    fig = plot_budget(budget)
    ax = fig.axes[0]
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "Planck occupation of the stage" in labels
    planck_line = next(line for line in ax.get_lines() if line.get_label().startswith("Planck"))
    t_mk, n = planck_line.get_data()
    np.testing.assert_allclose(n, planck_occupation(nu, np.asarray(t_mk) / 1e3), rtol=1e-12)
