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
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

#: probability mass of a one-sigma interval of a normal law (the "68%" intervals)
CREDIBLE_68 = math.erf(1.0 / math.sqrt(2.0))
#: lower and upper quantile of the equal-tailed 68% interval (0.15866, 0.84134): the one
#: definition every table, trend, check and corner title uses
QUANTILES_68 = ((1.0 - CREDIBLE_68) / 2.0, (1.0 + CREDIBLE_68) / 2.0)


__all__ = ["COLUMN_INFO", "DESCRIPTIONS", "short_label", "CREDIBLE_68", "QUANTILES_68",
           "INTERVAL_QUANTILES", "Interval", "interval", "quality_factor", "linewidth",
           "amplitude_decay_time", "data_units", "UNKNOWN_DATA_UNIT"]

#: the unit of values in the data's own, unstated unit ("arbitrary units")
UNKNOWN_DATA_UNIT = "a.u."
#: linear power unit of a dB reference (dBm: 10 log10(P / 1 mW))
_DB_REFERENCE = {"dbm": "mW", "dbw": "W", "dbmw": "mW"}


def data_units(signal: str, value_unit: str | None = None) -> dict[str, str]:
    """Units of a ring-down model's parameters that live in the data's units.

    Parameters
    ----------
    signal
        The signal kind (``power``, ``power2``, ``db``, ``amplitude``, ``iq``, ...).
    value_unit
        The unit of the trace's values (a header ``I (V)`` or a ``# value_unit: V``
        line); None when the file does not say (then :data:`UNKNOWN_DATA_UNIT`).

    Returns
    -------
    dict
        Column root (``amplitude``, ``floor``, ``sigma``, ``offset_re``, ...; a
        several-trace column ``amplitude_2`` has the root ``amplitude``) -> unit.
        A dB trace's amplitude and floor are linear powers in the unit of its dB
        reference (dBm -> mW, dBW -> W; a bare dB says nothing, so a.u.) and its
        noise is in dB; an IQ trace's phase is in rad.
    """
    unit = (value_unit or "").strip() or UNKNOWN_DATA_UNIT
    if signal == "db":
        linear = _DB_REFERENCE.get(unit.lower().replace(" ", ""), UNKNOWN_DATA_UNIT)
        return {"amplitude": linear, "floor": linear, "sigma_db": "dB", "sigma": "dB"}
    if signal in ("power", "power2", "amplitude", "iq"):
        return {"amplitude": unit, "amplitude_fast": unit, "floor": unit, "sigma": unit,
                "offset_re": unit, "offset_im": unit, "phase": "rad"}
    return {}


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

#: column name -> what it is, in words (report tables, qualification messages)
DESCRIPTIONS: dict[str, str] = {
    "lifetime": "energy lifetime T_c",
    "quality_factor": "quality factor Q = 2π ν T_c",
    "linewidth": "linewidth (FWHM) 1/(2π T_c)",
    "n_thermal": "thermal photon number n_th",
    "effective_temperature": "effective temperature T_eff",
    "amplitude_decay_time": "amplitude decay time 2 T_c",
    "excess_photons": "excess photons n_th − n(ν, T_stage)",
}


def short_label(name: str) -> str:
    """The printed label of a result column (``"lifetime"`` -> ``"T_c"``); the name itself
    for a column without one."""
    info = COLUMN_INFO.get(name)
    return info[2] if info else name


def quality_factor(freq_hz: ArrayLike, lifetime_s: ArrayLike) -> np.ndarray:
    """``Q = 2 pi nu T_c`` (dimensionless) from the mode frequency (Hz) and T_c (s)."""
    return 2.0 * np.pi * np.asarray(freq_hz, dtype=float) * np.asarray(lifetime_s, dtype=float)


def linewidth(lifetime_s: ArrayLike) -> np.ndarray:
    """FWHM linewidth ``kappa / 2 pi = 1 / (2 pi T_c)`` in Hz from T_c in s."""
    return 1.0 / (2.0 * np.pi * np.asarray(lifetime_s, dtype=float))


def amplitude_decay_time(lifetime_s: ArrayLike) -> np.ndarray:
    """Decay time of the field amplitude, ``2 T_c`` in s, from the energy lifetime T_c in s."""
    return 2.0 * np.asarray(lifetime_s, dtype=float)


# --------------------------------------------------------------- one interval summary
@dataclass(frozen=True)
class Interval:
    """Median and equal-tailed 68 % / 95 % interval of a set of draws (their units)."""

    median: float
    lo68: float
    hi68: float
    lo95: float
    hi95: float
    n_draws: int

    def as_dict(self) -> dict[str, float]:
        """Plain-JSON form: median, 68% and 95% bounds and the number of draws."""
        return {"median": self.median, "lo68": self.lo68, "hi68": self.hi68,
                "lo95": self.lo95, "hi95": self.hi95, "n_draws": self.n_draws}


#: median and the 68.27 % / 95 % equal-tailed quantiles (FitResult.summary uses the same)
INTERVAL_QUANTILES = np.array([0.5, *QUANTILES_68, 0.025, 0.975])


def interval(draws: np.ndarray) -> Interval:
    """Median and 68.27 % / 95 % equal-tailed intervals of 1-D draws."""
    values = np.asarray(draws, dtype=float)
    q = np.quantile(values, INTERVAL_QUANTILES)
    return Interval(*(float(v) for v in q), n_draws=int(values.size))
