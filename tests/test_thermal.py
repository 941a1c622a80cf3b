"""Planck occupation and effective temperature against outside references."""

import csv

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import constants

from cavchar.thermal import (
    H_OVER_KB,
    d_occupation_d_temperature,
    d_temperature_d_occupation,
    effective_temperature,
    planck_occupation,
    two_bath_occupation,
)
from tests.conftest import REFERENCE_TABLES


def test_constant_is_exact_si():
    # source: 2019 SI exact values of h and k_B (scipy.constants)
    assert H_OVER_KB == constants.h / constants.k
    assert H_OVER_KB * 1e9 * 1e3 == pytest.approx(47.99243073366, rel=1e-12)
    # common practice: rule of thumb "48 mK per GHz"
    assert H_OVER_KB * 1e12 == pytest.approx(48.0, rel=0.01)


def test_reference_table():
    # source: reference_tables/planck_occupation.csv (derived from exact SI constants)
    with open(REFERENCE_TABLES / "planck_occupation.csv") as handle:
        rows = list(csv.DictReader(handle))
    assert len(rows) > 10
    nu = np.array([float(r["frequency_hz"]) for r in rows])
    temp = np.array([float(r["temperature_k"]) for r in rows])
    expected = np.array([float(r["occupation"]) for r in rows])
    np.testing.assert_allclose(planck_occupation(nu, temp), expected, rtol=1e-11)


@pytest.mark.parametrize(
    ("nu", "temps", "expected"),
    [  # source: Bose-Einstein occupation 1/expm1(h nu / k_B T), derived with the
      # exact 2019 SI h and k_B (scipy.constants)
        (5e9, [0.020, 0.035, 0.050, 0.070, 0.100],
         [6.1559e-06, 1.0542e-03, 8.3044e-03, 3.3539e-02, 9.9810e-02]),
        (6e9, [0.035, 0.050, 0.070], [2.6734e-04, 3.1640e-03, 1.6620e-02]),
        (7e9, [0.035, 0.050, 0.070, 0.100], [6.7836e-05, 1.2093e-03, 8.3044e-03, 3.6005e-02]),
    ],
)
def test_check_values(nu, temps, expected):
    np.testing.assert_allclose(planck_occupation(nu, temps), expected, rtol=1e-4)


def test_effective_temperature_check_values():
    # source: inverse of the Bose-Einstein occupation, h nu/(k_B ln(1 + 1/n)), derived with
    # scipy.constants: 5 GHz n=1e-3 -> 34.733 mK, 1e-2 -> 51.995 mK; 7 GHz 48.626/72.793
    np.testing.assert_allclose(effective_temperature(5e9, [1e-3, 1e-2]), [34.733e-3, 51.995e-3],
                               rtol=2e-5)
    np.testing.assert_allclose(effective_temperature(7e9, [1e-3, 1e-2]), [48.626e-3, 72.793e-3],
                               rtol=2e-5)


def test_trade_check_value_from_memory():
    # from memory (trade fact, check value only): a cavity near 51 GHz with n_th about 0.05
    # corresponds to an effective temperature near 0.8 K
    assert effective_temperature(51e9, 0.05) == pytest.approx(0.8, rel=0.05)


def test_against_qutip():
    qutip = pytest.importorskip("qutip")
    # source: QuTiP n_thermal(w, w_th) with w = 2 pi nu and w_th = k_B T / hbar
    for nu in [1e9, 6.8e9, 2e10]:
        for temp in [0.01, 0.05, 0.3, 4.0]:
            ref = qutip.n_thermal(2 * np.pi * nu, constants.k * temp / constants.hbar)
            assert planck_occupation(nu, temp) == pytest.approx(ref, rel=1e-12)


def test_limits_are_stable():
    # T -> 0: exactly zero, no warning or overflow; T -> infinity: n ~ k_B T / h nu - 1/2
    with np.errstate(all="raise"):
        assert planck_occupation(6e9, 0.0) == 0.0
        assert planck_occupation(6e9, 1e-6) == 0.0
        big = planck_occupation(6e9, 1e6)
    x = H_OVER_KB * 6e9 / 1e6
    assert big == pytest.approx(1 / x - 0.5 + x / 12, rel=1e-12)
    assert effective_temperature(6e9, 0.0) == 0.0


@given(st.floats(min_value=-9, max_value=3))
def test_round_trip(log10_n):
    n = 10.0**log10_n
    t_eff = effective_temperature(6.8e9, n)
    assert planck_occupation(6.8e9, t_eff) == pytest.approx(n, rel=1e-12)


def test_derivatives_against_finite_differences():
    nu = 6.8e9
    for temp in [0.03, 0.08, 0.5]:
        h = temp * 1e-6
        numeric = (planck_occupation(nu, temp + h) - planck_occupation(nu, temp - h)) / (2 * h)
        assert d_occupation_d_temperature(nu, temp) == pytest.approx(numeric, rel=1e-7)
    for n in [1e-4, 0.01, 2.0]:
        h = n * 1e-6
        numeric = (effective_temperature(nu, n + h) - effective_temperature(nu, n - h)) / (2 * h)
        assert d_temperature_d_occupation(nu, n) == pytest.approx(numeric, rel=1e-7)
    assert d_occupation_d_temperature(nu, 1e-5) == 0.0


def test_two_bath():
    nu = 6.8e9
    assert two_bath_occupation(nu, 0.02, 4.0, 0.0) == pytest.approx(planck_occupation(nu, 0.02))
    assert two_bath_occupation(nu, 0.02, 4.0, 1.0) == pytest.approx(planck_occupation(nu, 4.0))
    mix = two_bath_occupation(nu, 0.02, 4.0, 1e-3)
    expected = 0.999 * planck_occupation(nu, 0.02) + 1e-3 * planck_occupation(nu, 4.0)
    assert mix == pytest.approx(expected)
    with pytest.raises(ValueError):
        two_bath_occupation(nu, 0.02, 4.0, 1.5)
