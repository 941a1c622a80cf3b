"""Which logged fit stands for a cooldown: trend, qualification, budget and cavity
comparison from a log that mixes kinds, a stage-temperature sweep and a fit of
another mode.

The log (invented scenario, built here from Gaussian draws so that every
probability has a closed form):

* cavity A (6.0 GHz).  Cooldown cd1, excess photon number 2e-3: a jump fit at the
  20 mK base, a precise ring-down at 20 mK (lifetime only), a less precise probe
  fit at 21 mK (inside the base tolerance), and a sweep at 60, 90 and 130 mK
  whose 130 mK point is logged last.  Cooldown cd2, excess 2e-2 (a hotter
  leak): base fit and the same sweep.
* cavity B (7.0 GHz): one ring-down in cd1.
* a fit made at 6.3 GHz, offered to cavity A.

Outside checks, each named where it is used:

* P(X >= c) for X ~ N(mu, s^2) is 1 - Phi((c - mu) / s), and for log-normal
  draws P(n <= c) = Phi((ln c - m) / s)  (normal CDF, scipy.stats.norm);
* P(X > Y) for independent normals is Phi((mu_x - mu_y) / sqrt(s_x^2 + s_y^2))
  (difference of independent normal variables, textbook; scipy.stats.norm);
* the Planck occupation n = 1 / expm1(h nu / k_B T) from scipy.constants
  (CODATA exact h, k_B) for the simulated n_th of each sweep point.

Tolerances: a probability estimated from n = 4000 independent draws has a
binomial standard error sqrt(p (1 - p) / n) (<= 0.008); checks allow 4 of them
plus 1e-4 for the float32 storage of draws.
"""

from __future__ import annotations

import json
import math
import re
import shutil

import numpy as np
import pytest
from scipy import constants
from scipy.stats import norm

from cavchar.errors import InputError
from cavchar.tracking.entries import FitEntry, entry_from_result
from cavchar.tracking.store import LOG_ENV, open_log
from tests.test_tracking_store import make_result

NU_A, NU_B = 6.0e9, 7.0e9          # invented mode frequencies [Hz]
N = 4000                           # draws per fit (the log keeps 4000: no thinning)
BASE, PROBE_STAGE = 0.020, 0.021   # K
SWEEP = (0.060, 0.090, 0.130)      # K
EXCESS = {"cd1": 2e-3, "cd2": 2e-2}
S_LN = 0.05                        # sd of ln n_th of the precise fits
# lifetime posteriors (mean, sd) [s]
JUMPS_LT, RING_LT, PROBE_LT, SWEEP_LT = (2.0e-3, 0.1e-3), (1.95e-3, 0.02e-3), \
    (1.7e-3, 0.2e-3), (1.9e-3, 0.1e-3)
B_LT = (1.92e-3, 0.05e-3)
THRESHOLD_LT = RING_LT[0] - 1.9 * RING_LT[1]     # P(met) = Phi(1.9) = 0.971 for the ring-down


def planck(nu, temp):
    # source: Planck occupation with the exact SI constants of scipy.constants
    return 1.0 / np.expm1(constants.h * nu / (constants.k * temp))


def mc_tol(p, n=N):
    """4 binomial standard errors of a probability from n independent draws, + float32."""
    return 4 * math.sqrt(max(p * (1 - p), 1e-6) / n) + 1e-4


class Scenario:
    """Ids and generating parameters of the log's fits."""

    def __init__(self):
        self.ids: dict[str, int] = {}
        self.n_centre: dict[int, tuple[float, float]] = {}  # fit id -> (mean, sd) of ln n_th
        self.results: dict[str, object] = {}


def build_log(path) -> Scenario:
    rng = np.random.default_rng(1301)
    sc = Scenario()
    with open_log(path) as log:
        log.add_cavity("A", freq_hz=NU_A)
        log.add_cavity("B", freq_hz=NU_B)
        log.add_cooldown("cd1", start_date="2031-03-01", stage_temp_k=BASE)
        log.add_cooldown("cd2", start_date="2031-05-01", stage_temp_k=BASE)
        count = 0

        def add(name, cooldown, stage, lt, n_sd=None, kind="jumps-exact", cavity="A",
                nu=NU_A):
            nonlocal count
            count += 1
            n_draws, centre = None, None
            if n_sd is not None:
                truth = planck(nu, stage) + EXCESS[cooldown]
                centre = math.log(truth) + rng.normal(0.0, n_sd)  # an observed value
                n_draws = np.exp(rng.normal(centre, n_sd, N))
            result = make_result(rng.normal(lt[0], lt[1], N), n_draws, freq=nu, stage=stage,
                                 sha=f"{count:064x}", kind=kind)
            fit_id = log.add_fit(entry_from_result(result), cavity, cooldown)
            sc.ids[name] = fit_id
            sc.results[name] = result
            if centre is not None:
                sc.n_centre[fit_id] = (centre, n_sd)

        for cd in ("cd1", "cd2"):
            add(f"{cd}-jumps", cd, BASE, JUMPS_LT, S_LN)
            if cd == "cd1":
                add("cd1-ringdown", cd, BASE, RING_LT, kind="ringdown-power")
                add("cd1-probes", cd, PROBE_STAGE, PROBE_LT, 3 * S_LN, kind="probes-exact")
            for t in SWEEP:
                add(f"{cd}-{round(t * 1e3)}mK", cd, t, SWEEP_LT, S_LN)
        add("B-ringdown", "cd1", BASE, B_LT, kind="ringdown-power", cavity="B", nu=NU_B)
    return sc


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    path = tmp_path_factory.mktemp("stands") / "log.sqlite"
    return path, build_log(path)


@pytest.fixture
def log_copy(scenario, tmp_path):
    """A private copy of the scenario's log (for tests that change marks)."""
    path, sc = scenario
    copy = tmp_path / "log.sqlite"
    shutil.copy(path, copy)
    return copy, sc


# -- the rule ------------------------------------------------------------------------------

def test_trend_uses_base_temperature_fits_and_names_them(scenario):
    from cavchar.tracking.trend import cooldown_trend

    path, sc = scenario
    with open_log(path, readonly=True) as log:
        trend = cooldown_trend(log, "A")
    rows = {r.cooldown: r for r in trend.rows}
    cd1 = rows["cd1"]
    # lifetime: the precise ring-down, not the less precise probe fit nor the 130 mK point
    # logged last; n_th: the jump fit at base (narrower than the probe fit's)
    assert cd1.sources["lifetime"].fit_id == sc.ids["cd1-ringdown"]
    assert cd1.sources["n_thermal"].fit_id == sc.ids["cd1-jumps"]
    assert cd1.sources["effective_temperature"].fit_id == sc.ids["cd1-jumps"]
    assert cd1.fit_ids == tuple(sorted((sc.ids["cd1-ringdown"], sc.ids["cd1-jumps"])))
    assert cd1.base_temp_k == pytest.approx(BASE)
    aside = dict(cd1.set_aside)
    assert "less precise" in aside[sc.ids["cd1-probes"]]
    for t in SWEEP:
        assert "sweep point" in aside[sc.ids[f"cd1-{round(t * 1e3)}mK"]]
    assert rows["cd2"].fit_ids == (sc.ids["cd2-jumps"],)
    # the row's n_th interval is the chosen fit's own (log-normal centre within 4 sd/sqrt(n))
    centre, sd = sc.n_centre[sc.ids["cd1-jumps"]]
    assert math.log(cd1.stats["n_thermal"].median) == pytest.approx(centre,
                                                                   abs=4 * sd / math.sqrt(N))
    doc = trend.to_dict()["rows"][0]
    assert doc["used"]["lifetime"]["fit_id"] == sc.ids["cd1-ringdown"]
    assert "the most precise of 3 fits at base temperature" in doc["used"]["lifetime"]["reason"]


def test_each_fit_and_filters(scenario):
    from cavchar.tracking.trend import cooldown_trend

    path, sc = scenario
    with open_log(path, readonly=True) as log:
        each = cooldown_trend(log, "A", each_fit=True)
        assert len(each.rows) == 10  # every fit of A, sweep points included
        probes = cooldown_trend(log, "A", kind="probes")  # the command's word
        assert [r.fit_ids for r in probes.rows] == [(sc.ids["cd1-probes"],)]
        ring = cooldown_trend(log, "A", kind="ringdown-power")  # the full kind
        assert [r.fit_id for r in ring.rows] == [sc.ids["cd1-ringdown"]]
        # a stage window: its lowest stage is the reference of the window
        hot = cooldown_trend(log, "A", min_stage_k=0.1)
        assert [r.fit_ids for r in hot.rows] == [(sc.ids["cd1-130mK"],),
                                                 (sc.ids["cd2-130mK"],)]
        with pytest.raises(InputError, match="unknown fit kind 'ring'"):
            cooldown_trend(log, "A", kind="ring")


def test_qualify_picks_base_fits_and_matches_the_normal_cdf(scenario):
    from cavchar.tracking.qualify import evidence_from_log, parse_spec, qualify

    path, sc = scenario
    centre, sd = sc.n_centre[sc.ids["cd1-jumps"]]
    n_max = math.exp(centre + 1.5 * sd)       # P(met) = Phi(1.5) = 0.933 for the base fit
    spec = parse_spec(f"[lifetime]\nat_least = {THRESHOLD_LT!r}\ncredibility = 0.95\n"
                      f"[thermal_photons]\nat_most = {n_max!r}\ncredibility = 0.9\n")
    with open_log(path, readonly=True) as log:
        q = qualify(spec, evidence_from_log(log, "A", cooldown="cd1"))
        assert q.status == "PASS" and q.exit_code == 0
        assert q.fit_ids == tuple(sorted((sc.ids["cd1-ringdown"], sc.ids["cd1-jumps"])))
        life, nth = q.verdicts
        # source: normal CDF (scipy.stats.norm) of the chosen fits' generating laws
        p_life = norm.sf((THRESHOLD_LT - RING_LT[0]) / RING_LT[1])
        p_nth = norm.cdf((math.log(n_max) - centre) / sd)
        assert abs(life.probability - p_life) <= mc_tol(p_life)
        assert abs(nth.probability - p_nth) <= mc_tol(p_nth)
        assert life.evidence.fit_id == sc.ids["cd1-ringdown"]
        assert "most precise" in life.evidence.description
        # the 130 mK sweep point (logged last) would FAIL n_th: it is not what stands
        hot = qualify(spec, evidence_from_log(log, "A", fit_id=sc.ids["cd1-130mK"]))
        assert hot.verdicts[1].status == "FAIL" and hot.exit_code == 4
        centre_hot, _ = sc.n_centre[sc.ids["cd1-130mK"]]
        p_hot = norm.cdf((math.log(n_max) - centre_hot) / sd)
        assert p_hot < 1e-6 and hot.verdicts[1].probability <= mc_tol(0.0)
        # default cooldown: the latest with usable fits, and the description says so
        latest = evidence_from_log(log, "A")
        assert latest["lifetime"].fit_id == sc.ids["cd2-jumps"]
        assert "the latest cooldown" in latest["lifetime"].description


def test_qualify_cli_names_the_fits(scenario, run_cli, monkeypatch, tmp_path):
    path, sc = scenario
    monkeypatch.setenv(LOG_ENV, str(path))
    centre, sd = sc.n_centre[sc.ids["cd1-jumps"]]
    spec = tmp_path / "spec.toml"
    spec.write_text(f"[lifetime]\nat_least = \"{THRESHOLD_LT * 1e3!r} ms\"\ncredibility = 0.95\n"
                    f"[thermal_photons]\nat_most = {math.exp(centre + 1.5 * sd)!r}\n"
                    "credibility = 0.9\n")
    code, out, err = run_cli("qualify", spec, "--cavity", "A", "--cooldown", "cd1")
    assert code == 0, out + err
    assert f"data: fit {sc.ids['cd1-ringdown']} (ringdown-power, cooldown cd1" in out
    assert f"data: fit {sc.ids['cd1-jumps']} (jumps-exact, cooldown cd1" in out
    code, out, _ = run_cli("qualify", spec, "--cavity", "A", "--fit", sc.ids["cd1-130mK"])
    assert code == 4 and "FAIL" in out


# -- refusing what cannot be right -----------------------------------------------------------

def test_wrong_frequency_is_refused_and_missing_frequency_taken(log_copy, run_cli, monkeypatch,
                                                               tmp_path):
    path, _ = log_copy
    rng = np.random.default_rng(1302)
    other = make_result(rng.normal(2e-3, 1e-4, N), np.exp(rng.normal(-7.0, 0.1, N)), freq=6.3e9,
                        stage=BASE,
                        sha="e" * 64, kind="jumps-exact")
    with open_log(path) as log:
        before = len(log.fits())
        with pytest.raises(InputError, match="not this cavity's mode") as info:
            log.add_fit(entry_from_result(other), "A", "cd1")
        assert "--force-freq" in info.value.hint
        assert len(log.fits()) == before  # nothing was written
        # 0.1 % is the documented tolerance: a rounded frequency (1.7e-4 off) passes
        near = make_result(rng.normal(2e-3, 1e-4, N), freq=NU_A * (1 + 1.7e-4), stage=BASE,
                           sha="d" * 64)
        log.add_fit(entry_from_result(near), "A", "cd1")
        # a fit without a frequency takes the cavity's
        bare = FitEntry(kind="jumps-exact", draws={"lifetime": rng.normal(2e-3, 1e-4, 100)},
                        stage_temp_k=BASE)
        fit_id = log.add_fit(bare, "A", "cd1")
        assert log.fit(fit_id).freq_hz == NU_A
    # through the CLI: one line, exit 2, naming the file and the fix
    result_file = tmp_path / "other.json"
    other.to_json(result_file)
    monkeypatch.setenv(LOG_ENV, str(path))
    code, out, err = run_cli("log", "add", result_file, "--cavity", "A", "--cooldown", "cd1")
    assert code == 2 and "not this cavity's mode" in err and "other.json" in err
    assert "Traceback" not in err and "--force-freq" in err and len(err.splitlines()) == 1
    # forced: the user says it is the same mode; the fit keeps its own frequency
    code, out, err = run_cli("log", "add", result_file, "--cavity", "A", "--cooldown", "cd2",
                             "--force-freq")
    assert code == 0, err
    with open_log(path, readonly=True) as log:
        assert log.fits()[-1].freq_hz == 6.3e9


# -- overrides --------------------------------------------------------------------------------

def test_prefer_exclude_unmark_and_note(log_copy, run_cli, monkeypatch):
    from cavchar.tracking.qualify import evidence_from_log, parse_spec, qualify
    from cavchar.tracking.trend import cooldown_trend

    path, sc = log_copy
    monkeypatch.setenv(LOG_ENV, str(path))
    spec = parse_spec(f"[lifetime]\nat_least = {THRESHOLD_LT!r}\ncredibility = 0.95\n")

    def cd1():
        with open_log(path, readonly=True) as log:
            row = cooldown_trend(log, "A").rows[0]
            verdict = qualify(spec, evidence_from_log(log, "A", cooldown="cd1")).verdicts[0]
        return row, verdict

    probe = sc.ids["cd1-probes"]
    code, out, _ = run_cli("log", "prefer", probe, "--reason", "cleanest record")
    assert code == 0 and f"fit {probe}" in out
    row, verdict = cd1()
    assert row.sources["lifetime"].fit_id == probe and row.sources["n_thermal"].fit_id == probe
    assert "preferred by the user (cleanest record)" in row.sources["lifetime"].reason
    # the verdict now rests on the probe fit: 1 - Phi((c - mu) / s) of its law (scipy.stats)
    p = norm.sf((THRESHOLD_LT - PROBE_LT[0]) / PROBE_LT[1])
    assert verdict.evidence.fit_id == probe and abs(verdict.probability - p) <= mc_tol(p)
    assert verdict.status == "UNDECIDED"
    assert run_cli("log", "unmark", probe)[0] == 0
    ring = sc.ids["cd1-ringdown"]
    assert run_cli("log", "exclude", ring, "--reason", "mixer saturated")[0] == 0
    row, verdict = cd1()
    # without the ring-down the jump fit (sd 0.1 ms) beats the probe fit (0.2 ms)
    assert row.sources["lifetime"].fit_id == sc.ids["cd1-jumps"]
    assert dict(row.set_aside)[ring] == "excluded by the user: mixer saturated"
    p = norm.sf((THRESHOLD_LT - JUMPS_LT[0]) / JUMPS_LT[1])
    assert abs(verdict.probability - p) <= mc_tol(p)
    assert run_cli("log", "unmark", ring)[0] == 0
    row, _ = cd1()
    assert row.sources["lifetime"].fit_id == ring
    # a preferred sweep point stands (for every quantity it measures), with a note that
    # it is not at base temperature
    hot = sc.ids["cd1-130mK"]
    run_cli("log", "prefer", hot)
    row, _ = cd1()
    assert row.fit_ids == (hot,)
    assert any(f"preferred fit {hot} is at 130 mK, not at the base temperature 20 mK" in n
               for n in row.notes)
    code, out, _ = run_cli("log", "note", hot, "--text", "sweep step", "--tag", "sweep")
    assert code == 0 and "sweep" in out
    code, out, _ = run_cli("log", "list", "--cavity", "A", "--tag", "sweep", "--json")
    listed = json.loads(out)
    assert [f["id"] for f in listed] == [hot] and listed[0]["mark"] == "preferred"
    assert listed[0]["notes"] == "sweep step"
    code, out, _ = run_cli("log", "list", "--cavity", "A", "--kind", "ringdown")
    assert code == 0 and f"less precise than the fits used ({hot})" in out
    run_cli("log", "unmark", hot)
    code, out, _ = run_cli("log", "list", "--cavity", "A", "--kind", "ringdown")
    assert code == 0 and "stands for its cooldown (T_c)" in out


# -- budget -----------------------------------------------------------------------------------

def test_budget_per_cooldown_recovers_each_excess(scenario):
    from cavchar.tracking.budget import cooldown_budgets

    path, sc = scenario
    with open_log(path, readonly=True) as log:
        report = cooldown_budgets(log, "A", pool=True)
    per = {c.cooldown: c for c in report.per_cooldown}
    assert set(per) == {"cd1", "cd2"}
    for cd, truth in EXCESS.items():
        x = per[cd].budget.excess.parameters["excess_photons"]
        # the simulated excess inside each cooldown's own 95 % interval (4 points of
        # 5 % precision: a miss has probability 0.05 per cooldown at this fixed seed)
        assert x.lo95 < truth < x.hi95, (cd, x)
    # the two cooldowns' excesses are told apart
    assert (per["cd1"].budget.excess.parameters["excess_photons"].hi95
            < per["cd2"].budget.excess.parameters["excess_photons"].lo95)
    # cd1: one fit per stage temperature; at base the jump fit (not the wider probe fit,
    # not the ring-down without n_th)
    used = {i: t for i, t, _ in per["cd1"].selection.used}
    assert set(used) == {sc.ids[k] for k in ("cd1-jumps", "cd1-60mK", "cd1-90mK", "cd1-130mK")}
    aside = dict(per["cd1"].selection.set_aside)
    assert "has no n_th draws" in aside[sc.ids["cd1-ringdown"]]
    assert "less precise than fit" in aside[sc.ids["cd1-probes"]]
    # pooling two disagreeing cooldowns is flagged
    assert report.agreement is not None and report.agreement["agree"] is False
    assert report.agreement["p_value"] < 0.01
    assert any("do NOT agree" in n for n in report.notes)


def test_budget_agreement_negative_control():
    # two cooldowns simulated with the same excess: the check must not flag them
    from cavchar.fits.budget import BudgetPoint
    from cavchar.tracking.budget import excess_agreement

    rng = np.random.default_rng(1303)
    series = []
    for label in ("x", "y"):
        points = []
        for t in (BASE, *SWEEP):
            centre = math.log(planck(NU_A, t) + 2e-3) + rng.normal(0, S_LN)
            points.append(BudgetPoint(f"{label} {t}", t, np.exp(rng.normal(centre, S_LN, N))))
        series.append((label, points))
    agreement = excess_agreement(series, NU_A)
    assert agreement["agree"] is True and "agree on one excess" in agreement["statement"]


def test_budget_cli_states_conditions_and_formats_numbers(scenario, run_cli, monkeypatch):
    path, sc = scenario
    monkeypatch.setenv(LOG_ENV, str(path))
    code, out, err = run_cli("budget", "--cavity", "A", "--cooldown", "cd1")
    assert code == 0, err
    assert f"uses fit {sc.ids['cd1-jumps']} at 20 mK: the most precise of 2 fits at 20 mK" in out
    # the reason names the condition that applied, not a list of possibilities
    why = next(line for line in out.splitlines() if "why: " in line)
    assert "not identifiable" in why and " or " not in why
    assert "spans a factor" in why or "prior's" in why
    # numbers formatted like everywhere else: no bare 6-decimal floats, no degenerate
    # "[1, 1]" intervals
    assert not re.search(r"\b\d\.0{6}\b", out), out
    assert not re.search(r"\[(\S+) – \1\]", out), out
    # a positive interval bound never shows as 0 (it keeps two significant digits)
    assert not re.search(r"\[0 – ", out), out


# -- two cavities ----------------------------------------------------------------------------

def test_comparison_probability_against_closed_form(scenario, run_cli, monkeypatch):
    from cavchar.tracking.trend import compare_cavities, cooldown_trend

    path, sc = scenario
    with open_log(path, readonly=True) as log:
        comparison = compare_cavities([cooldown_trend(log, "A"), cooldown_trend(log, "B")])
    row = next(r for r in comparison.rows if r.basis == "same cooldown")
    assert (row.fit_a, row.fit_b) == (sc.ids["cd1-ringdown"], sc.ids["B-ringdown"])
    # source: difference of independent normals, scipy.stats.norm
    exact = norm.cdf((RING_LT[0] - B_LT[0]) / math.hypot(RING_LT[1], B_LT[1]))
    assert 0.6 < exact < 0.8
    assert abs(row.probability - exact) <= 4 * row.mc_error + 1e-4
    # the reported Monte Carlo error is the size expected for n = m = 4000 draws
    assert 0.5 * math.sqrt(exact * (1 - exact) / N) < row.mc_error < 2 * math.sqrt(
        exact * (1 - exact) / N) * math.sqrt(2)
    latest = next(r for r in comparison.rows if r.basis == "latest cooldown of each")
    assert (latest.cooldown_a, latest.cooldown_b) == ("cd2", "cd1")
    monkeypatch.setenv(LOG_ENV, str(path))
    code, out, _ = run_cli("trend", "--cavity", "A", "--cavity", "B")
    assert code == 0
    assert (f"P(T_c A [cd1, fit {row.fit_a}] > T_c B [cd1, fit {row.fit_b}]) = "
            f"{row.probability:.3f}") in out


# -- the report -------------------------------------------------------------------------------

def _cells(page: str, section_id: str, table: int = 0) -> list[list[str]]:
    """Text of the cells of one table of a report section, row by row."""
    body = page.split(f'id="{section_id}"', 1)[1].split("</section>", 1)[0]
    body = re.findall(r"<table.*?</table>", body, re.S)[table]
    rows = []
    for tr in re.findall(r"<tr>(.*?)</tr>", body, re.S):
        cells = re.findall(r"<t[dh][^>]*>(.*?)</t[dh]>", tr, re.S)
        rows.append([re.sub(r"\s+", " ", re.sub(r"<[^>]+>", "", c)).strip() for c in cells])
    return rows


def test_report_trend_agrees_with_comparison_table(scenario):
    import html as html_lib

    from cavchar.report import render_report
    from cavchar.tracking.trend import cooldown_trend

    path, sc = scenario
    with open_log(path, readonly=True) as log:
        trend = cooldown_trend(log, "A")
    results = [sc.results["cd1-ringdown"], sc.results["cd1-jumps"], sc.results["cd2-jumps"]]
    page = html_lib.unescape(render_report(results, labels=["ring", "jumps1", "jumps2"],
                                           extra_sections=[trend], figures=False))
    table = {r[0]: r for r in _cells(page, "comparison")[1:]}
    trend_rows = _cells(page, "trend")
    header, rows = trend_rows[0], {r[0]: r for r in trend_rows[1:]}
    col = {name: header.index(name) for name in ("T_c [95%]", "n_th [95%]", "fits",
                                                 "stage temperature")}
    # the same numbers as the comparison table, for the same fits
    assert rows["cd1"][col["T_c [95%]"]] == table["ring"][1]
    assert rows["cd1"][col["n_th [95%]"]] == table["jumps1"][3]
    assert rows["cd2"][col["T_c [95%]"]] == table["jumps2"][1]
    # the fit ids and the stage temperature of each point
    assert rows["cd1"][col["fits"]] == f"{sc.ids['cd1-jumps']}, {sc.ids['cd1-ringdown']}"
    assert rows["cd1"][col["stage temperature"]] == "20 mK"
    assert f"fit {sc.ids['cd1-ringdown']}" in page.split('id="trend"', 1)[1]


def test_report_stage_of_each_quantity_and_several_cavities(log_copy, tmp_path, run_cli,
                                                            monkeypatch):
    import html as html_lib

    path, sc = log_copy
    with open_log(path) as log:  # n_th from the probe fit at 21 mK, T_c at 20 mK
        log.set_mark(sc.ids["cd1-jumps"], "excluded")
    result = tmp_path / "ring.json"
    sc.results["cd1-ringdown"].to_json(result)
    out = tmp_path / "r.html"
    code, _, err = run_cli("report", result, "-o", out, "--log-file", path, "--cavity", "A",
                           "--cavity", "B")
    assert code == 0, err
    page = html_lib.unescape(out.read_text(encoding="utf-8"))
    rows = {r[0]: r for r in _cells(page, "trend")[1:]}
    assert rows["cd1"][4] == "T_c 20 mK; n_th 21 mK"
    assert rows["cd2"][4] == "20 mK"
    assert _cells(page, "trend", 1)[1][:3] == ["cd1", "2031-03-01", str(sc.ids["B-ringdown"])]
    comparison = {r[4]: r for r in _cells(page, "trend", 2)[1:]}
    same = comparison["same cooldown"]
    assert same[:3] == ["P(T_c A > T_c B)", f"cd1 (fit {sc.ids['cd1-ringdown']})",
                        f"cd1 (fit {sc.ids['B-ringdown']})"]
    exact = norm.cdf((RING_LT[0] - B_LT[0]) / math.hypot(RING_LT[1], B_LT[1]))
    assert abs(float(same[3].split(" ± ")[0]) - exact) <= 0.03  # 4 MC errors (<= 0.0072)


def test_interval_bounds_keep_two_significant_digits():
    # a wide, skewed interval (e.g. T_hot when it is not identifiable): the PDG rule on the
    # 68 % half-width gives 0 decimals, which would print the lower 95 % bound as "0"
    from cavchar.report.text import format_interval_row

    row = {"median": 7.0, "lo68": 3.0, "hi68": 40.0, "lo95": 0.2, "hi95": 251.0}
    text = format_interval_row(row, "temperature")
    assert (text["median"], text["interval95"], text["unit"]) == ("7", "0.20 – 251", "K")
    # narrow intervals are untouched (two significant digits of the half-width)
    row = {"median": 1.9e-3, "lo68": 1.85e-3, "hi68": 1.95e-3, "lo95": 1.8e-3, "hi95": 2.0e-3}
    assert format_interval_row(row, "time")["interval95"] == "1.80 – 2.00"
