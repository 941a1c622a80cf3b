"""Posteriors that pile up against a bound of their prior.

When the data do not constrain a parameter on one side, its posterior runs
into the prior's bound there (a jump record with an absurd last time puts the
lifetime against the 1000 s default bound; a cold mode puts ``n_th`` against
the lower bound).  A median and interval would then describe the prior, not
the measurement, so such a parameter is reported as a one-sided limit:

* the posterior *reaches* a bound when, on the sampling scale (``ln x`` for
  log-scale parameters), the density of the draws in the bin next to the bound
  is at least :data:`REACH_FRACTION` of the highest bin density, with bins of
  one tenth of the central 95% width (a normal posterior whose mode lies
  within about 2.1 sd of the bound qualifies; one 3 sd away does not:
  ``exp(-9/2) = 0.011``);
* the reported limit is the 5% quantile for an upper bound ("not constrained
  above X"; a one-sided 95% lower limit) and the 95% quantile for a lower
  bound ("not constrained below X"; a one-sided 95% upper limit).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence

import numpy as np

from cavchar.errors import PriorDominatedWarning

__all__ = ["prior_bound_check", "REACH_FRACTION"]

#: bin density next to a bound, relative to the highest bin, that counts as reaching it
REACH_FRACTION = 0.1
_BINS_PER_WIDTH = 10


def _scale(values, log_scale: bool):
    values = np.asarray(values, dtype=float)
    if not log_scale:
        return values
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.log(values)


def _reaches(u: np.ndarray, bound: float, side: str) -> tuple[bool, float]:
    """Whether draws ``u`` reach ``bound`` on ``side``; and the density ratio there."""
    lo, hi = np.quantile(u, [0.025, 0.975])
    width = (hi - lo) / _BINS_PER_WIDTH
    if not math.isfinite(bound) or not width > 0:
        return False, 0.0
    if side == "upper":
        edges = np.arange(bound, u.min() - width, -width)[::-1]
    else:
        edges = np.arange(bound, u.max() + width, width)
    if edges.size < 2:
        return True, 1.0
    counts, _ = np.histogram(u, bins=edges)
    peak = counts.max()
    if peak == 0:
        return False, 0.0
    next_to_bound = counts[-1] if side == "upper" else counts[0]
    ratio = float(next_to_bound / peak)
    return ratio >= REACH_FRACTION, ratio


def prior_bound_check(specs: Sequence, draws: np.ndarray, *, warn: bool = True) -> dict:
    """Find parameters whose posterior reaches a bound of their prior (module docstring).

    Parameters
    ----------
    specs : sequence of ParameterSpec
        Parameter specifications in column order (their ``prior.support`` and
        ``log_scale``).
    draws : ndarray, shape (n_draws, ndim)
        Posterior draws in physical units.
    warn : bool
        Raise a :class:`~cavchar.errors.PriorDominatedWarning` per flagged parameter.

    Returns
    -------
    dict
        ``{"parameters": {name: {"side" ("upper", "lower" or "both"), "bounds",
        "limit", "limit_kind", "density_ratio", "unit", "message"}},
        "flags": [messages]}``;
        only parameters that reach a bound are listed.
    """
    from cavchar.units import format_quantity

    draws = np.asarray(draws, dtype=float)
    out: dict = {"parameters": {}, "flags": []}
    for i, spec in enumerate(specs):
        x = draws[:, i]
        x = x[np.isfinite(x)]
        if x.size < 20:
            continue
        low, high = spec.prior.support
        u = _scale(x, spec.log_scale)
        reached = {}
        for side, bound in (("upper", high), ("lower", low)):
            if not math.isfinite(bound) or (spec.log_scale and bound <= 0):
                continue
            hit, ratio = _reaches(u, float(_scale(bound, spec.log_scale)), side)
            if hit:
                reached[side] = (float(bound), ratio)
        if not reached:
            continue

        def fmt(v: float, spec=spec) -> str:
            try:
                return format_quantity(v, spec.dimension, 3)
            except KeyError:
                return f"{v:.3g} {spec.unit}".strip()

        label = spec.label
        if len(reached) == 2:
            side, limit, kind = "both", math.nan, "none"
            message = (f"the posterior of {label} fills its prior range "
                       f"[{fmt(low)}, {fmt(high)}]: the data do not constrain {label}")
        elif "upper" in reached:
            side, limit, kind = "upper", float(np.quantile(x, 0.05)), "lower limit (5% quantile)"
            message = (f"the posterior of {label} reaches the prior's upper bound "
                       f"{fmt(high)}: the data do not constrain {label} above {fmt(limit)}; "
                       f"report {label} > {fmt(limit)} (95%, one-sided), not the median "
                       "and interval")
        else:
            side, limit, kind = "lower", float(np.quantile(x, 0.95)), "upper limit (95% quantile)"
            message = (f"the posterior of {label} reaches the prior's lower bound "
                       f"{fmt(low)}: the data do not constrain {label} below {fmt(limit)}; "
                       f"report {label} < {fmt(limit)} (95%, one-sided), not the median "
                       "and interval")
        out["parameters"][spec.name] = {
            "side": side, "bounds": [float(low), float(high)], "limit": limit,
            "limit_kind": kind, "density_ratio": {k: v[1] for k, v in reached.items()},
            "unit": spec.unit, "message": message}
        out["flags"].append(message)
        if warn:
            warnings.warn(message, PriorDominatedWarning, stacklevel=3)
    return out
