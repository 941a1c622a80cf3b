"""Which logged fits stand for a cooldown: the rule, the user's marks, and the reasons.

The rule (per cavity and cooldown; tolerances in :mod:`cavchar.tracking.rules`):

1. Fits marked **excluded** (``cavchar log exclude``) are never used; fits
   outside the chosen kind or stage-temperature range are not candidates.
2. The cooldown's **base stage temperature** is the lowest stage temperature
   of the cavity's fits in it (excluded fits left out; with a stage-temperature
   range, the lowest inside the range, so that ``--min-stage-temp 100mK`` shows
   each cooldown's lowest sweep step at or above 100 mK).  A fit is *at base
   temperature* when ``T <= 1.2 T_base + 1 mK``.  Fits above are sweep points:
   they never stand for the cooldown (the thermal budget uses them).  When no
   fit of the cooldown has a stage temperature, all count as at base (and a
   note says so); otherwise a fit without one is set aside.
3. For each quantity (lifetime; n_th, with the effective temperature taken from
   the same fit), the **most precise** fit at base temperature that measures
   it stands for the cooldown: the one with the narrowest central 68 %
   interval of ln(quantity) in its stored draws (ties: the later fit).
4. Fits marked **preferred** (``cavchar log prefer``) replace step 3: the most
   precise preferred fit that measures the quantity is used, at any stage
   temperature (a note says when it is not at base).

Why the most precise fit and not the product of the posteriors.  Multiplying
posteriors is right only for independent records of the same mode with the
fits' priors divided out; the log cannot tell independence (a jump record
reconstructed from a probe record has another file hash but the same photons,
and would be counted twice), and two fits of different kinds that disagree
through a model error would give a narrow wrong product.  A single fit's
posterior is always a valid statement; the price is some information when
records really are independent.  Other fits at base that disagree with the
chosen one (medians of ln(quantity) more than 3 combined standard deviations
apart) are named in a note, so the disagreement is seen, not averaged away.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from cavchar.tracking.entries import FitRecord
from cavchar.tracking.rules import base_limit, kind_matches

__all__ = ["Choice", "CooldownSelection", "select_cooldown", "precision", "STANDING"]

#: quantities a cooldown is summarised by -> the draws whose precision decides
STANDING = {"lifetime": "lifetime", "n_thermal": "n_thermal",
            "effective_temperature": "n_thermal"}
#: |difference of ln medians| / combined sd above which a note names a disagreeing fit
DISAGREE_Z = 3.0


@dataclass(frozen=True)
class Choice:
    """The fit that stands for one quantity of a cooldown, and why."""

    quantity: str
    fit_id: int
    kind: str
    stage_temp_k: float | None
    reason: str

    def as_dict(self) -> dict:
        """Plain-JSON form of the choice."""
        return {"quantity": self.quantity, "fit_id": self.fit_id, "kind": self.kind,
                "stage_temp_k": self.stage_temp_k, "reason": self.reason}


@dataclass(frozen=True)
class CooldownSelection:
    """The fits of one cavity in one cooldown: which stand for it, which were set aside."""

    cavity: str
    cooldown: str
    base_temp_k: float | None
    choices: dict
    set_aside: tuple = ()        # (fit id, why) pairs
    notes: tuple = ()
    n_fits: int = 0

    @property
    def fit_ids(self) -> tuple[int, ...]:
        """Ids of the fits used, in increasing order."""
        return tuple(sorted({c.fit_id for c in self.choices.values()}))

    def as_dict(self) -> dict:
        """Plain-JSON form: the cavity, cooldown, base temperature, choices and notes."""
        return {"cavity": self.cavity, "cooldown": self.cooldown,
                "base_temp_k": self.base_temp_k, "fit_ids": list(self.fit_ids),
                "used": {q: c.as_dict() for q, c in self.choices.items()},
                "set_aside": [{"fit_id": i, "why": why} for i, why in self.set_aside],
                "notes": list(self.notes)}


def precision(values: np.ndarray) -> tuple[float, float, float]:
    """(width, centre, sd) of ln(values): width = ln q84 - ln q16 (smaller is more
    precise), centre = ln median, sd = width / 2 (the normal sd for a normal in ln)."""
    v = np.asarray(values, dtype=float)
    q16, q50, q84 = np.quantile(v, [0.16, 0.5, 0.84])
    if q16 > 0:
        width = float(np.log(q84) - np.log(q16))
        return width, float(np.log(q50)), width / 2
    scale = abs(q50) if q50 != 0 else 1.0  # draws reaching 0: relative width instead
    return float((q84 - q16) / scale), float(np.log(max(q50, 1e-300))), float("inf")


def _t(value: float | None) -> str:
    from cavchar.units import format_quantity

    return "unknown" if value is None else format_quantity(value, "temperature")


def select_cooldown(fits: Sequence[FitRecord], draws: Mapping[int, Mapping[str, np.ndarray]], *,
                    kind: str | None = None, min_stage_k: float | None = None,
                    max_stage_k: float | None = None) -> CooldownSelection:
    """Apply the rule (module notes) to the fits of one cavity in one cooldown.

    Parameters
    ----------
    fits
        The cavity's logged fits in this cooldown (any order).
    draws
        Stored draws by fit id: {parameter: (n,) array}.
    kind
        Only fits of this kind (a fit command's word or a full kind).
    min_stage_k, max_stage_k
        Only fits with a stage temperature in this range [K].
    """
    fits = sorted(fits, key=lambda f: f.id)
    if not fits:
        raise ValueError("select_cooldown needs at least one fit")
    cavity, cooldown = fits[0].cavity, fits[0].cooldown
    aside: list[tuple[int, str]] = []
    notes: list[str] = []
    usable = []
    for f in fits:
        if f.mark == "excluded":
            aside.append((f.id, "excluded by the user" + (f": {f.mark_reason}"
                                                          if f.mark_reason else "")))
        else:
            usable.append(f)

    def in_window(t: float | None) -> bool:
        return (min_stage_k is None and max_stage_k is None) or (
            t is not None and (min_stage_k is None or t >= min_stage_k)
            and (max_stage_k is None or t <= max_stage_k))

    known = [f.stage_temp_k for f in usable
             if f.stage_temp_k is not None and in_window(f.stage_temp_k)]
    base = min(known) if known else None
    windowed = min_stage_k is not None or max_stage_k is not None
    base_name = ("the lowest stage temperature in the selected range" if windowed
                 else "base temperature")
    limit = None if base is None else base_limit(base)
    if usable and base is None:
        notes.append("no fit of this cooldown has a stage temperature: all are taken as at "
                     "base temperature")
    candidates, at_base = [], []
    for f in usable:
        if not kind_matches(f.kind, kind):
            aside.append((f.id, f"kind {f.kind} not selected (kind {kind})"))
            continue
        t = f.stage_temp_k
        if not in_window(t):
            aside.append((f.id, f"stage temperature {_t(t)} outside the selected range"))
            continue
        candidates.append(f)
        if base is None or (t is not None and t <= limit):
            at_base.append(f)
    choices: dict[str, Choice] = {}
    widths: dict[tuple[int, str], tuple[float, float, float]] = {}

    def measure(f: FitRecord, name: str):
        if (f.id, name) not in widths:
            values = draws.get(f.id, {}).get(name)
            widths[(f.id, name)] = None if values is None or len(values) == 0 \
                else precision(values)
        return widths[(f.id, name)]

    preferred = [f for f in candidates if f.mark == "preferred"]
    for quantity, deciding in STANDING.items():
        if quantity == "effective_temperature":
            source = choices.get("n_thermal")
            if source is not None and "effective_temperature" in draws.get(source.fit_id, {}):
                choices[quantity] = Choice(quantity, source.fit_id, source.kind,
                                           source.stage_temp_k,
                                           "from the same fit as n_th")
            continue
        pool = [f for f in preferred if measure(f, deciding) is not None]
        by_user = bool(pool)
        if not pool:
            pool = [f for f in at_base if measure(f, deciding) is not None]
        if not pool:
            above = [f for f in candidates if measure(f, deciding) is not None]
            if above:
                notes.append(f"no fit at base temperature ({_t(base)}) measures {quantity}; "
                             f"fit(s) {', '.join(str(f.id) for f in above)} are above it "
                             "(`cavchar log prefer FIT_ID` makes one stand for the cooldown)")
            continue
        best = min(pool, key=lambda f: (measure(f, deciding)[0], -f.id))
        others = [f for f in pool if f is not best]
        if by_user:
            reason = "preferred by the user" + (f" ({best.mark_reason})" if best.mark_reason
                                                 else "")
            if base is not None and (best.stage_temp_k is None or best.stage_temp_k > limit):
                notes.append(f"preferred fit {best.id} is at {_t(best.stage_temp_k)}, not at "
                             f"the base temperature {_t(base)}")
        elif others:
            reason = (f"the most precise of {len(pool)} fits at {base_name} "
                      f"{_t(base)} (fits {', '.join(str(f.id) for f in pool)})")
        else:
            reason = (f"the only fit at {base_name} {_t(base)}" if base is not None
                      else "the only fit")
        choices[quantity] = Choice(quantity, best.id, best.kind, best.stage_temp_k, reason)
        w_best = measure(best, deciding)
        for f in (f for f in at_base if f is not best and measure(f, deciding) is not None):
            w = measure(f, deciding)
            z = abs(w[1] - w_best[1]) / np.hypot(w[2], w_best[2])
            if np.isfinite(z) and z > DISAGREE_Z:
                notes.append(f"fit {f.id} ({f.kind}) disagrees with fit {best.id} on {quantity} "
                             f"({z:.1f} combined standard deviations apart)")
    used = {c.fit_id for c in choices.values()}
    for f in candidates:
        if f.id in used:
            continue
        if f in at_base:
            why = (f"at base temperature but less precise than the fits used "
                   f"({', '.join(str(i) for i in sorted(used))})" if used
                   else "at base temperature, measures nothing the cooldown is summarised by")
        elif f.stage_temp_k is None:
            why = "no stage temperature logged"
        else:
            why = (f"at {_t(f.stage_temp_k)}, above the base temperature {_t(base)} "
                   "(a sweep point; the thermal budget uses it)")
        aside.append((f.id, why))
    aside.sort()
    return CooldownSelection(cavity, cooldown, base, choices, tuple(aside), tuple(notes),
                             n_fits=len(fits))
