"""Lifetime, thermal photon number and effective temperature of a cavity per
cooldown, and the posterior probability that the lifetime fell.

Which fits stand for a cooldown: :mod:`cavchar.tracking.selection`.  Medians
and intervals come from each chosen fit's stored summary (all its draws, the
numbers a report of the result file shows), else from the stored draws:
equal-tailed 68.27 % and 95 % (2.5th-97.5th percentile).

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

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from cavchar.errors import InputError
from cavchar.quantities import INTERVAL_QUANTILES, Interval, interval
from cavchar.tracking.entries import PRIOR_LIMITS, FitRecord
from cavchar.tracking.store import CooldownLog

__all__ = ["TrendRow", "Trend", "drop_probability", "cooldown_trend",
           "fit_draws", "TREND_QUANTITIES", "exceed_probability", "compare_cavities",
           "CavityComparison", "ComparisonRow", "cooldown_selections", "summary_interval",
           "limit_text"]

#: quantity -> (column, unit symbol, dimension of cavchar.units)
TREND_QUANTITIES = {
    "lifetime": ("lifetime", "s", "time"),
    "n_thermal": ("n_thermal", "", "dimensionless"),
    "effective_temperature": ("effective_temperature", "K", "temperature"),
}



def limit_text(limit: Mapping, dimension: str,
               format_value: Callable[[float, str, int], str]) -> str:
    """A trend cell of a quantity whose posterior reaches a prior bound: its one-sided
    limit (``"> 997 s (limit)"``), never a median and interval of the prior's edge.
    ``format_value(value, dimension, digits)`` writes the number with its unit (the
    CLI's and the report's own formatter)."""
    sign = {"lower": ">", "upper": "<"}.get(limit.get("kind"))
    if sign is None or limit.get("limit") is None:
        return "not constrained"
    return f"{sign} {format_value(float(limit['limit']), dimension, 3)} (limit)"


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
        position = INTERVAL_QUANTILES * (n - 1)
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
    """One cooldown (or one fit) of a trend; ``stats`` maps quantity -> Interval.

    ``sources`` maps each quantity to the :class:`~cavchar.tracking.selection.Choice`
    (fit id and reason) it comes from; ``set_aside`` lists the cooldown's other
    fits with why they were not used; ``fit_id``, ``kind`` and ``stage_temp_k``
    are those of the lifetime's fit (else the first fit used).
    """

    cooldown: str
    start_date: str | None
    fit_id: int
    kind: str
    n_fits: int
    stage_temp_k: float | None
    stats: dict
    drop_probability: float | None = None
    drop_mc_error: float | None = None
    sources: dict = field(default_factory=dict)
    set_aside: tuple = ()
    base_temp_k: float | None = None
    notes: tuple = ()
    limits: dict = field(default_factory=dict)

    @property
    def fit_ids(self) -> tuple[int, ...]:
        """Ids of every fit this row uses."""
        return tuple(sorted({c.fit_id for c in self.sources.values()} or {self.fit_id}))


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
    lifetime_draws: dict = field(default_factory=dict, repr=False, compare=False)

    def table(self):
        """The trend as a pandas DataFrame (SI units in the column names)."""
        import pandas as pd

        records = []
        for row in self.rows:
            record = {"cavity": self.cavity, "cooldown": row.cooldown,
                      "start_date": row.start_date, "fit_id": row.fit_id, "kind": row.kind,
                      "n_fits": row.n_fits, "stage_temp_K": row.stage_temp_k,
                      "fit_ids": " ".join(str(i) for i in row.fit_ids)}
            for name, (_, unit, _dim) in TREND_QUANTITIES.items():
                tag = f"_{unit}" if unit else ""
                stats = row.stats.get(name)
                for key in ("median", "lo68", "hi68", "lo95", "hi95"):
                    record[f"{name}{tag}_{key}"] = getattr(stats, key) if stats else np.nan
                source = row.sources.get(name)
                record[f"{name}_fit_id"] = source.fit_id if source else None
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
                      "fit_ids": list(r.fit_ids), "kind": r.kind, "n_fits": r.n_fits,
                      "stage_temp_k": r.stage_temp_k, "base_temp_k": r.base_temp_k,
                      "drop_probability": r.drop_probability,
                      "drop_mc_error": r.drop_mc_error,
                      "used": {q: c.as_dict() for q, c in r.sources.items()},
                      "set_aside": [{"fit_id": i, "why": why} for i, why in r.set_aside],
                      "notes": list(r.notes),
                      "limits": {k: dict(v) for k, v in r.limits.items()},
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


_SUMMARY_KEYS = ("median", "lo68", "hi68", "lo95", "hi95")


def summary_interval(summary: dict, name: str, n_draws: int | None) -> Interval | None:
    """The Interval of ``name`` from a fit's stored summary (all of the fit's draws: the
    numbers a report of the result file shows), or None when the summary lacks it."""
    row = summary.get(name) if isinstance(summary, dict) else None
    if not isinstance(row, dict):
        return None
    try:
        values = [float(row[k]) for k in _SUMMARY_KEYS]
    except (KeyError, TypeError, ValueError):
        return None
    if not all(np.isfinite(values)):
        return None
    return Interval(*values, n_draws=int(n_draws or 0))


def _cooldown_order(log: CooldownLog) -> dict:
    return {c.label: (i, c) for i, c in enumerate(log.cooldowns())}


def cooldown_selections(log: CooldownLog, cavity: str, *, kind: str | None = None,
                        min_stage_k: float | None = None, max_stage_k: float | None = None,
                        cooldowns: Sequence[str] | None = None):
    """The rule of :mod:`cavchar.tracking.selection` applied to every cooldown of a cavity.

    Returns ``(selections, fits, draws)``: selections in cooldown order (by start
    date), the cavity's fits and their draws by fit id.
    """
    from cavchar.tracking.rules import check_kind
    from cavchar.tracking.selection import select_cooldown

    log.cavity(cavity)
    for label in cooldowns or ():
        log.cooldown(label)
    fits = [f for f in log.fits(cavity=cavity, summaries=False)
            if not cooldowns or f.cooldown in cooldowns]
    check_kind(kind, {f.kind for f in fits})
    if not fits:
        where = " in these cooldowns" if cooldowns else ""
        raise InputError(f"cavity {cavity!r} has no logged fits{where}",
                         hint="add one with `cavchar log add`")
    draws = fit_draws(log, fits)
    order = _cooldown_order(log)
    groups: dict[str, list[FitRecord]] = {}
    for fit in fits:
        groups.setdefault(fit.cooldown, []).append(fit)
    selections = [select_cooldown(groups[label], draws, kind=kind, min_stage_k=min_stage_k,
                                  max_stage_k=max_stage_k)
                  for label in sorted(groups, key=lambda c: order[c][0])]
    return selections, fits, draws


def cooldown_trend(log: CooldownLog, cavity: str, *, reference: str | None = None,
                   fraction: float = 0.1, kind: str | None = None, each_fit: bool = False,
                   min_stage_k: float | None = None, max_stage_k: float | None = None
                   ) -> Trend:
    """Lifetime, n_th and effective temperature per cooldown, with drop probabilities.

    Each cooldown is summarised by the fits that the documented rule chooses
    (:mod:`cavchar.tracking.selection`: fits at the base stage temperature, the
    most precise per quantity, the user's marks first); every row names the
    fits it used and why, and the fits set aside.  Medians and intervals come
    from each fit's stored summary (all of its draws, the numbers a report of the
    result shows); probabilities from the stored draws.

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
        Only fits of this kind: a fit command's word (``jumps``, ``probes``,
        ``ringdown``) or a full kind (``jumps-exact``).
    each_fit
        One row per fit (every candidate, sweep points included) instead of the
        rule's choice per cooldown.
    min_stage_k, max_stage_k
        Only fits with a stage temperature in this range [K].
    """
    from cavchar.tracking.selection import Choice

    if not 0.0 <= fraction < 1.0:
        raise InputError(f"the drop fraction must lie in [0, 1), not {fraction}")
    cav = log.cavity(cavity)
    selections, fits, draws = cooldown_selections(log, cavity, kind=kind,
                                                  min_stage_k=min_stage_k,
                                                  max_stage_k=max_stage_k)
    by_id = {f.id: f for f in fits}
    order = _cooldown_order(log)
    if reference is not None:
        log.cooldown(reference)  # InputError for an unknown label
    notes: list[str] = []
    plans = []  # (cooldown, sources, set aside, base, notes, n_fits)
    for sel in selections:
        if each_fit:
            aside = dict(sel.set_aside)
            for fid in sorted({f.id for f in fits if f.cooldown == sel.cooldown}):
                why = aside.get(fid, "")
                if why.startswith(("excluded", "kind", "stage temperature")):
                    continue
                f = by_id[fid]
                sources = {q: Choice(q, fid, f.kind, f.stage_temp_k, "one row per fit")
                           for q in TREND_QUANTITIES if q in draws[fid]}
                plans.append((sel.cooldown, sources, (), sel.base_temp_k, (), sel.n_fits))
        elif sel.choices:
            plans.append((sel.cooldown, dict(sel.choices), sel.set_aside, sel.base_temp_k,
                          sel.notes, sel.n_fits))
        else:
            notes.append(f"cooldown {sel.cooldown}: no fit stands for it"
                         + (f" ({'; '.join(sel.notes)})" if sel.notes else ""))
    if not plans:
        what = f" of kind {kind!r}" if kind else ""
        raise InputError(f"cavity {cavity!r} has no usable logged fits{what}",
                         hint="check `cavchar log list --cavity NAME` for excluded fits and "
                         "stage temperatures")
    used_ids = sorted({c.fit_id for _, src, *_ in plans for c in src.values()})
    summaries = log.summaries_of(used_ids)
    rows, lifetimes = [], {}
    for label, sources, aside, base, row_notes, n_fits in plans:
        stats, limits, row_notes = {}, {}, tuple(row_notes)
        for name, choice in sources.items():
            fit = by_id[choice.fit_id]
            limit = (summaries.get(fit.id, {}).get(PRIOR_LIMITS) or {}).get(name)
            if isinstance(limit, dict) and limit.get("kind") in ("lower", "upper", "none"):
                limits[name] = limit  # against a prior bound: a limit, not a measurement
                row_notes += (f"fit {fit.id}: {limit.get('text', name)}; a one-sided limit, "
                              "not a measurement",)
            stat = summary_interval(summaries.get(fit.id, {}), name, fit.n_draws_total)
            if stat is None and name in draws[fit.id]:
                stat = interval(draws[fit.id][name])
            if stat is not None:
                stats[name] = stat
        head = sources.get("lifetime") or next(iter(sources.values()))
        if "lifetime" in sources:
            lifetimes[(label, head.fit_id)] = draws[head.fit_id]["lifetime"]
        rows.append(TrendRow(cooldown=label, start_date=order[label][1].start_date,
                             fit_id=head.fit_id, kind=head.kind, n_fits=n_fits,
                             stage_temp_k=head.stage_temp_k, stats=stats, sources=sources,
                             set_aside=tuple(aside), base_temp_k=base, notes=row_notes,
                             limits=limits))
    ref_fit = None
    if reference is not None:
        in_ref = [r for r in rows if r.cooldown == reference and "lifetime" in r.sources]
        if not in_ref:
            raise InputError(f"cavity {cavity!r} has no usable lifetime in reference cooldown "
                             f"{reference!r}", hint="cooldowns with fits: "
                             + ", ".join(dict.fromkeys(r.cooldown for r in rows)))
        ref_fit = in_ref[0].sources["lifetime"].fit_id
        ref_draws = np.sort(lifetimes[(reference, ref_fit)])
        out = []
        for r in rows:
            key = (r.cooldown, r.fit_id)
            if key in lifetimes and r.fit_id != ref_fit:
                p, err = _drop_sorted(np.sort(lifetimes[key]), ref_draws, fraction)
                r = replace(r, drop_probability=p, drop_mc_error=err)
            out.append(r)
        rows = out
    if len({r.kind for r in rows}) > 1:
        notes.append("the rows mix fit kinds; --kind selects one")
    selection = ("each fit (sweep points included)" if each_fit else
                 "per cooldown the fits at base stage temperature, the most precise per "
                 "quantity (marks by the user first)")
    return Trend(cavity=cav.name, freq_hz=cav.freq_hz, rows=tuple(rows), reference=reference,
                 reference_fit=ref_fit, fraction=fraction, selection=selection,
                 notes=tuple(notes), lifetime_draws=lifetimes)


def exceed_probability(draws_a: np.ndarray, draws_b: np.ndarray) -> tuple[float, float]:
    """P(X > Y) for independent X ~ ``draws_a`` and Y ~ ``draws_b`` (e.g. the lifetimes of
    two cavities), from all pairs of draws; ties count one half.

    Returns the probability and its Monte Carlo error (the U-statistic error of
    :func:`drop_probability`).
    """
    x = np.sort(np.asarray(draws_a, dtype=float))
    y = np.sort(np.asarray(draws_b, dtype=float))
    if x.size == 0 or y.size == 0:
        raise InputError("the comparison needs draws of both lifetimes")
    below = np.searchsorted(x, y, side="right")   # #{i: x_i <= y_j}
    ties = below - np.searchsorted(x, y, side="left")
    b = 1.0 - (below - 0.5 * ties) / x.size         # P(X > y_j), ties half
    above = np.searchsorted(y, x, side="left")    # #{j: y_j < x_i}
    ties_x = np.searchsorted(y, x, side="right") - above
    a = (above + 0.5 * ties_x) / y.size             # P(Y < x_i), ties half
    probability = float(b.mean())
    error = float(np.sqrt(a.var() / x.size + b.var() / y.size))
    return probability, error


@dataclass(frozen=True)
class ComparisonRow:
    """P(lifetime of cavity A > lifetime of cavity B) for one pair of cooldown rows."""

    cavity_a: str
    cooldown_a: str
    fit_a: int
    cavity_b: str
    cooldown_b: str
    fit_b: int
    probability: float
    mc_error: float
    basis: str

    def as_dict(self) -> dict:
        """Plain-JSON form of the row."""
        return dict(self.__dict__)


@dataclass(frozen=True)
class CavityComparison:
    """Several cavities' trends side by side, with lifetime comparisons to the first."""

    trends: tuple[Trend, ...]
    rows: tuple[ComparisonRow, ...]

    def to_dict(self) -> dict:
        """Plain-JSON form: each cavity's trend and the lifetime comparisons."""
        return {"cavities": [t.to_dict() for t in self.trends],
                "lifetime_comparisons": [r.as_dict() for r in self.rows]}

    def table(self):
        """One table (pandas DataFrame) of every cavity's trend, stacked."""
        import pandas as pd

        return pd.concat([t.table() for t in self.trends], ignore_index=True)


def compare_cavities(trends: Sequence[Trend]) -> CavityComparison:
    """P(T_c of the first cavity > T_c of each other cavity): in every cooldown both have a
    lifetime for, and between their latest cooldowns (when those differ).

    The two posteriors come from different records, so they are independent and
    the probability is taken over all pairs of their stored draws
    (:func:`exceed_probability`).
    """
    if len(trends) < 2:
        raise InputError("a comparison needs at least two cavities")
    first, rows = trends[0], []

    def lifetime_rows(trend: Trend) -> list[tuple[str, int]]:
        return [(r.cooldown, r.sources["lifetime"].fit_id) for r in trend.rows
                if "lifetime" in r.sources]

    a_rows = lifetime_rows(first)
    for other in trends[1:]:
        b_rows = lifetime_rows(other)
        shared = [(ca, fa, cb, fb) for ca, fa in a_rows for cb, fb in b_rows if ca == cb]
        pairs = [(*p, "same cooldown") for p in shared]
        if a_rows and b_rows and a_rows[-1][0] != b_rows[-1][0]:
            pairs.append((*a_rows[-1], *b_rows[-1], "latest cooldown of each"))
        for ca, fa, cb, fb, basis in pairs:
            p, err = exceed_probability(first.lifetime_draws[(ca, fa)],
                                        other.lifetime_draws[(cb, fb)])
            rows.append(ComparisonRow(first.cavity, ca, fa, other.cavity, cb, fb, p, err, basis))
    return CavityComparison(tuple(trends), tuple(rows))
