"""Posterior predictive check of an exact jump record: dwell times per photon number.

In the damped-mode model each dwell in ``n`` is exponential with the exit rate
``r_n = a (n+1) + b n`` and ends with an up jump with probability
``a (n+1) / r_n``.  For each photon number with enough complete dwells this
module compares the observed dwells with replicated ones drawn from the model
at posterior draws (posterior predictive p-value, Gelman, Meng & Stern,
Statistica Sinica 6, 733 (1996)) using the Kolmogorov–Smirnov distance of the
probability-integral transform ``u = 1 - exp(-r_n d)`` from the uniform law as
the discrepancy, and reports also the observed/expected mean dwell and the
branching fraction.  Dwells cut by the end of a segment are right-censored and
left out (their duration is only a lower bound).
"""

from __future__ import annotations

import numpy as np

__all__ = ["dwell_time_check"]


def _ks_uniform(u: np.ndarray) -> np.ndarray:
    """KS distance of each row of ``u`` (shape (s, m)) from the uniform law on [0, 1]."""
    u = np.sort(u, axis=-1)
    m = u.shape[-1]
    grid = np.arange(1, m + 1) / m
    return np.maximum(np.max(grid - u, axis=-1), np.max(u - (grid - 1.0 / m), axis=-1))


def dwell_time_check(
    durations: np.ndarray,
    states: np.ndarray,
    complete: np.ndarray,
    lifetime_draws: np.ndarray,
    n_thermal_draws: np.ndarray,
    rng: np.random.Generator,
    n_replicates: int = 400,
    min_dwells: int = 5,
    alpha: float = 0.01,
    max_dwells: int = 2000,
) -> dict:
    """Dwell-time posterior predictive check.

    Parameters
    ----------
    durations, states, complete : (m,) arrays
        Dwell durations (s), the photon number during each dwell and whether it
        ended in a jump (see :func:`cavchar.models.jumps.dwell_times`).
    lifetime_draws, n_thermal_draws : (s,) arrays
        Posterior draws of T_c (s) and n_th.
    rng
        Random generator (seeded by the caller).
    n_replicates
        Posterior draws used for replication.
    min_dwells
        Photon numbers with fewer complete dwells are listed but not tested.
    max_dwells
        Longer lists of dwells are tested on a random subset of this size (the cost
        is ``n_replicates * max_dwells`` per photon number; the test then has the power
        of that many dwells, ample to see a misfit that matters).
    alpha
        Family-wise level: a misfit is flagged when the smallest p-value is below
        ``alpha / (number of tested photon numbers)`` (Bonferroni).

    Returns
    -------
    dict
        ``{"per_photon_number": [...], "misfit": bool, "smallest_p_value": float,
        "threshold": float, "method": str}`` (plain JSON).
    """
    pick = rng.choice(lifetime_draws.size, size=min(n_replicates, lifetime_draws.size),
                      replace=False)
    kappa = 1.0 / lifetime_draws[pick]
    nth = n_thermal_draws[pick]
    rows = []
    tested_p = []
    for n in np.unique(states):
        mask = (states == n) & complete
        d = durations[mask]
        total = int(d.size)
        if d.size > max_dwells:
            d = rng.choice(d, max_dwells, replace=False)
        rate = kappa * (nth * (n + 1) + (1 + nth) * n)  # (s,)
        row = {
            "photon_number": int(n),
            "complete_dwells": total,
            "tested_dwells": int(d.size) if d.size >= min_dwells else 0,
            "mean_dwell_s": float(durations[mask].mean()) if total else None,
            "expected_mean_dwell_s": float(np.median(1.0 / rate)),
        }
        if d.size >= min_dwells:
            observed = _ks_uniform(1.0 - np.exp(-np.outer(rate, d)))
            replicated = _ks_uniform(rng.uniform(size=(rate.size, d.size)))
            p_value = float(np.mean(replicated >= observed))
            row["ks_distance"] = float(np.median(observed))
            row["p_value"] = p_value
            tested_p.append(p_value)
        rows.append(row)
    threshold = alpha / max(len(tested_p), 1)
    smallest = min(tested_p) if tested_p else None
    return {
        "method": "posterior predictive KS distance of dwell times per photon number "
                  f"(censored dwells excluded; at most {max_dwells} random dwells per number; "
                  "Bonferroni over photon numbers)",
        "per_photon_number": rows,
        "smallest_p_value": smallest,
        "threshold": threshold,
        "misfit": bool(smallest is not None and smallest < threshold),
    }
