"""Two-exponential power ring-downs and the comparison with one exponential.

Model: ``A_1 e^{-tau/T_1} + A_2 e^{-tau/T_2} + F`` (``T_1 > T_2``, two close
modes or a mixed decay).  The amplitudes are sampled (uniform priors on
``[0, A_max]``); the floor is marginalized with a flat prior and an unknown
noise scale with the prior ``1/sigma`` as in :mod:`cavchar.models.ringdown.power`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit
from scipy import special

from cavchar.models.ringdown.exponential_sums import ExponentialSums
from cavchar.models.ringdown.least_squares import fit_exponentials
from cavchar.models.ringdown.power import default_lifetime_bounds
from cavchar.models.ringdown.series import (
    DecayModel,
    DecaySeries,
    amplitude_bound,
    as_batch,
    default_spec,
)

__all__ = ["TwoExponentialPower", "ModelComparison", "compare_exponentials"]


@njit(cache=True, nogil=True)
def _floor_profiled_rss(rates1, rates2, amps1, amps2, tau, w, y
                        ):  # pragma: no cover - compiled; checked against the sums route
    """One pass per parameter set: ``sum w z^2 - (sum w z)^2 / sum w``, z = y - A1 e1 - A2 e2."""
    k = rates1.size
    out = np.empty(k)
    for i in range(k):
        swz = 0.0
        swzz = 0.0
        sw = 0.0
        for j in range(tau.size):
            z = (y[j] - amps1[i] * np.exp(-rates1[i] * tau[j])
                 - amps2[i] * np.exp(-rates2[i] * tau[j]))
            swz += w[j] * z
            swzz += w[j] * z * z
            sw += w[j]
        out[i] = swzz - swz * swz / sw
    return out


class TwoExponentialPower(DecayModel):
    """``A_1 e^{-tau/T_1} + A_2 e^{-tau/T_2} + F`` on one trace, ``T_1 > T_2``.

    Sampled: ``lifetime`` (the slower, ``T_1``), ``lifetime_fast`` (``T_2``) in s and
    ``amplitude``, ``amplitude_fast`` (data
    units, uniform on ``[0, A_max]``); the floor is marginalized (flat prior) and
    an unknown noise scale too (``1/sigma`` prior): with ``z = y - A_1 e_1 - A_2 e_2``,

        known:   ln L = -RSS_F / 2 - (1/2) ln S_w(0) + (1/2) ln(2 pi) + const,
        unknown: ln L = -((n-1)/2) ln RSS_F + const,
        RSS_F = sum w z^2 - (sum w z)^2 / S_w(0),

    all sums from the exponential sums at ``r_1, r_2, 2 r_1, 2 r_2, r_1 + r_2``.
    """

    signal = "power"

    def __init__(self, series: DecaySeries, *, amplitude_max: float | None = None,
                 compress: bool = True) -> None:
        self.series = series
        self.amplitude_max = float(amplitude_bound(series.values) if amplitude_max is None
                                   else amplitude_max)
        self.start = fit_exponentials(series.tau, series.values, 2, sigma=series.sigma, t0=0.0)
        self.fitted_sigma = series.sigma is None
        self._shift = self.start.floor
        rmax = float(np.max(self.start.rates))
        limit = 2.0 * 4.0 * rmax if compress else None  # rates up to 4x the fast LS rate
        self.sums = ExponentialSums(series.tau, series.values - self._shift, series.weights(),
                                    rate_limit=limit)
        low, high = default_lifetime_bounds([series])
        self.specs = (
            default_spec("lifetime", "s", "T_1", low, high, True),
            default_spec("lifetime_fast", "s", "T_2", low, high, True),
            default_spec("amplitude", "", "A_1", 0.0, self.amplitude_max, False),
            default_spec("amplitude_fast", "", "A_2", 0.0, self.amplitude_max, False),
        )
        n = series.n
        if self.fitted_sigma:
            nu = n - 1
            self._const = (special.gammaln(nu / 2) + (nu / 2 - 1) * math.log(2)
                           + 0.5 * math.log(2 * math.pi) - 0.5 * n * math.log(2 * math.pi))
        else:
            self._const = (0.5 * math.log(2 * math.pi)
                           - 0.5 * float(np.sum(np.log(2 * math.pi * series.sigma**2))))

    def initial_guess(self) -> np.ndarray:
        """The least-squares start ``(T_1, T_2, A_1, A_2)`` (amplitudes kept positive)."""
        r = self.start.rates
        a = np.clip(self.start.amplitudes, 1e-6 * self.amplitude_max, None)
        return np.array([1 / r[0], 1 / r[1], a[0], a[1]])

    def log_likelihood(self, theta: np.ndarray, *, direct: bool = False) -> np.ndarray:
        """(k, 4) -> (k,); ``-inf`` unless ``T_1 > T_2 > 0``."""
        theta = as_batch(theta, 4)
        t1, t2, a1, a2 = theta.T
        ok = np.isfinite(theta).all(axis=1) & (t2 > 0) & (t1 > t2)
        out = np.full(theta.shape[0], -np.inf)
        if not ok.any():
            return out
        r1, r2, a1, a2 = 1 / t1[ok], 1 / t2[ok], a1[ok], a2[ok]
        s = self.sums
        if direct or not s.compressed:  # one compiled pass over the data
            rss = _floor_profiled_rss(r1, r2, a1, a2, s.tau, s.w, s.y)
        else:
            rss = self._floor(theta[ok])[1]
        with np.errstate(divide="ignore", invalid="ignore"):
            if self.fitted_sigma:
                ll = -0.5 * (s.n - 1) * np.log(rss)
            else:
                ll = -0.5 * rss - 0.5 * math.log(s.sum_w)
        ll = ll + self._const
        out[ok] = np.where(np.isfinite(ll) & (rss > 0), ll, -np.inf)
        return out

    __call__ = log_likelihood

    def _floor(self, theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Best floor and residual sum given (k, 4) parameters."""
        theta = as_batch(theta, 4)
        r1, r2, a1, a2 = 1 / theta[:, 0], 1 / theta[:, 1], theta[:, 2], theta[:, 3]
        s = self.sums
        w, y = s(np.concatenate([r1, r2, 2 * r1, 2 * r2, r1 + r2]))
        k = r1.size
        w1, w2, w11, w22, w12 = (w[i * k:(i + 1) * k] for i in range(5))
        szz = (s.sum_yy - 2 * (a1 * y[:k] + a2 * y[k:2 * k]) + a1**2 * w11 + a2**2 * w22
               + 2 * a1 * a2 * w12)
        sz = s.sum_y - a1 * w1 - a2 * w2
        return sz / s.sum_w, szz - sz**2 / s.sum_w

    def draw_nuisance(self, draws: np.ndarray, rng: np.random.Generator) -> dict:
        """Exact draws of the floor (and noise sigma) given each draw."""
        f_hat, rss = self._floor(draws)
        out = {}
        if self.fitted_sigma:
            sigma = np.sqrt(rss / rng.chisquare(self.series.n - 1, size=rss.shape))
            out["sigma"] = sigma
        else:
            sigma = np.ones_like(rss)
        out["floor"] = f_hat + self._shift + sigma / math.sqrt(self.sums.sum_w) * \
            rng.standard_normal(rss.shape)
        return out

    def expected(self, theta: np.ndarray) -> list[np.ndarray]:
        """Power ``A_1 exp(-tau/T_1) + A_2 exp(-tau/T_2) + F`` at ``theta`` (``F``: best floor)."""
        theta = np.asarray(theta, dtype=float)
        f_hat, _ = self._floor(theta)
        t1, t2, a1, a2 = theta
        tau = self.series.tau
        return [a1 * np.exp(-tau / t1) + a2 * np.exp(-tau / t2) + float(f_hat[0]) + self._shift]

    def noise_scale(self, theta: np.ndarray) -> list[np.ndarray]:
        """Noise sd of each point: stated, or the residual rms at ``theta``."""
        if not self.fitted_sigma:
            return [self.series.sigma]
        _, rss = self._floor(np.asarray(theta, dtype=float))
        return [np.full(self.series.n, math.sqrt(max(float(rss[0]), 0.0) / (self.series.n - 1)))]


@dataclass(frozen=True)
class ModelComparison:
    """One against two exponentials by information criteria of the least-squares fits.

    ``bic = chi^2 + k ln n`` (known noise) or ``n ln(RSS/n) + k ln n`` (unknown
    noise, ``k`` counting the noise scale), Schwarz (1978); ``aic`` with ``2 k``.
    ``delta_bic = bic_1 - bic_2`` (> 0 favours two exponentials);
    ``evidence_ratio = exp(delta_bic / 2)`` approximates the Bayes factor of
    two over one exponential (Kass & Raftery, JASA 90, 773 (1995)), whose scale
    names the strength: < 2 "not worth more than a bare mention", 2-6
    "positive", 6-10 "strong", > 10 "very strong" (in ``|delta_bic|``).
    """

    bic_one: float
    bic_two: float
    aic_one: float
    aic_two: float
    delta_bic: float
    evidence_ratio: float
    preferred: str
    strength: str
    one: object
    two: object | None

    def describe(self) -> str:
        """One sentence: preferred model, strength, BIC difference and evidence ratio."""
        return (f"{self.preferred} preferred ({self.strength}; BIC difference "
                f"{abs(self.delta_bic):.1f}, approximate evidence ratio two/one "
                f"{self.evidence_ratio:.3g})")


def _criteria(fit, n: int, known: bool, k_extra: int) -> tuple[float, float]:
    k = fit.params.size + k_extra
    fit_term = fit.rss if known else n * math.log(fit.rss / n)
    return fit_term + k * math.log(n), fit_term + 2 * k


def compare_exponentials(series: DecaySeries, one=None) -> ModelComparison:
    """Compare one and two exponentials (with floor) on one trace; see :class:`ModelComparison`.

    ``one``: the one-exponential least-squares fit of this trace (``t0 = 0``), if made.
    """
    known = series.sigma is not None
    n = series.n
    one = one or fit_exponentials(series.tau, series.values, 1, sigma=series.sigma, t0=0.0)
    bic1, aic1 = _criteria(one, n, known, 0 if known else 1)
    try:
        two = fit_exponentials(series.tau, series.values, 2, sigma=series.sigma, t0=0.0)
        bic2, aic2 = _criteria(two, n, known, 0 if known else 1)
    except (np.linalg.LinAlgError, ValueError):
        two, bic2, aic2 = None, math.inf, math.inf
    delta = bic1 - bic2
    size = abs(delta)
    strength = ("not worth more than a bare mention" if size < 2 else "positive" if size < 6
                else "strong" if size < 10 else "very strong")
    with np.errstate(over="ignore"):
        ratio = float(np.exp(np.clip(0.5 * delta, -700, 700)))
    return ModelComparison(bic_one=bic1, bic_two=bic2, aic_one=aic1, aic_two=aic2,
                           delta_bic=delta, evidence_ratio=ratio,
                           preferred="two exponentials" if delta > 0 else "one exponential",
                           strength=strength, one=one, two=two)
