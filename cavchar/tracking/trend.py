"""Lifetime, thermal photon number and effective temperature of a cavity per
cooldown, and the posterior probability that the lifetime fell.

Intervals are equal-tailed quantiles of the stored posterior draws: 68 %
(16th-84th percentile) and 95 % (2.5th-97.5th).

Drop probability.  With X the lifetime in a cooldown and Y in the reference
cooldown, independent posteriors (different data), the probability that the
lifetime fell by more than a fraction ``delta`` is

    P(X < (1 - delta) Y) = integral p_X(x) P_Y(Y > x / (1 - delta)) dx,

estimated from all n*m pairs of the stored draws (an unbiased two-sample
U-statistic; Hoeffding 1948, from memory), in O((n + m) log n) by sorting.
Its Monte Carlo error for independent draws is
``sqrt(var_i(a_i)/n + var_j(b_j)/m)`` with ``a_i`` the fraction of reference
draws above ``x_i / (1 - delta)`` and ``b_j`` the fraction of draws below
``(1 - delta) y_j``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from cavchar.errors import InputError
from cavchar.tracking.records import FitRecord
from cavchar.tracking.store import CooldownLog

__all__ = ["Interval", "TrendRow", "Trend", "interval", "drop_probability", "cooldown_trend",
           "fit_draws", "TREND_QUANTITIES"]

#: quantity -> (column, unit symbol, dimension of cavchar.units)
TREND_QUANTITIES = {
    "lifetime": ("lifetime", "s", "time"),
    "n_thermal": ("n_thermal", "", "dimensionless"),
    "effective_temperature": ("effective_temperature", "K", "temperature"),
}


@dataclass(frozen=True)
class Interval:
    """Median and equal-tailed 68 % / 95 % interval of a set of draws (their units)."""

    median: float
    low_68: float
    high_68: float
    low_95: float
    high_95: float
    n_draws: int

    def as_dict(self) -> dict[str, float]:
        return {"median": self.median, "low_68": self.low_68, "high_68": self.high_68,
                "low_95": self.low_95, "high_95": self.high_95, "n_draws": self.n_draws}


def interval(draws: np.ndarray) -> Interval:
    """Median and 68 % / 95 % equal-tailed intervals of 1-D draws."""
    values = np.asarray(draws, dtype=float)
    q = np.quantile(values, [0.5, 0.16, 0.84, 0.025, 0.975])
    return Interval(*(float(v) for v in q), n_draws=int(values.size))


_QUANTILES = np.array([0.5, 0.16, 0.84, 0.025, 0.975])


def _sorted_intervals(arrays: dict[int, np.ndarray]
                      ) -> tuple[dict[int, Interval], dict[int, np.ndarray]]:
    """Intervals of many draw sets at once: rows of equal length are stacked and sorted
    in one call; quantiles by linear interpolation at (n - 1) q (numpy's default
    method).  Returns the intervals and the sorted draws, both by key."""
    by_length: dict[int, list[int]] = {}
    for key, values in arrays.items():
        by_length.setdefault(len(values), []).append(key)
    intervals, sorted_rows = {}, {}
    for n, keys in by_length.items():
        block = np.sort(np.stack([arrays[k] for k in keys]), axis=1)
        position = _QUANTILES * (n - 1)
        low = np.floor(position).astype(int)
        high = np.minimum(low + 1, n - 1)
        weight = position - low
        q = block[:, low] * (1 - weight) + block[:, high] * weight
        for row, key in enumerate(keys):
            intervals[key] = Interval(*(float(v) for v in q[row]), n_draws=n)
            sorted_rows[key] = block[row]
    return intervals, sorted_rows


def drop_probability(draws: np.ndarray, reference: np.ndarray, fraction: float = 0.1
                     ) -> tuple[float, float]:
    """P(X < (1 - fraction) Y) for independent X ~ ``draws`` and Y ~ ``reference``.

    Parameters
    ----------
    draws, reference : array, shape (n,), (m,)
        Posterior draws of the lifetime [s] in a cooldown and in the reference.
    fraction
        Relative drop, 0 <= fraction < 1 (0.1: "fell by more than 10 %").

    Returns
    -------
    probability, mc_error
        The all-pairs estimate and its Monte Carlo standard error (for independent draws).
    """
    if not 0.0 <= fraction < 1.0:
        raise InputError(f"the drop fraction must lie in [0, 1), not {fraction}")
    return _drop_sorted(np.sort(np.asarray(draws, dtype=float)),
                        np.sort(np.asarray(reference, dtype=float)), fraction)


def _drop_sorted(x: np.ndarray, y: np.ndarray, fraction: float) -> tuple[float, float]:
    """:func:`drop_probability` for draws already sorted ascending."""
    limit = (1.0 - fraction) * y
    counts = np.searchsorted(x, limit, side="left")  # c_j = #{i: x_i < (1-d) y_j}
    b = counts / x.size                                  # P(X < (1-d) y_j)
    # x_i < (1-d) y_j exactly when i < c_j, so #{j: c_j > i} counts the y_j above x_i
    above = y.size - np.cumsum(np.bincount(counts, minlength=x.size + 1))[: x.size]
    a = above / y.size                                   # P((1-d) Y > x_i)
    probability = float(b.mean())
    error = float(np.sqrt(a.var() / x.size + b.var() / y.size))
    return probability, error


@dataclass(frozen=True)
class TrendRow:
    """One cooldown (or one fit) of a trend; ``stats`` maps quantity -> Interval."""

    cooldown: str
    start_date: str | None
    fit_id: int
    kind: str
    n_fits: int
    stage_temp_k: float | None
    stats: dict
    drop_probability: float | None = None
    drop_mc_error: float | None = None


@dataclass(frozen=True)
class Trend:
    """Trend of one cavity across cooldowns."""

    cavity: str
    freq_hz: float | None
    rows: tuple[TrendRow, ...]
    reference: str | None
    reference_fit: int | None
    fraction: float
    selection: str
    notes: tuple[str, ...] = field(default=())

    def table(self):
        """The trend as a pandas DataFrame (SI units in the column names)."""
        import pandas as pd

        records = []
        for row in self.rows:
            record = {"cooldown": row.cooldown, "start_date": row.start_date,
                      "fit_id": row.fit_id, "kind": row.kind, "n_fits": row.n_fits,
                      "stage_temp_K": row.stage_temp_k}
            for name, (_, unit, _dim) in TREND_QUANTITIES.items():
                tag = f"_{unit}" if unit else ""
                stats = row.stats.get(name)
                for key in ("median", "low_68", "high_68", "low_95", "high_95"):
                    record[f"{name}{tag}_{key}"] = getattr(stats, key) if stats else np.nan
            record["drop_probability"] = row.drop_probability
            records.append(record)
        return pd.DataFrame.from_records(records)

    def to_dict(self) -> dict:
        """Plain-JSON form (units: s, K)."""
        return {
            "cavity": self.cavity, "freq_hz": self.freq_hz, "reference": self.reference,
            "reference_fit": self.reference_fit, "drop_fraction": self.fraction,
            "selection": self.selection, "notes": list(self.notes),
            "rows": [{"cooldown": r.cooldown, "start_date": r.start_date, "fit_id": r.fit_id,
                      "kind": r.kind, "n_fits": r.n_fits, "stage_temp_k": r.stage_temp_k,
                      "drop_probability": r.drop_probability,
                      "drop_mc_error": r.drop_mc_error,
                      **{k: v.as_dict() for k, v in r.stats.items()}} for r in self.rows],
        }


def fit_draws(log: CooldownLog, fits: Sequence[FitRecord]) -> dict[int, dict[str, np.ndarray]]:
    """Draws of lifetime, n_th and effective temperature for many fits (batched queries).

    The effective temperature is computed from n_th and the mode frequency,
    ``T_eff = h nu / (k_B ln(1 + 1/n_th))``, when a fit did not store it.
    """
    from cavchar.thermal import effective_temperature

    ids = [f.id for f in fits]
    by_name = {name: log.draws_of(ids, name) for name in TREND_QUANTITIES}
    out: dict[int, dict[str, np.ndarray]] = {}
    for fit in fits:
        draws = {name: by_name[name][fit.id] for name in TREND_QUANTITIES
                 if fit.id in by_name[name]}
        if ("effective_temperature" not in draws and "n_thermal" in draws
                and fit.freq_hz is not None):
            draws["effective_temperature"] = effective_temperature(fit.freq_hz,
                                                                   draws["n_thermal"])
        out[fit.id] = draws
    return out


def cooldown_trend(log: CooldownLog, cavity: str, *, reference: str | None = None,
                   fraction: float = 0.1, kind: str | None = None, each_fit: bool = False
                   ) -> Trend:
    """Lifetime, n_th and effective temperature per cooldown, with drop probabilities.

    Parameters
    ----------
    log
        An open cooldown log.
    cavity
        Cavity name (InputError if unknown).
    reference
        Label of the reference cooldown for the drop probability (optional).
    fraction
        Relative drop of the lifetime that counts (default 0.1 = 10 %).
    kind
        Only fits of this kind (e.g. ``"jumps"``, ``"ringdown"``).
    each_fit
        One row per fit instead of one per cooldown (the latest fit of each
        cooldown, by log order, is used otherwise).
    """
    cav = log.cavity(cavity)
    fits = log.fits(cavity=cavity, kind=kind, summaries=False)
    if not fits:
        what = f" of kind {kind!r}" if kind else ""
        raise InputError(f"cavity {cavity!r} has no logged fits{what}",
                         hint="add one with `cavchar log add`")
    order = {c.label: (i, c) for i, c in enumerate(log.cooldowns())}
    counts: dict[str, int] = {}
    for fit in fits:
        counts[fit.cooldown] = counts.get(fit.cooldown, 0) + 1
    if each_fit:
        chosen = sorted(fits, key=lambda f: (order[f.cooldown][0], f.id))
    else:
        latest: dict[str, FitRecord] = {}
        for fit in fits:
            latest[fit.cooldown] = fit  # ordered by id: the last one wins
        chosen = sorted(latest.values(), key=lambda f: order[f.cooldown][0])
    ref_fit = None
    if reference is not None:
        log.cooldown(reference)  # InputError for an unknown label
        in_ref = [f for f in fits if f.cooldown == reference]
        if not in_ref:
            raise InputError(f"cavity {cavity!r} has no fit in reference cooldown {reference!r}",
                             hint=f"cooldowns with fits: {', '.join(sorted(counts))}")
        ref_fit = in_ref[-1]  # the latest fit of the reference cooldown (always in `chosen`)
    draws = fit_draws(log, chosen)
    notes = []
    ref_lifetime = None
    if ref_fit is not None:
        ref_lifetime = draws[ref_fit.id].get("lifetime")
        if ref_lifetime is None:
            raise InputError(f"reference fit {ref_fit.id} has no lifetime draws")
    if not 0.0 <= fraction < 1.0:
        raise InputError(f"the drop fraction must lie in [0, 1), not {fraction}")
    batched = {name: _sorted_intervals({i: d[name] for i, d in draws.items() if name in d})
               for name in TREND_QUANTITIES}
    rows = []
    for fit in chosen:
        stats = {name: batched[name][0][fit.id] for name in TREND_QUANTITIES
                 if fit.id in batched[name][0]}
        probability = error = None
        if ref_lifetime is not None and fit.id != ref_fit.id and "lifetime" in draws[fit.id]:
            lifetimes = batched["lifetime"][1]
            probability, error = _drop_sorted(lifetimes[fit.id], lifetimes[ref_fit.id],
                                              fraction)
        cool = order[fit.cooldown][1]
        rows.append(TrendRow(cooldown=fit.cooldown, start_date=cool.start_date, fit_id=fit.id,
                             kind=fit.kind, n_fits=counts[fit.cooldown],
                             stage_temp_k=fit.stage_temp_k, stats=stats,
                             drop_probability=probability, drop_mc_error=error))
    if not each_fit and any(n > 1 for n in counts.values()):
        notes.append("cooldowns with several fits show the latest one (--each-fit shows all)")
    if len({f.kind for f in chosen}) > 1:
        notes.append("the rows mix fit kinds; --kind selects one")
    rows.sort(key=lambda r: (order[r.cooldown][0], r.fit_id))
    selection = "each fit" if each_fit else "latest fit per cooldown"
    return Trend(cavity=cav.name, freq_hz=cav.freq_hz, rows=tuple(rows), reference=reference,
                 reference_fit=None if ref_fit is None else ref_fit.id, fraction=fraction,
                 selection=selection, notes=tuple(notes))
