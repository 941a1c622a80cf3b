"""Importance sampling from a Laplace proposal with Pareto smoothing (PSIS), for every fit.

Steps of :func:`sample_importance`:

1. The MAP and the local covariance ``Sigma = (-H)^-1`` in sampler coordinates
   ``u`` (``ln x`` for log-scale parameters), exactly as the ensemble sampler
   starts (:mod:`cavchar.inference.start`).
1a. A parameter whose MAP lies within :data:`NEAR_BOUND_SD` local standard
   deviations of a bound of its prior (a readout error at 0, a lifetime against
   its upper bound) is not Gaussian there, and a Laplace proposal in ``u``
   wastes draws outside the support and misses the shape (k-hat above the
   limit).  Such coordinates are mapped to an unbounded ``z``: ``z =
   logit((u - a)/(b - a))`` for a support ``[a, b]``, ``z = ln(u - a)`` or
   ``ln(b - u)`` for a one-sided one; the target in ``z`` carries the Jacobian
   ``|du/dz|``, the MAP and local covariance are found again in ``z`` and the
   proposal of step 2 lives there (the usual change of variables of bounded
   parameters, e.g. Gelman et al., *Bayesian Data Analysis*, 3rd ed., sect.
   13.3 and Stan Reference Manual, "Constraint transforms").  Draws are mapped
   back, so the weights and every output are those of the posterior in ``u``.
2. Proposal ``q(u)``: a multivariate Student-t with ``df`` degrees of freedom
   (or a Gaussian, ``df = inf``), centre the MAP, scale matrix ``Sigma``
   (the Laplace approximation with heavier tails).
3. ``S`` proposal draws, evaluated in batches by the model's own batched
   log-likelihood: log ratios ``r_s = ln p(u_s | data) - ln q(u_s)`` (up to a constant).
4. Pareto smoothing (Vehtari, Simpson, Gelman, Yao & Gabry, "Pareto smoothed
   importance sampling", JMLR 25(72), 2024): a generalized Pareto distribution
   is fitted to the ``M = min(S/5, 3 sqrt(S))`` largest ratios (estimator of
   Zhang & Stephens, Technometrics 51, 316 (2009), with the paper's weakly
   informative prior on the shape), those weights are replaced by the fitted
   distribution's expected order statistics, truncated at the largest raw weight.
   The fitted shape is the diagnostic ``k-hat``: the estimate is reliable
   when ``k-hat < min(1 - 1/log10(S), 0.7)``.
5. If ``k-hat`` is too large, one adaptation: the proposal is moved to the
   importance-weighted mean and covariance and drawn again.  If the weights'
   effective sample size is below the target, more draws are added (up to
   ``max_draws``).
6. Equal-weight posterior draws by systematic resampling with the smoothed
   weights; the effective sample sizes (of the weights, and per parameter for
   the mean and the 5%/95% quantiles) are recorded in the diagnostics.
7. If the approximation stays poor (``k-hat`` above the limit or the effective
   sample size below the target), the ensemble sampler
   (:func:`cavchar.inference.sampler.sample_posterior`) runs instead and the
   diagnostics say so (``diagnostics["sampler"]``, ``diagnostics["importance"]``).

The result is a :class:`~cavchar.inference.sampler.PosteriorRun` either way, so
every fit kind can use :func:`sample_posterior_auto` in place of the ensemble sampler.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import asdict, dataclass, replace
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from cavchar.errors import InputError
from cavchar.inference.sampler import (
    LogLikelihood,
    PosteriorRun,
    SamplerSettings,
    _Posterior,
    _resolve_seed,
    refuse_point_posterior,
    sample_posterior,
)
from cavchar.inference.start import (
    find_map,
    local_covariance,
    prior_quantiles_68,
    support_in_sampler,
)
from cavchar.parameters import ParameterSpace, ParameterSpec

__all__ = ["ImportanceSettings", "psis_smooth", "fit_generalized_pareto", "khat_limit",
           "sample_importance", "sample_posterior_auto", "SAMPLERS"]

#: sampler choices of :func:`sample_posterior_auto`
SAMPLERS = ("importance", "ensemble")

#: a MAP within this many local standard deviations of a prior bound moves that
#: coordinate to the unbounded scale (module docstring, step 1a); a Gaussian cut
#: 3 sd from its centre loses 0.13% of its mass, which a proposal in ``u`` tolerates
NEAR_BOUND_SD = 3.0


@dataclass(frozen=True)
class ImportanceSettings:
    """Settings of :func:`sample_importance` (stored in the diagnostics).

    Parameters
    ----------
    n_draws
        Proposal draws in the first round.
    max_draws
        Most proposal draws in all (more are drawn while the effective sample
        size is below ``target_ess``).
    df
        Degrees of freedom of the Student-t proposal (``math.inf``: Gaussian).
        10 by measurement: on the benchmark probe record (10^4 probes, four
        parameters, two of them on a prior bound) df 10 gave an effective sample
        size of 0.53 per draw (k-hat 0.41), df 5 only 0.11 (k-hat 0.51): heavier
        tails spend most draws where the posterior is negligible, and there the
        probe likelihood is dearest (many photon-number levels at large n_th).

    target_ess
        Smallest effective sample size of the smoothed weights (Kish,
        ``(sum w)^2 / sum w^2``) accepted.
    khat_max
        Upper limit of the Pareto shape; the limit used is
        ``min(khat_max, 1 - 1/log10(S))`` (Vehtari et al. 2024, sect. 3).
    adapt
        Rounds of moving the proposal to the weighted moments when k-hat is too large.
    fallback
        Run the ensemble sampler when the approximation stays poor
        (else raise :class:`cavchar.errors.ConvergenceError` unless unconverged runs are allowed).
    batch
        Parameter sets per call of the log-likelihood.
    """

    n_draws: int = 4000
    max_draws: int = 16000
    df: float = 10.0
    target_ess: float = 1000.0
    khat_max: float = 0.7
    adapt: int = 1
    fallback: bool = True
    batch: int = 1024

    def __post_init__(self) -> None:
        if int(self.n_draws) != self.n_draws or self.n_draws < 100:
            raise InputError(f"importance sampling needs at least 100 draws, got {self.n_draws}")
        if self.max_draws < self.n_draws:
            raise InputError("max_draws must be at least n_draws")
        if not self.df > 2:
            raise InputError(f"the proposal's degrees of freedom must exceed 2, got {self.df}")
        if not 0 < self.khat_max <= 1:
            raise InputError(f"khat_max must be in (0, 1], got {self.khat_max}")
        if not self.target_ess > 0:
            raise InputError(f"target_ess must be positive, got {self.target_ess}")

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form of the settings (an infinite ``df`` as None)."""
        out = asdict(self)
        out["df"] = None if math.isinf(self.df) else float(self.df)
        return out


# ------------------------------------------------------------------ Pareto smoothing
def fit_generalized_pareto(x: ArrayLike) -> tuple[float, float]:
    """Shape ``k`` and scale ``sigma`` of a generalized Pareto fit to exceedances ``x >= 0``.

    Zhang & Stephens (2009) empirical-Bayes estimator: ``m = 30 + floor(sqrt(n))``
    candidates ``theta_j = 1/x_(n) + (1 - sqrt(m/(j - 1/2))) / (3 x_(q))`` (``x_(q)`` the
    first quartile), each with the profile log-likelihood
    ``l(theta) = n (ln(-theta/k) - k - 1)``, ``k(theta) = mean ln(1 - theta x)``;
    ``theta`` is their posterior mean, then ``k = mean ln(1 - theta x)``,
    ``sigma = -k/theta``.  The shape is then pulled towards 0.5 with the weakly
    informative prior of Vehtari et al. (2024): ``(n k + 5) / (n + 10)``.

    Distribution: ``F(x) = 1 - (1 + k x / sigma)^(-1/k)`` (``k > 0``: heavy tail).
    """
    x = np.sort(np.asarray(x, dtype=float))
    n = x.size
    if n < 5 or not x[-1] > 0:
        raise ValueError("need at least 5 exceedances with a positive largest one")
    m = 30 + int(math.floor(math.sqrt(n)))
    quartile = x[max(0, int(math.floor(n / 4 + 0.5)) - 1)]
    if not quartile > 0:
        quartile = x[x > 0][0]
    j = np.arange(1, m + 1, dtype=float)
    theta = 1.0 / x[-1] + (1.0 - np.sqrt(m / (j - 0.5))) / (3.0 * quartile)
    k = np.mean(np.log1p(-theta[:, None] * x[None, :]), axis=1)
    profile = n * (np.log(-theta / k) - k - 1.0)
    with np.errstate(over="ignore"):
        weights = 1.0 / np.sum(np.exp(profile[None, :] - profile[:, None]), axis=1)
    keep = weights >= 10 * np.finfo(float).eps
    weights, theta = weights[keep], theta[keep]
    theta_hat = float(np.sum(theta * weights) / np.sum(weights))
    k_hat = float(np.mean(np.log1p(-theta_hat * x)))
    sigma = -k_hat / theta_hat
    k_hat = (n * k_hat + 10 * 0.5) / (n + 10)
    return k_hat, float(sigma)


def _gpd_quantile(p: np.ndarray, k: float, sigma: float) -> np.ndarray:
    if abs(k) < 1e-12:
        return -sigma * np.log1p(-p)
    return sigma / k * np.expm1(-k * np.log1p(-p))


def khat_limit(n_draws: int, khat_max: float = 0.7) -> float:
    """Largest reliable Pareto shape for ``n_draws`` draws: ``min(khat_max, 1 - 1/log10 S)``."""
    return min(khat_max, 1.0 - 1.0 / math.log10(max(n_draws, 11)))


def psis_smooth(log_ratios: ArrayLike) -> tuple[np.ndarray, float]:
    """Pareto-smoothed log weights (normalized, ``logsumexp = 0``) and ``k-hat``.

    ``log_ratios`` (S,): ``ln p - ln q`` up to a constant; ``-inf`` (zero
    target density) allowed.  The tail is the ``M = ceil(min(S/5, 3 sqrt(S)))``
    largest ratios (Vehtari et al. 2024, sect. 3); ``k-hat`` is ``-inf`` when
    the tail has no spread (all weights equal there).
    """
    lr = np.asarray(log_ratios, dtype=float).copy()
    if lr.ndim != 1 or lr.size < 10:
        raise ValueError("need a one-dimensional array of at least 10 log ratios")
    finite = np.isfinite(lr)
    if not finite.any():
        raise ValueError("every log ratio is -inf (no proposal draw has posterior density)")
    lr -= lr[finite].max()
    s = int(finite.sum())
    m = int(math.ceil(min(0.2 * s, 3.0 * math.sqrt(s))))
    k_hat = -math.inf
    if m >= 5 and s > m + 1:
        order = np.argsort(lr)  # -inf first
        tail = order[-m:]
        cutoff = lr[order[-m - 1]]
        w_tail = np.exp(lr[tail])
        exceed = w_tail - math.exp(cutoff)
        if exceed[-1] > 0 and np.ptp(exceed) > 0:
            k_hat, sigma = fit_generalized_pareto(exceed)
            if math.isfinite(k_hat):
                p = (np.arange(1, m + 1) - 0.5) / m
                smoothed = math.exp(cutoff) + _gpd_quantile(p, k_hat, sigma)
                smoothed = np.minimum(smoothed, 1.0)  # truncate at the largest raw weight
                lr[tail] = np.log(smoothed)
    top = lr[np.isfinite(lr)].max()
    log_norm = top + math.log(np.sum(np.exp(lr[np.isfinite(lr)] - top)))
    return lr - log_norm, float(k_hat)


def _kish_ess(w: np.ndarray) -> float:
    return float(1.0 / np.sum(w**2))


def _function_ess(w: np.ndarray, h: np.ndarray) -> float:
    """Effective sample size of the self-normalized estimate of ``E[h]``:
    ``Var(h) / sum w^2 (h - E h)^2`` (delta method; ``w`` normalized)."""
    mean = float(np.sum(w * h))
    var = float(np.sum(w * (h - mean) ** 2))
    err = float(np.sum(w**2 * (h - mean) ** 2))
    if not err > 0:
        return float(np.count_nonzero(w))
    return var / err


def _weighted_quantile(x: np.ndarray, w: np.ndarray, q: float) -> float:
    order = np.argsort(x)
    c = np.cumsum(w[order])
    return float(x[order][min(np.searchsorted(c, q * c[-1]), x.size - 1)])


# ------------------------------------------------------------------ proposal
class _Proposal:
    """Multivariate Student-t (or Gaussian for ``df = inf``) with centre ``mu``, scale ``cov``."""

    def __init__(self, mu: np.ndarray, cov: np.ndarray, df: float) -> None:
        self.mu = np.asarray(mu, dtype=float)
        self.cov = 0.5 * (cov + cov.T)
        self.df = float(df)
        self.chol = np.linalg.cholesky(self.cov)
        self.log_det = 2.0 * float(np.sum(np.log(np.diag(self.chol))))

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        d = self.mu.size
        z = rng.standard_normal((size, d)) @ self.chol.T
        if math.isfinite(self.df):
            z /= np.sqrt(rng.chisquare(self.df, size) / self.df)[:, None]
        return self.mu + z

    def logpdf(self, u: np.ndarray) -> np.ndarray:
        from scipy.linalg import solve_triangular
        from scipy.special import gammaln

        d = self.mu.size
        y = solve_triangular(self.chol, (u - self.mu).T, lower=True)
        maha = np.sum(y**2, axis=0)
        if not math.isfinite(self.df):
            return -0.5 * (maha + self.log_det + d * math.log(2 * math.pi))
        v = self.df
        return (gammaln(0.5 * (v + d)) - gammaln(0.5 * v) - 0.5 * d * math.log(v * math.pi)
                - 0.5 * self.log_det - 0.5 * (v + d) * np.log1p(maha / v))


def _evaluate(logpost: _Posterior, u: np.ndarray, batch: int) -> np.ndarray:
    return np.concatenate([logpost(u[i:i + batch]) for i in range(0, u.shape[0], batch)])


def _systematic_resample(w: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    positions = (rng.random() + np.arange(n)) / n
    index = np.searchsorted(np.cumsum(w), positions)
    index = np.minimum(index, w.size - 1)
    return rng.permutation(index)


# ------------------------------------------------------------------ bounded axes
class _UnboundedAxes:
    """Map chosen sampler coordinates ``u`` with a bounded support to unbounded ``z``.

    ``lo``, ``hi``: support per coordinate in ``u`` (``±inf`` where open);
    ``axes``: boolean mask of the coordinates mapped (module docstring, step 1a):
    both bounds finite ``u = lo + (hi - lo) sigma(z)``; only ``lo`` ``u = lo + e^z``;
    only ``hi`` ``u = hi - e^z``.  Other coordinates pass unchanged.
    """

    def __init__(self, lo: np.ndarray, hi: np.ndarray, axes: np.ndarray) -> None:
        self.axes = np.asarray(axes, dtype=bool)
        self.lo, self.hi = np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
        finite_lo, finite_hi = np.isfinite(self.lo), np.isfinite(self.hi)
        self.both = self.axes & finite_lo & finite_hi
        self.lower = self.axes & finite_lo & ~finite_hi
        self.upper = self.axes & ~finite_lo & finite_hi

    def kinds(self, names: Sequence[str]) -> dict[str, str]:
        """``{name: "logit" | "log above lower bound" | "log below upper bound"}``."""
        out = {}
        for i, name in enumerate(names):
            if self.both[i]:
                out[name] = "logit"
            elif self.lower[i]:
                out[name] = "log above lower bound"
            elif self.upper[i]:
                out[name] = "log below upper bound"
        return out

    def to_z(self, u: np.ndarray) -> np.ndarray:
        """``u (..., ndim) -> z``; ``±inf`` on a bound."""
        u = np.asarray(u, dtype=float)
        z = u.copy()
        lo, hi = self.lo, self.hi
        with np.errstate(divide="ignore", invalid="ignore"):
            b, a, c = self.both, self.lower, self.upper
            z[..., b] = np.log(u[..., b] - lo[b]) - np.log(hi[b] - u[..., b])
            z[..., a] = np.log(u[..., a] - lo[a])
            z[..., c] = np.log(hi[c] - u[..., c])
        return z

    def to_u(self, z: np.ndarray) -> np.ndarray:
        """``z (..., ndim) -> u``."""
        z = np.asarray(z, dtype=float)
        u = z.copy()
        lo, hi = self.lo, self.hi
        b, a, c = self.both, self.lower, self.upper
        with np.errstate(over="ignore"):
            u[..., b] = lo[b] + (hi[b] - lo[b]) * (0.5 * (1.0 + np.tanh(0.5 * z[..., b])))
            u[..., a] = lo[a] + np.exp(z[..., a])
            u[..., c] = hi[c] - np.exp(z[..., c])
        return u

    def log_jacobian(self, z: np.ndarray) -> np.ndarray:
        """``sum_i ln |du_i/dz_i|``, shape ``(...,)``.

        Logit axes: ``ln(hi - lo) - ln(1 + e^-z) - ln(1 + e^z)``; log axes: ``z``.
        """
        z = np.asarray(z, dtype=float)
        b, one_sided = self.both, self.lower | self.upper
        zb = z[..., b]
        total = np.sum(np.log(self.hi[b] - self.lo[b]) - np.logaddexp(0.0, -zb)
                       - np.logaddexp(0.0, zb), axis=-1)
        return total + np.sum(z[..., one_sided], axis=-1)


def _near_bound(space: ParameterSpace, u_map: np.ndarray, sd: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Support ``(lo, hi)`` in sampler coordinates and the mask of MAPs near a bound."""
    lo, hi = support_in_sampler(space)
    distance = np.minimum(u_map - lo, hi - u_map)
    near = np.isfinite(distance) & ~(distance > NEAR_BOUND_SD * sd)
    return lo, hi, near


class _PosteriorIn:
    """Log posterior in the proposal's coordinates ``z``: ``ln p(u(z)) + ln |du/dz|``."""

    def __init__(self, logpost: _Posterior, axes: _UnboundedAxes) -> None:
        self.logpost, self.axes = logpost, axes

    def __call__(self, z: np.ndarray) -> np.ndarray:
        z = np.atleast_2d(z)
        with np.errstate(invalid="ignore"):
            out = self.logpost(self.axes.to_u(z)) + self.axes.log_jacobian(z)
        return np.where(np.isnan(out), -np.inf, out)


def _unbounded_start(logpost: _Posterior, space: ParameterSpace, u_map: np.ndarray,
                     cov: np.ndarray, rng: np.random.Generator):
    """MAP and local covariance in unbounded coordinates for MAPs near a prior bound.

    Returns ``(axes, z_map, lpz_map, cov_z, method)``, or ``None`` when no MAP is
    near a bound (or the unbounded coordinates give no finite start).
    """
    sd = np.sqrt(np.diag(cov))
    lo, hi, near = _near_bound(space, u_map, sd)
    if not near.any():
        return None
    axes = _UnboundedAxes(lo, hi, near)
    # start just inside the support: half a local sd (at most a tenth of the range)
    inset = np.minimum(0.5 * sd, 0.1 * np.where(np.isfinite(hi - lo), hi - lo, np.inf))
    u_start = np.clip(u_map, lo + inset, hi - inset)
    z0 = axes.to_z(u_start)
    target = _PosteriorIn(logpost, axes)
    if not (np.isfinite(z0).all() and np.isfinite(target(z0[None])[0])):
        return None
    q16, q84 = axes.to_z(prior_quantiles_68(space))
    with np.errstate(invalid="ignore"):
        widths = q84 - q16
    # mapped axes are open; the others keep their support (z = u there)
    support_z = (np.where(near, -np.inf, lo), np.where(near, np.inf, hi))
    z_map, lpz_map, _info = find_map(target, z0, space, rng, widths=widths, support=support_z)
    cov_z, method = local_covariance(target, z_map, lpz_map, space, widths=widths)
    return axes, z_map, lpz_map, cov_z, method


# ------------------------------------------------------------------ sampler
def sample_importance(
    log_likelihood: LogLikelihood,
    specs: Sequence[ParameterSpec],
    initial_guess: ArrayLike,
    settings: SamplerSettings | None = None,
    importance: ImportanceSettings | None = None,
) -> PosteriorRun:
    """Posterior draws by Pareto-smoothed importance sampling from a Laplace proposal.

    Same arguments and result as :func:`cavchar.inference.sampler.sample_posterior`
    (``settings`` gives the seed and ``allow_unconverged``; ``importance`` the
    proposal), plus a fallback to it (module docstring).  ``draws`` are equal-weight
    (resampled, so some repeat); ``trace`` is ``None``.  Diagnostics: ``sampler``
    (``"importance"`` or ``"ensemble (fallback: ...)"``), ``importance``
    (k-hat, its limit, the weights' ESS, rounds, draws), ``ess_bulk`` (per
    parameter, ESS of the posterior mean in sampler coordinates, e.g. of ``ln T_c``),
    ``ess_tail`` (smaller ESS of the 5% and 95% quantile indicators), ``n_draws``,
    ``converged``, ``failed_checks``, ``map``,
    ``elapsed_s``.

    Raises
    ------
    ConvergenceError
        Without ``fallback`` when the checks fail, unless ``settings.allow_unconverged``.
    """
    from cavchar.errors import ConvergenceError

    t0 = time.perf_counter()
    settings = _resolve_seed(settings or SamplerSettings())
    imp = importance or ImportanceSettings()
    space = ParameterSpace(specs)
    names, ndim = space.names, space.ndim
    seeds = np.random.SeedSequence(settings.seed).spawn(3)
    logpost = _Posterior(log_likelihood, space)
    u0 = space.to_sampler(np.asarray(initial_guess, dtype=float).reshape(ndim))
    u_map, lp_map, map_info = find_map(logpost, u0, space, np.random.default_rng(seeds[0]))
    cov, scale_method = local_covariance(logpost, u_map, lp_map, space)
    # a spread of a few hundred units in the last place cannot be sampled or summarized
    resolution = 1e-13 * np.maximum(1.0, np.abs(u_map))
    refuse_point_posterior(specs, ~(np.sqrt(np.diag(cov)) > resolution))
    rng = np.random.default_rng(seeds[1])

    # the proposal's coordinates z: u itself, or unbounded ones for MAPs on a bound
    unbounded = _unbounded_start(logpost, space, u_map, cov, np.random.default_rng(seeds[0]))
    if unbounded is None:
        axes, target, z_centre, cov_z, z_method = None, logpost, u_map, cov, scale_method
    else:
        axes, z_centre, _lpz, cov_z, z_method = unbounded
        target = _PosteriorIn(logpost, axes)

    def to_u(z: np.ndarray) -> np.ndarray:
        return z if axes is None else axes.to_u(z)

    def u_space_lp(z: np.ndarray, lpz: np.ndarray) -> np.ndarray:
        return lpz if axes is None else lpz - axes.log_jacobian(z)

    proposal = _Proposal(z_centre, cov_z, imp.df)
    rounds: list[dict[str, Any]] = []
    z = lp = logq = None
    for round_ in range(imp.adapt + 1):
        z = proposal.sample(rng, imp.n_draws)
        lp = _evaluate(target, z, imp.batch)
        logq = proposal.logpdf(z)
        log_w, k_hat = psis_smooth(lp - logq)
        w = np.exp(log_w)
        rounds.append({"draws": int(z.shape[0]), "k_hat": _finite_or_none(k_hat),
                       "ess": _kish_ess(w)})
        if k_hat < khat_limit(z.shape[0], imp.khat_max) or round_ == imp.adapt:
            break
        # move the proposal to the weighted moments (if they are usable) and draw again
        mean = np.sum(w[:, None] * z, axis=0)
        dev = z - mean
        wcov = (w[:, None] * dev).T @ dev
        try:
            proposal = _Proposal(mean, wcov, imp.df)
        except np.linalg.LinAlgError:
            break
    # more draws while the effective sample size is short
    while True:
        log_w, k_hat = psis_smooth(lp - logq)
        w = np.exp(log_w)
        ess = _kish_ess(w)
        good_k = k_hat < khat_limit(z.shape[0], imp.khat_max)
        if not good_k or ess >= imp.target_ess or z.shape[0] >= imp.max_draws:
            break
        need = int(math.ceil(z.shape[0] * (imp.target_ess / max(ess, 1.0) - 1.0) * 1.1))
        extra = min(max(need, imp.n_draws // 4), imp.max_draws - z.shape[0])
        z_new = proposal.sample(rng, extra)
        z = np.vstack([z, z_new])
        lp = np.concatenate([lp, _evaluate(target, z_new, imp.batch)])
        logq = np.concatenate([logq, proposal.logpdf(z_new)])
        rounds.append({"draws": int(z.shape[0]), "k_hat": _finite_or_none(k_hat), "ess": ess})
    u = to_u(z)
    lp = u_space_lp(z, lp)

    limit = khat_limit(u.shape[0], imp.khat_max)
    failed = []
    if not k_hat < limit:
        failed.append(f"Pareto k-hat {k_hat:.2f} is not below {limit:.2f}: the Laplace "
                      "proposal is a poor approximation of the posterior")
    if not ess >= imp.target_ess:
        failed.append(f"effective sample size of the importance weights {ess:.0f} is below "
                      f"the target {imp.target_ess:.0f}")
    report = {"k_hat": _finite_or_none(k_hat), "k_hat_limit": limit, "ess_weights": ess,
              "n_proposal_draws": int(u.shape[0]),
              "proposal": "gaussian" if math.isinf(imp.df) else f"student-t (df {imp.df:g})",
              "rounds": rounds, "settings": imp.to_dict(),
              "unbounded_coordinates": {} if axes is None else axes.kinds(names),
              "proposal_scale_method": z_method,
              "reference": "Vehtari, Simpson, Gelman, Yao, Gabry, JMLR 25(72) (2024)"}
    map_diag = {**map_info, "log_posterior": float(lp_map),
                "sampler_coordinates": dict(zip(names, u_map.tolist(), strict=True)),
                "local_sd": dict(zip(names, np.sqrt(np.diag(cov)).tolist(), strict=True)),
                "local_scale_method": scale_method}
    if failed and imp.fallback:
        reason = "; ".join(failed)
        run = sample_posterior(log_likelihood, specs, space.to_physical(u_map), settings)
        diagnostics = dict(run.diagnostics)
        diagnostics["sampler"] = f"ensemble (fallback from importance sampling: {reason})"
        diagnostics["importance"] = {**report, "used": False, "reason": reason}
        diagnostics["elapsed_s"] = time.perf_counter() - t0
        return replace(run, diagnostics=diagnostics)

    draw_rng = np.random.default_rng(seeds[2])
    n_out = int(u.shape[0])
    index = _systematic_resample(w, n_out, draw_rng)
    flat_u = u[index]
    flat_lp = lp[index]
    draws = space.to_physical(flat_u)
    ess_bulk, ess_tail = {}, {}
    for d, name in enumerate(names):
        h = u[:, d]  # sampler coordinates: the ESS of a mean of ln T_c, not of a heavy tail
        ess_bulk[name] = _function_ess(w, h)
        tails = []
        for q in (0.05, 0.95):
            cut = _weighted_quantile(h, w, q)
            tails.append(_function_ess(w, (h <= cut).astype(float)))
        ess_tail[name] = min(tails)
    converged = not failed
    diagnostics: dict[str, Any] = {
        "converged": converged,
        "failed_checks": failed,
        "sampler": "importance",
        "n_draws": n_out,
        "n_unique_draws": int(np.unique(index).size),
        "moves": "importance (PSIS)",
        "ess": {n: ess for n in names},
        "ess_bulk": ess_bulk,
        "ess_tail": ess_tail,
        "importance": {**report, "used": True},
        "map": map_diag,
        "elapsed_s": time.perf_counter() - t0,
    }
    if failed:
        message = "importance sampling failed its checks: " + "; ".join(failed) + "."
        if not settings.allow_unconverged:
            raise ConvergenceError(message, diagnostics=diagnostics)
    return PosteriorRun(specs=space.specs, draws=draws, log_posterior=flat_lp,
                        log_likelihood=flat_lp - space.log_prior(flat_u),
                        map=space.to_physical(u_map), map_log_posterior=float(lp_map),
                        trace=None, diagnostics=diagnostics, converged=converged,
                        settings=settings)


def _finite_or_none(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


def sample_posterior_auto(
    log_likelihood: LogLikelihood,
    specs: Sequence[ParameterSpec],
    initial_guess: ArrayLike,
    settings: SamplerSettings | None = None,
    sampler: str = "importance",
    importance: ImportanceSettings | None = None,
) -> PosteriorRun:
    """``sampler="importance"`` (:func:`sample_importance`, falling back to the ensemble
    when its checks fail) or ``"ensemble"`` (:func:`sample_posterior`)."""
    if sampler not in SAMPLERS:
        raise InputError(f"unknown sampler {sampler!r}", hint="use importance or ensemble")
    if sampler == "ensemble":
        return sample_posterior(log_likelihood, specs, initial_guess, settings)
    return sample_importance(log_likelihood, specs, initial_guess, settings, importance)
