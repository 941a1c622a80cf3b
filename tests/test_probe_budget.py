"""The measured exact-likelihood budget of the probe fit (cavchar.fits.probe_budget)."""

from __future__ import annotations

import time

import numpy as np

from cavchar.fits.probe_budget import BATCH, EVALUATIONS, exact_cost


def _slow_model(seconds_per_set):
    def model(theta):
        time.sleep(seconds_per_set * theta.shape[0])
        return np.zeros(theta.shape[0])

    return model


def test_budget_follows_the_measured_cost():
    # 2 ms per set (time.sleep; the sleep is at least that long, so the predicted cost is
    # at least 2 ms x the expected number of sets)
    cost = exact_cost(_slow_model(2e-3), np.array([0.02, 0.1]), "importance", budget_s=1.0)
    assert cost["seconds_per_set"] >= 2e-3
    assert cost["predicted_s"] >= 2e-3 * EVALUATIONS["importance"]
    assert not cost["affordable"]
    cost = exact_cost(_slow_model(0.0), np.array([0.02, 0.1]), "ensemble", budget_s=1e3)
    assert cost["affordable"] and cost["sets_expected"] == EVALUATIONS["ensemble"]
    assert BATCH >= 8
