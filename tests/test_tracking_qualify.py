"""Qualification against a TOML spec: parsing errors, PASS / FAIL / UNDECIDED, exit codes.

Outside checks: for normal draws the probability that a requirement is met is
the normal CDF (scipy.stats.norm); the "more data" forecast is checked by
regenerating log-normal draws with the sd shrunk by 1/sqrt(k), for which the
probability must land on the credibility level (z-score algebra of the normal law).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy.stats import norm

from cavchar.errors import InputError
from cavchar.tracking.entries import entry_from_result
from cavchar.tracking.qualify import (
    EXIT_FAIL,
    EXIT_PASS,
    EXIT_UNDECIDED,
    Evidence,
    judge,
    parse_spec,
    qualify,
    read_spec,
)
from cavchar.tracking.store import LOG_ENV
from tests.test_tracking_store import FREQ, fresh_log, make_result

SPEC = """
title = "acceptance of an invented test cavity"

[lifetime]
at_least = "1.5 ms"
credibility = 0.95

[thermal_photons]
at_most = 0.01
credibility = "90%"

[effective_temperature]
at_most = "80 mK"
credibility = 0.9

[quality_factor]
at_least = 5e7
credibility = 0.95

[linewidth]
at_most = "120 Hz"
credibility = 0.95
"""


def test_spec_parses_units_and_levels(tmp_path):
    path = tmp_path / "spec.toml"
    path.write_text(SPEC)
    spec = read_spec(path)
    assert spec.title.startswith("acceptance")
    got = {r.quantity: (r.bound, r.threshold, r.credibility) for r in spec.requirements}
    assert got["lifetime"] == ("at_least", pytest.approx(1.5e-3), 0.95)
    assert got["thermal_photons"] == ("at_most", 0.01, pytest.approx(0.9))
    assert got["effective_temperature"] == ("at_most", pytest.approx(0.08), 0.9)
    assert got["linewidth"][1] == pytest.approx(120.0)


@pytest.mark.parametrize("text, message, line", [
    ("[lifetime]\nat_least = '1ms'\ncredibility = 0.9\n[lifetme]\nat_least = 1\n",
     "unknown key 'lifetme'", 4),
    ("[lifetime]\nat_least = '1ms'\ncredibilty = 0.9\n", "unknown key 'credibilty' in "
     "\\[lifetime\\]", 3),
    ("[lifetime]\nat_least = '1ms'\n", "\\[lifetime\\] has no 'credibility'", 1),
    ("[lifetime]\nat_least = '1ms'\nat_most = '2ms'\ncredibility = 0.9\n",
     "exactly one of 'at_least' or 'at_most'", 1),
    ("[lifetime]\nat_least = '1 mK'\ncredibility = 0.9\n", "\\[lifetime\\] at_least: .*unit",
     2),
    ("[thermal_photons]\nat_most = 0.01\ncredibility = 1.5\n", "credibility must be", 3),
    ("colour = 'red'\n", "unknown key 'colour'", 1),
    ("title = 'nothing to check'\n", "no requirement", None),
    ("[lifetime\n", "not valid TOML", 1),
])
def test_spec_errors_name_the_key(text, message, line):
    with pytest.raises(InputError, match=message) as info:
        parse_spec(text, "spec.toml")
    assert info.value.line == line
    assert info.value.path == "spec.toml"


def _spec(quantity, bound, threshold, level):
    value = f'"{threshold}"' if isinstance(threshold, str) else repr(threshold)
    return parse_spec(f"[{quantity}]\n{bound} = {value}\ncredibility = {level}\n")


@pytest.mark.parametrize("threshold, status", [(1.6e-3, "PASS"), (2.4e-3, "FAIL"),
                                                (2.02e-3, "UNDECIDED")])
def test_verdicts_against_normal_cdf(threshold, status):
    rng = np.random.default_rng(30)
    mu, sd, n = 2.0e-3, 0.1e-3, 4000
    evidence = Evidence("normal draws", {"lifetime": rng.normal(mu, sd, n)})
    report = qualify(_spec("lifetime", "at_least", threshold, 0.95), evidence)
    verdict = report.verdicts[0]
    exact = norm.sf(threshold, mu, sd)  # source: normal law, P(T_c >= threshold)
    # tolerance: 4 binomial standard errors of a fraction of n independent draws (+1/n)
    assert abs(verdict.probability - exact) <= 4 * math.sqrt(exact * (1 - exact) / n) + 1 / n
    assert verdict.status == status
    assert report.exit_code == {"PASS": EXIT_PASS, "FAIL": EXIT_FAIL,
                                "UNDECIDED": EXIT_UNDECIDED}[status]
    assert (verdict.data_factor is not None) == (status == "UNDECIDED")


def test_more_data_forecast_decides_at_the_credibility():
    rng = np.random.default_rng(31)
    m, s, n = math.log(2e-3), 0.2, 200_000
    req = _spec("lifetime", "at_least", "1.8 ms", 0.95).requirements[0]
    verdict = judge(req, Evidence("log-normal draws", {"lifetime": np.exp(rng.normal(m, s, n))}))
    assert verdict.status == "UNDECIDED" and "PASS if the estimate stays" in verdict.hint
    k = verdict.data_factor
    expected_k = (norm.ppf(0.95) * s / (m - math.log(1.8e-3))) ** 2  # z_c s / |m - L|, squared
    # k uses the sample mean and sd of ln T_c: relative sd of k is
    # 2 sqrt((s / sqrt(n) / gap)^2 + 1 / (2 n)) (error propagation); tolerance 4 of them
    gap = m - math.log(1.8e-3)
    rel_sd = 2 * math.sqrt((s / math.sqrt(n) / gap) ** 2 + 1 / (2 * n))
    assert k == pytest.approx(expected_k, rel=4 * rel_sd)
    more = judge(req, Evidence("k times the data",
                               {"lifetime": np.exp(rng.normal(m, s / math.sqrt(k), n))}))
    # at k the probability sits on the credibility level: k's own error (4 sd ~ 3.6 %) moves
    # it by up to phi(z) z / 2 * 0.036 ~ 0.003, the binomial error of 2e5 draws is 5e-4
    assert more.probability == pytest.approx(0.95, abs=0.005)
    # the same for a FAIL direction and an at_most bound
    req = _spec("thermal_photons", "at_most", 0.009, 0.9).requirements[0]
    verdict = judge(req, Evidence("n_th", {"n_thermal": np.exp(rng.normal(math.log(0.01), 0.3,
                                                                           n))}))
    assert verdict.status == "UNDECIDED" and "FAIL if" in verdict.hint
    more = judge(req, Evidence("n_th", {"n_thermal": np.exp(rng.normal(
        math.log(0.01), 0.3 / math.sqrt(verdict.data_factor), n))}))
    assert 1 - more.probability == pytest.approx(0.9, abs=0.006)  # as above, for z = 1.28


def test_derived_quantities_and_missing_data():
    rng = np.random.default_rng(32)
    life = rng.normal(2e-3, 0.05e-3, 4000)
    evidence = Evidence("lifetime only", {"lifetime": life}, freq_hz=FREQ)
    spec = parse_spec(SPEC)
    report = qualify(spec, evidence)
    by = {v.requirement.quantity: v for v in report.verdicts}
    # Q = 2 pi nu T_c and FWHM = 1/(2 pi T_c) (RP Photonics Encyclopedia, "Q factor")
    assert by["quality_factor"].median == pytest.approx(2 * math.pi * FREQ * np.median(life))
    assert by["linewidth"].median == pytest.approx(1 / (2 * math.pi * np.median(life)))
    assert by["thermal_photons"].status == "UNDECIDED"
    assert "no data on thermal photon number" in by["thermal_photons"].hint
    assert report.status == "UNDECIDED" and report.exit_code == EXIT_UNDECIDED
    no_freq = qualify(spec, Evidence("no frequency", {"lifetime": life}))
    assert "needs the mode frequency" in {v.requirement.quantity: v for v in
                                          no_freq.verdicts}["quality_factor"].hint
    doc = report.to_dict()
    assert json.loads(json.dumps(doc))["requirements"][0]["evidence"]["n_draws_stored"] == 4000


def _write_log(path, lifetime_ms, n_th):
    rng = np.random.default_rng(33)
    with fresh_log(path) as log:
        result = make_result(rng.normal(lifetime_ms * 1e-3, 0.04e-3, 4000),
                             np.exp(rng.normal(math.log(n_th), 0.1, 4000)), sha="7" * 64)
        log.add_fit(entry_from_result(result), "A", "cd1")
        # a ring-down in a later cooldown: lifetime only
        ring = make_result(rng.normal(1.0e-3, 0.02e-3, 4000), sha="8" * 64, kind="ringdown")
        log.add_fit(entry_from_result(ring), "A", "cd2")


@pytest.mark.parametrize("lifetime_ms, n_th, code, word", [
    (2.0, 2e-3, 0, "PASS"),
    (1.2, 2e-3, 4, "FAIL"),
    (1.51, 2e-3, 5, "UNDECIDED"),
])
def test_cli_exit_codes(tmp_path, run_cli, monkeypatch, lifetime_ms, n_th, code, word):
    monkeypatch.setenv(LOG_ENV, str(tmp_path / "log.sqlite"))
    _write_log(tmp_path / "log.sqlite", lifetime_ms, n_th)
    spec = tmp_path / "spec.toml"
    spec.write_text(SPEC)
    got, out, err = run_cli("qualify", spec, "--cavity", "A", "--cooldown", "cd1")
    assert got == code, out + err
    assert out.splitlines()[0].endswith(word)
    assert "data: fit 1 (jumps, cooldown cd1" in out
    if word == "UNDECIDED":
        assert "times the present data" in out
    got, out, _ = run_cli("qualify", spec, "--cavity", "A", "--cooldown", "cd1", "--json")
    doc = json.loads(out)
    assert got == code and doc["exit_code"] == code and doc["status"] == word


def test_cli_sources_and_bad_input(tmp_path, run_cli, monkeypatch):
    monkeypatch.setenv(LOG_ENV, str(tmp_path / "log.sqlite"))
    _write_log(tmp_path / "log.sqlite", 2.0, 2e-3)
    spec = tmp_path / "spec.toml"
    spec.write_text("[lifetime]\nat_least = '1.5ms'\ncredibility = 0.95\n"
                    "[thermal_photons]\nat_most = 0.01\ncredibility = 0.9\n")
    # no --cooldown: the latest cooldown with fits (cd2, a ring-down only); n_th is not taken
    # from an older cooldown
    code, out, _ = run_cli("qualify", spec, "--cavity", "A")
    assert code == EXIT_FAIL and "fit 2 (ringdown, cooldown cd2 (the latest cooldown" in out
    assert "no data on thermal photon number" in out and "fit 1" not in out
    assert run_cli("qualify", spec, "--cavity", "A", "--fit", "1")[0] == EXIT_PASS
    result = make_result(np.random.default_rng(34).normal(2e-3, 1e-4, 3000), sha="9" * 64)
    result.to_json(tmp_path / "r.json")
    code, out, _ = run_cli("qualify", spec, "--result", tmp_path / "r.json")
    assert code == EXIT_UNDECIDED and "no data on thermal photon number" in out
    code, _, err = run_cli("qualify", spec, "--cavity", "B")
    assert code == 2 and "unknown cavity 'B'" in err
    code, _, err = run_cli("qualify", spec, "--cavity", "A", "--cooldown", "cd9")
    assert code == 2 and "unknown cooldown 'cd9'" in err
    assert run_cli("qualify", spec)[0] == 2
    bad = tmp_path / "bad.toml"
    bad.write_text("[lifetime]\nat_least = '1.5ms'\n")
    code, _, err = run_cli("qualify", bad, "--cavity", "A")
    assert code == 2 and "'credibility'" in err and "bad.toml, line 1" in err
