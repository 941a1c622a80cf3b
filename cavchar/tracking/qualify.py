"""Qualification of a cavity against a spec: PASS, FAIL or UNDECIDED per requirement.

Spec file (TOML, read with :mod:`tomllib`): one table per quantity, each with
exactly one bound and a credibility level::

    title = "Mirror set acceptance"        # optional
    notes = "free text"                    # optional

    [lifetime]                 # energy lifetime T_c
    at_least = "2 ms"          # number (SI) or text with a unit
    credibility = 0.95         # or "95%"

    [thermal_photons]          # n_th
    at_most = 0.01
    credibility = 0.9

Quantities: ``lifetime`` [s], ``thermal_photons`` [-], ``effective_temperature``
[K], ``quality_factor`` [-] (``Q = 2 pi nu T_c``), ``linewidth`` [Hz]
(``1 / (2 pi T_c)``); Q and linewidth need the mode frequency.

Decision, with p = P(requirement met | data) from the stored posterior draws
and credibility c: PASS if p >= c, FAIL if 1 - p >= c, UNDECIDED otherwise.
Exit codes: 0 all PASS, 4 any FAIL, 5 otherwise any UNDECIDED.

More data.  For an UNDECIDED requirement, let m and s be the mean and sd of
ln(quantity) over the draws and L = ln(threshold).  If the estimate stays
where it is and the posterior sd shrinks as 1/sqrt(amount of data), the
requirement is decided at credibility c once |m - L| / (s / sqrt(k)) >= z_c,
z_c = Phi^-1(c), i.e. with k = (z_c s / |m - L|)^2 times the present data.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from cavchar.errors import InputError
from cavchar.io.toml import loads_toml
from cavchar.quantities import COLUMN_INFO, DESCRIPTIONS

__all__ = ["QUANTITIES", "Requirement", "Spec", "Evidence", "Verdict", "Qualification",
           "read_spec", "parse_spec", "qualify", "EXIT_PASS", "EXIT_FAIL", "EXIT_UNDECIDED"]

EXIT_PASS, EXIT_FAIL, EXIT_UNDECIDED = 0, 4, 5

#: spec key -> (dimension for cavchar.units, unit symbol, what it is)
QUANTITIES = {
    key: (COLUMN_INFO[column][1], COLUMN_INFO[column][0], DESCRIPTIONS[column])
    for key, column in (("lifetime", "lifetime"), ("thermal_photons", "n_thermal"),
                        ("effective_temperature", "effective_temperature"),
                        ("quality_factor", "quality_factor"), ("linewidth", "linewidth"))}
_TOP_KEYS = {"title", "notes"}
_REQUIREMENT_KEYS = {"at_least", "at_most", "credibility", "notes"}


@dataclass(frozen=True)
class Requirement:
    """One requirement: ``quantity`` at least / at most ``threshold`` (SI) at ``credibility``."""

    quantity: str
    bound: str          # "at_least" or "at_most"
    threshold: float
    credibility: float
    notes: str = ""

    def describe(self) -> str:
        """The requirement in words, e.g. ``lifetime >= 1 ms at 95% credibility``."""
        from cavchar.units import format_quantity

        dim = QUANTITIES[self.quantity][0]
        word = ">=" if self.bound == "at_least" else "<="
        return (f"{self.quantity} {word} {format_quantity(self.threshold, dim)} "
                f"at {100 * self.credibility:g}% credibility")


@dataclass(frozen=True)
class Spec:
    """A parsed spec file."""

    title: str
    requirements: tuple[Requirement, ...]
    path: str | None = None
    notes: str = ""


def _line_of(text: str, section: str | None, key: str) -> int | None:
    """1-based line of ``key = ...`` (inside ``[section]`` if given) in TOML text."""
    current = None
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        header = re.match(r"^\[\s*([^\]]+?)\s*\]", stripped)
        if header:
            current = header.group(1).strip().strip('"')
            if section is None and current == key:
                return number
            continue
        if re.match(rf"^\"?{re.escape(key)}\"?\s*=", stripped) and current == section:
            return number
    return None


def _credibility(value: object, where: str, path: str | None, line: int | None) -> float:
    text = str(value).strip()
    try:
        level = float(text[:-1]) / 100 if text.endswith("%") else float(text)
    except ValueError:
        level = math.nan
    if isinstance(value, bool) or not 0.5 < level < 1.0:
        raise InputError(f"{where}: credibility must be a probability between 0.5 and 1 "
                         f"(e.g. 0.95 or \"95%\"), not {value!r}", path=path, line=line)
    return level


def parse_spec(text: str, path: str | os.PathLike | None = None) -> Spec:
    """Parse spec text (TOML); InputError naming the key and line for any mistake."""
    from cavchar.units import parse_quantity

    where = None if path is None else str(path)
    data = loads_toml(text, path=path, what="the spec file",
                      hint="a spec holds one table per quantity with plain values")
    requirements = []
    for key, value in data.items():
        if key in _TOP_KEYS:
            if not isinstance(value, str):
                raise InputError(f"'{key}' must be text", path=where,
                                 line=_line_of(text, None, key))
            continue
        if key not in QUANTITIES:
            raise InputError(f"unknown key '{key}'", path=where,
                             line=_line_of(text, None, key),
                             hint="known: " + ", ".join([*QUANTITIES, *sorted(_TOP_KEYS)]))
        if not isinstance(value, dict):
            raise InputError(f"'{key}' must be a table [{key}] with a bound and a credibility",
                             path=where, line=_line_of(text, None, key))
        for inner in value:
            if inner not in _REQUIREMENT_KEYS:
                raise InputError(f"unknown key '{inner}' in [{key}]", path=where,
                                 line=_line_of(text, key, inner),
                                 hint="known: " + ", ".join(sorted(_REQUIREMENT_KEYS)))
        bounds = [b for b in ("at_least", "at_most") if b in value]
        if len(bounds) != 1:
            raise InputError(f"[{key}] needs exactly one of 'at_least' or 'at_most'",
                             path=where, line=_line_of(text, None, key))
        bound = bounds[0]
        if "credibility" not in value:
            raise InputError(f"[{key}] has no 'credibility' (e.g. credibility = 0.95)",
                             path=where, line=_line_of(text, None, key))
        line = _line_of(text, key, bound)
        raw = value[bound]
        if isinstance(raw, bool) or not isinstance(raw, int | float | str):
            raise InputError(f"[{key}] {bound} must be a number or text with a unit", path=where,
                             line=line)
        try:
            threshold = parse_quantity(raw, QUANTITIES[key][0])
        except InputError as exc:
            raise InputError(f"[{key}] {bound}: {exc.message}", path=where, line=line,
                             hint=exc.hint) from None
        if not (math.isfinite(threshold) and threshold > 0):
            raise InputError(f"[{key}] {bound} must be a positive value", path=where, line=line)
        level = _credibility(value["credibility"], f"[{key}]", where,
                             _line_of(text, key, "credibility"))
        requirements.append(Requirement(key, bound, threshold, level,
                                        str(value.get("notes", ""))))
    if not requirements:
        raise InputError("the spec has no requirement", path=where,
                         hint="add e.g. [lifetime] at_least = \"1 ms\" credibility = 0.95")
    return Spec(title=str(data.get("title", "")), requirements=tuple(requirements),
                path=where, notes=str(data.get("notes", "")))


def read_spec(path: str | os.PathLike) -> Spec:
    """Read a spec file (TOML, UTF-8)."""
    file = Path(path)
    try:
        text = file.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the spec file ({exc})", path=file) from None
    return parse_spec(text, file)


@dataclass(frozen=True)
class Evidence:
    """One fit's stored draws and what it is (the data a verdict rests on)."""

    description: str
    draws: dict
    freq_hz: float | None = None
    fit_id: int | None = None
    kind: str | None = None
    input_sha256: str | None = None
    n_draws_total: int | None = None
    reason: str = ""
    cooldown: str | None = None
    stage_temp_k: float | None = None
    limits: dict | None = None      # column -> one-sided limit (posterior at a prior bound)

    def limit_of(self, name: str) -> str | None:
        """"lower" / "upper" / "none" when the spec quantity ``name`` is only a one-sided
        limit in this fit (its posterior, or its source's, reaches a prior bound)."""
        source, direction = _LIMIT_SOURCE.get(name, (name, 1))
        limit = (self.limits or {}).get(source)
        if not isinstance(limit, dict):
            return None
        kind = limit.get("kind")
        if kind in ("lower", "upper") and direction < 0:
            kind = "upper" if kind == "lower" else "lower"
        return kind

    def quantity(self, name: str) -> np.ndarray | None:
        """Draws of a spec quantity in SI units, or None if this fit cannot give them."""
        lifetime = self.draws.get("lifetime")
        if name == "lifetime":
            return lifetime
        if name == "thermal_photons":
            return self.draws.get("n_thermal")
        if name == "effective_temperature":
            if "effective_temperature" in self.draws:
                return self.draws["effective_temperature"]
            if "n_thermal" in self.draws and self.freq_hz:
                from cavchar.thermal import effective_temperature

                return effective_temperature(self.freq_hz, self.draws["n_thermal"])
            return None
        if lifetime is None:
            return None
        if name == "linewidth":
            return 1.0 / (2.0 * math.pi * lifetime)
        if name == "quality_factor" and self.freq_hz:
            return 2.0 * math.pi * self.freq_hz * lifetime
        return None


@dataclass(frozen=True)
class Verdict:
    """Outcome of one requirement."""

    requirement: Requirement
    status: str                     # "PASS", "FAIL" or "UNDECIDED"
    probability: float | None       # P(requirement met | data)
    mc_error: float | None
    median: float | None
    lo95: float | None
    hi95: float | None
    evidence: Evidence | None
    data_factor: float | None       # times the present data that would decide it
    hint: str


@dataclass(frozen=True)
class Qualification:
    """All verdicts of a spec; ``exit_code`` is 0 / 4 / 5."""

    spec: Spec
    verdicts: tuple[Verdict, ...]

    @property
    def status(self) -> str:
        """Overall verdict: FAIL if any requirement fails, else UNDECIDED if any is, else PASS."""
        states = {v.status for v in self.verdicts}
        return "FAIL" if "FAIL" in states else "UNDECIDED" if "UNDECIDED" in states else "PASS"

    @property
    def exit_code(self) -> int:
        """Exit code of the verdict: 0 PASS, 4 FAIL, 5 UNDECIDED."""
        return {"PASS": EXIT_PASS, "FAIL": EXIT_FAIL, "UNDECIDED": EXIT_UNDECIDED}[self.status]

    @property
    def fit_ids(self) -> tuple[int, ...]:
        """Ids of the logged fits the verdicts rest on."""
        return tuple(sorted({v.evidence.fit_id for v in self.verdicts
                             if v.evidence is not None and v.evidence.fit_id is not None}))

    def to_dict(self) -> dict:
        """Plain-JSON form: title, spec path, verdict, exit code, fit ids and every requirement."""
        return {"title": self.spec.title, "spec": self.spec.path, "status": self.status,
                "exit_code": self.exit_code, "fit_ids": list(self.fit_ids),
                "requirements": [_verdict_dict(v) for v in self.verdicts]}


def _verdict_dict(v: Verdict) -> dict:
    r, e = v.requirement, v.evidence
    return {"quantity": r.quantity, "bound": r.bound, "threshold_si": r.threshold,
            "unit": QUANTITIES[r.quantity][1], "credibility": r.credibility,
            "status": v.status, "probability_met": v.probability, "mc_error": v.mc_error,
            "median": v.median, "lo95": v.lo95, "hi95": v.hi95,
            "data_factor": v.data_factor, "hint": v.hint,
            "evidence": None if e is None else {
                "description": e.description, "fit_id": e.fit_id, "kind": e.kind,
                "reason": e.reason, "cooldown": e.cooldown, "stage_temp_k": e.stage_temp_k,
                "input_sha256": e.input_sha256, "n_draws_stored": _n(e),
                "n_draws_total": e.n_draws_total}}


def _n(e: Evidence) -> int:
    return max((len(v) for v in e.draws.values()), default=0)


def _more_data(values: np.ndarray, req: Requirement) -> tuple[float | None, str]:
    from scipy.special import ndtri

    logs = np.log(values[values > 0])
    if logs.size < 2:
        return None, "the draws do not allow a forecast"
    m, s = float(logs.mean()), float(logs.std(ddof=1))
    gap = abs(m - math.log(req.threshold))
    z = float(ndtri(req.credibility))
    if gap == 0 or (z * s / gap) ** 2 > 1e4:
        return None, "the estimate sits on the threshold: more data of the same kind will " \
                     "hardly decide it"
    k = max((z * s / gap) ** 2, 1.0)
    met = (m > math.log(req.threshold)) == (req.bound == "at_least")
    return k, (f"about {k:.2g} times the present data would decide it "
               f"({'PASS' if met else 'FAIL'} if the estimate stays where it is; "
               "posterior sd scaling as 1/sqrt(data))")


#: spec quantity -> (stored column it comes from, +1 rising / -1 falling with it)
_LIMIT_SOURCE = {"lifetime": ("lifetime", 1), "thermal_photons": ("n_thermal", 1),
                 "effective_temperature": ("effective_temperature", 1),
                 "quality_factor": ("lifetime", 1), "linewidth": ("lifetime", -1)}


def judge(req: Requirement, evidence: Evidence | None) -> Verdict:
    """The verdict on one requirement from one fit's draws."""
    values = None if evidence is None else evidence.quantity(req.quantity)
    if values is None or len(values) == 0:
        need = ("the mode frequency" if evidence is not None and "lifetime" in evidence.draws
                else "a fit that measures it")
        return Verdict(req, "UNDECIDED", None, None, None, None, None, evidence, None,
                       f"no data on {QUANTITIES[req.quantity][2]}: needs {need}")
    values = np.asarray(values, dtype=float)
    if not np.isfinite(values).all():  # a verdict is never computed from non-finite draws
        raise InputError(f"the draws of {QUANTITIES[req.quantity][2]} from "
                         f"{evidence.description} hold {int((~np.isfinite(values)).sum())} "
                         "non-finite value(s); no verdict is given on them",
                         hint="fit again; in a log, check it with `cavchar log check`")
    met = values >= req.threshold if req.bound == "at_least" else values <= req.threshold
    p = float(met.mean())
    error = math.sqrt(p * (1.0 - p) / values.size)  # binomial, for independent draws
    low, median, high = (float(q) for q in np.quantile(values, [0.025, 0.5, 0.975]))
    kind = evidence.limit_of(req.quantity)
    # a side the data do not constrain (the posterior there is the prior's edge) cannot
    # decide: "at most" against a lower limit, "at least" against an upper limit
    blind = kind == "none" or (kind == "lower" and req.bound == "at_most") or (
        kind == "upper" and req.bound == "at_least")
    if blind and (p >= req.credibility or 1.0 - p >= req.credibility):
        status, factor = "UNDECIDED", None
        hint = (f"the posterior reaches a bound of its prior: the data give only a "
                f"{'one-sided ' + kind if kind != 'none' else 'no'} limit, which cannot "
                f"decide '{req.bound.replace('_', ' ')}' (P(met) = {p:.3g} reflects the "
                "prior)")
    elif p >= req.credibility:
        status, factor, hint = "PASS", None, ""
    elif 1.0 - p >= req.credibility:
        status, factor, hint = "FAIL", None, ""
    else:
        status = "UNDECIDED"
        factor, hint = _more_data(values, req)
    return Verdict(req, status, p, error, median, low, high, evidence, factor, hint)


def qualify(spec: Spec, evidence: Evidence | dict[str, Evidence]) -> Qualification:
    """Judge every requirement of ``spec``.

    ``evidence`` is one fit for all requirements, or a mapping quantity ->
    Evidence (e.g. the lifetime from a ring-down and n_th from a jump record).
    """
    verdicts = []
    for req in spec.requirements:
        chosen = evidence.get(req.quantity) if isinstance(evidence, dict) else evidence
        verdicts.append(judge(req, chosen))
    return Qualification(spec, tuple(verdicts))


def evidence_from_log(log, cavity: str, cooldown: str | None = None,
                      fit_id: int | None = None, freq_hz: float | None = None,
                      quantities: tuple[str, ...] = tuple(QUANTITIES), *,
                      kind: str | None = None, min_stage_k: float | None = None,
                      max_stage_k: float | None = None) -> dict[str, Evidence]:
    """For each quantity, the fit that stands for the cooldown (the documented rule of
    :mod:`cavchar.tracking.selection`), with the reason in its description.

    Parameters
    ----------
    cooldown
        The cooldown judged; default: the latest cooldown (by start date) with
        fits of the cavity, and the description says so.
    fit_id
        Use only this fit (the rule is not applied).
    freq_hz
        Mode frequency [Hz] for fits logged without one.
    kind, min_stage_k, max_stage_k
        Only fits of this kind / in this stage-temperature range [K].
    """
    from cavchar.tracking.selection import STANDING

    if fit_id is not None:
        fit = log.fit(fit_id)
        if fit.cavity != cavity:
            raise InputError(f"fit {fit_id} belongs to cavity {fit.cavity!r}, "
                             f"not {cavity!r}")
        ev = Evidence(description=f"fit {fit.id} ({fit.kind}, cooldown {fit.cooldown}, "
                      f"stage {_temp(fit.stage_temp_k)}; chosen with --fit)",
                      limits=_limits(fit.summary),
                      draws=log.draws(fit.id), freq_hz=fit.freq_hz or freq_hz, fit_id=fit.id,
                      kind=fit.kind, input_sha256=fit.input_sha256,
                      n_draws_total=fit.n_draws_total, reason="chosen by the user (--fit)",
                      cooldown=fit.cooldown, stage_temp_k=fit.stage_temp_k)
        return {q: ev for q in quantities if ev.quantity(q) is not None}
    from cavchar.tracking.trend import cooldown_selections

    selections, fits, _ = cooldown_selections(
        log, cavity, kind=kind, min_stage_k=min_stage_k, max_stage_k=max_stage_k,
        cooldowns=None if cooldown is None else [cooldown])
    if cooldown is None:
        usable = [s for s in selections if s.choices]
        if not usable:
            raise InputError(f"no fit of cavity {cavity!r} stands for any cooldown",
                             hint="see `cavchar log list` for excluded fits and stage "
                             "temperatures")
        selection, how = usable[-1], " (the latest cooldown with usable fits)"
    else:
        if not selections:
            raise InputError(f"cavity {cavity!r} has no logged fits in cooldown {cooldown!r}")
        selection, how = selections[0], ""
    by_id = {f.id: f for f in fits}
    summaries = log.summaries_of(sorted({c.fit_id for c in selection.choices.values()}))
    chosen: dict[str, Evidence] = {}
    cache: dict[int, dict] = {}
    for q in quantities:
        column = {"thermal_photons": "n_thermal", "effective_temperature":
                  "effective_temperature"}.get(q, "lifetime")
        choice = selection.choices.get(column) or selection.choices.get(STANDING[column])
        if choice is None:
            continue
        fit = by_id[choice.fit_id]
        if fit.id not in cache:
            cache[fit.id] = log.draws(fit.id)
        ev = Evidence(description=f"fit {fit.id} ({fit.kind}, cooldown {fit.cooldown}{how}, "
                      f"stage {_temp(fit.stage_temp_k)}): {choice.reason}",
                      draws=cache[fit.id], freq_hz=fit.freq_hz or freq_hz, fit_id=fit.id,
                      kind=fit.kind, input_sha256=fit.input_sha256,
                      n_draws_total=fit.n_draws_total, reason=choice.reason,
                      cooldown=fit.cooldown, stage_temp_k=fit.stage_temp_k,
                      limits=_limits(summaries.get(fit.id, {})))
        if ev.quantity(q) is not None:
            chosen[q] = ev
    return chosen


def _limits(summary: dict) -> dict:
    """The one-sided limits a logged fit's summary records (``PRIOR_LIMITS``)."""
    from cavchar.tracking.entries import PRIOR_LIMITS

    found = summary.get(PRIOR_LIMITS) if isinstance(summary, dict) else None
    return dict(found) if isinstance(found, dict) else {}


def _temp(value: float | None) -> str:
    from cavchar.units import format_quantity

    return "unknown" if value is None else format_quantity(value, "temperature")


def evidence_from_entry(entry, freq_hz: float | None = None) -> Evidence:
    """Evidence from a result file read with :func:`cavchar.tracking.entries.read_result_file`."""
    return Evidence(description=f"result file {entry.source} ({entry.kind})",
                    draws=dict(entry.draws), freq_hz=freq_hz or entry.freq_hz, kind=entry.kind,
                    input_sha256=entry.input_sha256, n_draws_total=entry.n_draws_total,
                    limits=_limits(dict(entry.summary)))
