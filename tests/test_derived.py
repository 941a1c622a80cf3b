"""Derived quantities and the Planck check.

Sources: Q = 2 pi nu T_c and FWHM = 1/(2 pi T_c) for the energy decay time (RP Photonics
Encyclopedia, "Q factor"); Planck occupation and its inverse with check values derived
with scipy.constants (exact 2019 SI h and k_B); a trade fact from memory: a
cavity near 51 GHz with n_th about 0.05 has an effective temperature near 0.8 K.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from cavchar.derived import add_derived_quantities, planck_check
from cavchar.errors import InputError
from cavchar.thermal import planck_occupation


def test_quality_factor_and_linewidth_closed_forms():
    # T_c = 0.13 s at 51 GHz: Q = 2 pi nu T_c = 4.1657e10 (derived from the published lifetime of
    # Kuhr et al., Appl. Phys. Lett. 90, 164101 (2007); check value only),
    # FWHM = 1/(2 pi T_c) = 1.22427 Hz
    table = add_derived_quantities(pd.DataFrame({"lifetime": [0.13, 1e-3]}), freq_hz=51e9)
    assert math.isclose(table["quality_factor"][0], 2 * math.pi * 51e9 * 0.13, rel_tol=1e-14)
    assert math.isclose(table["quality_factor"][0], 4.1657e10, rel_tol=1e-4)
    assert math.isclose(table["linewidth"][0], 1.22427, rel_tol=1e-5)
    assert math.isclose(table["linewidth"][1], 1.0 / (2 * math.pi * 1e-3), rel_tol=1e-14)
    assert table["amplitude_decay_time"].tolist() == [0.26, 2e-3]


@pytest.mark.parametrize(("freq", "n", "t_eff"), [
    (5e9, 1e-3, 34.733e-3), (5e9, 1e-2, 51.995e-3), (7e9, 1e-3, 48.626e-3),
    (7e9, 1e-2, 72.793e-3)])
def test_effective_temperature_against_check_values(freq, n, t_eff):
    # T_eff = h nu / (k_B ln(1 + 1/n)) (inverse Bose-Einstein occupation), values derived
    # with scipy.constants
    table = add_derived_quantities(pd.DataFrame({"lifetime": [1e-3], "n_thermal": [n]}),
                                   freq_hz=freq)
    assert math.isclose(table["effective_temperature"][0], t_eff, rel_tol=2e-5)
    # and it inverts the Planck occupation
    assert math.isclose(planck_occupation(freq, table["effective_temperature"][0]), n,
                        rel_tol=1e-12)


def test_trade_check_51ghz_mode_with_005_photons_is_near_08_kelvin():
    # from memory: n_th about 0.05 near 51 GHz corresponds to about 0.8 K
    table = add_derived_quantities(pd.DataFrame({"lifetime": [0.1], "n_thermal": [0.05]}),
                                   freq_hz=51e9)
    assert abs(table["effective_temperature"][0] - 0.8) < 0.02


def test_excess_photons_over_stage_occupation():
    # 5 GHz at 50 mK: n = 8.3044e-03 (derived with scipy.constants)
    samples = pd.DataFrame({"lifetime": [1e-3, 2e-3], "n_thermal": [0.01, 0.02]})
    table = add_derived_quantities(samples, freq_hz=5e9, stage_temp_k=0.05)
    np.testing.assert_allclose(table["stage_occupation"], 8.3044e-3, rtol=1e-4)
    np.testing.assert_allclose(table["excess_photons"],
                               samples["n_thermal"] - table["stage_occupation"], rtol=1e-14)
    assert list(samples.columns) == ["lifetime", "n_thermal"]  # input untouched


def test_without_frequency_only_time_quantities():
    table = add_derived_quantities(pd.DataFrame({"lifetime": [1e-3], "n_thermal": [0.1]}))
    assert set(table.columns) == {"lifetime", "n_thermal", "linewidth", "amplitude_decay_time"}


@pytest.mark.parametrize(("frame", "kwargs"), [
    (pd.DataFrame({"n_thermal": [0.1]}), {}),
    (pd.DataFrame({"lifetime": [-1.0]}), {}),
    (pd.DataFrame({"lifetime": [1.0]}), {"freq_hz": -5e9}),
    (pd.DataFrame({"lifetime": [1.0]}), {"freq_hz": 5e9, "stage_temp_k": float("nan")}),
])
def test_bad_input_raises_input_error(frame, kwargs):
    with pytest.raises(InputError):
        add_derived_quantities(frame, **kwargs)


def test_planck_check_hot_mode():
    rng = np.random.default_rng(4)
    n = np.exp(rng.normal(np.log(0.02), 0.2, 4000))  # far above n(5 GHz, 50 mK) = 0.0083
    check = planck_check(pd.DataFrame({"n_thermal": n}), 5e9, 0.05)
    assert check.prob_hotter_than_stage == np.mean(n > check.stage_occupation)
    assert check.prob_hotter_than_stage > 0.99
    assert check.verdict == "hotter than the stage"
    assert not check.piles_up_at_zero and check.n_thermal_upper95 is None
    t = check.effective_temperature_k
    assert t["lo95"] < t["lo68"] < t["median"] < t["hi68"] < t["hi95"]
    assert 0.05 < t["median"] < 0.07  # T_eff(5 GHz, 0.02) = 60.6 mK


def test_planck_check_consistent_with_stage():
    rng = np.random.default_rng(5)
    n = np.exp(rng.normal(np.log(8.3044e-3), 0.3, 4000))  # centred on the stage occupation
    check = planck_check(pd.DataFrame({"n_thermal": n}), 5e9, 0.05)
    # P(hotter) ~ 0.5 with binomial sd 0.008 for 4000 draws
    assert abs(check.prob_hotter_than_stage - 0.5) < 0.05
    assert check.verdict == "consistent with the stage"


def test_planck_check_upper_limit_when_piled_up_at_zero():
    rng = np.random.default_rng(6)
    n = np.exp(rng.uniform(np.log(1e-7), np.log(1e-3), 4000))  # no lower bound in the data
    check = planck_check(pd.DataFrame({"n_thermal": n}), 5e9, 0.02)
    assert check.piles_up_at_zero
    assert check.n_thermal_upper95 == pytest.approx(np.quantile(n, 0.95))
    # T_eff is monotone in n, so its upper limit is T_eff of the n upper limit
    from cavchar.thermal import effective_temperature

    assert check.effective_temperature_upper95_k == pytest.approx(
        float(effective_temperature(5e9, check.n_thermal_upper95)), rel=1e-9)


def test_planck_check_needs_n_thermal():
    with pytest.raises(InputError):
        planck_check(pd.DataFrame({"lifetime": [1.0]}), 5e9, 0.05)


@pytest.mark.parametrize(("p", "n_draws", "text"), [
    (1.0, 4000, "> 0.999"),
    (0.0, None, "< 0.001"),
    (0.9996, None, "> 0.999"),   # would round to 1.000 at three places
    (0.97312, None, "0.973"),
])
def test_a_probability_is_never_shown_as_one_or_zero(p, n_draws, text):
    """A fraction of n Monte Carlo draws resolves no closer than 1/n to 0 or 1 (binomial
    resolution, common practice), so such values are written as bounds."""
    from cavchar.derived import format_probability, format_probability_error

    assert format_probability(p, n_draws).startswith(text)
    with_error = format_probability_error(p, 0.0004)
    assert with_error.startswith(text) and "0.000" in with_error
    shown = with_error.split("±")[0]
    assert "1.000" not in shown and not shown.startswith("0.000")
