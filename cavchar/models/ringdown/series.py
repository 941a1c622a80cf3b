"""Pieces shared by the ring-down models: the data container, the default parameter
specifications and numerically safe Gaussian / Student-t interval probabilities."""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from cavchar.parameters import ParameterSpec
from cavchar.priors import LogUniform, Uniform

__all__ = ["DecaySeries", "DecayModel", "default_spec", "log_interval_probability",
           "draw_truncated", "as_batch", "amplitude_bound"]


@dataclass(frozen=True)
class DecaySeries:
    """One ring-down trace prepared for a model.

    Attributes
    ----------
    tau : ndarray, shape (n,)
        Times since the reference time ``t0`` of the trace, in s (>= 0).
    values : ndarray, shape (n,)
        Measured values (power, dB, magnitude, complex IQ or mean photon number).
    sigma : ndarray, shape (n,) or None
        Known per-point standard deviation (for IQ: per quadrature); ``None``
        when the noise scale is fitted.
    t0 : float
        Absolute time of ``tau = 0`` in s (amplitudes refer to it).
    label : str
        Name of the trace (file or trace column value).
    """

    tau: np.ndarray
    values: np.ndarray
    sigma: np.ndarray | None = None
    t0: float = 0.0
    label: str = ""

    @classmethod
    def from_times(cls, t: ArrayLike, values: ArrayLike, sigma: ArrayLike | None = None,
                   *, t0: float | None = None, label: str = "") -> DecaySeries:
        """Build from absolute times ``t`` (s); ``t0`` defaults to the first time."""
        t = np.asarray(t, dtype=float)
        t0 = float(t.min()) if t0 is None else float(t0)
        values = np.asarray(values)
        sig = None if sigma is None else np.broadcast_to(
            np.asarray(sigma, dtype=float), t.shape).copy()
        return cls(tau=t - t0, values=values, sigma=sig, t0=t0, label=label)

    @property
    def n(self) -> int:
        """Number of points."""
        return int(self.tau.size)

    @property
    def span(self) -> float:
        """Time spanned by the points (s), 0 for an empty series."""
        return float(np.ptp(self.tau)) if self.tau.size else 0.0

    def weights(self) -> np.ndarray:
        """``1 / sigma^2`` (ones when sigma is fitted)."""
        return np.ones(self.n) if self.sigma is None else 1.0 / self.sigma**2


def default_spec(name: str, unit: str, label: str, low: float, high: float,
                 log_scale: bool = True) -> ParameterSpec:
    """A sampled parameter of a ring-down model with its default prior: log-uniform on
    ``[low, high]`` (physical units) when ``log_scale``, else uniform.  The fit layer
    replaces the prior with the user's and fills in a data unit where ``unit`` is empty."""
    prior = LogUniform(low, high) if log_scale else Uniform(low, high)
    return ParameterSpec(name, unit, label, prior, log_scale=log_scale)


def as_batch(theta: ArrayLike, ndim: int) -> np.ndarray:
    """Parameters as a float array of shape (k, ndim)."""
    theta = np.asarray(theta, dtype=float)
    if theta.ndim == 1:
        theta = theta[None, :]
    if theta.ndim != 2 or theta.shape[1] != ndim:
        raise ValueError(f"parameters must have shape (k, {ndim}), got {theta.shape}")
    return theta


def _log_cdf(x: np.ndarray, dof: float | None) -> np.ndarray:
    """ln P(X <= x) for a standard normal (``dof=None``) or Student-t."""
    if dof is None:
        return special.log_ndtr(x)
    with np.errstate(divide="ignore"):
        return np.log(special.stdtr(dof, x))


@functools.lru_cache(maxsize=64)
def _negligible_tail(dof: float | None) -> float:
    """``x`` beyond which a standard normal / Student-t tail is below 1e-18."""
    return 38.5 if dof is None else float(-special.stdtrit(dof, 1e-18))


def log_interval_probability(low: ArrayLike, high: ArrayLike, dof: float | None = None
                             ) -> np.ndarray:
    """``ln P(low < X < high)`` for a standard normal or Student-t ``X`` (stable in the tails).

    By symmetry ``P(l < X < u) = P(-u < X < -l)``; the interval is mirrored to
    lie mostly below zero, so that ``ln(F(u) - F(l))`` is formed from small,
    accurately represented lower-tail probabilities.  Entries whose interval
    covers all but 1e-18 of the law are exactly 0 (no special-function call).
    """
    low = np.asarray(low, dtype=float)
    high = np.asarray(high, dtype=float)
    out = np.zeros(np.broadcast(low, high).shape)
    low, high = np.broadcast_to(low, out.shape), np.broadcast_to(high, out.shape)
    edge = _negligible_tail(dof)
    need = (low > -edge) | (high < edge) | np.isnan(low) | np.isnan(high)
    if not need.any():
        return out
    lo_in, hi_in = low[need], high[need]
    flip = (lo_in + hi_in) > 0
    lo = np.where(flip, -hi_in, lo_in)
    hi = np.where(flip, -lo_in, hi_in)
    log_hi = _log_cdf(hi, dof)
    log_lo = _log_cdf(lo, dof)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        val = log_hi + np.log1p(-np.exp(log_lo - log_hi))
    out[need] = np.where(np.isnan(val), -np.inf, val)
    return out


def draw_truncated(rng: np.random.Generator, mean: np.ndarray, scale: np.ndarray,
                   low: float | np.ndarray, high: float | np.ndarray,
                   dof: float | None = None) -> np.ndarray:
    """Draws of ``mean + scale X`` with ``X`` normal (``dof=None``) or Student-t, truncated
    to ``[low, high]`` (inverse CDF on the smaller tail, so it stays exact far out)."""
    mean = np.asarray(mean, dtype=float)
    scale = np.asarray(scale, dtype=float)
    a = (np.asarray(low, dtype=float) - mean) / scale
    b = (np.asarray(high, dtype=float) - mean) / scale
    flip = (a + b) > 0
    lo = np.where(flip, -b, a)
    hi = np.where(flip, -a, b)
    if dof is None:
        cdf, ppf = special.ndtr, special.ndtri
    else:
        def cdf(x):
            return special.stdtr(dof, x)

        def ppf(p):
            return special.stdtrit(dof, p)
    p_lo, p_hi = cdf(lo), cdf(hi)
    u = rng.uniform(size=mean.shape)
    x = ppf(np.clip(p_lo + u * (p_hi - p_lo), 1e-300, 1.0))
    x = np.clip(x, lo, hi)
    return mean + scale * np.where(flip, -x, x)


def amplitude_bound(values: np.ndarray, factor: float = 100.0) -> float:
    """Default upper bound of a flat amplitude prior: ``factor`` times the data range."""
    span = float(np.ptp(np.abs(values))) if np.size(values) else 0.0
    top = float(np.max(np.abs(values))) if np.size(values) else 0.0
    return factor * max(span, top, math.ulp(1.0))


class DecayModel:
    """Shared part of the ring-down models: the parameter count follows the specs, the
    start is the least-squares point and nothing is marginalized unless a model says so."""

    specs: tuple[ParameterSpec, ...]
    start: np.ndarray

    @property
    def ndim(self) -> int:
        """Number of sampled parameters: one per spec, in the order of ``theta``'s columns."""
        return len(self.specs)

    def initial_guess(self) -> np.ndarray:
        """The least-squares start, shape ``(ndim,)`` in physical units (a copy)."""
        return self.start.copy()

    def _hold(self, series: DecaySeries) -> None:
        """Keep one trace: ``series``, its delays ``tau`` in s (float array) and whether its
        noise sigma is unknown (then fitted)."""
        self.series = series
        self.tau = np.asarray(series.tau, dtype=float)
        self.fitted_sigma = series.sigma is None

    def draw_nuisance(self, draws: np.ndarray, rng: np.random.Generator) -> dict:
        """Exact conditional draws of the analytically marginalized parameters; a model
        that marginalizes none returns an empty dict."""
        return {}
