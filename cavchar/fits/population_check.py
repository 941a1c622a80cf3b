"""Goodness of fit of Fock-population counts by a parametric bootstrap.

Counts of photon numbers after a Fock-state preparation are sparse: at late
delays most cells have expected counts far below one, and every delay's counts
sum to its number of shots.  Pearson's statistic is then not chi-square
distributed and its textbook degrees of freedom are wrong, so this check
calibrates the statistic by simulation instead (the parametric bootstrap,
Efron & Tibshirani, *An Introduction to the Bootstrap*, 1993, ch. 16):

1. Maximum-likelihood estimate ``theta_hat = (T_c, n_th)`` of the multinomial
   model (cells ``0..K-1`` plus the unobserved rest ``n >= K``), by Fisher
   scoring in ``(ln T_c, ln n_th)``.
2. Observed statistic: the deviance ``G^2 = 2 sum O ln(O / E)`` at ``theta_hat``.
3. ``B`` replicate count tables drawn from the multinomial law at
   ``theta_hat`` with the same shots per delay, each *refitted* the same way
   (so the replicates carry the same fitting effect as the data) and its
   deviance computed.
4. Bootstrap p-value ``(1 + #{G_rep >= G_obs}) / (B + 1)``; its resolution is
   ``1 / (B + 1)``.  For a tail probability finer than that resolution the
   replicate deviances are matched by a scaled chi-square ``a chi2_b`` (first
   two moments; Satterthwaite, *Biometrics Bulletin* 2, 1946) and its upper tail
   at ``G_obs`` is reported as well.

The check is flagged when both the bootstrap p-value sits at its resolution
(no replicate as extreme) and the moment-matched tail is below the misfit
threshold.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["population_goodness_of_fit", "population_cell_probabilities", "fit_populations_mle"]

#: replicate tables of the bootstrap (resolution 1/(B+1) of the p-value)
DEFAULT_REPLICATES = 200
_STEP = 1e-5  # central-difference step in (ln T_c, ln n_th)
_LOG_NTH_FLOOR = math.log(1e-9)
_TINY = 1e-300


def population_cell_probabilities(model, log_theta: np.ndarray) -> np.ndarray:
    """Cell probabilities of the population model, rest cell included.

    Parameters
    ----------
    model : PopulationDecay
        The population model (its ``populations((k, 2)) -> (k, m, K)``).
    log_theta : array, shape (k, 2)
        ``(ln T_c / s, ln n_th)``.

    Returns
    -------
    ndarray, shape (k, m, K + 1)
        Probabilities of photon numbers ``0..K-1`` and of ``n >= K`` (last cell),
        floored at 1e-300.
    """
    pops = model.populations(np.exp(log_theta))
    rest = np.clip(1.0 - pops.sum(axis=2, keepdims=True), 0.0, None)
    return np.maximum(np.concatenate([pops, rest], axis=2), _TINY)


def _log_likelihood(counts: np.ndarray, probs: np.ndarray) -> np.ndarray:
    return np.sum(counts * np.log(probs), axis=(1, 2))


def fit_populations_mle(model, counts: np.ndarray, start: np.ndarray,
                        iterations: int = 40) -> np.ndarray:
    """Multinomial maximum-likelihood ``(ln T_c, ln n_th)`` of many count tables at once.

    Fisher scoring (expected information ``sum_m N_m sum_c dp_c dp_c^T / p_c``)
    with step halving when the log-likelihood would fall; ``ln n_th`` is kept
    above ``ln 1e-9`` (a record without thermal signal has its MLE at zero).

    Parameters
    ----------
    model : PopulationDecay
    counts : array, shape (k, m, K + 1)
        Count tables, rest cell last.
    start : array, shape (2,)
        Starting point ``(ln T_c, ln n_th)`` shared by all tables.

    Returns
    -------
    ndarray, shape (k, 2)
    """
    k = counts.shape[0]
    shots = counts.sum(axis=2)  # (k, m)
    phi = np.tile(np.asarray(start, dtype=float), (k, 1))
    probs = population_cell_probabilities(model, phi)
    ll = _log_likelihood(counts, probs)
    eye = np.eye(2)
    for _ in range(iterations):
        grads = []
        for j in range(2):
            up = population_cell_probabilities(model, phi + _STEP * eye[j])
            down = population_cell_probabilities(model, phi - _STEP * eye[j])
            grads.append((up - down) / (2 * _STEP))
        score = np.stack([np.sum(counts / probs * g, axis=(1, 2)) for g in grads], axis=1)
        info = np.empty((k, 2, 2))
        for a in range(2):
            for b in range(a, 2):
                value = np.sum(shots[..., None] * grads[a] * grads[b] / probs, axis=(1, 2))
                info[:, a, b] = info[:, b, a] = value
        info += 1e-12 * np.abs(info).max(axis=(1, 2))[:, None, None] * eye
        step = np.linalg.solve(info, score[..., None])[..., 0]
        step = np.clip(step, -1.0, 1.0)
        scale = np.ones(k)
        for _ in range(8):
            trial = phi + scale[:, None] * step
            trial[:, 1] = np.maximum(trial[:, 1], _LOG_NTH_FLOOR)
            trial_probs = population_cell_probabilities(model, trial)
            trial_ll = _log_likelihood(counts, trial_probs)
            worse = ~(trial_ll >= ll - 1e-12)
            if not worse.any():
                break
            scale = np.where(worse, scale / 2, scale)
        accept = trial_ll >= ll - 1e-12
        moved = np.max(np.abs(np.where(accept[:, None], trial - phi, 0.0)))
        phi = np.where(accept[:, None], trial, phi)
        probs = np.where(accept[:, None, None], trial_probs, probs)
        ll = np.where(accept, trial_ll, ll)
        if moved < 1e-7:
            break
    return phi


def _deviance(counts: np.ndarray, probs: np.ndarray) -> np.ndarray:
    """``G^2 = 2 sum O ln(O / E)`` per table, shape (k,)."""
    expected = counts.sum(axis=2, keepdims=True) * probs
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(counts > 0, counts * np.log(counts / expected), 0.0)
    return 2.0 * terms.sum(axis=(1, 2))


def population_goodness_of_fit(model, theta: np.ndarray, rng: np.random.Generator, *,
                               replicates: int = DEFAULT_REPLICATES,
                               threshold: float = 1e-3) -> dict:
    """Parametric-bootstrap goodness of fit of population counts (module docstring).

    Parameters
    ----------
    model : PopulationDecay
        The fitted model; ``model.counts`` (m, K) holds the observed counts.
    theta : array, shape (2,)
        Starting point ``(T_c / s, n_th)`` for the maximum-likelihood search
        (e.g. the posterior median).
    rng : numpy.random.Generator
        Source of the replicate tables.
    replicates : int
        Number ``B`` of replicate tables.
    threshold : float
        Tail probability below which the check is flagged.

    Returns
    -------
    dict
        ``statistic`` (name), ``deviance``, ``replicate_mean``, ``replicate_sd``,
        ``p_value`` (bootstrap), ``p_value_resolution`` (1/(B+1)),
        ``scaled_chi2_p_value``, ``replicates``, ``mle`` (T_c in s, n_th),
        ``cells`` and ``sparse_cells`` (expected count < 1), ``flag`` (text or None).
    """
    observed = np.asarray(model.counts, dtype=float)
    m = observed.shape[0]
    counts = np.concatenate([observed, np.zeros((m, 1))], axis=1)[None]
    start = np.log(np.maximum(np.asarray(theta, dtype=float), [1e-300, 1e-9]))
    phi_hat = fit_populations_mle(model, counts, start)
    probs_hat = population_cell_probabilities(model, phi_hat)  # (1, m, C)
    g_obs = float(_deviance(counts, probs_hat)[0])
    shots = observed.sum(axis=1).astype(np.int64)
    p_norm = probs_hat[0] / probs_hat[0].sum(axis=1, keepdims=True)
    rep = rng.multinomial(shots, p_norm, size=(replicates, m)).astype(float)
    phi_rep = fit_populations_mle(model, rep, phi_hat[0])
    g_rep = _deviance(rep, population_cell_probabilities(model, phi_rep))
    g_rep = g_rep[np.isfinite(g_rep)]
    p_boot = (1 + int(np.sum(g_rep >= g_obs))) / (g_rep.size + 1)
    mean, var = float(g_rep.mean()), float(g_rep.var(ddof=1))
    from scipy import special

    if var > 0 and mean > 0:
        scale, dof = var / (2 * mean), 2 * mean * mean / var
        p_scaled = float(special.chdtrc(dof, g_obs / scale))
    else:
        p_scaled = math.nan
    expected = shots[:, None] * p_norm
    flag = None
    if p_boot <= 1.0 / (g_rep.size + 1) and p_scaled < threshold:
        flag = (f"population counts: deviance {g_obs:.1f} against replicates "
                f"{mean:.1f} +- {math.sqrt(var):.1f} (bootstrap p < {1 / (g_rep.size + 1):.2g}, "
                f"scaled chi-square tail {p_scaled:.1g}): the counts do not follow the rate "
                "equations")
    return {"statistic": "deviance G^2, calibrated by parametric bootstrap with refits",
            "deviance": g_obs, "replicate_mean": mean, "replicate_sd": math.sqrt(var),
            "p_value": p_boot, "p_value_resolution": 1.0 / (g_rep.size + 1),
            "scaled_chi2_p_value": p_scaled, "replicates": int(g_rep.size),
            "mle": {"lifetime_s": float(np.exp(phi_hat[0, 0])),
                    "n_thermal": float(np.exp(phi_hat[0, 1]))},
            "cells": int(expected.size), "sparse_cells": int(np.sum(expected < 1.0)),
            "flag": flag}
