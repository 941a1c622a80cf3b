"""Trend across cooldowns and the probability that the lifetime fell.

Outside check: for independent normal posteriors X ~ N(mu1, s1^2) (a cooldown)
and Y ~ N(mu0, s0^2) (the reference), X - (1 - d) Y is normal, so

    P(X < (1 - d) Y) = Phi(((1 - d) mu0 - mu1) / sqrt(s1^2 + (1 - d)^2 s0^2))

(closed form for a difference of independent normals; scipy.stats.norm.cdf).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.stats import norm

from cavchar.errors import InputError
from cavchar.thermal import effective_temperature
from cavchar.tracking.entries import entry_from_result
from cavchar.tracking.store import LOG_ENV
from cavchar.tracking.trend import cooldown_trend, drop_probability
from tests.test_tracking_store import FREQ, fresh_log, make_result, random_result


def closed_form(mu1, s1, mu0, s0, d):
    # source: difference of independent normal variables (textbook), scipy.stats.norm
    return norm.cdf(((1 - d) * mu0 - mu1) / np.hypot(s1, (1 - d) * s0))


@pytest.mark.parametrize("mu1, s1, expected_range", [
    (1.70e-3, 0.08e-3, (0.5, 0.9)),    # near the threshold (0.9 * 2 ms = 1.8 ms)
    (1.95e-3, 0.05e-3, (0.0, 0.05)),   # clearly not fallen by 10 %
    (1.50e-3, 0.10e-3, (0.95, 1.0)),   # clearly fallen
])
def test_drop_probability_against_closed_form(tmp_path, mu1, s1, expected_range):
    rng = np.random.default_rng(20)
    mu0, s0, d = 2.0e-3, 0.06e-3, 0.1
    with fresh_log(tmp_path / "log.sqlite") as log:  # through the log: float32 storage
        log.add_fit(entry_from_result(make_result(rng.normal(mu0, s0, 4000), sha="0" * 64)),
                    "A", "cd1")
        log.add_fit(entry_from_result(make_result(rng.normal(mu1, s1, 4000), sha="1" * 64)),
                    "A", "cd2")
        trend = cooldown_trend(log, "A", reference="cd1", fraction=d)
    row = trend.rows[1]
    exact = closed_form(mu1, s1, mu0, s0, d)
    assert expected_range[0] <= exact <= expected_range[1]
    # tolerance: 4 Monte Carlo standard errors of the all-pairs estimate (independent draws),
    # plus 1e-4 for float32 rounding of draws that sit exactly at the threshold
    assert abs(row.drop_probability - exact) <= 4 * row.drop_mc_error + 1e-4
    # negative control: ignoring the reference's own uncertainty is a different answer the
    # test can tell apart (where that difference exceeds the tolerance)
    wrong = norm.cdf(((1 - d) * mu0 - mu1) / s1)
    if abs(wrong - exact) > 8 * row.drop_mc_error + 1e-3:
        assert abs(row.drop_probability - wrong) > 4 * row.drop_mc_error
    assert trend.rows[0].drop_probability is None  # the reference itself


def test_drop_probability_error_estimate_matches_repeats():
    # the reported Monte Carlo error against the spread over 300 independent repeats;
    # the sd of 300 repeats is known to +-4 % (1/sqrt(2*299)), the 25 % allowance is generous
    rng = np.random.default_rng(21)
    estimates, errors = [], []
    for _ in range(300):
        p, e = drop_probability(rng.normal(1.75, 0.1, 400), rng.normal(2.0, 0.08, 300), 0.1)
        estimates.append(p)
        errors.append(e)
    assert np.std(estimates, ddof=1) == pytest.approx(np.mean(errors), rel=0.25)
    assert np.mean(estimates) == pytest.approx(closed_form(1.75, 0.1, 2.0, 0.08, 0.1),
                                               abs=4 * np.std(estimates) / np.sqrt(300))


def test_drop_probability_edges():
    x = np.array([1.0, 2.0, 3.0])
    y = np.array([10.0, 10.0])
    assert drop_probability(x, y, 0.5) == (1.0, 0.0)
    assert drop_probability(y, x, 0.0)[0] == 0.0
    # ties: X exactly at (1 - d) Y does not count as "fell by more than d"
    assert drop_probability(np.array([9.0]), np.array([10.0]), 0.1)[0] == 0.0
    with pytest.raises(InputError, match="drop fraction"):
        drop_probability(x, y, 1.0)


def test_trend_rows_intervals_and_selection(tmp_path):
    rng = np.random.default_rng(22)
    with fresh_log(tmp_path / "log.sqlite") as log:
        # logged out of date order: cd3 first
        log.add_fit(entry_from_result(random_result(rng, lifetime=1.5e-3, sha="3" * 64)),
                    "A", "cd3")
        log.add_fit(entry_from_result(random_result(rng, lifetime=2.0e-3, sha="1" * 64)),
                    "A", "cd1")
        log.add_fit(entry_from_result(random_result(rng, lifetime=1.9e-3, sha="2" * 64)),
                    "A", "cd2")
        precise = make_result(rng.normal(1.8e-3, 0.02 * 1.8e-3, 6000),
                              np.exp(rng.normal(np.log(1e-3), 0.04, 6000)), sha="4" * 64)
        latest = log.add_fit(entry_from_result(precise), "A", "cd2")
        ringdown = make_result(rng.normal(1.7e-3, 5e-5, 3000), sha="5" * 64, kind="ringdown")
        log.add_fit(entry_from_result(ringdown), "A", "cd2")
        trend = cooldown_trend(log, "A", kind="jumps")
        assert [r.cooldown for r in trend.rows] == ["cd1", "cd2", "cd3"]  # by start date
        row = trend.rows[1]
        # the more precise of the two jumps fits at base temperature stands for cd2
        assert row.fit_id == latest and row.n_fits == 3 and row.fit_ids == (latest,)
        assert dict(row.set_aside)[latest - 1].startswith("at base temperature but less precise")
        assert "not selected" in dict(row.set_aside)[latest + 1]  # the ring-down, --kind jumps
        # intervals: the fit's own summary (all its draws), as a report of the result shows
        summary = precise.summary()
        for name in ("lifetime", "n_thermal", "effective_temperature"):
            s = row.stats[name]
            np.testing.assert_allclose([s.median, s.lo68, s.hi68, s.lo95, s.hi95],
                                       summary.loc[name, ["median", "lo68", "hi68", "lo95",
                                                          "hi95"]].to_numpy(dtype=float))
        each = cooldown_trend(log, "A", each_fit=True)
        assert len(each.rows) == 5
        assert any("mix fit kinds" in n for n in each.notes)
        table = trend.table()
        assert list(table["cooldown"]) == ["cd1", "cd2", "cd3"]
        assert "lifetime_s_median" in table.columns and "effective_temperature_K_lo95" in table
        with pytest.raises(InputError, match="unknown cooldown 'cd7'"):
            cooldown_trend(log, "A", reference="cd7")
        log.add_cooldown("empty")
        with pytest.raises(InputError, match="no usable lifetime in reference cooldown 'empty'"):
            cooldown_trend(log, "A", reference="empty")
        with pytest.raises(InputError, match="unknown cavity 'Z'"):
            cooldown_trend(log, "Z")
        log.add_cavity("B")
        with pytest.raises(InputError, match="no logged fits"):
            cooldown_trend(log, "B")


def test_effective_temperature_from_n_thermal(tmp_path):
    # a fit that stored n_th but not T_eff: T_eff = h nu / (k_B ln(1 + 1/n)) from the draws
    from cavchar.tracking.store import FitEntry

    rng = np.random.default_rng(23)
    n_th = np.exp(rng.normal(np.log(2e-3), 0.1, 2000))
    entry = FitEntry(kind="jumps", draws={"lifetime": rng.normal(2e-3, 1e-4, 2000),
                                          "n_thermal": n_th}, freq_hz=FREQ)
    with fresh_log(tmp_path / "log.sqlite") as log:
        log.add_fit(entry, "A", "cd1")
        row = cooldown_trend(log, "A").rows[0]
    expected = np.median(effective_temperature(FREQ, n_th.astype(np.float32).astype(float)))
    assert row.stats["effective_temperature"].median == pytest.approx(expected, rel=1e-9)


def test_cli_trend(tmp_path, run_cli, monkeypatch):
    monkeypatch.setenv(LOG_ENV, str(tmp_path / "log.sqlite"))
    rng = np.random.default_rng(24)
    with fresh_log(tmp_path / "log.sqlite") as log:
        for i, life in enumerate([2.0e-3, 1.95e-3, 1.5e-3]):
            log.add_fit(entry_from_result(random_result(rng, lifetime=life, sha=f"{i:064x}")),
                        "A", f"cd{i + 1}")
    code, out, _ = run_cli("trend", "--cavity", "A", "--reference", "cd1", "--drop", "10%")
    assert code == 0
    lines = out.splitlines()
    assert "P(drop > 10%)" in lines[1] and "reference" in lines[2]
    assert " ms" in out and " mK" in out
    assert float(lines[4].split()[-3]) > 0.99  # cd3: 25 % shorter lifetime
    code, out, _ = run_cli("trend", "--cavity", "A", "--reference", "cd1", "--json")
    doc = json.loads(out)
    assert doc["rows"][2]["drop_probability"] > 0.99 and doc["drop_fraction"] == 0.1
    out_dir = tmp_path / "out"
    assert run_cli("trend", "--cavity", "A", "-o", out_dir)[0] == 0
    assert {p.name for p in out_dir.iterdir()} == {"trend-A.csv", "trend-A.json", "trend-A.png"}
    code, _, err = run_cli("trend", "--cavity", "A", "-o", out_dir)
    assert code == 2 and "already exists" in err
    assert run_cli("trend", "--cavity", "A", "-o", out_dir, "--force")[0] == 0
    code, _, err = run_cli("trend", "--cavity", "nope")
    assert code == 2 and "unknown cavity 'nope'" in err
    assert run_cli("trend", "--cavity", "A", "--drop", "150%")[0] == 2
    code, _, err = run_cli("trend", "--cavity", "A", "--log-file", tmp_path / "none.sqlite")
    assert code == 2 and "no cooldown log here" in err


def test_plot_trend_smoke(tmp_path):
    pytest.importorskip("matplotlib")
    from cavchar.plots.trend import plot_trend

    rng = np.random.default_rng(25)
    with fresh_log(tmp_path / "log.sqlite") as log:
        for i in range(3):
            log.add_fit(entry_from_result(random_result(rng, sha=f"{i:064x}")), "A", f"cd{i + 1}")
        trend = cooldown_trend(log, "A", reference="cd2")
    fig = plot_trend(trend)
    assert len(fig.axes) == 3
    assert fig.axes[1].get_yscale() == "log"
    assert "P(lifetime fell" in fig.axes[0].get_title()


def test_open_log_is_light(modules_loaded_by):
    # import cavchar.tracking.store pulls in neither pandas nor matplotlib (subprocess check)
    assert modules_loaded_by("cavchar.tracking.store, cavchar.tracking.trend, cavchar.cli.log",
                             ("matplotlib", "pandas", "scipy.stats")) == []


def test_trend_draws_user_text_literally(tmp_path, run_cli, monkeypatch):
    """A cavity or cooldown name that matplotlib's mathtext would parse (an unbalanced
    ``$...$``) is drawn as plain text: trend writes its figure, exit 0, no traceback."""
    monkeypatch.setenv(LOG_ENV, str(tmp_path / "log.sqlite"))
    rng = np.random.default_rng(26)
    cavity = "mirrors $\\frac{1}{$"
    with fresh_log(tmp_path / "log.sqlite", cooldowns=("$x^", "cd $2$"), cavity=cavity) as log:
        for i, label in enumerate(("$x^", "cd $2$")):
            log.add_fit(entry_from_result(random_result(rng, sha=f"{i:064x}")), cavity, label)
    out_dir = tmp_path / "out"
    code, _, err = run_cli("trend", "--cavity", cavity, "-o", out_dir)
    assert code == 0, err
    figures = list(out_dir.glob("*.png"))
    assert len(figures) == 1 and figures[0].stat().st_size > 1000
