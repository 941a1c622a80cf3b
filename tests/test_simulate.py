"""Simulators against their defining laws, statistically, at fixed seeds.

Tolerances: a sample mean is compared with its expectation within 4 standard
errors (two-sided false-alarm probability 6e-5 per comparison for a normal
estimate); goodness-of-fit tests (scipy.stats) must not reject at p < 1e-4.
Each statistical check has a negative control that the same tolerance rejects.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import linalg, special, stats

from cavchar.errors import InputError
from cavchar.io import read_jump_record, read_probe_record, read_ringdown, read_sampled_record
from cavchar.records import JumpRecord
from cavchar.simulate import (
    jump_path,
    photons_at,
    probe_times,
    probes_on_path,
    simulate_jump_record,
    simulate_probe_record,
    simulate_ringdown,
    simulate_sampled_record,
    stationary_draw,
)

LIFETIME = 1e-3  # s (invented test values)
KAPPA = 1.0 / LIFETIME
N_TH = 0.4
Z = 4.0  # standard errors allowed (see module docstring)


def exit_rate(n, n_th=N_TH, kappa=KAPPA):
    # textbook birth-death rates of the damped mode: up kappa n_th (n+1), down kappa (1+n_th) n
    return kappa * ((1 + n_th) * n + n_th * (n + 1))


def bose_einstein(n, n_th=N_TH):
    # closed form P_n = n_th^n / (1 + n_th)^(n+1)
    return n_th**n / (1 + n_th) ** (n + 1)


@pytest.fixture(scope="module")
def long_record() -> JumpRecord:
    # 100 segments x 2000 lifetimes, about 2.2e5 jumps
    return simulate_jump_record(LIFETIME, N_TH, 2.0, segments=100, seed=20240611)


def _interior_dwells(record: JumpRecord):
    """Dwell times and photon numbers of the uncensored rows (not a segment's first or last)."""
    dwell = record.dwell_times()
    keep = np.ones(len(record), bool)
    keep[record.bounds[:-1]] = False
    keep[record.bounds[1:] - 1] = False
    return dwell[keep], record.photons[keep], keep


def test_jumps_are_single_photon_and_inside_segments(long_record):
    for j, part in enumerate(long_record.segments()):
        assert np.all(np.abs(np.diff(part.photons)) == 1)
        assert part.time[0] == 2.0 * j and part.end_time == 2.0 * (j + 1)
        assert part.time[-1] < part.end_time
    assert long_record.n_jumps > 1e5


@pytest.mark.parametrize("n", [0, 1, 2, 3])
def test_mean_dwell_time_is_inverse_exit_rate(long_record, n):
    dwell, photons, _ = _interior_dwells(long_record)
    d = dwell[photons == n]
    expected = 1.0 / exit_rate(n)
    se = expected / math.sqrt(d.size)  # exponential law: sd = mean
    assert d.size > 5000
    assert abs(d.mean() - expected) < Z * se
    # negative control: a 5 % wrong exit rate is rejected by the same tolerance
    assert abs(d.mean() - expected / 1.05) > Z * se
    # the whole dwell distribution is exponential (scipy.stats.kstest against expon)
    assert stats.kstest(d, stats.expon(scale=expected).cdf).pvalue > 1e-4


@pytest.mark.parametrize("n", [1, 2, 3])
def test_jump_direction_probabilities(long_record, n):
    before, after = long_record.photons[:-1], long_record.photons[1:]
    inside = np.ones(before.size, bool)
    inside[long_record.bounds[1:-1] - 1] = False
    leaving = inside & (before == n)
    up = np.count_nonzero(after[leaving] == n + 1)
    total = np.count_nonzero(leaving)
    p_up = N_TH * (n + 1) / ((1 + N_TH) * n + N_TH * (n + 1))
    se = math.sqrt(p_up * (1 - p_up) / total)
    assert abs(up / total - p_up) < Z * se


def test_time_averaged_occupation_is_bose_einstein(long_record):
    # the fraction of time spent in each state, per independent segment (batch means)
    dwell = long_record.dwell_times()
    levels = np.arange(5)
    fractions = np.zeros((long_record.n_segments, levels.size))
    means = np.zeros(long_record.n_segments)
    for j, (a, b) in enumerate(zip(long_record.bounds[:-1], long_record.bounds[1:],
                                   strict=True)):
        n, d = long_record.photons[a:b], dwell[a:b]
        fractions[j] = [d[n == k].sum() for k in levels]
        fractions[j] /= d.sum()
        means[j] = np.dot(n, d) / d.sum()
    mean = fractions.mean(axis=0)
    se = fractions.std(axis=0, ddof=1) / math.sqrt(fractions.shape[0])
    expected = bose_einstein(levels)
    assert np.all(np.abs(mean - expected) < Z * se), (mean, expected, se)
    # negative control: the law at a 10 % different n_th is rejected
    assert np.any(np.abs(mean - bose_einstein(levels, 1.1 * N_TH)) > Z * se)
    assert abs(means.mean() - N_TH) < Z * means.std(ddof=1) / math.sqrt(means.size)


def test_reproducible_bit_for_bit():
    a = simulate_jump_record(2e-3, 0.3, 5.0, segments=3, seed=7)
    b = simulate_jump_record(2e-3, 0.3, 5.0, segments=3, seed=7)
    c = simulate_jump_record(2e-3, 0.3, 5.0, segments=3, seed=8)
    assert np.array_equal(a.time, b.time) and np.array_equal(a.photons, b.photons)
    assert not (a.time.size == c.time.size and np.array_equal(a.time, c.time))
    # a Generator gives the same stream as its seed
    d = simulate_jump_record(2e-3, 0.3, 5.0, segments=3, seed=np.random.default_rng(7))
    assert np.array_equal(a.time, d.time)


def test_compiled_kernel_equals_plain_python_loop():
    fast = jump_path(500.0, 0.7, 2, 0.0, 10.0, np.random.default_rng(3))
    slow = jump_path(500.0, 0.7, 2, 0.0, 10.0, np.random.default_rng(3), compiled=False)
    assert fast[0].size > 1000
    assert np.array_equal(fast[0], slow[0]) and np.array_equal(fast[1], slow[1])


def test_zero_temperature_fock_decay():
    # n_th = 0: |3> decays 3 -> 2 -> 1 -> 0 and stays; the wait in |k> is Exp(k kappa)
    record = simulate_jump_record(LIFETIME, 0.0, 30 * LIFETIME, segments=4000, initial=3,
                                  seed=11)
    first_waits = []
    for part in record.segments():
        assert part.photons.tolist() == [3, 2, 1, 0]
        first_waits.append(part.time[1] - part.time[0])
    expected = 1.0 / (3 * KAPPA)
    assert abs(np.mean(first_waits) - expected) < Z * expected / math.sqrt(len(first_waits))
    # a mode that starts empty at n_th = 0 never jumps
    empty = simulate_jump_record(LIFETIME, 0.0, 1.0, initial=0, seed=1)
    assert empty.n_jumps == 0 and empty.photons.tolist() == [0]


def test_stationary_draw_is_bose_einstein():
    draws = stationary_draw(N_TH, 200_000, np.random.default_rng(5))
    top = 7
    observed = np.bincount(np.minimum(draws, top), minlength=top + 1)
    p = bose_einstein(np.arange(top))
    expected = draws.size * np.append(p, 1 - p.sum())
    # source: scipy.stats.chisquare goodness of fit against the closed-form law
    assert stats.chisquare(observed, expected).pvalue > 1e-4
    assert stats.chisquare(observed, draws.size * np.append(
        bose_einstein(np.arange(top), 0.45), 1 - bose_einstein(np.arange(top), 0.45).sum())
    ).pvalue < 1e-4  # negative control


def _generator(n_levels: int, kappa: float, n_th: float) -> np.ndarray:
    # the truncated birth-death generator written out here (rows sum to 0)
    q = np.zeros((n_levels, n_levels))
    for n in range(n_levels - 1):
        q[n, n + 1] = kappa * n_th * (n + 1)
        q[n + 1, n] = kappa * (1 + n_th) * (n + 1)
    q -= np.diag(q.sum(axis=1))
    return q


def test_sampled_transitions_match_matrix_exponential():
    dt = 0.3 * LIFETIME
    times = np.arange(300_000) * dt
    record = simulate_sampled_record(LIFETIME, N_TH, times, seed=21)
    # source: scipy.linalg.expm of the generator (40 levels: truncation error < 1e-20)
    p = linalg.expm(_generator(40, KAPPA, N_TH) * dt)
    before, after = record.photons[:-1], record.photons[1:]
    checked = 0
    for i in range(3):
        start = before == i
        total = np.count_nonzero(start)
        for j in range(5):
            freq = np.count_nonzero(after[start] == j) / total
            se = math.sqrt(p[i, j] * (1 - p[i, j]) / total)
            if p[i, j] * total > 50:
                assert abs(freq - p[i, j]) < 4.5 * se, (i, j, freq, p[i, j])
                checked += 1
    assert checked >= 10
    assert record.segment_ids.tolist() == [0]


def test_probe_times():
    t, s = probe_times(1.0, 0.1, segments=2, gap=0.5)
    assert np.allclose(t[:10], np.arange(10) * 0.1) and np.allclose(t[10:], 1.5 + t[:10])
    assert s.tolist() == [0] * 10 + [1] * 10
    t, s = probe_times(1.0, 1e-3, segments=200, spacing="poisson", seed=4)
    counts = np.bincount(s)
    # Poisson process: count ~ Poisson(1000) (+1 for the probe at the start)
    assert abs(counts.mean() - 1001) < Z * math.sqrt(1000 / counts.size)
    gaps = np.diff(t)[np.diff(s) == 0]
    assert stats.kstest(gaps, stats.expon(scale=1e-3).cdf).pvalue > 1e-4


def fringe(n, setting, v, phi0, phi_r, e0, e1):
    # the Ramsey-fringe response written out from its definition
    return e0 + (1 - e0 - e1) * (1 + v * np.cos(phi0 * n + phi_r + setting)) / 2


def test_probe_outcomes_follow_the_fringe():
    import cavchar.models.probes.response as response_mod
    params = dict(v=0.8, phi0=math.pi / 2, phi_r=0.3, e0=0.03, e1=0.05)
    response = response_mod.FringeResponse(
        visibility=params["v"], phase_per_photon=params["phi0"], phase_offset=params["phi_r"],
        readout_error_0=params["e0"], readout_error_1=params["e1"])
    times = np.arange(200_000) * 0.05 * LIFETIME
    settings = [0.0, math.pi / 2]
    record, truth = simulate_probe_record(LIFETIME, N_TH, times, response, settings=settings,
                                          loss=0.05, seed=31)
    assert np.array_equal(record.setting[:4], [0.0, math.pi / 2] * 2)
    lost = record.lost
    assert abs(lost.mean() - 0.05) < Z * math.sqrt(0.05 * 0.95 / lost.size)
    checked = 0
    for n in range(3):
        for s in settings:
            sel = (truth.photons == n) & (record.setting == s) & ~lost
            p = fringe(n, s, **params)
            se = math.sqrt(p * (1 - p) / sel.sum())
            assert abs(record.outcome[sel].mean() - p) < Z * se, (n, s)
            wrong = fringe(n, s, **{**params, "phi_r": params["phi_r"] + 0.2})
            checked += abs(record.outcome[sel].mean() - wrong) > Z * se  # negative control
    assert checked >= 3


def test_probe_table_and_callable_responses():
    times = np.arange(20_000) * 0.1 * LIFETIME
    table = np.array([0.1, 0.7, 0.4, 0.9, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5])
    record, truth = simulate_probe_record(LIFETIME, N_TH, times, lambda n, s: table[n], seed=2)
    for n in range(2):
        sel = truth.photons == n
        se = math.sqrt(table[n] * (1 - table[n]) / sel.sum())
        assert abs(record.outcome[sel].mean() - table[n]) < Z * se
    import cavchar.models.probes.response as response_mod
    same, _ = simulate_probe_record(LIFETIME, N_TH, times, response_mod.TableResponse(table),
                                    seed=2)
    assert np.array_equal(same.outcome, record.outcome)  # same draws, same probabilities


def test_probes_on_a_given_path_with_a_parity_probe():
    path = JumpRecord([0.0, 1.0, 2.0], [0, 1, 2], 3.0)
    times = np.array([0.5, 1.0, 1.5, 2.5])
    assert photons_at(path, times).tolist() == [0, 1, 1, 2]
    # perfect parity probe: P(1 | n) = (1 + cos(pi n)) / 2 = 1 for even n, 0 for odd n
    record, truth = probes_on_path(path, times, lambda n, s: (1 + np.cos(np.pi * n)) / 2)
    assert record.outcome.tolist() == [1.0, 0.0, 0.0, 1.0]
    with pytest.raises(InputError, match="outside segment"):
        photons_at(path, [3.5])


def _residual_checks(residual: np.ndarray, sd: float) -> None:
    n = residual.size
    assert abs(residual.mean()) < Z * sd / math.sqrt(n)
    assert abs(residual.var(ddof=1) / sd**2 - 1) < Z * math.sqrt(2 / (n - 1))
    assert stats.kstest(residual, stats.norm(scale=sd).cdf).pvalue > 1e-4
    assert stats.kstest(residual, stats.norm(scale=1.1 * sd).cdf).pvalue < 1e-4  # control


RING_TIMES = np.linspace(0.0, 5 * LIFETIME, 60)


@pytest.mark.parametrize("signal", ["power", "db", "mean_n"])
def test_real_valued_ringdowns_have_gaussian_noise(signal):
    options = dict(amplitude=2.0, floor=0.05, t0=0.2 * LIFETIME, noise=0.03, n_th=0.2, initial=3)
    trace = simulate_ringdown(signal, RING_TIMES, LIFETIME, traces=300, seed=41, **options)
    assert trace.n_traces == 300 and trace.signal == signal
    t = trace.time
    u = np.exp(-(t - options["t0"]) / LIFETIME)
    clean = {"power": 2.0 * u + 0.05, "db": 10 * np.log10(2.0 * u + 0.05),
             "mean_n": 0.2 + (3 - 0.2) * u}[signal]
    _residual_checks(trace.value - clean, 0.03)
    assert (trace.sigma is not None) == (signal == "mean_n")


def test_amplitude_ringdown_is_rice_distributed():
    trace = simulate_ringdown("amplitude", RING_TIMES, LIFETIME, amplitude=0.5, noise=0.1,
                              phase=1.0, traces=300, seed=43)
    field = 0.5 * np.exp(-trace.time / (2 * LIFETIME))  # amplitude decay time 2 T_c
    # source: scipy.stats.rice (b = |field| / sigma, scale = sigma); probability integral
    # transform of every point must be uniform
    pit = stats.rice.cdf(trace.value, field / 0.1, scale=0.1)
    assert stats.kstest(pit, "uniform").pvalue > 1e-4
    wrong = stats.rice.cdf(trace.value, 0.5 * np.exp(-trace.time / LIFETIME) / 0.1, scale=0.1)
    assert stats.kstest(wrong, "uniform").pvalue < 1e-4  # energy (not amplitude) decay: rejected


def test_iq_ringdown_with_detuning_and_offset():
    detuning, offset = 700.0, 0.02 - 0.01j
    trace = simulate_ringdown("iq", RING_TIMES, LIFETIME, amplitude=0.8, phase=0.4,
                              detuning=detuning, offset=offset, noise=0.05, traces=300, seed=47,
                              known_sigma=True)
    t = trace.time
    clean = 0.8 * np.exp(0.4j) * np.exp(-t / (2 * LIFETIME)) * np.exp(-2j * np.pi * detuning * t)
    residual = trace.value - clean - offset
    _residual_checks(residual.real, 0.05)
    _residual_checks(residual.imag, 0.05)
    assert abs(np.corrcoef(residual.real, residual.imag)[0, 1]) < Z / math.sqrt(residual.size)
    assert np.all(trace.sigma == 0.05)


def test_fock_populations_at_zero_temperature_are_binomial():
    shots, traces = 400, 20
    trace = simulate_ringdown("populations", RING_TIMES, LIFETIME, initial=3, shots=shots,
                              traces=traces, seed=53)
    counts = trace.value.reshape(traces, RING_TIMES.size, -1).sum(axis=0)
    assert np.all(counts.sum(axis=1) == shots * traces)
    assert np.all(counts[:, 4:] == 0)  # nothing above the initial Fock state at n_th = 0
    # closed form: each photon survives with u = exp(-t / T_c): binomial(3, u)
    u = np.exp(-RING_TIMES / LIFETIME)[:, None]
    k = np.arange(4)[None, :]
    p = special.comb(3, k) * u**k * (1 - u) ** (3 - k)
    expected = p * shots * traces
    use = expected > 5
    chi2 = np.sum((counts[:, :4][use] - expected[use]) ** 2 / expected[use])
    dof = int(use.sum()) - int(np.count_nonzero(use.any(axis=1)))
    assert stats.chi2.sf(chi2, dof) > 1e-4


def test_thermal_populations_mean_photon_number():
    trace = simulate_ringdown("populations", RING_TIMES, LIFETIME, n_th=0.3, initial=2,
                              shots=2000, traces=5, seed=59)
    counts = trace.value.reshape(5, RING_TIMES.size, -1).sum(axis=0)
    n = np.arange(counts.shape[1])
    mean = counts @ n / counts.sum(axis=1)
    var = counts @ n**2 / counts.sum(axis=1) - mean**2
    expected = 0.3 + (2 - 0.3) * np.exp(-RING_TIMES / LIFETIME)  # <n>(t), closed form
    # at t = 0 the state is exactly |2>: zero variance, exact equality
    assert np.all(np.abs(mean - expected) <= Z * np.sqrt(var / counts.sum(axis=1)) + 1e-12)


def test_ringdown_errors_and_reproducibility():
    a = simulate_ringdown("power", RING_TIMES, LIFETIME, noise=0.1, seed=5)
    b = simulate_ringdown("power", RING_TIMES, LIFETIME, noise=0.1, seed=5)
    assert np.array_equal(a.value, b.value)
    with pytest.raises(InputError, match="dB"):
        simulate_ringdown("db", RING_TIMES, LIFETIME, amplitude=-1.0)
    with pytest.raises(InputError, match="after t0"):
        simulate_ringdown("populations", RING_TIMES, LIFETIME, t0=1e-3)
    with pytest.raises(InputError, match="unknown signal"):
        simulate_ringdown("voltage", RING_TIMES, LIFETIME)
    with pytest.raises(InputError, match="lifetime"):
        simulate_jump_record(-1.0, 0.1, 1.0)


# ------------------------------------------------------------------ command line


@pytest.mark.parametrize(
    ("shape", "options", "reader"),
    [
        ("jumps", ["--n-thermal", "0.3", "--duration", "0.5s", "--segments", "2"],
         read_jump_record),
        ("sampled", ["--n-thermal", "0.3", "--duration", "0.2s", "--interval", "0.1ms",
                     "--spacing", "poisson"], read_sampled_record),
        ("probes", ["--n-thermal", "0.3", "--duration", "0.2s", "--interval", "0.1ms",
                    "--visibility", "0.9", "--setting", "0", "--setting", "90deg",
                    "--loss", "0.02"], read_probe_record),
        ("ringdown", ["--signal", "iq", "--duration", "5ms", "--noise", "0.01", "--traces", "2",
                      "--detuning", "200Hz"], read_ringdown),
    ],
)
def test_cli_writes_what_the_readers_take(tmp_path, run_cli, shape, options, reader):
    argv = ["simulate", shape, "--lifetime", "1ms", *options, "--seed", "3", "-o", tmp_path,
            "--freq", "5GHz"]
    code, out, err = run_cli(*argv)
    assert code == 0, err
    path = tmp_path / f"{shape}.csv"
    assert f"wrote {path}" in out
    record = reader(path)
    assert record.quantity("frequency", "frequency") == pytest.approx(5e9)
    assert record.metadata["seed"] == "3"
    first = path.read_bytes()
    code, _, err = run_cli(*argv)
    assert code == 2 and "--force" in err and "Traceback" not in err
    code, _, _ = run_cli(*argv, "--force")
    assert code == 0 and path.read_bytes() == first  # same seed, same file


def test_cli_help_and_probe_truth(tmp_path, run_cli):
    for shape in ("jumps", "sampled", "probes", "ringdown"):
        code, out, _ = run_cli("simulate", shape, "--help")
        assert code == 0 and "example" in out
    code, out, err = run_cli("simulate", "probes", "--lifetime", "1ms", "--n-thermal", "0.2",
                             "--duration", "50ms", "--interval", "0.1ms", "--truth", "-o",
                             tmp_path, "--file", "p.tsv.gz")
    assert code == 0, err
    probes = read_probe_record(tmp_path / "p.tsv.gz")
    truth = read_sampled_record(tmp_path / "p-truth.tsv.gz")
    assert np.array_equal(probes.time, truth.time)
    code, _, err = run_cli("simulate", "sampled", "--interval", "1ms", "-o", tmp_path)
    assert code == 2 and "--lifetime" in err
