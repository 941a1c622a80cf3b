"""Quantities derived from posterior draws of the lifetime and the thermal photon number.

Per draw (equations; Q, linewidth and amplitude decay time from
:mod:`cavchar.quantities`, which also holds the units and labels of every column):

    quality_factor        Q = 2 pi nu T_c
    linewidth             FWHM = kappa / (2 pi) = 1 / (2 pi T_c)        [Hz]
    amplitude_decay_time  2 T_c (the field decays at half the energy rate)   [s]
    effective_temperature T_eff = h nu / (k_B ln(1 + 1/n_th))         [K]
    stage_occupation      n(nu, T_stage) = 1 / expm1(h nu / k_B T_stage)
    excess_photons        n_th - n(nu, T_stage)

and :func:`planck_check`, the comparison of the mode with its stage.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    import pandas as pd

from cavchar.errors import InputError
from cavchar.quantities import (
    COLUMN_INFO,
    CREDIBLE_68,
    QUANTILES_68,
    amplitude_decay_time,
    linewidth,
    quality_factor,
)
from cavchar.result_types import PlanckCheck

__all__ = ["add_derived_quantities", "planck_check", "format_probability",
           "format_probability_error", "COLUMN_INFO",
           "CREDIBLE_68", "QUANTILES_68", "PILE_UP_RATIO"]



#: n_th counts as piled up against zero when its 2.5% quantile is below this fraction
#: of its 97.5% quantile (the 95% interval spans more than two decades)
PILE_UP_RATIO = 0.01

#: P(hotter) above this reads "hotter than the stage"; below 1 - it "colder"
DECISION_PROBABILITY = 0.95


def _positive(value: float | None, what: str, allow_zero: bool = False) -> float | None:
    if value is None:
        return None
    value = float(value)
    ok = value >= 0 if allow_zero else value > 0
    if not (math.isfinite(value) and ok):
        raise InputError(f"{what} must be a {'non-negative' if allow_zero else 'positive'} "
                         f"finite number, got {value!r}")
    return value


def add_derived_quantities(samples: pd.DataFrame | Mapping[str, np.ndarray],
                           freq_hz: float | None = None,
                           stage_temp_k: float | None = None) -> pd.DataFrame | dict:
    """Add derived columns to a table of posterior draws.

    Parameters
    ----------
    samples
        Draws with a ``lifetime`` column (T_c in s) and optionally ``n_thermal``: a
        DataFrame or a mapping of equal-length arrays (then a dict is returned).
    freq_hz
        Mode frequency nu in Hz; needed for the quality factor and the temperatures.
    stage_temp_k
        Stage temperature in K; adds ``stage_occupation`` (constant column) and, with
        ``n_thermal``, ``excess_photons``.

    Returns
    -------
    DataFrame
        A new table (the input is not changed) with ``linewidth`` [Hz] and
        ``amplitude_decay_time`` [s] always; ``quality_factor`` with ``freq_hz``;
        ``effective_temperature`` [K] with ``freq_hz`` and ``n_thermal``;
        ``stage_occupation`` and ``excess_photons`` with ``freq_hz`` and ``stage_temp_k``.
    """
    from cavchar.thermal import effective_temperature, planck_occupation

    if "lifetime" not in _column_names(samples):
        raise InputError("derived quantities need a 'lifetime' column (T_c in s)")
    freq_hz = _positive(freq_hz, "mode frequency")
    stage_temp_k = _positive(stage_temp_k, "stage temperature", allow_zero=True)
    out = samples.copy() if hasattr(samples, "columns") else dict(samples)
    t_c = np.asarray(out["lifetime"], dtype=float)
    if np.any(~(t_c > 0)):
        raise InputError("lifetime draws must be positive")
    out["linewidth"] = linewidth(t_c)
    out["amplitude_decay_time"] = amplitude_decay_time(t_c)
    if freq_hz is not None:
        out["quality_factor"] = quality_factor(freq_hz, t_c)
    has_n = "n_thermal" in _column_names(out)
    if has_n and freq_hz is not None:
        n = np.asarray(out["n_thermal"], dtype=float)
        out["effective_temperature"] = effective_temperature(freq_hz, n)
    if freq_hz is not None and stage_temp_k is not None:
        n_stage = float(planck_occupation(freq_hz, stage_temp_k))
        out["stage_occupation"] = np.full(t_c.shape, n_stage)
        if has_n:
            out["excess_photons"] = np.asarray(out["n_thermal"], dtype=float) - n_stage
    return out


def _column_names(samples: Any) -> list[str]:
    """The column names of a DataFrame or of a mapping of columns."""
    return list(samples.columns) if hasattr(samples, "columns") else list(samples)


def _interval(x: np.ndarray) -> dict[str, float]:
    lo68, med, hi68 = np.quantile(x, [QUANTILES_68[0], 0.5, QUANTILES_68[1]])
    lo95, hi95 = np.quantile(x, [0.025, 0.975])
    return {"median": float(med), "lo68": float(lo68), "hi68": float(hi68),
            "lo95": float(lo95), "hi95": float(hi95)}


def planck_check(samples: pd.DataFrame | Mapping[str, np.ndarray], freq_hz: float,
                 stage_temp_k: float) -> PlanckCheck:
    """Compare the mode's thermal photon number with the Planck occupation of its stage.

    Parameters
    ----------
    samples
        Posterior draws with an ``n_thermal`` column.
    freq_hz
        Mode frequency nu in Hz.
    stage_temp_k
        Stage temperature in K.

    Returns
    -------
    PlanckCheck
        ``stage_occupation`` n(nu, T_stage); ``prob_hotter_than_stage`` = fraction of
        draws with ``n_th > n(nu, T_stage)`` (equivalently ``T_eff > T_stage``, since
        the Planck occupation increases with T); ``verdict`` ("hotter than the stage"
        if that probability exceeds 0.95, "colder than the stage" below 0.05, else
        "consistent with the stage"); ``n_thermal``, ``effective_temperature_k`` and
        ``excess_photons``: median with 68% and 95% equal-tailed intervals;
        ``piles_up_at_zero`` (2.5% quantile of n_th below 1% of its 97.5% quantile)
        and then ``n_thermal_upper95`` / ``effective_temperature_upper95_k``, the
        one-sided 95% upper limits to quote instead of an interval.
    """
    from cavchar.thermal import effective_temperature, planck_occupation

    if "n_thermal" not in _column_names(samples):
        raise InputError("a Planck check needs posterior draws of the thermal photon number",
                         hint="this fit has no n_thermal parameter")
    freq_hz = _positive(freq_hz, "mode frequency")
    stage_temp_k = _positive(stage_temp_k, "stage temperature", allow_zero=True)
    n = np.asarray(samples["n_thermal"], dtype=float)
    if n.size == 0:
        raise InputError("no posterior draws to check")
    n_stage = float(planck_occupation(freq_hz, stage_temp_k))
    t_eff = effective_temperature(freq_hz, n)
    p_hot = float(np.mean(n > n_stage))
    if p_hot > DECISION_PROBABILITY:
        verdict = "hotter than the stage"
    elif p_hot < 1 - DECISION_PROBABILITY:
        verdict = "colder than the stage"
    else:
        verdict = "consistent with the stage"
    n_int = _interval(n)
    piles_up = bool(n_int["lo95"] < PILE_UP_RATIO * n_int["hi95"])
    out: dict[str, Any] = {
        "freq_hz": freq_hz,
        "stage_temperature_k": stage_temp_k,
        "stage_occupation": n_stage,
        "prob_hotter_than_stage": p_hot,
        "decision_probability": DECISION_PROBABILITY,
        "verdict": verdict,
        "n_thermal": n_int,
        "effective_temperature_k": _interval(t_eff),
        "excess_photons": _interval(n - n_stage),
        "piles_up_at_zero": piles_up,
        "pile_up_ratio": PILE_UP_RATIO,
        "n_draws": int(n.size),
    }
    if piles_up:
        n_upper = float(np.quantile(n, 0.95))
        out["n_thermal_upper95"] = n_upper
        # T_eff increases with n, so the limit maps through exactly
        out["effective_temperature_upper95_k"] = float(effective_temperature(freq_hz, n_upper))
    return PlanckCheck(**out)


def format_probability_error(p: float, mc_error: float, decimals: int = 3) -> str:
    """A probability with its Monte Carlo error, ``"0.973 ± 0.004"``; a value within
    the display resolution of 1 or 0 is written as a bound, ``"> 0.999 (± 0.000)"``,
    never as ``"1.000"`` (see :func:`format_probability`)."""
    text = format_probability(p, None, decimals)
    if text.startswith((">", "<")):
        return f"{text} (± {mc_error:.{decimals}f})"
    return f"{text} ± {mc_error:.{decimals}f}"


def format_probability(p: float | None, n_draws: int | None = None, decimals: int = 3) -> str:
    """A posterior probability for people to read: never printed as exactly 1 or 0.

    A probability estimated from ``n_draws`` Monte Carlo draws cannot be told
    from 1 (or 0) closer than its resolution ``1/n_draws``, and one shown with
    ``decimals`` places cannot be told from them closer than ``10**-decimals``.
    Within the larger of the two from either end the value is written as a
    bound, with the resolution when the number of draws is known::

        format_probability(1.0, 4000)   -> "> 0.999 (Monte Carlo resolution 0.0003, 4000 draws)"
        format_probability(0.0)         -> "< 0.001"
        format_probability(0.97312)     -> "0.973"

    Parameters
    ----------
    p
        The probability (fraction of draws), in [0, 1].
    n_draws
        Number of draws it was estimated from, if known.
    decimals
        Decimal places of an interior value (at least 1).

    Returns
    -------
    str
        The text; ``"unknown"`` for None or a non-finite value.
    """
    if p is None or isinstance(p, bool) or not isinstance(p, numbers.Real) \
            or not math.isfinite(p):
        return "unknown"
    p = min(max(float(p), 0.0), 1.0)
    decimals = max(1, int(decimals))
    edge = 10.0**-decimals
    note = ""
    if isinstance(n_draws, numbers.Integral) and not isinstance(n_draws, bool) and n_draws > 0:
        n_draws = int(n_draws)
        edge = max(edge, 1.0 / n_draws)
        note = f" (Monte Carlo resolution {1.0 / n_draws:.1g}, {n_draws} draws)"
    shown = round(p, decimals)
    if p > 1.0 - edge or shown >= 1.0:
        return f"> {1.0 - edge:.{decimals}f}{note}"
    if p < edge or shown <= 0.0:
        return f"< {edge:.{decimals}f}{note}"
    return f"{p:.{decimals}f}"
