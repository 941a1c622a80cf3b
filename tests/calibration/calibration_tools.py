"""Shared pieces of the calibration suite: SBC ranks and their tests, exact jump posteriors.

Simulation-based calibration (Talts, Betancourt, Simpson, Vehtari & Gelman,
arXiv 1804.06788, 2018): draw ``theta ~ prior``, simulate data, draw ``L``
posterior samples; if the posterior is right, the rank of ``theta`` among the
``L`` draws is uniform on ``0..L``.  Two tests of that uniformity:

* Pearson's chi-square on ``B`` equal bins of ranks (``L + 1`` divisible by
  ``B``, so the bins are exactly equally likely);
* a test aimed at interval widths: the normal scores ``z = Phi^{-1}(u)`` with
  ``u = (rank + 1/2) / (L + 1)`` are close to N(0, 1) under calibration;
  posterior draws spread ``f`` times too wide shrink them by about ``f``.  The
  statistic is ``mean(z^2)``; its two-sided p-value comes from 20,000
  simulated sets of uniform ranks (exact for the discrete ranks, fixed seed), and
  ``scale = sqrt(mean(z^2) / E0[z^2])`` estimates how many times too narrow the
  posterior is (0.5: twice too wide; 2: twice too narrow, up to the cap
  ``Phi^{-1}(1 - 1/(2(L+1)))`` of the scores).

Exact posteriors of exact jump records (conjugate Gamma laws; Gelman et al.,
*Bayesian Data Analysis*, 3rd ed., ch. 2): the up and down rate coefficients
``a = kappa n_th`` and ``b = kappa (1 + n_th)`` have the likelihood
``a^U e^{-a A_1} b^D e^{-b A_0}``, so Gamma priors give Gamma posteriors, and
a restriction ``b > a`` (kappa > 0) of the prior restricts the posterior alike.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

#: significance of every uniformity test (fixed seeds: each test is deterministic)
ALPHA = 1e-3


def ranks(truth: np.ndarray, draws: list[np.ndarray]) -> np.ndarray:
    """Rank of each true value among its posterior draws: (M, p) integers in 0..L."""
    return np.array([np.sum(d < t[None, :], axis=0) for t, d in zip(truth, draws, strict=True)])


def _null_scale(k: int, m: int, sets: int) -> np.ndarray:
    """Null distribution of mean(z^2) for m uniform ranks in 0..k-1 (seeded, chunked)."""
    key = (k, m, sets)
    if key not in _NULL:
        scores_sq = stats.norm.ppf((np.arange(k) + 0.5) / k) ** 2
        rng = np.random.default_rng(0)
        chunk = max(1, 2_000_000 // m)
        parts = [scores_sq[rng.integers(0, k, (min(chunk, sets - i), m))].mean(axis=1)
                 for i in range(0, sets, chunk)]
        _NULL[key] = np.sort(np.concatenate(parts))
    return _NULL[key]


_NULL: dict = {}


def uniformity(rank: np.ndarray, n_draws: int, bins: int,
               null_sets: int = 20_000) -> dict[str, np.ndarray]:
    """Chi-square p-value, scale p-value and scale estimate of each column of ``rank``
    (ranks in 0..n_draws); see the module docstring."""
    k = n_draws + 1
    if k % bins:
        raise ValueError("L + 1 must be divisible by the number of bins")
    rank = np.atleast_2d(rank)
    m = rank.shape[0]
    counts = np.stack([np.bincount(r // (k // bins), minlength=bins) for r in rank.T])
    p_chi2 = stats.chisquare(counts, axis=1).pvalue
    scores_sq = stats.norm.ppf((np.arange(k) + 0.5) / k) ** 2  # z^2 of each possible rank
    observed = scores_sq[rank].mean(axis=0)
    null = _null_scale(k, m, null_sets)
    lower = (np.searchsorted(null, observed, side="right") + 1) / (null_sets + 1)
    upper = (null_sets - np.searchsorted(null, observed, side="left") + 1) / (null_sets + 1)
    p_scale = np.minimum(1.0, 2 * np.minimum(lower, upper))
    return {"p_chi2": p_chi2, "p_scale": p_scale, "scale": np.sqrt(observed / scores_sq.mean()),
            "counts": counts}


def calibrated(result: dict[str, np.ndarray], alpha: float = ALPHA) -> bool:
    """Both tests pass for every parameter at level ``alpha``."""
    return bool(np.all(result["p_chi2"] > alpha) and np.all(result["p_scale"] > alpha))


def widen(draws: np.ndarray, factor: float) -> np.ndarray:
    """Draws scaled by ``factor`` about their mean (a posterior sd off by that factor)."""
    mean = draws.mean(axis=0, keepdims=True)
    return mean + factor * (draws - mean)


#: negative controls: every posterior spread this many times too wide or too narrow
CONTROL_FACTORS = (2.0, 0.5)


def control_results(truth: np.ndarray, draws: list[np.ndarray], n_draws: int,
                    bins: int) -> dict[float, dict[str, np.ndarray]]:
    """:func:`uniformity` of the ranks with the draws :func:`widen`-ed by each of
    :data:`CONTROL_FACTORS` (a posterior sd off by a factor 2 either way)."""
    return {factor: uniformity(ranks(truth, [widen(d, factor) for d in draws]), n_draws, bins)
            for factor in CONTROL_FACTORS}


def check_sbc(truth: np.ndarray, draws: list[np.ndarray], n_draws: int, bins: int, *,
              controls: bool = True, label: str | None = None) -> dict[str, np.ndarray]:
    """Assert that the ranks of ``truth`` among ``draws`` pass both uniformity tests and,
    with ``controls``, that each negative control (:func:`control_results`) fails them;
    return the uniformity result (printed first under ``label`` when given)."""
    result = uniformity(ranks(truth, draws), n_draws, bins=bins)
    if label is not None:
        print(f"SBC {label}:", result)
    assert calibrated(result), result
    if controls:
        for factor, wrong in control_results(truth, draws, n_draws, bins).items():
            assert not calibrated(wrong), (factor, wrong)
    return result


def thin_to(draws: np.ndarray, n: int) -> np.ndarray:
    """``n`` draws evenly spaced through a chain (far apart: nearly independent)."""
    idx = np.linspace(0, draws.shape[0] - 1, n).round().astype(int)
    return draws[idx]


def gamma_rate_draws(rng: np.random.Generator, shape_a: float, rate_a: float, shape_b: float,
                     rate_b: float, size: int, min_ratio: float = 1.0) -> np.ndarray:
    """Draws of (a, b) from Gamma(shape_a, rate_a) x Gamma(shape_b, rate_b) restricted to
    ``b > min_ratio * a`` (by rejection), shape (size, 2).  ``min_ratio = 1`` is kappa > 0;
    ``min_ratio = 2`` is n_th < 1."""
    out = np.empty((0, 2))
    while out.shape[0] < size:
        a = rng.gamma(shape_a, 1 / rate_a, 2 * size)
        b = rng.gamma(shape_b, 1 / rate_b, 2 * size)
        keep = b > min_ratio * a
        out = np.vstack([out, np.column_stack([a[keep], b[keep]])])
    return out[:size]


def lifetime_and_n(ab: np.ndarray) -> np.ndarray:
    """(a, b) -> (T_c, n_th) = (1/(b - a), a/(b - a))."""
    kappa = ab[:, 1] - ab[:, 0]
    return np.column_stack([1 / kappa, ab[:, 0] / kappa])


def record_statistics(lifetime: float, n_thermal: float, duration: float,
                      rng: np.random.Generator):
    """Sufficient statistics of a simulated stationary exact record (cavchar.simulate)."""
    from cavchar.models.jumps import jump_statistics
    from cavchar.simulate import simulate_jump_record

    rec = simulate_jump_record(lifetime, n_thermal, duration, seed=rng)
    return jump_statistics(rec.time, rec.photons, rec.end_time, rec.segment)


def log_uniform_posterior(stats_, rng: np.random.Generator, size: int):
    """Weighted draws of the exact posterior under log-uniform priors on T_c and n_th.

    In (a, b) that prior is ``1/(a (b - a))`` (Jacobian ``(b - a)^-3``); proposals from
    the posterior under ``1/(a b)``, i.e. Gamma(U, A_1) x Gamma(D, A_0) on b > a, get
    the importance weight ``b / (b - a)`` (bounded prior boxes far from the data are
    immaterial).  Returns (T_c, n_th) draws (size, 2) and normalized weights.
    """
    ab = gamma_rate_draws(rng, stats_.up, stats_.time_n_plus_1, stats_.down, stats_.time_n, size)
    weight = ab[:, 1] / (ab[:, 1] - ab[:, 0])
    return lifetime_and_n(ab), weight / weight.sum()


def weighted_quantiles(values: np.ndarray, weights: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Quantiles ``q`` of a weighted sample (inverse of the weighted empirical CDF)."""
    order = np.argsort(values)
    cdf = np.cumsum(weights[order])
    return values[order][np.searchsorted(cdf, q * cdf[-1])]


def grid_posterior_quantiles(stats_, q: np.ndarray, points: int = 700) -> np.ndarray:
    """Marginal posterior quantiles of (T_c, n_th) under fit_jumps' default priors, on a grid.

    The default priors are log-uniform on 1 us .. 1000 s and 1e-6 .. 100 (cavchar.fits.jumps),
    i.e. flat in (ln T_c, ln n_th); the posterior is evaluated on a ``points`` x ``points``
    grid over that box (spacing 0.03 e-folds: fine for records of up to a few hundred
    jumps, whose posterior widths exceed 0.1 e-fold) with the exact likelihood, and each
    marginal CDF is interpolated linearly.  Works for records without any jump, where
    the posterior is the prior's business.  Returns (2, len(q)).
    """
    from cavchar.fits.jumps import DEFAULT_LIFETIME_PRIOR as PT
    from cavchar.fits.jumps import DEFAULT_N_THERMAL_PRIOR as PN
    from cavchar.models.jumps import exact_log_likelihood

    lt = np.linspace(np.log(PT.low), np.log(PT.high), points)
    ln = np.linspace(np.log(PN.low), np.log(PN.high), points)
    gt, gn = np.meshgrid(lt, ln, indexing="ij")
    logp = exact_log_likelihood(stats_, np.exp(gt).ravel(), np.exp(gn).ravel()).reshape(gt.shape)
    p = np.exp(logp - logp.max())
    out = np.empty((2, len(q)))
    for k, (axis, grid) in enumerate(((1, lt), (0, ln))):
        marginal = p.sum(axis=axis)
        cdf = (np.cumsum(marginal) - 0.5 * marginal) / marginal.sum()  # CDF at cell centres
        out[k] = np.exp(np.interp(q, cdf, grid))
    return out
