"""Convergence diagnostics of Markov chains: autocorrelation time, R-hat, ESS.

Methods (published; implemented here from their descriptions):

* Integrated autocorrelation time with Sokal's automatic window, the
  autocorrelation function averaged over the walkers of an ensemble
  (Goodman & Weare, Comm. App. Math. Comp. Sci. 5, 65 (2010); A. Sokal,
  "Monte Carlo methods in statistical mechanics", 1996):
  ``tau = 1 + 2 sum_{t=1}^{M} rho(t)`` with the smallest window ``M >= c tau(M)``.
* Rank-normalized split R-hat, bulk and tail effective sample size
  (Vehtari, Gelman, Simpson, Carpenter, Buerkner, Bayesian Analysis 16, 667
  (2021)): chains are split in halves, draws replaced by normal scores of their
  pooled ranks ``z = Phi^-1((r - 3/8)/(S + 1/4))``; R-hat is the larger of the
  classic potential scale reduction of ``z`` and of the folded draws
  ``|x - median|``; ESS uses Geyer's initial monotone sequence on the
  multi-chain autocorrelation.

Shapes: an ensemble chain is ``(n_steps, n_walkers, ndim)``; the R-hat and ESS
functions take ``(n_chains, n_draws)`` for one scalar quantity (each walker of
an ensemble is treated as a chain).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

__all__ = [
    "autocorrelation",
    "integrated_time",
    "split_chains",
    "rank_normalize",
    "potential_scale_reduction",
    "split_rhat",
    "effective_sample_size",
    "ess_bulk",
    "ess_tail",
]


def _next_pow_two(n: int) -> int:
    return 1 << (int(n) - 1).bit_length()


def autocorrelation(x: ArrayLike) -> np.ndarray:
    """Normalised autocorrelation function along axis 0, averaged over the other axis.

    Parameters
    ----------
    x : array, shape (n,) or (n, m)
        One chain, or ``m`` chains of length ``n`` (e.g. one parameter of all walkers).

    Returns
    -------
    ndarray, shape (n,)
        ``rho(t)`` with ``rho(0) = 1`` (biased estimator ``sum x_i x_{i+t} / n``,
        computed with a zero-padded FFT), normalised per chain, then averaged over
        chains (as Goodman & Weare and emcee do); NaN if any chain is constant.
    """
    x = np.asarray(x, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    n = x.shape[0]
    f = np.fft.rfft(x - x.mean(axis=0), n=2 * _next_pow_two(n), axis=0)
    acov = np.fft.irfft(f * np.conjugate(f), axis=0)[:n]
    if not np.all(acov[0] > 0):
        return np.full(n, np.nan)
    return (acov / acov[0]).mean(axis=1)


def integrated_time(chain: ArrayLike, c: float = 5.0) -> np.ndarray:
    """Integrated autocorrelation time per parameter.

    Parameters
    ----------
    chain : array, shape (n_steps,), (n_steps, n_walkers) or (n_steps, n_walkers, ndim)
    c
        Window constant of Sokal's automatic window (5 is customary).

    Returns
    -------
    ndarray, shape (ndim,)
        ``tau`` in steps; NaN for a parameter that never moves.  No length check
        is made here: the caller compares ``n_steps`` with a multiple of ``tau``.
    """
    chain = np.asarray(chain, dtype=float)
    if chain.ndim == 1:
        chain = chain[:, None, None]
    elif chain.ndim == 2:
        chain = chain[:, :, None]
    out = np.empty(chain.shape[2])
    for d in range(chain.shape[2]):
        rho = autocorrelation(chain[:, :, d])
        if not np.isfinite(rho[0]):
            out[d] = np.nan
            continue
        taus = 2.0 * np.cumsum(rho) - 1.0
        window = np.arange(len(taus)) < c * taus
        m = int(np.argmin(window)) if not window.all() else len(taus) - 1
        out[d] = taus[m]
    return out


def split_chains(draws: ArrayLike) -> np.ndarray:
    """Split each chain in two halves (the middle draw dropped when odd): (m, n) -> (2m, n//2)."""
    draws = np.asarray(draws, dtype=float)
    if draws.ndim == 1:
        draws = draws[None, :]
    half = draws.shape[1] // 2
    return np.concatenate([draws[:, :half], draws[:, -half:]], axis=0)


def average_ranks(values: ArrayLike) -> np.ndarray:
    """1-based ranks of all values pooled, ties sharing their average rank (the
    ``method="average"`` of ``scipy.stats.rankdata``), same shape as ``values``.

    Written with numpy so that the diagnostics do not import ``scipy.stats``
    (about a second of start-up for every fit)."""
    values = np.asarray(values, dtype=float)
    flat = values.ravel()
    order = np.argsort(flat, kind="mergesort")
    ordered = flat[order]
    first = np.concatenate(([True], ordered[1:] != ordered[:-1]))
    starts = np.flatnonzero(first)
    ends = np.append(starts[1:], flat.size)
    ranks = np.empty(flat.size)
    ranks[order] = ((starts + 1 + ends) / 2.0)[np.cumsum(first) - 1]
    return ranks.reshape(values.shape)


def rank_normalize(draws: ArrayLike) -> np.ndarray:
    """Normal scores of pooled ranks, ``Phi^-1((r - 3/8) / (S + 1/4))`` (Blom), same shape."""
    draws = np.asarray(draws, dtype=float)
    return special.ndtri((average_ranks(draws) - 0.375) / (draws.size + 0.25))


def potential_scale_reduction(draws: ArrayLike) -> float:
    """Classic R-hat of (already split) chains ``(m, n)``:
    ``sqrt(((n-1)/n W + B/n) / W)``; NaN if the within-chain variance is 0."""
    draws = np.asarray(draws, dtype=float)
    n = draws.shape[1]
    w = draws.var(axis=1, ddof=1).mean()
    b_over_n = draws.mean(axis=1).var(ddof=1)
    if not w > 0:
        return float("nan")
    return float(np.sqrt(((n - 1) / n * w + b_over_n) / w))


def split_rhat(draws: ArrayLike) -> float:
    """Rank-normalized split R-hat of chains ``(m, n)`` (Vehtari et al. 2021, eqs. 3-4).

    The larger of the bulk value (normal scores of the draws) and the tail value
    (normal scores of ``|x - median(x)|``).  Values above 1.01 flag chains that
    have not mixed.
    """
    split = split_chains(draws)
    bulk = potential_scale_reduction(rank_normalize(split))
    folded = np.abs(split - np.median(split))
    tail = potential_scale_reduction(rank_normalize(folded))
    return float(np.nanmax([bulk, tail])) if np.isfinite([bulk, tail]).any() else float("nan")


def effective_sample_size(draws: ArrayLike) -> float:
    """Multi-chain effective sample size of chains ``(m, n)`` (no splitting here).

    ``ESS = m n / tau`` with ``tau = -1 + 2 sum_t rho_t`` over Geyer's initial
    monotone sequence of paired sums, where ``rho_t = 1 - (W - mean_j acov_j(t)) / var+``
    combines within- and between-chain variance (Vehtari et al. 2021, sec. 3.2).
    """
    draws = np.asarray(draws, dtype=float)
    if draws.ndim == 1:
        draws = draws[None, :]
    m, n = draws.shape
    if n < 4:
        return float("nan")
    centred = draws - draws.mean(axis=1, keepdims=True)
    f = np.fft.rfft(centred, n=2 * _next_pow_two(n), axis=1)
    acov = np.fft.irfft(f * np.conjugate(f), axis=1)[:, :n] / n  # biased, per chain
    mean_acov = acov.mean(axis=0)
    w = mean_acov[0] * n / (n - 1)
    var_plus = mean_acov[0]
    if m > 1:
        var_plus = var_plus + draws.mean(axis=1).var(ddof=1)
    if not var_plus > 0:
        return float("nan")
    rho = 1.0 - (w - mean_acov) / var_plus
    rho[0] = 1.0
    # Geyer: keep pairs (rho_{2k} + rho_{2k+1}) while positive, then enforce monotone decrease
    n_pairs = (n - 1) // 2
    pairs = rho[: 2 * n_pairs].reshape(n_pairs, 2).sum(axis=1)
    negative = np.nonzero(pairs <= 0)[0]
    k = int(negative[0]) if negative.size else n_pairs
    pairs = np.minimum.accumulate(pairs[:k]) if k > 0 else pairs[:0]
    tau = -1.0 + 2.0 * pairs.sum()
    tau = max(tau, 1.0 / np.log10(m * n))  # Stan's guard against absurdly large ESS
    return float(m * n / tau)


def ess_bulk(draws: ArrayLike) -> float:
    """Bulk ESS: ESS of the rank-normalized split chains (Vehtari et al. 2021)."""
    return effective_sample_size(rank_normalize(split_chains(draws)))


def ess_tail(draws: ArrayLike, probs: tuple[float, float] = (0.05, 0.95)) -> float:
    """Tail ESS: the smaller ESS of the indicators ``x <= q_5%`` and ``x <= q_95%`` on split
    chains (Vehtari et al. 2021)."""
    split = split_chains(draws)
    values = []
    for p in probs:
        indicator = (split <= np.quantile(split, p)).astype(float)
        values.append(effective_sample_size(indicator))
    return float(np.nanmin(values)) if np.isfinite(values).any() else float("nan")
