r"""Power ring-downs with the amplitude and floor marginalized analytically.

Model of trace ``j`` (``tau = t - t0``, energy lifetime ``T_c = 1/r`` in s)::

    y_i = A_j exp(-r tau_i) + F_j + e_i,      e_i ~ N(0, sigma_i^2)

with ``sigma_i`` known per point (weights ``w_i = 1/sigma_i^2``) or
``sigma_i = sigma_j`` unknown.  Several traces share ``T_c`` only.

Marginal likelihood of ``T_c`` (derivation)
-------------------------------------------
For fixed ``r`` the model is linear in ``c = (A, F)``.  With ``G`` the
weighted Gram matrix and ``b`` the right side (from the exponential sums
:mod:`cavchar.models.ringdown.exponential_sums`: ``G = [[S_w(2r), S_w(r)], [S_w(r), S_w(0)]]``,
``b = (S_y(r), S_y(0))``), completing the square gives exactly

    sum_i w_i (y_i - A e_i - F)^2 = RSS(r) + (c - c_hat)^T G (c - c_hat),
    c_hat = G^{-1} b,   RSS(r) = sum_i w_i y_i^2 - b^T c_hat.

Priors: ``A`` uniform on ``[0, A_max]`` (density ``1/A_max``), ``F`` flat on the
real line, and for unknown noise the scale-invariant ``p(sigma) = 1/sigma``.

*Known noise.*  The Gaussian integral over ``F`` and over ``A`` restricted to
the box (``A`` is marginally ``N(A_hat, V_AA)``, ``V = G^{-1}``) is

    ln L(r) = -RSS/2 - (1/2) ln det G + ln P_N(0 < A < A_max) - ln A_max
              + ln(2 pi) - sum_i ln(2 pi sigma_i^2)/2,

i.e. the profile likelihood times the determinant factor ``(2 pi)^{p/2}
det G^{-1/2}`` and the probability of the box.

*Unknown noise* (``w_i = 1``, ``p = 2`` linear parameters, ``nu = n - p``).  The
integral over ``sigma`` of ``sigma^{-n-1} exp(-(RSS + Q(c)) / (2 sigma^2))`` makes
``c`` multivariate Student-t with ``nu`` degrees of freedom and scale matrix
``s^2 G^{-1}``, ``s^2 = RSS/nu``; so

    ln L(r) = -(1/2) ln det G - (nu/2) ln RSS + ln P_t(0 < A < A_max) - ln A_max
              + ln Gamma(nu/2) + (nu/2 - 1) ln 2 + ln(2 pi) - (n/2) ln(2 pi),

with ``P_t`` the Student-t probability that ``A`` lies in the box (location
``A_hat``, scale ``s sqrt(V_AA)``).  The sampler therefore sees ``T_c`` only.

Exact conditional draws of the nuisance parameters (for the posterior of
amplitudes, floors and noise): ``A | r`` truncated normal (known noise) or
truncated Student-t; ``sigma^2 | A, r = (RSS + (A - A_hat)^2 / V_AA) / chi^2_{n-1}``;
``F | A, sigma, r ~ N(F_hat - (G_AF/G_FF)(A - A_hat), sigma^2 / G_FF)``.

Two exponentials and the comparison with one: :mod:`cavchar.models.ringdown.two_exponentials`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numba import njit
from scipy import special

from cavchar.models.ringdown.exponential_sums import ExponentialSums, _real_moment_sums
from cavchar.models.ringdown.least_squares import fit_exponentials
from cavchar.models.ringdown.series import (
    DecayModel,
    DecaySeries,
    amplitude_bound,
    as_batch,
    default_spec,
    draw_truncated,
    log_interval_probability,
)
from cavchar.models.ringdown.shared_rate import fit_shared_rate


@njit(cache=True, nogil=True)
def _power_kernel(rates, centres, half, moments, w0, y0, syy, fitted, nu, a_max
                  ):  # pragma: no cover - compiled; checked against _log_likelihood_numpy
    """Compiled one-exponential marginal likelihood without the box term.

    Returns (ll, lo, hi): the terms of the module docstring except
    ``ln P(0 < A < A_max)`` and the standardized box bounds of ``A``.
    """
    k = rates.size
    w2, _ = _real_moment_sums(2.0 * rates, centres, half, moments)
    w1, y1 = _real_moment_sums(rates, centres, half, moments)
    ll = np.empty(k)
    lo = np.zeros(k)
    hi = np.ones(k)
    for i in range(k):
        det = w2[i] * w0 - w1[i] * w1[i]
        if not det > 0.0:
            ll[i] = -np.inf
            continue
        inv = 1.0 / det
        a_hat = (y1[i] * w0 - w1[i] * y0) * inv
        f_hat = (w2[i] * y0 - w1[i] * y1[i]) * inv
        rss = syy - a_hat * y1[i] - f_hat * y0
        if not rss > 0.0:
            ll[i] = -np.inf
            continue
        if fitted:
            scale = np.sqrt(rss / nu * w0 * inv)
            ll[i] = -0.5 * np.log(det) - 0.5 * nu * np.log(rss)
        else:
            scale = np.sqrt(w0 * inv)
            ll[i] = -0.5 * rss - 0.5 * np.log(det)
        lo[i] = -a_hat / scale
        hi[i] = (a_max - a_hat) / scale
    return ll, lo, hi


__all__ = ["PowerDecay", "default_lifetime_bounds", "RATE_HEADROOM"]

#: compressed sums serve rates up to this multiple of the least-squares rate
RATE_HEADROOM = 12.0


def default_lifetime_bounds(series: Sequence[DecaySeries]) -> tuple[float, float]:
    """Default prior range of ``T_c``: a tenth of the smallest step to 1000 spans."""
    steps = np.concatenate([np.diff(np.sort(s.tau)) for s in series])
    steps = steps[steps > 0]
    span = max(s.span for s in series)
    low = 0.1 * float(np.min(steps)) if steps.size else 1e-3 * span
    return low, 1000.0 * span


class PowerDecay(DecayModel):
    """One-exponential power decay on one or more traces sharing ``T_c``.

    Parameters
    ----------
    series
        The traces (:class:`DecaySeries`; ``sigma=None`` means the noise scale of
        that trace is unknown and marginalized).
    amplitude_max
        Upper bounds of the flat amplitude priors, one per trace (default 100
        times the range of that trace's values).
    compress
        Use the compressed exponential sums (exact to rounding; see
        :mod:`cavchar.models.ringdown.exponential_sums`).  ``False``: brute force.
    start
        Optional least-squares fit of the single trace already made
        (:func:`~cavchar.models.ringdown.least_squares.fit_exponentials`, ``t0 = 0``).

    Attributes
    ----------
    parameters : tuple of default_spec
        ``lifetime`` (``T_c``, s) only.
    start : ExponentialFit or SharedRateFit
        The least-squares fit the model was set up from.
    """

    signal = "power"

    def __init__(self, series: Sequence[DecaySeries], *,
                 amplitude_max: Sequence[float] | None = None, compress: bool = True,
                 start=None) -> None:
        self.series = list(series)
        if not self.series:
            raise ValueError("at least one trace is needed")
        self.amplitude_max = np.broadcast_to(np.array(
            [amplitude_bound(s.values) for s in self.series] if amplitude_max is None
            else amplitude_max, dtype=float), (len(self.series),)).copy()
        fitted = [s.sigma is None for s in self.series]
        self.fitted_sigma = fitted
        self._start = start
        if not compress:
            # brute force: no rate limit to choose, so the least-squares fit waits until
            # a start is asked for; the offset is the mean of the last 5% of each trace
            floors = [float(np.mean(s.values[s.tau >= np.quantile(s.tau, 0.95)]))
                      for s in self.series]
            self.sums = [ExponentialSums(s.tau, s.values, s.weights(), offset=c)
                         for s, c in zip(self.series, floors, strict=True)]
        else:
            if len(self.series) == 1:
                rate = float(self.start.rates[0])
                rel_sd = float(self.start.stderr[1]) / rate
                floors = [self.start.floor]
                reuse = self.start.sums
            else:
                rate, rel_sd = self.start.rate, 0.3
                floors = list(self.start.floors)
                reuse = None
            # compressed sums serve 2 r for r up to r_hat (1.5 + 20 relative sd); other
            # rates are summed directly, so the headroom affects speed only
            limit = 2.0 * rate * min(1.5 + 20.0 * rel_sd, RATE_HEADROOM)
            if reuse is not None and reuse.compressed and reuse.rate_limit >= limit:
                self.sums = [reuse]
            else:
                self.sums = [ExponentialSums(s.tau, s.values, s.weights(), rate_limit=limit,
                                             offset=c)
                             for s, c in zip(self.series, floors, strict=True)]
        # the floor absorbs the offset exactly; it is added back to floor draws
        self._shift = np.array([float(np.real(x.offset)) for x in self.sums])
        self._const = np.array([self._constant(s, f) for s, f in
                                zip(self.series, fitted, strict=True)])
        low, high = default_lifetime_bounds(self.series)
        self.specs = (default_spec("lifetime", "s", "T_c", low, high, True),)

    @staticmethod
    def _constant(s: DecaySeries, fitted: bool) -> float:
        n = s.n
        if not fitted:
            return math.log(2 * math.pi) - 0.5 * float(np.sum(np.log(2 * math.pi * s.sigma**2)))
        nu = n - 2
        return (special.gammaln(nu / 2) + (nu / 2 - 1) * math.log(2) + math.log(2 * math.pi)
                - 0.5 * n * math.log(2 * math.pi))

    @property
    def start(self):
        """The least-squares fit the model starts from (one trace: ExponentialFit with
        ``t0 = 0``; several: SharedRateFit), made on first use."""
        if self._start is None:
            if len(self.series) == 1:
                s = self.series[0]
                self._start = fit_exponentials(s.tau, s.values, 1, sigma=s.sigma, t0=0.0)
            else:
                self._start = fit_shared_rate([(s.tau, s.values, s.sigma)
                                               for s in self.series])
        return self._start

    @property
    def rate_hat(self) -> float:
        """Least-squares decay rate of the power in 1/s (shared rate for several traces)."""
        start = self.start
        return float(start.rates[0]) if len(self.series) == 1 else float(start.rate)

    def initial_guess(self) -> np.ndarray:
        """The start ``(T_c,)`` with ``T_c = 1 / rate_hat`` in s."""
        return np.array([1.0 / self.rate_hat])

    def _pieces(self, j: int, rate: np.ndarray, direct: bool = False) -> dict:
        s = self.sums[j]
        k = rate.size
        w, y = (s.direct if direct else s)(np.concatenate([2 * rate, rate]))
        w2, w1, y1 = w[:k], w[k:], y[k:]
        w0, y0 = s.sum_w, s.sum_y
        det = w2 * w0 - w1 * w1
        with np.errstate(divide="ignore", invalid="ignore"):
            inv = 1.0 / det
            a_hat = (y1 * w0 - w1 * y0) * inv
            f_hat = (w2 * y0 - w1 * y1) * inv
            rss = s.sum_yy - a_hat * y1 - f_hat * y0
        return {"det": det, "a": a_hat, "f": f_hat, "rss": rss, "v_aa": w0 * inv,
                "g_af": w1, "g_ff": w0}

    def log_likelihood(self, theta: np.ndarray, *, direct: bool = False) -> np.ndarray:
        """Marginal log-likelihood of ``T_c`` (module docstring); (k, 1) -> (k,).

        ``direct=True`` sums over the data at every call (brute force, for checks).
        """
        theta = as_batch(theta, 1)
        lifetime = theta[:, 0]
        ok = np.isfinite(lifetime) & (lifetime > 0)
        if not ok.all():
            out = np.full(lifetime.shape, -np.inf)
            if ok.any():
                out[ok] = self.log_likelihood(lifetime[ok][:, None], direct=direct)
            return out
        rate = 1.0 / lifetime
        total = np.zeros(rate.shape)
        for j, s in enumerate(self.sums):
            fitted = self.fitted_sigma[j]
            nu = s.n - 2
            if (not direct and s.compressed and s._real
                    and 2.0 * float(rate.max()) <= s.rate_limit):
                ll, lo, hi = _power_kernel(rate, s.centres, s.half_width, s.moments, s.sum_w,
                                           s.sum_y, s.sum_yy, fitted, nu, self.amplitude_max[j])
            else:
                ll, lo, hi = self._log_likelihood_numpy(j, rate, direct)
            ll = ll + log_interval_probability(lo, hi, nu if fitted else None)
            total += ll + (self._const[j] - math.log(self.amplitude_max[j]))
        return np.where(np.isnan(total), -np.inf, total)

    def _log_likelihood_numpy(self, j: int, rate: np.ndarray, direct: bool):
        """Same as the compiled kernel: (ll without box term, standardized box bounds)."""
        p = self._pieces(j, rate, direct)
        a_max = self.amplitude_max[j]
        nu = self.sums[j].n - 2
        with np.errstate(divide="ignore", invalid="ignore"):
            if self.fitted_sigma[j]:
                scale = np.sqrt(p["rss"] / nu * p["v_aa"])
                ll = -0.5 * np.log(p["det"]) - 0.5 * nu * np.log(p["rss"])
            else:
                scale = np.sqrt(p["v_aa"])
                ll = -0.5 * p["rss"] - 0.5 * np.log(p["det"])
            lo, hi = -p["a"] / scale, (a_max - p["a"]) / scale
        bad = ~(p["det"] > 0) | ~(p["rss"] > 0) | ~np.isfinite(ll)
        return np.where(bad, -np.inf, ll), np.where(bad, 0.0, lo), np.where(bad, 1.0, hi)

    __call__ = log_likelihood

    def conditional_fit(self, lifetime: float) -> list[dict]:
        """Best amplitude and floor of each trace at a given ``T_c`` (for residuals)."""
        rate = np.array([1.0 / lifetime])
        out = []
        for j in range(len(self.sums)):
            p = self._pieces(j, rate)
            out.append({"amplitude": float(p["a"][0]), "floor": float(p["f"][0] + self._shift[j]),
                        "rss": float(p["rss"][0])})
        return out

    def draw_nuisance(self, draws: np.ndarray, rng: np.random.Generator) -> dict:
        """Exact draws of amplitude, floor (and noise sigma) given each ``T_c`` draw.

        ``draws`` has shape (s, 1) (or (s,)); returns arrays of shape (s,) under the
        names ``amplitude``, ``floor``, ``sigma`` (suffixed ``_1, _2, ...`` for
        several traces).
        """
        lifetimes = np.asarray(draws, dtype=float).reshape(-1)
        rate = 1.0 / lifetimes
        out: dict[str, np.ndarray] = {}
        several = len(self.sums) > 1
        for j in range(len(self.sums)):
            p = self._pieces(j, rate)
            n = self.sums[j].n
            a_max = self.amplitude_max[j]
            if self.fitted_sigma[j]:
                nu = n - 2
                scale = np.sqrt(p["rss"] / nu * p["v_aa"])
                amp = draw_truncated(rng, p["a"], scale, 0.0, a_max, dof=nu)
                sigma = np.sqrt((p["rss"] + (amp - p["a"]) ** 2 / p["v_aa"])
                                / rng.chisquare(n - 1, size=rate.shape))
            else:
                amp = draw_truncated(rng, p["a"], np.sqrt(p["v_aa"]), 0.0, a_max)
                sigma = np.ones_like(rate)
            mean_f = p["f"] - p["g_af"] / p["g_ff"] * (amp - p["a"])
            floor = mean_f + sigma / np.sqrt(p["g_ff"]) * rng.standard_normal(rate.shape)
            suffix = f"_{j + 1}" if several else ""
            out["amplitude" + suffix] = amp
            out["floor" + suffix] = floor + self._shift[j]
            if self.fitted_sigma[j]:
                out["sigma" + suffix] = sigma
        return out


    def expected(self, theta: np.ndarray) -> list[np.ndarray]:
        """Model curve of each trace at ``T_c = theta[0]`` (amplitude, floor at their best)."""
        lifetime = float(np.asarray(theta, dtype=float).ravel()[0])
        return [c["amplitude"] * np.exp(-s.tau / lifetime) + c["floor"]
                for c, s in zip(self.conditional_fit(lifetime), self.series, strict=True)]

    def noise_scale(self, theta: np.ndarray) -> list[np.ndarray]:
        """Per-point noise sd of each trace: known sigma or ``sqrt(RSS / (n - 2))``."""
        lifetime = float(np.asarray(theta, dtype=float).ravel()[0])
        out = []
        for j, (c, s) in enumerate(zip(self.conditional_fit(lifetime), self.series,
                                       strict=True)):
            if self.fitted_sigma[j]:
                out.append(np.full(s.n, math.sqrt(max(c["rss"], 0.0) / (s.n - 2))))
            else:
                out.append(s.sigma)
        return out
