r"""Ring-downs recorded in decibels (spectrum-analyser zero-span traces).

Model (``tau = t - t0``; amplitude ``A`` and floor ``F`` in the linear power
units of the dB reference, e.g. mW for dBm)::

    y_i = 10 log10(A exp(-tau_i / T_c) + F) + e_i,     e_i ~ N(0, sigma_i^2) in dB

so a noise floor bends the curve instead of being cut away by hand.  Sampled:
``lifetime`` (s), ``amplitude``, ``floor`` (both > 0).  The dB noise is known
per point or unknown; unknown noise is marginalized with the prior
``p(sigma) = 1/sigma``:

    ln L = ln Gamma(n/2) + (n/2 - 1) ln 2 - (n/2) ln(2 pi) - (n/2) ln RSS,
    RSS = sum_i (y_i - mu_i)^2,

and ``sigma^2 | rest = RSS / chi^2_n`` gives exact draws of it afterwards.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize, special

from cavchar.models.ringdown.least_squares import fit_exponentials
from cavchar.models.ringdown.power import default_lifetime_bounds
from cavchar.models.ringdown.series import DecayModel, DecaySeries, as_batch, default_spec

__all__ = ["DecibelDecay", "db_model"]

_BLOCK = 2_000_000  # largest (parameter sets x points) block evaluated at once


def db_model(tau: np.ndarray, lifetime, amplitude, floor) -> np.ndarray:
    """``10 log10(A exp(-tau/T_c) + F)``; broadcasts parameters (k, 1) against tau (n,)."""
    return 10.0 * np.log10(amplitude * np.exp(-tau / lifetime) + floor)


class DecibelDecay(DecayModel):
    """Exponential decay with floor observed in dB (module docstring).

    Parameters
    ----------
    series
        One trace; ``values`` in dB, ``sigma`` in dB or ``None`` (unknown).
    """

    signal = "db"

    def __init__(self, series: DecaySeries) -> None:
        self._hold(series)
        self.y = np.asarray(series.values, dtype=float)
        n = series.n
        if self.fitted_sigma:
            self._const = (special.gammaln(n / 2) + (n / 2 - 1) * math.log(2)
                           - 0.5 * n * math.log(2 * math.pi))
            self._w = None
        else:
            self._w = 1.0 / series.sigma**2
            self._const = -0.5 * float(np.sum(np.log(2 * math.pi * series.sigma**2)))
        self.start = self._least_squares()
        low, high = default_lifetime_bounds([series])
        peak = float(10 ** (self.y.max() / 10))
        base = float(10 ** (self.y.min() / 10))
        self.specs = (
            default_spec("lifetime", "s", "T_c", low, high, True),
            default_spec("amplitude", "", "A", 1e-6 * peak, 1e3 * peak, True),
            default_spec("floor", "", "F", 1e-9 * base, 1e3 * peak, True),
        )

    def _least_squares(self) -> np.ndarray:
        """Start: linear-power fit (relative weights), then least squares in dB."""
        power = 10 ** (self.y / 10)
        lin = fit_exponentials(self.tau, power, 1, sigma=power, t0=0.0)
        amp = max(float(lin.amplitudes[0]), 1e-3 * float(power.max()))
        flo = max(float(lin.floor), 1e-4 * float(power.min()), 1e-12 * float(power.max()))
        x0 = np.log([1.0 / lin.rates[0], amp, flo])
        sw = np.ones_like(self.y) if self._w is None else np.sqrt(self._w)

        def resid(x):
            t, a, f = np.exp(x)
            return (self.y - db_model(self.tau, t, a, f)) * sw

        sol = optimize.least_squares(resid, x0, method="lm", xtol=1e-12, ftol=1e-12)
        return np.exp(sol.x)

    def _rss(self, theta: np.ndarray) -> np.ndarray:
        out = np.empty(theta.shape[0])
        step = max(1, _BLOCK // max(self.tau.size, 1))
        for s in range(0, theta.shape[0], step):
            t = theta[s:s + step]
            mu = db_model(self.tau, t[:, 0:1], t[:, 1:2], t[:, 2:3])
            res = self.y - mu
            sq = res * res
            out[s:s + step] = sq.sum(axis=1) if self._w is None else np.einsum("kn,n->k", sq,
                                                                                 self._w)
        return out

    def log_likelihood(self, theta: np.ndarray) -> np.ndarray:
        """(k, 3) -> (k,) with columns lifetime, amplitude, floor."""
        theta = as_batch(theta, 3)
        ok = np.isfinite(theta).all(axis=1) & (theta > 0).all(axis=1)
        out = np.full(theta.shape[0], -np.inf)
        if not ok.any():
            return out
        rss = self._rss(theta[ok])
        with np.errstate(divide="ignore"):
            ll = -0.5 * self.tau.size * np.log(rss) if self.fitted_sigma else -0.5 * rss
        out[ok] = np.where(np.isfinite(ll), ll + self._const, -np.inf)
        return out

    __call__ = log_likelihood

    def draw_nuisance(self, draws: np.ndarray, rng: np.random.Generator) -> dict:
        """Exact draws of the dB noise ``sigma_db`` given each draw (unknown noise only)."""
        if not self.fitted_sigma:
            return {}
        rss = self._rss(as_batch(draws, 3))
        return {"sigma_db": np.sqrt(rss / rng.chisquare(self.tau.size, size=rss.shape))}

    def expected(self, theta: np.ndarray) -> list[np.ndarray]:
        """Model curve (dB) at the parameters ``theta`` (3,)."""
        t, a, f = np.asarray(theta, dtype=float)
        return [db_model(self.tau, t, a, f)]

    def noise_scale(self, theta: np.ndarray) -> list[np.ndarray]:
        """Per-point noise sd (dB): known sigma, or the conditional estimate sqrt(RSS/n)."""
        if not self.fitted_sigma:
            return [self.series.sigma]
        rss = float(self._rss(as_batch(theta, 3))[0])
        return [np.full(self.tau.size, math.sqrt(rss / self.tau.size))]
