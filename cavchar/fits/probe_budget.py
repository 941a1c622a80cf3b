"""Exact or coarse: a measured time budget for the probe-record likelihood.

Under ``mode="auto"`` the probe fit uses the exact forward algorithm whenever its
predicted cost fits the budget, and the coarse (blocked) likelihood only where a
measurement says the exact one would take too long:

    predicted_s = (time of one exact evaluation per parameter set, measured on a batch of
                   BATCH sets around the pilot estimate) x (parameter sets the sampler needs)

with the sets needed ``EVALUATIONS[sampler]``: about 16,000 for the importance sampler
(MAP search, Hessian and at most 16,000 proposal draws, cavchar.inference.importance) and
about 64,000 for the emcee ensemble (32 walkers x 2,000 steps, typical for a converged run).
For probes at irregular times the route timed is the quantized one (the route
``mode="auto"`` takes for them when the coarse mode is not needed; its own bias check
follows the fit), recorded as ``route_timed`` in the fit's ``checks.exact_budget``.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np

__all__ = ["EXACT_BUDGET_S", "EVALUATIONS", "exact_cost"]

#: largest predicted time (s) of the exact likelihood under mode="auto"
EXACT_BUDGET_S = 60.0
#: parameter sets the sampler typically evaluates (see the module docstring)
EVALUATIONS = {"importance": 16_000, "ensemble": 64_000}
#: parameter sets in the timed batch
BATCH = 32


def exact_cost(model, guess: np.ndarray, sampler: str, budget_s: float = EXACT_BUDGET_S,
               seed: int = 0) -> dict[str, Any]:
    """Measure the exact likelihood's cost and say whether it fits the budget.

    ``model`` is a batched log-likelihood ``(k, ndim) -> (k,)``; ``guess`` (ndim,) the pilot
    estimate (physical units).  The batch is the guess with lifetime and n_th scattered by
    +-10% (log-normal), evaluated twice (the first call may compile a kernel); the second
    call's time counts.  Returns ``{"seconds_per_set", "sets_expected", "predicted_s",
    "budget_s", "affordable"}`` (seconds of wall time on this machine, now).
    """
    rng = np.random.default_rng(seed)
    theta = np.repeat(np.asarray(guess, dtype=float)[None, :], BATCH, axis=0)
    theta[:, :2] *= np.exp(0.1 * rng.standard_normal((BATCH, 2)))
    model(theta[:2])
    t0 = time.perf_counter()
    model(theta)
    per_set = (time.perf_counter() - t0) / BATCH
    sets = EVALUATIONS.get(sampler, EVALUATIONS["ensemble"])
    predicted = per_set * sets
    return {"seconds_per_set": per_set, "sets_expected": sets, "predicted_s": predicted,
            "budget_s": float(budget_s), "affordable": bool(predicted <= budget_s)}
