"""Honest checks: a posterior against a prior bound is a one-sided limit, the
population-decay goodness of fit is valid, a record may end at its last change,
every parameter carries its unit, and printed digits follow the interval.

Outside references, each named where it is used:

* the exact-record likelihood of a birth-death process: a dwell of length
  ``tau`` in state n survives with probability ``exp(-Gamma_n tau)``,
  ``Gamma_n = kappa (n + 1) n_th + kappa n (1 + n_th)`` (continuous-time Markov
  chains, e.g. Norris, *Markov Chains*, 1997, sec. 2.6, from memory);
* the Particle Data Group rounding rule (Review of Particle Physics,
  "Rounding", from memory): three leading digits of the error 100-354 keep two
  significant digits, 355-949 one, 950-999 round up to two;
* numpy's quantiles of the draws for the printed bounds.
"""

from __future__ import annotations

import json
import re

import numpy as np
import pytest

from cavchar.errors import PriorDominatedWarning

# -- a posterior against a prior bound ---------------------------------------------------------


@pytest.fixture(scope="module")
def absurd(tmp_path_factory):
    """A jump record with an absurd last time (a time column in the wrong unit): one
    photon stays 5e5 "s" before its down jump, so the likelihood of T_c peaks far above
    the default 1000 s prior bound and the posterior piles against it."""
    from cavchar.io.writers import write_jump_record
    from cavchar.records import JumpRecord

    folder = tmp_path_factory.mktemp("absurd")
    record = JumpRecord(time=np.array([0.0, 1e-3, 2e-3, 5e5]), photons=np.array([0, 1, 2, 1]),
                        end_time=5.0001e5)
    path = write_jump_record(record, folder / "absurd.csv")
    return folder, path


@pytest.fixture(scope="module")
def absurd_result(absurd):
    from cavchar.fits.jumps import fit_jumps
    from cavchar.inference import SamplerSettings

    folder, path = absurd
    with pytest.warns(PriorDominatedWarning):
        return fit_jumps(path, freq_hz=6e9, settings=SamplerSettings(
            quiet=True, seed=1, max_steps=200, allow_unconverged=True))


def test_prior_bound_is_a_limit_in_cli_result_and_report(absurd, absurd_result):
    from cavchar.outputs import summary_text
    from cavchar.report import render_report
    from cavchar.result import FitResult

    folder, _ = absurd
    result = absurd_result
    out = summary_text(result)  # what the fit commands print
    row = next(line for line in out.splitlines() if line.strip().startswith("T_c "))
    # the table row is the limit, with no median and interval of the prior's edge
    assert re.search(r"T_c\s+> \d+(\.\d+)? s\s+one-sided 95% limit", row), row
    assert "prior bound: the posterior of T_c reaches the prior's upper bound" in out
    assert re.search(r"T_c > \d+(\.\d+)? s \(95% one-sided lower limit", out)
    # derived quantities follow: Q is bounded below, the linewidth above
    assert re.search(r"linewidth \(FWHM\)\s+< ", out) and re.search(r"\bQ\s+> ", out)
    assert not re.search(r"T_c\s+\d", out)  # no "T_c 991 s [956 s, 1000 s]" anywhere

    result.to_json(folder / "result.json")
    back = FitResult.from_json(folder / "result.json")
    doc = json.loads((folder / "result.json").read_text())
    entry = doc["checks"]["prior_bounds"]["parameters"]["lifetime"]
    assert entry["side"] == "upper" and entry["bounds"][1] == pytest.approx(1000.0)
    assert "do not constrain T_c above" in entry["message"]
    # the limit is the 5 % quantile of the draws (numpy), read back from the file
    limit = back.prior_limit("lifetime")
    assert limit["kind"] == "lower"
    assert limit["limit"] == pytest.approx(np.quantile(back.samples["lifetime"], 0.05))
    assert back.prior_limit("linewidth")["kind"] == "upper"
    assert limit["limit"] < 1000.0 and limit["limit"] > 900.0
    page = render_report([back], figures=False)
    assert "one-sided 95% limit" in page and "‡" in page
    assert "posterior of T_c reaches the prior" in page


def test_prior_bound_through_the_cli(absurd, run_cli):
    folder, path = absurd
    code, out, err = run_cli("fit", "jumps", path, "--max-steps", 100,
                             "--allow-unconverged", "--quiet")
    assert code == 0, err
    assert "warning: the posterior of T_c reaches the prior's upper bound" in err
    assert re.search(r"T_c\s+> \d+(\.\d+)? s\s+one-sided 95% limit", out), out


def test_prior_bound_is_a_limit_in_the_log_trend_and_qualification(absurd_result, tmp_path,
                                                                      run_cli, monkeypatch):
    from cavchar.tracking.entries import entry_from_result
    from cavchar.tracking.qualify import evidence_from_log, parse_spec, qualify
    from cavchar.tracking.store import LOG_ENV, open_log
    from cavchar.tracking.trend import cooldown_trend

    path = tmp_path / "log.sqlite"
    with open_log(path) as log:
        log.add_cavity("A", freq_hz=6e9)
        log.add_cooldown("cd1", start_date="2031-01-01")
        fit_id = log.add_fit(entry_from_result(absurd_result), "A", "cd1")
        trend = cooldown_trend(log, "A")
        row = trend.rows[0]
        assert row.limits["lifetime"]["kind"] == "lower"
        assert any(f"fit {fit_id}: T_c > " in n and "not a measurement" in n
                   for n in row.notes)
        lower = row.limits["lifetime"]["limit"]
        # the side the data constrain decides; the side the prior's edge fills cannot
        spec = parse_spec(f"[lifetime]\nat_least = {lower / 2!r}\ncredibility = 0.95\n"
                          "[linewidth]\nat_most = 1.0\ncredibility = 0.95\n"
                          "[quality_factor]\nat_most = 1e20\ncredibility = 0.95\n")
        verdicts = qualify(spec, evidence_from_log(log, "A", cooldown="cd1")).verdicts
    assert [v.status for v in verdicts] == ["PASS", "PASS", "UNDECIDED"]
    assert verdicts[2].probability == 1.0 and "reflects the prior" in verdicts[2].hint
    monkeypatch.setenv(LOG_ENV, str(path))
    code, out, _ = run_cli("trend", "--cavity", "A")
    assert code == 0 and re.search(r"> \d+(\.\d+)? s \(limit\)", out), out


def test_a_measured_lifetime_is_not_turned_into_a_limit():
    # negative control: a result without a prior-bound flag keeps median and interval
    from tests.test_tracking_store import make_result

    rng = np.random.default_rng(17)
    result = make_result(rng.normal(2e-3, 1e-4, 2000))
    assert result.prior_limit("lifetime") is None
    assert result.one_line("lifetime").startswith("T_c = ")


# -- the population-decay goodness of fit ------------------------------------------------------


def test_population_goodness_of_fit_is_a_bootstrap_with_honest_cells():
    # the check behind `fit ringdown --signal populations` (calibration and power are
    # tested against QuTiP in tests/test_population_check.py): the statistic is the
    # deviance calibrated by a parametric bootstrap, so no chi-square law with a naive
    # count of degrees of freedom is claimed (each delay's counts sum to its shots), and
    # the cells expecting less than one count are counted, not hidden
    from cavchar.fits.ringdown_checks import residual_diagnostics
    from cavchar.models.ringdown.photon_number import PopulationDecay
    from cavchar.simulate import simulate_ringdown

    trace = simulate_ringdown("populations", np.linspace(0.0, 3e-3, 16), 1e-3, n_th=0.05,
                              initial=2, shots=120, seed=5)
    model = PopulationDecay(trace.time, np.asarray(trace.value), [0, 0, 1])
    check = residual_diagnostics(model, "populations", np.array([1e-3, 0.05]),
                                 np.random.default_rng(1))
    assert "bootstrap" in check["statistic"] and "dof" not in check
    assert check["sparse_cells"] > 0 and check["cells"] > check["sparse_cells"]
    # counts that follow the model: not flagged (a false flag has probability 1e-3)
    assert check["p_value"] > 1e-3 and not check["misfit"]


# -- a record that ends at its last change -----------------------------------------------------


def test_end_time_equal_to_the_last_change(tmp_path, run_cli):
    from cavchar.io.writers import write_table
    from cavchar.models.jumps import exact_log_likelihood, jump_statistics

    times = np.array([0.0, 0.4e-3, 1.1e-3, 2.0e-3, 2.6e-3])
    photons = np.array([0, 1, 2, 1, 2])
    last = times[-1]
    zero = jump_statistics(times, photons, [last])
    eps = 1e-4
    later = jump_statistics(times, photons, [last + eps])
    lifetime, n_th = 1.3e-3, 0.2
    kappa = 1 / lifetime
    # source: survival of the last dwell, exp(-Gamma_n eps) with Gamma_n of state n = 2
    gamma = kappa * (2 + 1) * n_th + kappa * 2 * (1 + n_th)
    diff = exact_log_likelihood(later, lifetime, n_th) - exact_log_likelihood(zero, lifetime,
                                                                              n_th)
    assert diff == pytest.approx(-gamma * eps, rel=1e-10)
    # through the CLI: the file has no end row; --end-time equal to the last change is taken
    path = tmp_path / "record.csv"
    write_table(path, {"time": times, "photons": photons})
    code, out, err = run_cli("fit", "jumps", path, "--end-time", f"{last * 1e3}ms",
                             "--max-steps", 100, "--allow-unconverged", "--quiet")
    assert code == 0, err
    assert "T_c" in out
    code, _, err = run_cli("fit", "jumps", path, "--end-time", f"{last * 1e3 - 0.1}ms",
                           "--max-steps", 100, "--allow-unconverged", "--quiet")
    assert code == 2 and "before its last change" in err


# -- digits follow the interval ------------------------------------------------------------------


def test_interval_texts_follow_the_pdg_rule():
    from cavchar.result import interval_texts

    # a detuning of 1850 Hz known to 0.05 Hz: the smaller 68 % half-width 0.030 Hz =
    # 3.0e-5 kHz has leading digits 300 -> two significant digits -> 6 decimals in kHz
    t = interval_texts(1850.0, 1849.97, 1850.05, 1849.91, 1850.12, "frequency")
    assert t["median"] == "1.850000 kHz"
    assert (t["lo95"], t["hi95"]) == ("1.849910 kHz", "1.850120 kHz")
    # leading digits 500 (355-949): one significant digit
    t = interval_texts(1.21e-3, 1.16e-3, 1.27e-3, 1.11e-3, 1.33e-3, "time")
    assert (t["median"], t["lo68"], t["hi95"]) == ("1.21 ms", "1.16 ms", "1.33 ms")
    # leading digits 960 (950-999): rounded up to two significant digits, 0.10
    t = interval_texts(1.5, 1.404, 1.6, 1.3, 1.7, "dimensionless")
    assert t["median"] == "1.50" and t["unit"] == ""
    # a far bound of a skewed interval keeps two significant digits
    t = interval_texts(7.0, 3.0, 40.0, 0.2, 251.0, "temperature")
    assert (t["median"], t["lo95"], t["hi95"]) == ("7 K", "0.20 K", "251 K")


def test_iq_detuning_prints_the_digits_its_interval_needs():
    from cavchar.fits.ringdown import fit_ringdown
    from cavchar.inference import SamplerSettings
    from cavchar.outputs import summary_text
    from cavchar.simulate import simulate_ringdown

    trace = simulate_ringdown("iq", np.linspace(0.0, 8e-3, 400), 2e-3, noise=0.05,
                              detuning=1850.0, seed=3)
    result = fit_ringdown(trace, settings=SamplerSettings(quiet=True, seed=1, max_steps=100,
                                                          allow_unconverged=True))
    out = summary_text(result)  # what `cavchar fit ringdown` prints
    row = next(line for line in out.splitlines() if line.strip().startswith("delta"))
    numbers = [float(v) for v in re.findall(r"(\d+\.\d+) kHz", row)]
    assert len(numbers) == 5, row
    median, lo68, hi68, lo95, hi95 = numbers
    assert lo95 < lo68 < median < hi68 < hi95  # all distinct: the digits resolve the interval
    decimals = len(row.split(" kHz")[0].split(".")[-1])
    # the printed numbers are the draws' quantiles (numpy) rounded to the printed decimals
    q = np.quantile(result.samples["detuning"], [0.5, 0.025, 0.975]) / 1e3  # kHz
    for shown, exact in zip((median, lo95, hi95), q, strict=True):
        assert abs(shown - exact) <= 0.5 * 10**-decimals * (1 + 1e-9)


# -- units on every parameter --------------------------------------------------------------------


def test_every_parameter_carries_its_unit(tmp_path):
    from cavchar.fits.ringdown import fit_ringdown
    from cavchar.inference import SamplerSettings
    from cavchar.io.writers import write_ringdown, write_table
    from cavchar.outputs import summary_text
    from cavchar.report import render_report
    from cavchar.result import FitResult
    from cavchar.simulate import simulate_ringdown

    quick = SamplerSettings(quiet=True, seed=1, max_steps=100, allow_unconverged=True)
    t = np.linspace(0.0, 8e-3, 200)
    # a dB trace in dBm (10 log10(P / 1 mW)): amplitude and floor in mW, the noise in dB
    db = simulate_ringdown("db", t, 2e-3, amplitude=1e-6, floor=1e-9, noise=0.2, seed=1)
    write_table(tmp_path / "db.csv", {"time": t, "Power (dBm)": db.value})
    result = fit_ringdown(tmp_path / "db.csv", settings=quick, compare=False)
    units = result.summary()["unit"].to_dict()
    assert (units["amplitude"], units["floor"], units["sigma_db"]) == ("mW", "mW", "dB")
    # the simulated amplitude, 1e-6 mW, is read in mW (a unit slip would be 1e3 off)
    assert 0.9e-6 < result.summary().loc["amplitude", "median"] < 1.1e-6
    assert re.search(r"\bA\s+\S+ mW\s+\[\S+ mW, \S+ mW\]", summary_text(result))
    # an IQ trace whose file states its unit: amplitude, offsets and noise in it, phase in rad
    iq = simulate_ringdown("iq", t, 2e-3, noise=0.05, detuning=1000.0, seed=3)
    write_ringdown(iq, tmp_path / "iq.csv", metadata={"value_unit": "V"})
    result = fit_ringdown(tmp_path / "iq.csv", settings=quick, compare=False)
    result.to_json(tmp_path / "iq.json")
    back = FitResult.from_json(tmp_path / "iq.json")
    units = back.summary()["unit"].to_dict()
    assert {k: units[k] for k in ("sigma", "amplitude", "offset_re", "offset_im", "phase")} == {
        "sigma": "V", "amplitude": "V", "offset_re": "V", "offset_im": "V", "phase": "rad"}
    assert re.search(r"sigma\s+\S+ V\s+\[", summary_text(back))
    page = render_report([back], figures=False)
    assert re.search(r"sigma.*?</td>.*?<td[^>]*>V</td>", page, re.S)
    # a file that does not say: the data's own unit, named as such (never an empty unit)
    power = simulate_ringdown("power", t, 2e-3, amplitude=1.0, floor=0.01, noise=0.01, seed=3)
    result = fit_ringdown(power, settings=quick, compare=False)
    units = result.summary()["unit"].to_dict()
    assert {units[k] for k in ("amplitude", "floor", "sigma")} == {"a.u."}
    assert all(units[k] for k in result.summary().index if k not in ("n_thermal",
                                                                       "quality_factor"))
