"""Planck (Bose–Einstein) occupation of a mode and its inverse, the effective temperature.

Equations (any statistical-mechanics textbook; constants exact in the 2019 SI,
taken from :mod:`scipy.constants`):

    n(nu, T)   = 1 / (exp(h nu / k_B T) - 1)
    T_eff(n)   = h nu / (k_B ln(1 + 1/n))
    n_mix      = (1 - f) n(nu, T_cold) + f n(nu, T_hot)        (two baths)

All functions are vectorized over numpy broadcasting; frequency in Hz,
temperature in K.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants

__all__ = [
    "H_OVER_KB",
    "planck_occupation",
    "effective_temperature",
    "two_bath_occupation",
    "d_occupation_d_temperature",
    "d_temperature_d_occupation",
]

#: h / k_B in kelvin per hertz (exact in the 2019 SI): 47.99 mK per GHz
H_OVER_KB: float = constants.h / constants.k


def _reduced_energy(freq_hz: ArrayLike, temp_k: ArrayLike) -> np.ndarray:
    nu = np.asarray(freq_hz, dtype=float)
    temp = np.asarray(temp_k, dtype=float)
    if np.any(nu <= 0):
        raise ValueError("mode frequency must be positive")
    if np.any(temp < 0):
        raise ValueError("temperature must be >= 0 K")
    with np.errstate(divide="ignore"):
        return H_OVER_KB * nu / temp  # +inf at T = 0


def planck_occupation(freq_hz: ArrayLike, temp_k: ArrayLike) -> np.ndarray:
    """Mean thermal photon number ``n = 1/expm1(h nu / k_B T)``.

    Stable at both ends: exactly 0 at T = 0 (and no overflow for
    h nu >> k_B T), and ``k_B T / h nu - 1/2`` accuracy preserved for
    T -> infinity because ``expm1`` keeps the small argument exact.

    Parameters
    ----------
    freq_hz : array_like
        Mode frequency nu in Hz (> 0).
    temp_k : array_like
        Bath temperature T in K (>= 0).
    """
    x = _reduced_energy(freq_hz, temp_k)
    with np.errstate(over="ignore"):
        return 1.0 / np.expm1(x)


def effective_temperature(freq_hz: ArrayLike, n_th: ArrayLike) -> np.ndarray:
    """Temperature at which the Planck occupation equals ``n_th``:
    ``T_eff = h nu / (k_B ln(1 + 1/n_th))``; 0 K for ``n_th = 0``.

    ``log1p(1/n)`` is used so that large occupations (T -> infinity) lose no digits.
    """
    nu = np.asarray(freq_hz, dtype=float)
    n = np.asarray(n_th, dtype=float)
    if np.any(n < 0):
        raise ValueError("thermal photon number must be >= 0")
    with np.errstate(divide="ignore"):
        return H_OVER_KB * nu / np.log1p(1.0 / n)


def two_bath_occupation(
    freq_hz: ArrayLike, t_cold_k: ArrayLike, t_hot_k: ArrayLike, hot_fraction: ArrayLike
) -> np.ndarray:
    """Occupation of a mode coupled to a cold bath with weight ``1 - f`` and a hot
    bath with weight ``f``: ``(1 - f) n(nu, T_cold) + f n(nu, T_hot)``."""
    f = np.asarray(hot_fraction, dtype=float)
    if np.any((f < 0) | (f > 1)):
        raise ValueError("hot fraction must lie in [0, 1]")
    return (1.0 - f) * planck_occupation(freq_hz, t_cold_k) + f * planck_occupation(
        freq_hz, t_hot_k
    )


def d_occupation_d_temperature(freq_hz: ArrayLike, temp_k: ArrayLike) -> np.ndarray:
    """dn/dT in 1/K: ``(x / T) e^x / (e^x - 1)^2`` with ``x = h nu / k_B T``.

    Written as ``(x/T) n (1 + n)`` which stays finite for large x (where it tends to 0).
    """
    x = _reduced_energy(freq_hz, temp_k)
    n = planck_occupation(freq_hz, temp_k)
    temp = np.asarray(temp_k, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        out = (x / temp) * n * (1.0 + n)
    return np.where(np.isfinite(out), out, 0.0)


def d_temperature_d_occupation(freq_hz: ArrayLike, n_th: ArrayLike) -> np.ndarray:
    """dT_eff/dn in K: ``T_eff^2 / (T_0 n (1 + n))`` with ``T_0 = h nu / k_B``."""
    nu = np.asarray(freq_hz, dtype=float)
    n = np.asarray(n_th, dtype=float)
    t0 = H_OVER_KB * nu
    t_eff = effective_temperature(nu, n)
    with np.errstate(divide="ignore", invalid="ignore"):
        return t_eff**2 / (t0 * n * (1.0 + n))
