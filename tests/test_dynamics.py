"""Damped-mode birth–death dynamics against QuTiP, closed forms and scipy."""

import csv

import numpy as np
import pytest
from scipy import linalg, stats

from cavchar.dynamics import (
    DampedModePropagator,
    bose_einstein,
    mean_photon_number,
    populations,
    rate_matrix,
    stationary_distribution,
    transition_matrices_batch,
    truncation_levels,
)
from tests.conftest import REFERENCE_TABLES


def _qutip_populations(kappa, n_th, n_levels, rho0_diag, times):
    qutip = pytest.importorskip("qutip")
    a = qutip.destroy(n_levels)
    c_ops = [np.sqrt(kappa * (1 + n_th)) * a, np.sqrt(kappa * n_th) * a.dag()]
    rho0 = qutip.Qobj(np.diag(rho0_diag))
    projectors = [qutip.fock_dm(n_levels, n) for n in range(n_levels)]
    result = qutip.mesolve(a.dag() * a, rho0, times, c_ops, e_ops=projectors,
                           options={"atol": 1e-13, "rtol": 1e-11})
    return np.array(result.expect).T


@pytest.mark.parametrize(("n_th", "start"), [(0.05, "fock3"), (0.4, "fock1"), (0.2, "thermal"),
                                             (1.5, "fock2")])
def test_populations_against_qutip_mesolve(n_th, start):
    # source: QuTiP mesolve of the Lindblad equation with collapse operators
    # sqrt(kappa(1+n_th)) a and sqrt(kappa n_th) a† (same truncation, a† kills the top level)
    kappa = 1 / 2.3e-3
    n_levels = 14
    if start == "thermal":
        p0 = stationary_distribution(0.05, n_levels)
    else:
        p0 = np.zeros(n_levels)
        p0[int(start[-1])] = 1.0
    times = np.linspace(0, 8e-3, 41)
    ours = DampedModePropagator(kappa, n_th, n_levels, n_max=0).populations(p0, times)
    ref = _qutip_populations(kappa, n_th, n_levels, p0, times)
    assert np.max(np.abs(ours - ref)) < 1e-8


def test_zero_temperature_fock_decay_is_binomial():
    # source: closed form — at T = 0 each photon survives independently with prob exp(-kappa t)
    kappa, k = 1 / 1.7e-3, 6
    times = np.array([1e-4, 1e-3, 4e-3])
    ours = populations(kappa, 0.0, np.eye(k + 1)[k], times, n_levels=k + 2)
    for t, row in zip(times, ours):
        expected = stats.binom.pmf(np.arange(k + 2), k, np.exp(-kappa * t))
        assert np.max(np.abs(row - expected)) < 1e-12


def test_stationary_law_is_bose_einstein():
    # source: detailed balance of the birth–death chain gives the geometric (Bose–Einstein) law
    for n_th in [1e-3, 0.05, 0.7, 3.0]:
        n_levels = truncation_levels(n_th)
        p = stationary_distribution(n_th, n_levels)
        q = rate_matrix(1e3, n_th, n_levels)
        assert np.max(np.abs(p @ q)) < 1e-9 * 1e3
        np.testing.assert_allclose(p, bose_einstein(n_th, np.arange(n_levels)), rtol=1e-11,
                                   atol=1e-300)


def test_truncation_tail_is_below_bound():
    for n_th in [1e-4, 0.05, 0.5, 5.0]:
        for n_max in [0, 3]:
            n_levels = truncation_levels(n_th, n_max)
            # geometric tail beyond the surviving photons: r^(N - n_max)
            r = n_th / (1 + n_th)
            assert r ** (n_levels - n_max) < 1e-12
            assert r ** (n_levels - n_max - 2) >= 1e-12 or n_levels - n_max == 2


def test_mean_relaxes_exponentially():
    # source: d<n>/dt = -kappa(<n> - n_th) (rate equations, Walls & Milburn sec. 6.1), and
    # the derived values of reference_tables/damped_mode.csv
    with open(REFERENCE_TABLES / "damped_mode.csv") as handle:
        rows = [r for r in csv.DictReader(handle) if r["kind"] == "mean_from_fock3"]
    kappa, n_th = 1 / float(rows[0]["t_c_s"]), float(rows[0]["n_th"])
    times = np.array([float(r["time_s"]) for r in rows])
    expected = np.array([float(r["value"]) for r in rows])
    np.testing.assert_allclose(mean_photon_number(times, kappa, n_th, 3), expected, rtol=1e-11)
    pops = populations(kappa, n_th, np.eye(4)[3], times)
    np.testing.assert_allclose(pops @ np.arange(pops.shape[1]), expected, rtol=1e-10)


def test_exit_rates_from_reference_table():
    with open(REFERENCE_TABLES / "damped_mode.csv") as handle:
        rows = [r for r in csv.DictReader(handle) if r["kind"] == "exit_rate"]
    for row in rows:
        kappa, n_th, n = 1 / float(row["t_c_s"]), float(row["n_th"]), int(row["n"])
        q = rate_matrix(kappa, n_th, 10)
        assert -q[n, n] == pytest.approx(float(row["value"]), abs=5e-7)  # table has 6 decimals


@pytest.mark.parametrize("n_th", [0.0, 1e-6, 0.05, 0.8])
def test_transition_matrices_against_expm(n_th):
    # source: scipy.linalg.expm (scaling and squaring) of the same rate matrix
    kappa, n_levels = 1 / 3e-3, 12
    dts = np.array([0.0, 1e-5, 2e-4, 5e-3, 0.1])
    prop = DampedModePropagator(kappa, n_th, n_levels, n_max=3)
    ours = prop.transition_matrices(dts)
    ref = np.stack([linalg.expm(rate_matrix(kappa, n_th, n_levels) * dt) for dt in dts])
    assert np.max(np.abs(ours[:, :4] - ref[:, :4])) < 1e-11
    np.testing.assert_allclose(ours.sum(axis=-1), 1.0, atol=1e-10)
    batch = transition_matrices_batch([kappa, 2 * kappa], [n_th, n_th], n_levels, dts, n_max=3)
    assert np.max(np.abs(batch[0, :, :4] - ref[:, :4])) < 1e-11
    ref2 = np.stack([linalg.expm(rate_matrix(2 * kappa, n_th, n_levels) * dt) for dt in dts])
    assert np.max(np.abs(batch[1, :, :4] - ref2[:, :4])) < 1e-11


def test_eigen_route_used_when_accurate():
    assert DampedModePropagator(1e3, 0.05, 13, n_max=3).method == "eigen"
    assert DampedModePropagator(1e3, 0.0, 5).method == "expm"


@pytest.mark.parametrize("kappa, n_th", [(1.0e3, 0.05), (250.0, 1.7)])
def test_mean_jump_rate_is_the_equilibrium_mean_of_the_rates(kappa, n_th):
    # source: the definition, sum_n P_n (up_n + down_n) over the Bose–Einstein law P_n,
    # summed to n = 399 (neglected tail below (1.7 / 2.7)^400 ~ 1e-80); rel 1e-12: rounding
    from cavchar.dynamics import down_rate, mean_jump_rate, up_rate

    n = np.arange(400)
    p = bose_einstein(n_th, n)
    expected = np.sum(p * (up_rate(kappa, n_th, n) + down_rate(kappa, n_th, n)))
    assert float(mean_jump_rate(kappa, n_th)) == pytest.approx(expected, rel=1e-12)
