"""What every fit shares after its model: settings, provenance and the result."""

from __future__ import annotations

import dataclasses
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from cavchar.errors import UnitSlipWarning
from cavchar.inference import SamplerSettings
from cavchar.result import FitResult
from cavchar.result_types import FitKind

__all__ = ["FitContext", "sampler_settings", "finish_fit"]


@dataclass(frozen=True)
class FitContext:
    """The record being fitted and the physical context of the fit.

    ``record`` is any record of :mod:`cavchar.records` (its ``source`` is the input
    file, hashed into the provenance) or a list of them; ``command_line`` the command
    as argv strings when the caller gave one (the command-line interface does).
    """

    record: Any
    freq_hz: float | None = None
    stage_temp_k: float | None = None
    command_line: Sequence[str] | None = None

    def sources(self) -> list[str]:
        """Source file names of the record(s) behind the fit (records without a source left out)."""
        records = self.record if isinstance(self.record, (list, tuple)) else [self.record]
        return [r.source for r in records if getattr(r, "source", None)]


def sampler_settings(settings: SamplerSettings | None, seed: int | None) -> SamplerSettings:
    """The given settings (default ones if None) with ``seed`` applied when given."""
    settings = settings or SamplerSettings()
    if seed is not None:
        settings = dataclasses.replace(settings, seed=int(seed))
    return settings


def plausibility_problems(run, context: FitContext) -> list[str]:
    """Sentences for stated settings and posterior medians outside the ranges any
    superconducting cavity has (:data:`cavchar.units.PLAUSIBLE_RANGES`), each naming the
    likely unit slip (a time column in ms read as s, a frequency without its prefix)."""
    import numpy as np

    from cavchar.thermal import effective_temperature
    from cavchar.units import plausibility_problem

    values: dict[str, float | None] = {"frequency": context.freq_hz,
                                       "stage_temperature": context.stage_temp_k}
    names = [s.name for s in run.specs]
    draws = np.asarray(run.draws, dtype=float)
    for name in ("lifetime", "n_thermal"):
        if name in names and draws.size:
            values[name] = float(np.median(draws[:, names.index(name)]))
    if context.freq_hz and values.get("n_thermal"):
        values["effective_temperature"] = float(
            effective_temperature(context.freq_hz, values["n_thermal"]))
    found = (plausibility_problem(q, v) for q, v in values.items() if v is not None)
    return [text for text in found if text]


def finish_fit(
    kind: FitKind | str,
    run,
    context: FitContext,
    *,
    checks: dict[str, Any] | None = None,
    extras: dict[str, Any] | None = None,
    model_settings: dict[str, Any] | None = None,
) -> FitResult:
    """Build the :class:`FitResult` of a finished run with provenance and derived quantities.

    Adds ``checks["prior_bounds"]`` (:func:`cavchar.inference.prior_bounds.prior_bound_check`):
    parameters whose posterior reaches a bound of their prior, reported as one-sided limits.
    """
    from cavchar.inference.prior_bounds import prior_bound_check
    from cavchar.provenance import collect_provenance

    provenance = collect_provenance(context.sources(), command_line=context.command_line)
    checks = dict(checks or {})
    checks["prior_bounds"] = prior_bound_check(run.specs, run.draws)
    problems = plausibility_problems(run, context)
    if problems:
        checks["plausibility"] = {"problems": problems}
        for text in problems:
            warnings.warn(text, UnitSlipWarning, stacklevel=2)
    return FitResult.from_run(
        kind, run, freq_hz=context.freq_hz, stage_temp_k=context.stage_temp_k,
        provenance=provenance, fit_settings=model_settings, checks=checks, extras=extras,
    )
