"""The quantities every fit reports: their units, labels, and the cavity's figures of merit.

One home for what a column of posterior draws means (``COLUMN_INFO``: unit,
dimension for formatting, printed label) and for the figures of merit computed
from the energy lifetime ``T_c = 1/kappa``:

* quality factor ``Q = 2 pi nu T_c`` (``Q = 2 pi`` x stored energy / energy lost
  per cycle; Pozar, *Microwave Engineering*, 4th ed., sec. 6.1);
* linewidth (full width at half maximum of the Lorentzian power spectrum)
  ``kappa / (2 pi) = 1 / (2 pi T_c)`` in Hz;
* amplitude decay time ``2 T_c``: the field decays at half the energy rate.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike

#: probability mass of a one-sigma interval of a normal law (the "68%" intervals)
CREDIBLE_68 = math.erf(1.0 / math.sqrt(2.0))
#: lower and upper quantile of the equal-tailed 68% interval (0.15866, 0.84134): the one
#: definition every table, trend, check and corner title uses
QUANTILES_68 = ((1.0 - CREDIBLE_68) / 2.0, (1.0 + CREDIBLE_68) / 2.0)


__all__ = ["COLUMN_INFO", "CREDIBLE_68", "QUANTILES_68", "quality_factor", "linewidth",
           "amplitude_decay_time"]

#: column name -> (unit, dimension of :mod:`cavchar.units`, printed label)
COLUMN_INFO: dict[str, tuple[str, str, str]] = {
    "lifetime": ("s", "time", "T_c"),
    "n_thermal": ("", "dimensionless", "n_th"),
    "quality_factor": ("", "dimensionless", "Q"),
    "linewidth": ("Hz", "frequency", "linewidth (FWHM)"),
    "amplitude_decay_time": ("s", "time", "amplitude decay time 2 T_c"),
    "effective_temperature": ("K", "temperature", "T_eff"),
    "stage_occupation": ("", "dimensionless", "n(nu, T_stage)"),
    "excess_photons": ("", "dimensionless", "n_th - n(nu, T_stage)"),
}


def quality_factor(freq_hz: ArrayLike, lifetime_s: ArrayLike) -> np.ndarray:
    """``Q = 2 pi nu T_c`` (dimensionless) from the mode frequency (Hz) and T_c (s)."""
    return 2.0 * np.pi * np.asarray(freq_hz, dtype=float) * np.asarray(lifetime_s, dtype=float)


def linewidth(lifetime_s: ArrayLike) -> np.ndarray:
    """FWHM linewidth ``kappa / 2 pi = 1 / (2 pi T_c)`` in Hz from T_c in s."""
    return 1.0 / (2.0 * np.pi * np.asarray(lifetime_s, dtype=float))


def amplitude_decay_time(lifetime_s: ArrayLike) -> np.ndarray:
    """Decay time of the field amplitude, ``2 T_c`` in s, from the energy lifetime T_c in s."""
    return 2.0 * np.asarray(lifetime_s, dtype=float)
