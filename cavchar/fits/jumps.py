"""Fit a photon-number jump record: energy lifetime, thermal photon number, effective temperature.

``fit_jumps`` takes an exact record (change points; likelihood from four
sufficient statistics) or a sampled record (photon number at probe times;
likelihood from the truncated generator's transition matrices), samples the
posterior of ``(T_c, n_th)`` with the common emcee driver and returns a
:class:`cavchar.result.FitResult` with derived quantities, the Planck check
and, for exact records, the dwell-time posterior predictive check.
"""

from __future__ import annotations

import math
import os
import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from cavchar.errors import InputError, ModelMisfitWarning, PriorDominatedWarning
from cavchar.fits.finish import FitContext, finish_fit, sampler_settings
from cavchar.inference import SamplerSettings
from cavchar.inference.importance import sample_posterior_auto
from cavchar.models.jumps import (
    ExactJumpModel,
    SampledJumpModel,
    dwell_times,
    jump_statistics,
    sampled_log_likelihood,
    sampled_transitions,
)
from cavchar.models.jumps.dwell_check import dwell_time_check
from cavchar.parameters import ParameterSpec
from cavchar.priors import LogUniform, Prior, stage_occupation_prior
from cavchar.records import JumpRecord, SampledRecord

__all__ = ["fit_jumps", "default_priors", "JumpPriors"]

#: default prior bounds: wide enough for any microwave cavity (1 us .. 1000 s; 1e-6 .. 100)
DEFAULT_LIFETIME_PRIOR = LogUniform(1e-6, 1e3)
DEFAULT_N_THERMAL_PRIOR = LogUniform(1e-6, 1e2)
#: largest accepted change of the sampled-record log-likelihood from more levels
TRUNCATION_LOGLIKE_TOL = 1e-9
_EXTRA_LEVELS = 4
#: most photon-number levels a sampled fit uses (the work of one likelihood call grows as
#: levels^3 per walker): a posterior that needs more reaches an n_th the record does not
#: constrain, and the fit is refused with the prior or record length to change
MAX_SAMPLED_LEVELS = 150


@dataclass(frozen=True)
class JumpPriors:
    """Priors on the lifetime T_c (s) and the thermal photon number n_th."""

    lifetime: Prior = DEFAULT_LIFETIME_PRIOR
    n_thermal: Prior = DEFAULT_N_THERMAL_PRIOR


def default_priors(freq_hz: float | None = None, stage_temp_k: float | None = None,
                   n_thermal_from_stage: bool = False) -> JumpPriors:
    """Log-uniform priors with wide bounds; optionally n_th log-normal around the stage's
    Planck occupation (:func:`cavchar.priors.stage_occupation_prior`)."""
    if n_thermal_from_stage:
        if freq_hz is None or stage_temp_k is None:
            raise InputError("a prior from the stage temperature needs --freq and --stage-temp")
        return JumpPriors(n_thermal=stage_occupation_prior(freq_hz, stage_temp_k))
    return JumpPriors()


def _specs(priors: JumpPriors) -> tuple[ParameterSpec, ParameterSpec]:
    return (
        ParameterSpec("lifetime", "s", "T_c", priors.lifetime, log_scale=True),
        ParameterSpec("n_thermal", "", "n_th", priors.n_thermal, log_scale=True),
    )


def _read(record, sampled: bool, end_time: float | None, columns=None, layout=None,
          exact_rows: bool = False):
    from cavchar.io.readers import read_jump_record, read_sampled_record

    if isinstance(record, (JumpRecord, SampledRecord)):
        return record
    if not isinstance(record, (str, os.PathLike)):
        raise TypeError("record must be a JumpRecord, a SampledRecord or a file path")
    if sampled:
        return read_sampled_record(record, columns=columns, layout=layout)
    return read_jump_record(record, end_time=end_time, columns=columns, layout=layout,
                            exact_rows=exact_rows or None)


def _sampled_guess(record: SampledRecord) -> tuple[float, float]:
    """Start from the mean relaxation: E[n(t+dt) | n(t)] = n_th + (n - n_th) exp(-kappa dt)."""
    n = record.photons.astype(float)
    n_th = max(float(n.mean()), 1e-3)
    same = np.ones(n.size - 1, bool)
    if record.segment is not None:
        same = record.segment[1:] == record.segment[:-1]
    dt = float(np.median(np.diff(record.time)[same])) if same.any() else 1.0
    x, y = n[:-1][same], n[1:][same]
    slope = np.nan
    if x.size > 2 and np.var(x) > 0:
        slope = np.cov(x, y, bias=True)[0, 1] / np.var(x)
    if not (0.01 < slope < 0.999):
        slope = 0.5
    return dt / -math.log(slope), n_th


def fit_jumps(
    record: JumpRecord | SampledRecord | str | os.PathLike,
    *,
    freq_hz: float | None = None,
    stage_temp_k: float | None = None,
    sampled: bool = False,
    end_time: float | None = None,
    priors: JumpPriors | None = None,
    stationary_start: bool = False,
    settings: SamplerSettings | None = None,
    seed: int | None = None,
    command_line: Sequence[str] | None = None,
    columns: dict[str, str] | None = None,
    layout=None,
    exact_rows: bool = False,
    sampler: str = "importance",
):
    """Posterior of the energy lifetime and thermal photon number from a jump record.

    Parameters
    ----------
    record
        A :class:`~cavchar.records.JumpRecord` (exact change points), a
        :class:`~cavchar.records.SampledRecord` (photon number at probe times)
        or the path of a file in one of these formats (see docs/data-formats.md).
    freq_hz
        Mode frequency in Hz: enables Q, effective temperature and the Planck check.
    stage_temp_k
        Stage temperature in K: enables the excess over the Planck occupation and
        the probability that the mode is hotter than its stage.
    sampled
        Read a file as a sampled record (several jumps may happen between samples).
    end_time
        End of an exact record in s when the file does not give it.
    priors
        :class:`JumpPriors` (default: log-uniform, T_c in [1 us, 1000 s], n_th in [1e-6, 100]).
    stationary_start
        Score the first photon number of each segment with the Bose–Einstein law
        (only for records that start in thermal equilibrium).
    settings, seed
        Sampler settings; ``seed`` overrides ``settings.seed``.
    command_line
        The command as argv strings, stored in the provenance (the command-line
        interface passes its own ``argv``); None, the default for Python callers,
        records no command line.
    columns, layout
        How to read a file: column mapping ``{"time": "Time (s)", ...}`` and a
        :class:`~cavchar.io.tables.layout.FileLayout` (rows to skip, delimiter,
        decimal mark); see docs/data-formats.md.
    sampler
        ``"importance"`` (Pareto-smoothed importance sampling from the Laplace
        approximation, falling back to the ensemble sampler when its k-hat says the
        approximation is poor; :mod:`cavchar.inference.importance`) or ``"ensemble"``.
    exact_rows
        Read a file's rows as exact change points even when they are evenly
        spaced and repeat photon numbers (which otherwise says "use sampled").

    Returns
    -------
    FitResult
        Kind ``"jumps-exact"`` or ``"jumps-sampled"``.
    """
    record = _read(record, sampled, end_time, columns, layout, exact_rows)
    priors = priors or JumpPriors()
    specs = _specs(priors)
    settings = sampler_settings(settings, seed)
    initial = "stationary" if stationary_start else "conditional"
    context = FitContext(record=record, freq_hz=freq_hz, stage_temp_k=stage_temp_k,
                         command_line=command_line)
    if isinstance(record, JumpRecord):
        return _fit_exact(record, specs, settings, initial, context, sampler)
    return _fit_sampled(record, specs, settings, initial, context, sampler)


def _fit_exact(record, specs, settings, initial, context, sampler):
    stats = jump_statistics(record.time, record.photons, record.end_time, record.segment)
    if stats.up + stats.down == 0:
        warnings.warn(f"{record.source or 'the record'} has no jumps: the posterior mostly "
                      "reflects the prior (the intervals below say how little is known)",
                      PriorDominatedWarning, stacklevel=3)

    model = ExactJumpModel(stats, tuple(specs), initial)
    run = sample_posterior_auto(model.log_likelihood, specs, model.initial_guess(), settings,
                                sampler)
    durations, states, complete = dwell_times(record.time, record.photons, record.end_time,
                                              record.segment)
    rng = np.random.default_rng(np.random.SeedSequence(run.settings.seed).spawn(4)[3])
    check = dwell_time_check(durations, states, complete, run.draws[:, 0], run.draws[:, 1], rng)
    if check["misfit"]:
        warnings.warn("dwell-time check: the dwell times of some photon number do not follow "
                      f"the fitted exponential (smallest p-value {check['smallest_p_value']:.3g}"
                      f" < {check['threshold']:.3g}); the damped-mode model may not describe "
                      "this record", ModelMisfitWarning, stacklevel=3)
    occupation = np.bincount(states, weights=durations) / durations.sum()
    extras = {
        "statistics": stats.to_dict(),
        "occupation_fraction": occupation.tolist(),
        "initial_state": initial,
        "record_excerpt": _excerpt(record),
        "dwell_excerpt": _dwell_excerpt(durations, states, complete, rng),
    }
    return finish_fit("jumps-exact", run, context, checks={"dwell_times": check},
                      extras=extras, model_settings={"initial_state": initial,
                                                     "sampler": sampler})


#: change points / dwells per photon number kept in the result for its figures
EXCERPT_ROWS = 2000


def _excerpt(record) -> dict:
    """The start of the first segment, for the record figure of reports."""
    first = record.segments()[0]
    rows = min(first.time.size, EXCERPT_ROWS)
    end = first.end_time if rows == first.time.size else float(first.time[rows])
    return {"time": first.time[:rows].tolist(), "photons": first.photons[:rows].tolist(),
            "end_time": end, "rows_in_segment": int(first.time.size)}


def _dwell_excerpt(durations, states, complete, rng) -> dict:
    """Up to EXCERPT_ROWS complete dwells per photon number (a seeded random subset)."""
    out = {}
    for n in np.unique(states[complete]):
        d = durations[complete & (states == n)]
        if d.size > EXCERPT_ROWS:
            d = rng.choice(d, EXCERPT_ROWS, replace=False)
        out[str(int(n))] = np.sort(d).tolist()
    return out


def _levels_for(trans, points: np.ndarray, initial: str, start: int) -> tuple[int, float]:
    """Smallest level count >= ``start`` at which ``_EXTRA_LEVELS`` more levels change the
    log-likelihood at every point (rows of (T_c, n_th)) by less than the tolerance; the
    truncation error is measured, not bounded, because it is far below the stationary tail
    (a path must climb from the observed numbers to the top level within one step)."""
    n_levels = max(int(start), trans.n_max + 2)
    while True:
        if n_levels + _EXTRA_LEVELS > MAX_SAMPLED_LEVELS:
            raise _too_many_levels(trans, points)
        base = sampled_log_likelihood(trans, points[:, 0], points[:, 1], n_levels, initial)
        more = sampled_log_likelihood(trans, points[:, 0], points[:, 1],
                                      n_levels + _EXTRA_LEVELS, initial)
        finite = np.isfinite(base) & np.isfinite(more)
        change = float(np.max(np.abs(base - more)[finite], initial=0.0))
        if change < TRUNCATION_LOGLIKE_TOL:
            return n_levels, change
        if n_levels >= MAX_SAMPLED_LEVELS - _EXTRA_LEVELS:
            raise _too_many_levels(trans, points)
        # +4 levels at a time where levels are cheap, then a quarter more each time
        grown = max(n_levels + _EXTRA_LEVELS, int(n_levels * 1.25)) if n_levels >= 60 \
            else n_levels + _EXTRA_LEVELS
        n_levels = min(grown, MAX_SAMPLED_LEVELS - _EXTRA_LEVELS)


def _too_many_levels(trans, points: np.ndarray) -> InputError:
    """The refusal of a sampled fit whose posterior reaches an n_th beyond the truncation."""
    from cavchar.units import format_quantity

    worst = points[int(np.argmax(points[:, 1]))]
    return InputError(
        f"the posterior reaches n_th = {worst[1]:.3g} (T_c = "
        f"{format_quantity(float(worst[0]), 'time')}), where the photon-number truncation "
        f"would need more than {MAX_SAMPLED_LEVELS} levels: the record "
        f"({trans.n_transitions} transitions between samples) does not constrain n_th",
        hint="give a narrower prior on n_thermal (e.g. n_thermal=loguniform:1e-6,3), or "
             "a longer record")


def _fit_sampled(record, specs, settings, initial, context, sampler):
    trans = sampled_transitions(record.time, record.photons, record.segment)
    if trans.n_transitions == 0:
        raise InputError("the sampled record has fewer than two samples in every segment",
                         path=record.source, hint="a sampled record needs consecutive samples")
    guess = _sampled_guess(record)
    probe = np.array([guess, (guess[0], 3.0 * guess[1]), (0.3 * guess[0], guess[1])])
    n_levels, _ = _levels_for(trans, probe, initial, trans.n_max + 3)
    for _attempt in range(3):
        model = SampledJumpModel(trans, tuple(specs), n_levels, guess, initial)
        run = sample_posterior_auto(model.log_likelihood, specs, model.initial_guess(),
                                    settings, sampler)
        # check the truncation where the posterior reaches its largest n_th
        extreme = run.draws[np.argsort(run.draws[:, 1])[-20:]]
        needed, error = _levels_for(trans, np.vstack([extreme, run.map]), initial, n_levels)
        if needed == n_levels:
            break
        n_levels = needed
    truncation = {
        "levels": int(n_levels),
        "largest_observed_photon_number": int(trans.n_max),
        "log_likelihood_change_with_more_levels": error,
        "rule": f"levels grow until adding {_EXTRA_LEVELS} more changes the log-likelihood by "
                f"less than {TRUNCATION_LOGLIKE_TOL:g} at the start, the MAP and the 20 draws "
                "with the largest n_th",
    }
    occupation = np.bincount(record.photons) / record.photons.size
    first = record.segments()[0]
    rows = min(first.time.size, EXCERPT_ROWS)
    extras = {
        "occupation_fraction": occupation.tolist(),
        "record_excerpt": {"time": first.time[:rows].tolist(),
                           "photons": first.photons[:rows].tolist(),
                           "end_time": float(first.time[rows - 1]),
                           "rows_in_segment": int(first.time.size)},
        "transitions": int(trans.n_transitions),
        "distinct_steps": int(trans.steps.size),
        "truncation": truncation,
        "initial_state": initial,
    }
    return finish_fit("jumps-sampled", run, context, checks={"truncation": truncation},
                      extras=extras, model_settings={"initial_state": initial,
                                                     "levels": int(n_levels),
                                                     "sampler": sampler})
