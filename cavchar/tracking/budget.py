"""The thermal budget from the cooldown log: which n_th fits enter it (one per stage
temperature and cooldown), the budget of each cooldown and the agreement of the
cooldowns' excess photon numbers.  The budget model and its sampling live in
:mod:`cavchar.fits.budget`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from cavchar.errors import InputError
from cavchar.fits.budget import Budget, BudgetPoint, excess_log_likelihood, thermal_budget

__all__ = ["n_thermal_prior", "BudgetSelection", "budget_selections", "points_from_log",
           "excess_agreement", "CooldownBudget", "CooldownBudgets", "cooldown_budgets",
           "AGREEMENT_LEVEL"]


def n_thermal_prior(parameters) -> tuple[object | None, bool]:
    """The fit's prior on n_th from its parameter specifications (``ParameterSpec.to_dict()``
    list): ``(prior, known)``; the prior is None when it is log-uniform (flat in ln n_th)
    or not recorded (``known`` False)."""
    spec = next((p for p in parameters or () if isinstance(p, dict)
                 and p.get("name") == "n_thermal"), None)
    prior = spec.get("prior") if spec else None
    if not isinstance(prior, dict):
        return None, False
    if prior.get("family") == "loguniform":
        return None, True
    from cavchar.priors import prior_from_dict

    try:
        return prior_from_dict(prior), True
    except (InputError, KeyError, TypeError, ValueError):
        return None, False


@dataclass(frozen=True)
class BudgetSelection:
    """The n_th fits of one cooldown that enter its budget: one per stage temperature."""

    cooldown: str
    points: tuple[BudgetPoint, ...]
    used: tuple            # (fit id, stage temperature [K], why)
    set_aside: tuple       # (fit id, why)


def _choose_per_stage(fits, with_n: dict, kind, min_stage_k, max_stage_k):
    """Group a cooldown's n_th fits by stage temperature (within the base tolerance of
    :mod:`cavchar.tracking.rules`) and choose one per group: the most precise preferred
    fit, else the most precise fit (narrowest 68 % interval of ln n_th)."""
    from cavchar.tracking.rules import base_limit, kind_matches
    from cavchar.tracking.selection import precision

    used, aside, candidates = [], [], []
    for f in sorted(fits, key=lambda f: f.id):
        t = f.stage_temp_k
        if f.mark == "excluded":
            aside.append((f.id, "excluded by the user"
                          + (f": {f.mark_reason}" if f.mark_reason else "")))
        elif not kind_matches(f.kind, kind):
            aside.append((f.id, f"kind {f.kind} not selected (kind {kind})"))
        elif f.id not in with_n:
            aside.append((f.id, "has no n_th draws"))
        elif t is None:
            aside.append((f.id, "no stage temperature logged"))
        elif (min_stage_k is not None and t < min_stage_k) or (
                max_stage_k is not None and t > max_stage_k):
            aside.append((f.id, "stage temperature outside the selected range"))
        else:
            candidates.append(f)
    candidates.sort(key=lambda f: (f.stage_temp_k, f.id))
    groups: list[list] = []
    for f in candidates:
        if groups and f.stage_temp_k <= base_limit(groups[-1][0].stage_temp_k):
            groups[-1].append(f)
        else:
            groups.append([f])
    from cavchar.units import format_quantity

    for group in groups:
        where = format_quantity(group[0].stage_temp_k, "temperature")
        preferred = [f for f in group if f.mark == "preferred"]
        pool = preferred or group
        best = min(pool, key=lambda f: (precision(with_n[f.id])[0], -f.id))
        if preferred:
            why = "preferred by the user" + (f" ({best.mark_reason})" if best.mark_reason
                                             else "")
        elif len(group) > 1:
            why = (f"the most precise of {len(group)} fits at {where} "
                   f"(fits {', '.join(str(f.id) for f in group)})")
        else:
            why = f"the only fit at {where}"
        used.append((best, why))
        aside += [(f.id, f"less precise than fit {best.id} at the same stage temperature "
                         f"{where}" if f not in preferred else
                   f"another preferred fit ({best.id}) at {where} is more precise")
                  for f in group if f is not best]
    return used, sorted(aside)


def budget_selections(log, cavity: str, *, cooldowns: Sequence[str] | None = None,
                      kind: str | None = None, min_stage_k: float | None = None,
                      max_stage_k: float | None = None
                      ) -> tuple[list[BudgetSelection], float | None]:
    """Per cooldown (by start date), the n_th fits that enter the thermal budget.

    At each stage temperature of a cooldown one fit enters (module
    :func:`_choose_per_stage`); every fit used or set aside is listed with why.
    Returns the selections (a cooldown without any usable fit has no points, and
    its fits set aside say why) and the cavity's mode frequency [Hz] (None if
    unknown).
    """
    from cavchar.tracking.rules import check_kind

    cav = log.cavity(cavity)
    for label in cooldowns or ():
        log.cooldown(label)
    fits = [f for f in log.fits(cavity=cavity, summaries=False)
            if not cooldowns or f.cooldown in cooldowns]
    check_kind(kind, {f.kind for f in fits})
    with_n = log.draws_of([f.id for f in fits], "n_thermal")
    order = {c.label: i for i, c in enumerate(log.cooldowns())}
    groups: dict[str, list] = {}
    for f in fits:
        groups.setdefault(f.cooldown, []).append(f)
    out = []
    for label in sorted(groups, key=order.__getitem__):
        used, aside = _choose_per_stage(groups[label], with_n, kind, min_stage_k, max_stage_k)
        points = tuple(BudgetPoint(f"fit {f.id} ({label})", float(f.stage_temp_k),
                                   with_n[f.id], *n_thermal_prior(f.parameters))
                       for f, _ in used)
        out.append(BudgetSelection(label, points,
                                   tuple((f.id, float(f.stage_temp_k), why) for f, why in used),
                                   tuple(aside)))
    if not any(sel.points for sel in out):
        raise InputError(f"cavity {cavity!r} has no usable logged fit with n_th draws and a "
                         "stage temperature" + (" in these cooldowns" if cooldowns else ""),
                         hint="log fits with --stage-temp; `cavchar log list` shows them")
    used_fits = [f for f in fits if any(f.id == u[0] for sel in out for u in sel.used)]
    freqs = {f.freq_hz for f in used_fits if f.freq_hz is not None} | (
        {cav.freq_hz} if cav.freq_hz is not None else set())
    if freqs and (max(freqs) - min(freqs)) > 1e-3 * max(freqs):
        raise InputError(f"the fits of {cavity!r} have different mode frequencies "
                         f"({', '.join(f'{f:.9g} Hz' for f in sorted(freqs))})",
                         hint="exclude the other mode's fits with `cavchar log exclude`")
    return out, (cav.freq_hz if cav.freq_hz is not None else
                 (max(freqs) if freqs else None))


def points_from_log(log, cavity: str, *, cooldowns: Sequence[str] | None = None,
                    kind: str | None = None) -> tuple[list[BudgetPoint], float | None]:
    """All budget points of a cavity (every cooldown's, see :func:`budget_selections`) and
    its mode frequency [Hz]: the input of one pooled budget."""
    selections, freq = budget_selections(log, cavity, cooldowns=cooldowns, kind=kind)
    return [p for sel in selections for p in sel.points], freq


#: p-value below which the cooldowns' excesses are said to disagree
AGREEMENT_LEVEL = 0.01


def excess_agreement(series: Sequence[tuple[str, Sequence[BudgetPoint]]], freq_hz: float, *,
                     approximation: str = "auto",
                     excess_range: tuple[float, float] = (1e-8, 10.0)) -> dict:
    """Do several cooldowns share one excess photon number?  A likelihood-ratio test.

    With ``L_i(n_x)`` the stage-plus-excess likelihood of cooldown i,

        lambda = 2 [ sum_i max ln L_i(n_x) - max sum_i ln L_i(n_x) ],

    maximised over ``n_x`` in ``excess_range`` on a grid of 4097 points in
    ln n_x; lambda is referred to a chi-square law with k - 1 degrees of freedom
    (Wilks 1938, Ann. Math. Statist. 9, 60).  The cooldowns are said to
    disagree when p < :data:`AGREEMENT_LEVEL`.  The law is approximate when an
    excess sits at its range's floor (an upper limit): there the test is
    conservative.

    Returns
    -------
    dict
        ``statistic``, ``dof``, ``p_value``, ``agree`` (bool), ``best_excess``
        per cooldown and pooled, and ``statement`` (one sentence).
    """
    from scipy.stats import chi2

    if len(series) < 2:
        raise InputError("the agreement check needs at least two cooldowns")
    lo, hi = excess_range
    grid = np.exp(np.linspace(math.log(lo), math.log(hi), 4097))
    curves = np.array([excess_log_likelihood(points, freq_hz, approximation)(grid)
                       for _, points in series])
    if not np.all(np.isfinite(curves.max(axis=1))):
        raise InputError("a cooldown's excess likelihood is zero across the whole range")
    summed = curves.sum(axis=0)
    statistic = float(max(2.0 * (curves.max(axis=1).sum() - summed.max()), 0.0))
    dof = len(series) - 1
    p_value = float(chi2.sf(statistic, dof))
    agree = p_value >= AGREEMENT_LEVEL
    labels = [label for label, _ in series]
    best = {label: float(grid[np.argmax(c)]) for label, c in zip(labels, curves, strict=True)}
    if agree:
        statement = (f"the cooldowns {', '.join(labels)} agree on one excess photon number "
                     f"(likelihood-ratio test, p = {p_value:.2g} >= {AGREEMENT_LEVEL:g}): "
                     "pooling them is consistent with the data")
    else:
        statement = (f"the cooldowns {', '.join(labels)} do NOT agree on one excess photon "
                     f"number (likelihood-ratio test, p = {p_value:.2g} < "
                     f"{AGREEMENT_LEVEL:g}): the pooled budget describes none of them; each "
                     "cooldown's own budget stands")
    return {"statistic": statistic, "dof": dof, "p_value": p_value, "agree": agree,
            "level": AGREEMENT_LEVEL, "best_excess": best,
            "best_excess_pooled": float(grid[np.argmax(summed)]), "statement": statement}


@dataclass(frozen=True)
class CooldownBudget:
    """One cooldown's own thermal budget and the fits it rests on."""

    cooldown: str
    budget: Budget
    selection: BudgetSelection

    @property
    def fit_ids(self) -> tuple[int, ...]:
        """Log ids of the fits used for this cooldown, sorted."""
        return tuple(sorted(u[0] for u in self.selection.used))


@dataclass(frozen=True)
class CooldownBudgets:
    """Thermal budgets of a cavity: one per cooldown, and a pooled one only on request."""

    cavity: str
    freq_hz: float
    per_cooldown: tuple[CooldownBudget, ...]
    pooled: Budget | None = None
    agreement: dict | None = None
    notes: tuple[str, ...] = ()

    @property
    def fit_ids(self) -> tuple[int, ...]:
        """Log ids of the fits used for any cooldown, sorted."""
        return tuple(sorted({i for c in self.per_cooldown for i in c.fit_ids}))

    def to_dict(self) -> dict:
        """Plain-JSON form: cavity, frequency and, per cooldown, the fits used and set aside."""
        return {"cavity": self.cavity, "freq_hz": self.freq_hz, "fit_ids": list(self.fit_ids),
                "per_cooldown": [{"cooldown": c.cooldown, "fit_ids": list(c.fit_ids),
                                  "used": [{"fit_id": i, "stage_temp_k": t, "why": why}
                                           for i, t, why in c.selection.used],
                                  "set_aside": [{"fit_id": i, "why": why}
                                                for i, why in c.selection.set_aside],
                                  "budget": c.budget.to_dict()} for c in self.per_cooldown],
                "pooled": None if self.pooled is None else self.pooled.to_dict(),
                "agreement": self.agreement, "notes": list(self.notes)}


def cooldown_budgets(log, cavity: str, *, cooldowns: Sequence[str] | None = None,
                     kind: str | None = None, pool: bool = False,
                     min_stage_k: float | None = None, max_stage_k: float | None = None,
                     freq_hz: float | None = None, approximation: str = "auto",
                     t_hot_max_k: float = 300.0, seed: int = 1) -> CooldownBudgets:
    """The thermal budget of each cooldown of a cavity (its own excess and, where
    identifiable, hot-bath temperature); with ``pool`` also one budget of all
    cooldowns together, with :func:`excess_agreement` saying whether they agree.

    ``freq_hz`` [Hz] stands in when the cavity has no mode frequency.
    """
    selections, freq = budget_selections(log, cavity, cooldowns=cooldowns, kind=kind,
                                         min_stage_k=min_stage_k, max_stage_k=max_stage_k)
    notes = [f"cooldown {sel.cooldown} has no budget: "
             + "; ".join(f"fit {i} set aside ({why})" for i, why in sel.set_aside)
             for sel in selections if not sel.points]
    selections = [sel for sel in selections if sel.points]
    freq = freq if freq is not None else freq_hz
    if freq is None:
        raise InputError("the mode frequency is unknown", hint="give --freq, e.g. 6.8GHz")
    per = tuple(CooldownBudget(sel.cooldown, thermal_budget(list(sel.points), freq,
                                                            approximation=approximation,
                                                            t_hot_max_k=t_hot_max_k,
                                                            seed=seed), sel)
                for sel in selections)
    pooled, agreement = None, None
    if pool:
        if len(selections) < 2:
            notes.append("only one cooldown has usable n_th fits: nothing to pool")
        else:
            agreement = excess_agreement([(s.cooldown, s.points) for s in selections], freq,
                                         approximation=approximation)
            pooled = thermal_budget([p for s in selections for p in s.points], freq,
                                    approximation=approximation, t_hot_max_k=t_hot_max_k,
                                    seed=seed)
            notes.append(agreement["statement"])
    elif len(selections) > 1:
        notes.append("each cooldown has its own budget; --pool fits them together (with a "
                     "check that they agree)")
    return CooldownBudgets(cavity, float(freq), per, pooled, agreement, tuple(notes))
