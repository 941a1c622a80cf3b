r"""Relaxation of the photon number: mean photon number and Fock-state populations.

Both give the lifetime ``T_c`` and the thermal photon number ``n_th`` jointly.

Mean photon number (:class:`MeanPhotonDecay`)
---------------------------------------------
``<n>(t) = n_th + (n0 - n_th) exp(-tau / T_c)`` (the closed form of
``d<n>/dt = -kappa(<n> - n_th)``), observed with Gaussian errors of known
per-point sd ``sigma_i`` (or an unknown common scale).  Sampled: ``lifetime``
and ``n_thermal``; the excess ``a = n0 - n_th`` enters linearly and is
marginalized with a flat prior (unless ``n0`` is fixed).  With
``z_i = y_i - n_th`` and the exponential sums at ``r = 1/T_c``:

    a_hat = (S_y(r) - n_th S_w(r)) / S_w(2r),    RSS = sum w z^2 - a_hat^2 S_w(2r),
    known noise:   ln L = -RSS/2 - (1/2) ln S_w(2r) + (1/2) ln(2 pi) - sum ln(2 pi sigma_i^2)/2,
    unknown noise: ln L = -((n-1)/2) ln RSS - (1/2) ln S_w(2r) + const   (prior 1/sigma).

Fock-state populations (:class:`PopulationDecay`)
-------------------------------------------------
Counts ``c_{i,n}`` of photon number ``n = 0..K-1`` at delays ``tau_i`` after
preparing the distribution ``p0`` (e.g. a Fock state), multinomial:

    ln L = sum_i [ ln N_i! - sum_n ln c_{i,n}! + sum_n c_{i,n} ln p_n(tau_i) ].

Populations ``p_n(t)`` solve the rate equations (diagonal of the Lindblad
equation, see :mod:`cavchar.dynamics`).  Their generating function
``G(s, t) = sum_n p_n(t) s^n`` obeys
``dG/dt = kappa (1 - s)[(1 + n_th) dG/ds - n_th (G + s dG/ds)]``, whose solution
(derived by the method of characteristics; checked against the truncated rate
equations of :mod:`cavchar.dynamics` in the tests) is, with
``eta = exp(-t/T_c)`` and ``N = n_th (1 - eta)``,

    G(s, t) = G(1 - eta (1 - s) / (1 + N (1 - s)), 0) / (1 + N (1 - s)).

For a Fock state ``|k>`` this is the law of a sum of ``k + 1`` independent
non-negative variables: one geometric with mean ``N`` (``g_n = q^n / (1 + N)``,
``q = N / (1 + N)``) and ``k`` copies of ``X`` with ``P(X = 0) = 1 - eta/(1+N)``,
``P(X = n >= 1) = eta q^(n-1) / (1 + N)^2``.  The populations of the observed
levels are therefore exact finite convolutions of positive terms (no level
truncation, no cancellation); ``method="rate-equations"`` uses
:func:`cavchar.dynamics.populations` instead (slower; for cross-checks).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from cavchar.models.ringdown.exponential_sums import ExponentialSums
from cavchar.models.ringdown.least_squares import fit_exponentials
from cavchar.models.ringdown.power import RATE_HEADROOM, default_lifetime_bounds
from cavchar.models.ringdown.series import DecayModel, DecaySeries, as_batch, default_spec
from cavchar.models.ringdown.shared_rate import fit_shared_rate

__all__ = ["MeanPhotonDecay", "PopulationDecay", "fock_populations"]


class MeanPhotonDecay(DecayModel):
    """Mean photon number relaxing to ``n_th`` (module docstring); traces share T_c and n_th.

    Parameters
    ----------
    series
        One or more traces of ``<n>`` values; ``sigma`` known per point or ``None``.
    n0
        Fixed initial mean photon number (then ``a = n0 - n_th`` is not free).
    compress
        Compressed exponential sums (exact to rounding) or brute force.
    """

    signal = "mean-n"

    def __init__(self, series: Sequence[DecaySeries] | DecaySeries, *, n0: float | None = None,
                 compress: bool = True) -> None:
        self.series = [series] if isinstance(series, DecaySeries) else list(series)
        self.n0 = None if n0 is None else float(n0)
        self.fitted_sigma = [s.sigma is None for s in self.series]
        if len(self.series) == 1:
            s = self.series[0]
            fit = fit_exponentials(s.tau, s.values, 1, sigma=s.sigma, t0=0.0)
            rate, floor = float(fit.rates[0]), float(fit.floor)
            rel_sd = float(fit.stderr[1]) / rate
        else:
            fit = fit_shared_rate([(s.tau, s.values, s.sigma) for s in self.series])
            rate, floor, rel_sd = fit.rate, float(np.mean(fit.floors)), 0.3
        limit = 2.0 * rate * min(1.5 + 20.0 * rel_sd, RATE_HEADROOM) if compress else None
        self.sums = [ExponentialSums(s.tau, s.values, s.weights(), rate_limit=limit,
                                     offset=floor) for s in self.series]
        top = max(float(np.max(s.values)) for s in self.series)
        self.start = np.array([1.0 / rate, max(floor, 1e-3 * max(top, 1e-3))])
        low, high = default_lifetime_bounds(self.series)
        self.specs = (
            default_spec("lifetime", "s", "T_c", low, high, True),
            default_spec("n_thermal", "", "n_th", 1e-6, max(10.0, 10 * top), True),
        )
        self._const = []
        for s, fitted in zip(self.series, self.fitted_sigma, strict=True):
            free = self.n0 is None
            nu = s.n - int(free)
            if fitted:
                c = (special.gammaln(nu / 2) + (nu / 2 - 1) * math.log(2)
                     - 0.5 * nu * math.log(2 * math.pi))
            else:
                c = (0.5 * math.log(2 * math.pi) * int(free)
                     - 0.5 * float(np.sum(np.log(2 * math.pi * s.sigma**2))))
            self._const.append(c)

    def _pieces(self, j: int, rate: np.ndarray, n_th: np.ndarray, direct: bool = False) -> dict:
        s = self.sums[j]
        k = rate.size
        w, y = (s.direct if direct else s)(np.concatenate([2 * rate, rate]))
        w2, w1, y1 = w[:k], w[k:], y[k:]
        m = n_th - s.offset  # n_th relative to the offset of the sums
        szz = s.sum_yy - 2 * m * s.sum_y + m * m * s.sum_w
        b = y1 - m * w1
        if self.n0 is None:
            a = b / w2
            rss = szz - a * b
        else:
            a = self.n0 - n_th
            rss = szz - 2 * a * b + a * a * w2
        return {"a": a, "rss": rss, "w2": w2}

    def log_likelihood(self, theta: np.ndarray, *, direct: bool = False) -> np.ndarray:
        """(k, 2) -> (k,), columns lifetime, n_thermal (module docstring)."""
        theta = as_batch(theta, 2)
        ok = np.isfinite(theta).all(axis=1) & (theta[:, 0] > 0) & (theta[:, 1] >= 0)
        out = np.full(theta.shape[0], -np.inf)
        if not ok.any():
            return out
        rate, n_th = 1.0 / theta[ok, 0], theta[ok, 1]
        total = np.zeros(rate.size)
        for j, s in enumerate(self.sums):
            p = self._pieces(j, rate, n_th, direct)
            free = self.n0 is None
            with np.errstate(divide="ignore", invalid="ignore"):
                if self.fitted_sigma[j]:
                    ll = -0.5 * (s.n - int(free)) * np.log(p["rss"])
                else:
                    ll = -0.5 * p["rss"]
                if free:
                    ll = ll - 0.5 * np.log(p["w2"])
            total += np.where(p["rss"] > 0, ll, -np.inf) + self._const[j]
        out[ok] = np.where(np.isnan(total), -np.inf, total)
        return out

    __call__ = log_likelihood

    def draw_nuisance(self, draws: np.ndarray, rng: np.random.Generator) -> dict:
        """Exact draws of ``n0`` (and the noise scale) given each draw of (T_c, n_th)."""
        draws = as_batch(draws, 2)
        rate, n_th = 1.0 / draws[:, 0], draws[:, 1]
        out: dict[str, np.ndarray] = {}
        several = len(self.sums) > 1
        for j, s in enumerate(self.sums):
            p = self._pieces(j, rate, n_th)
            suffix = f"_{j + 1}" if several else ""
            free = self.n0 is None
            if self.fitted_sigma[j]:
                sigma = np.sqrt(p["rss"] / rng.chisquare(s.n - int(free), size=rate.shape))
                out["sigma" + suffix] = sigma
            else:
                sigma = np.ones_like(rate)
            if free:
                a = p["a"] + sigma / np.sqrt(p["w2"]) * rng.standard_normal(rate.shape)
                out["n_initial" + suffix] = n_th + a
        return out

    def expected(self, theta: np.ndarray) -> list[np.ndarray]:
        """Mean photon number ``n_th + a exp(-tau/T_c)`` of each trace at ``theta``.

        The amplitude ``a`` is the least-squares value given ``theta`` (``n0 - n_th``
        when ``n0`` is fixed)."""
        theta = np.asarray(theta, dtype=float)
        out = []
        for j, s in enumerate(self.series):
            p = self._pieces(j, np.array([1 / theta[0]]), np.array([theta[1]]))
            a = float(np.atleast_1d(p["a"])[0])
            out.append(theta[1] + a * np.exp(-s.tau / theta[0]))
        return out

    def noise_scale(self, theta: np.ndarray) -> list[np.ndarray]:
        """Noise sd of each point at ``theta`` (one array per trace; stated or estimated)."""
        theta = np.asarray(theta, dtype=float)
        out = []
        for j, s in enumerate(self.series):
            if not self.fitted_sigma[j]:
                out.append(s.sigma)
                continue
            p = self._pieces(j, np.array([1 / theta[0]]), np.array([theta[1]]))
            dof = s.n - int(self.n0 is None)
            out.append(np.full(s.n, math.sqrt(max(float(p["rss"][0]), 0.0) / dof)))
        return out


def fock_populations(lifetime: ArrayLike, n_th: ArrayLike, p0: ArrayLike, tau: ArrayLike,
                     n_levels: int) -> np.ndarray:
    """Exact populations of levels ``0..n_levels-1`` (module docstring), batched.

    Parameters
    ----------
    lifetime, n_th : array, shape (k,)
        Energy lifetimes (s) and thermal photon numbers.
    p0 : array, shape (L,)
        Initial distribution over photon numbers 0..L-1.
    tau : array, shape (m,)
        Delays in s.
    n_levels : int
        Number K of levels returned.

    Returns
    -------
    ndarray, shape (k, m, K)
    """
    lifetime = np.atleast_1d(np.asarray(lifetime, dtype=float))
    n_th = np.atleast_1d(np.asarray(n_th, dtype=float))
    p0 = np.asarray(p0, dtype=float)
    tau = np.atleast_1d(np.asarray(tau, dtype=float))
    eta = np.exp(-tau[None, :] / lifetime[:, None])  # (k, m)
    big_n = n_th[:, None] * (-np.expm1(-tau[None, :] / lifetime[:, None]))
    q = big_n / (1.0 + big_n)
    levels = np.arange(n_levels)
    with np.errstate(divide="ignore", invalid="ignore"):
        geo = q[..., None] ** levels / (1.0 + big_n)[..., None]  # (k, m, K)
        x = (eta / (1.0 + big_n) ** 2)[..., None] * q[..., None] ** np.maximum(levels - 1, 0)
    x[..., 0] = 1.0 - eta / (1.0 + big_n)
    # lower-triangular Toeplitz operator of X: (T c)[n] = sum_{l<=n} X[n-l] c[l]
    diff = levels[:, None] - levels[None, :]
    toeplitz = np.where(diff >= 0, x[..., np.clip(diff, 0, None)], 0.0)  # (k, m, K, K)
    current = geo
    total = p0[0] * geo if p0.size else np.zeros_like(geo)
    for level in range(1, p0.size):
        current = np.einsum("kmnl,kml->kmn", toeplitz, current)
        if p0[level] != 0:
            total = total + p0[level] * current
    return total


class PopulationDecay(DecayModel):
    """Photon-number counts after preparing ``p0`` (module docstring).

    Parameters
    ----------
    tau : array, shape (m,)
        Delays after the preparation, s.
    counts : array, shape (m, K)
        Number of shots finding photon number ``n`` at each delay.
    p0 : array, shape (L,)
        Initial distribution (e.g. ``[0, 0, 1]`` for the Fock state |2>).
    method : {"closed-form", "rate-equations"}
    """

    signal = "populations"

    def __init__(self, tau: ArrayLike, counts: ArrayLike, p0: ArrayLike, *,
                 method: str = "closed-form") -> None:
        self.tau = np.asarray(tau, dtype=float)
        self.counts = np.asarray(counts, dtype=float)
        self.p0 = np.asarray(p0, dtype=float)
        if self.counts.ndim != 2 or self.counts.shape[0] != self.tau.size:
            raise ValueError("counts must have shape (number of delays, number of levels)")
        if method not in ("closed-form", "rate-equations"):
            raise ValueError(f"unknown method {method!r}")
        self.method = method
        self.n_levels = self.counts.shape[1]
        shots = self.counts.sum(axis=1)
        self._const = float(np.sum(special.gammaln(shots + 1))
                            - np.sum(special.gammaln(self.counts + 1)))
        self._observed = self.counts > 0
        mean_n = (self.counts * np.arange(self.n_levels)).sum(axis=1) / np.maximum(shots, 1)
        start_series = DecaySeries(tau=self.tau, values=mean_n,
                                   sigma=np.sqrt(np.maximum(mean_n, 0.05) / np.maximum(shots, 1)))
        try:
            fit = fit_exponentials(start_series.tau, mean_n, 1, sigma=start_series.sigma,
                                   t0=0.0)
            t_start, n_start = 1.0 / float(fit.rates[0]), max(float(fit.floor), 1e-3)
        except Exception:  # noqa: BLE001 - any failure of the rough start: use a plain guess
            t_start, n_start = 0.3 * float(np.ptp(self.tau)) or 1.0, 0.05
        self.start = np.array([t_start, n_start])
        low, high = default_lifetime_bounds([start_series])
        self.specs = (
            default_spec("lifetime", "s", "T_c", low, high, True),
            default_spec("n_thermal", "", "n_th", 1e-6, 10.0, True),
        )

    def populations(self, theta: np.ndarray) -> np.ndarray:
        """Model populations (k, m, K) at parameters (k, 2)."""
        theta = as_batch(theta, 2)
        if self.method == "closed-form":
            return fock_populations(theta[:, 0], theta[:, 1], self.p0, self.tau, self.n_levels)
        from cavchar.dynamics import populations, truncation_levels

        out = np.empty((theta.shape[0], self.tau.size, self.n_levels))
        for i, (life, nth) in enumerate(theta):
            levels = max(truncation_levels(nth, max(self.n_levels, self.p0.size)),
                         self.n_levels, self.p0.size)
            pops = populations(1.0 / life, nth, self.p0, self.tau, n_levels=levels)
            out[i] = pops[:, :self.n_levels]
        return out

    def log_likelihood(self, theta: np.ndarray) -> np.ndarray:
        """(k, 2) -> (k,), columns lifetime, n_thermal."""
        theta = as_batch(theta, 2)
        ok = np.isfinite(theta).all(axis=1) & (theta[:, 0] > 0) & (theta[:, 1] >= 0)
        out = np.full(theta.shape[0], -np.inf)
        if not ok.any():
            return out
        pops = self.populations(theta[ok])
        with np.errstate(divide="ignore", invalid="ignore"):
            logp = np.where(self._observed, np.log(pops), 0.0)
        ll = (self.counts * logp).sum(axis=(1, 2)) + self._const
        out[ok] = np.where(np.isnan(ll), -np.inf, ll)
        return out

    __call__ = log_likelihood

    def expected(self, theta: np.ndarray) -> list[np.ndarray]:
        """Expected fractions (m, K) at ``theta``."""
        return [self.populations(np.asarray(theta, dtype=float)[None])[0]]

    def noise_scale(self, theta: np.ndarray) -> list[np.ndarray]:
        """Binomial sd of each fraction (m, K)."""
        p = self.expected(theta)[0]
        shots = self.counts.sum(axis=1, keepdims=True)
        return [np.sqrt(np.maximum(p * (1 - p), 1e-300) / np.maximum(shots, 1))]

