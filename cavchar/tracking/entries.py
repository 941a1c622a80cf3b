"""What the cooldown log stores: record types, their encodings, and the
conversion of a fit result into a log entry.

A :class:`FitEntry` is built from any FitResult (``kind``, ``samples``
DataFrame, ``settings``, ``provenance``, ``summary()``) by
:func:`entry_from_result`; it keeps a thinned copy of the posterior draws of
the key parameters (:data:`KEY_PARAMETERS`), the same rows for every
parameter so that joint draws stay joint.
"""

from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from cavchar.errors import InputError

__all__ = [
    "KEY_PARAMETERS", "DEFAULT_MAX_DRAWS", "Cavity", "Cooldown", "FitEntry", "FitRecord",
    "canonical_json", "settings_digest", "encode_draws", "decode_draws", "thin_index",
    "entry_from_result", "read_result_file",
]

#: posterior columns copied into the log (lifetime [s], n_th, effective temperature [K])
KEY_PARAMETERS = ("lifetime", "n_thermal", "effective_temperature")
#: draws kept per fit: the Monte Carlo error of a probability from 4000 draws is <= 0.008
DEFAULT_MAX_DRAWS = 4000
#: key of the stored summary listing quantities that are one-sided limits (posterior
#: against a prior bound, :meth:`cavchar.result.FitResult.prior_limit`)
PRIOR_LIMITS = "prior_limits"


def _json_default(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, Path):
        return str(value)
    if hasattr(value, "__dataclass_fields__"):
        from dataclasses import asdict

        return asdict(value)
    return repr(value)


def canonical_json(value: Any) -> str:
    """JSON text with sorted keys and no spaces (the form that is hashed and stored)."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), default=_json_default)


#: setting names that change how a fit is shown, not what it computes (left out of the digest)
COSMETIC_SETTINGS = frozenset({"quiet", "progress"})


def _without_cosmetic(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {k: _without_cosmetic(v) for k, v in value.items() if k not in COSMETIC_SETTINGS}
    if isinstance(value, list | tuple):
        return [_without_cosmetic(v) for v in value]
    return value


def settings_digest(kind: str, model: str | None, settings: Mapping, seed: Any,
                    parameters: Any = ()) -> str:
    """SHA-256 of kind, model, settings (without :data:`COSMETIC_SETTINGS`), seed and
    parameter specifications (priors): with the input SHA-256 it identifies a fit."""
    text = canonical_json({"kind": kind, "model": model, "seed": seed,
                           "settings": _without_cosmetic(settings),
                           "parameters": list(parameters)})
    return hashlib.sha256(text.encode()).hexdigest()


def encode_draws(values: np.ndarray) -> bytes:
    """Draws as little-endian float32 bytes (7 significant digits, 4 bytes a draw)."""
    return np.ascontiguousarray(values, dtype="<f4").tobytes()


def decode_draws(blob: bytes) -> np.ndarray:
    """Inverse of :func:`encode_draws`; returns float64."""
    return np.frombuffer(blob, dtype="<f4").astype(float)


@dataclass(frozen=True)
class Cavity:
    """A logged cavity: ``freq_hz`` is the mode frequency in Hz (None if not given)."""

    id: int
    name: str
    freq_hz: float | None
    notes: str
    created_at: str


@dataclass(frozen=True)
class Cooldown:
    """A logged cooldown: base stage temperature [K] and other stage temperatures [K]."""

    id: int
    label: str
    start_date: str | None
    stage_temp_k: float | None
    stage_temps: dict
    notes: str
    created_at: str


@dataclass(frozen=True)
class FitEntry:
    """One fit, ready to be logged (built from a FitResult by ``entry_from_result``).

    ``draws`` maps key parameters to 1-D arrays of equal length (SI units:
    lifetime in s, effective temperature in K); ``n_draws_total`` is the number
    of draws in the result before thinning.
    """

    kind: str
    draws: Mapping[str, np.ndarray]
    model: str | None = None
    settings: Mapping = field(default_factory=dict)
    seed: Any = None
    summary: Mapping = field(default_factory=dict)
    input_sha256: str | None = None
    tool_version: str | None = None
    fitted_at: str | None = None
    freq_hz: float | None = None
    stage_temp_k: float | None = None
    source: str | None = None
    n_draws_total: int | None = None
    parameters: tuple = ()

    @property
    def settings_sha256(self) -> str:
        return settings_digest(self.kind, self.model, self.settings, self.seed,
                               self.parameters)


@dataclass(frozen=True)
class FitRecord:
    """A fit as read back from the log (draws are fetched separately)."""

    id: int
    cavity: str
    cooldown: str
    kind: str
    model: str | None
    settings: dict
    seed: Any
    summary: dict
    input_sha256: str | None
    settings_sha256: str
    tool_version: str | None
    fitted_at: str | None
    logged_at: str
    freq_hz: float | None
    stage_temp_k: float | None
    source: str | None
    n_draws_total: int | None
    parameters: tuple = ()
    mark: str | None = None          # "preferred", "excluded" or None
    mark_reason: str = ""
    notes: str = ""
    tags: tuple = ()


def thin_index(n_total: int, max_draws: int) -> np.ndarray:
    """Evenly spaced row indices keeping at most ``max_draws`` of ``n_total`` rows."""
    if n_total <= max_draws:
        return np.arange(n_total)
    return (np.arange(max_draws) * n_total) // max_draws


def _as_dict(value: Any) -> dict:
    if value is None:
        return {}
    if isinstance(value, Mapping):
        return dict(value)
    if hasattr(value, "__dataclass_fields__"):
        from dataclasses import asdict

        return asdict(value)
    if hasattr(value, "to_dict"):
        return dict(value.to_dict())
    if hasattr(value, "__dict__"):
        return dict(vars(value))
    return {}


def _find(mapping: Any, names: tuple[str, ...], depth: int = 0) -> Any:
    """First value stored under one of ``names`` in nested mappings (breadth first)."""
    if not isinstance(mapping, Mapping) or depth > 4:
        return None
    for name in names:
        if mapping.get(name) is not None:
            return mapping[name]
    for value in mapping.values():
        items = value if isinstance(value, list) else [value]
        for item in items:
            found = _find(item, names, depth + 1)
            if found is not None:
                return found
    return None


def _summary_dict(result: Any) -> dict:
    summary = getattr(result, "summary", None)
    table = summary() if callable(summary) else summary
    if table is None:
        return {}
    if hasattr(table, "to_dict"):
        table = table.to_dict(orient="index")
    return json.loads(canonical_json(table))


def _optional_float(value: Any) -> float | None:
    try:
        return None if value is None else float(value)
    except (TypeError, ValueError):
        return None


def entry_from_result(result: Any, *, source: str | None = None,
                      max_draws: int = DEFAULT_MAX_DRAWS) -> FitEntry:
    """A log entry from a fit result.

    Parameters
    ----------
    result
        A FitResult (or any object with ``kind``, ``samples`` (DataFrame with
        some of the columns :data:`KEY_PARAMETERS`), ``settings``,
        ``provenance``, ``summary()`` and optionally ``seed`` and ``specs``).
    source
        Where it came from (e.g. the result file), stored for information.
    max_draws
        Draws kept (evenly thinned, the same rows for every parameter).
    """
    samples = getattr(result, "samples", None)
    if samples is None or not hasattr(samples, "columns"):
        raise InputError("the result has no table of posterior draws", path=source)
    names = [p for p in KEY_PARAMETERS if p in samples.columns]
    if not names:
        raise InputError(f"the result has none of the columns {', '.join(KEY_PARAMETERS)}",
                         path=source)
    rows = thin_index(len(samples), int(max_draws))
    draws = {p: np.asarray(samples[p], dtype=float)[rows] for p in names}
    settings = json.loads(canonical_json(_as_dict(getattr(result, "settings", None))))
    provenance = _as_dict(getattr(result, "provenance", None))
    seed = getattr(result, "seed", None)
    if seed is None:
        seed = _find(settings, ("seed",))
    if seed is None:
        seed = _find(provenance, ("seed",))
    model = getattr(result, "model", None) or _find(settings, ("model",))
    sha = _find(provenance, ("input_sha256", "sha256"))
    if isinstance(sha, list):  # several input files
        sha = ",".join(str(v) for v in sha)
    specs = getattr(result, "specs", None) or ()
    parameters = tuple(json.loads(canonical_json([s.to_dict() if hasattr(s, "to_dict") else s
                                                  for s in specs])))
    summary = _summary_dict(result)
    limiter = getattr(result, "prior_limit", None)
    if callable(limiter):  # quantities whose posterior reaches a prior bound: limits only
        limits = {}
        for p in names:
            try:
                found = limiter(p)
            except (KeyError, TypeError, ValueError):
                found = None
            if found is not None:
                limits[p] = {"kind": found["kind"], "limit": found["limit"],
                             "text": found["text"]}
        if limits:
            summary[PRIOR_LIMITS] = json.loads(canonical_json(limits).replace("NaN", "null"))
    version = _find(provenance, ("cavchar_version", "cavchar"))
    date = _find(provenance, ("created_at", "created", "fitted_at", "date", "timestamp"))
    return FitEntry(
        kind=str(result.kind), draws=draws, model=None if model is None else str(model),
        settings=settings, seed=json.loads(canonical_json(seed)),
        summary=summary,
        input_sha256=None if sha is None else str(sha),
        tool_version=None if version is None else str(version),
        fitted_at=None if date is None else str(date),
        freq_hz=_optional_float(_find(settings, ("freq_hz", "frequency_hz"))),
        stage_temp_k=_optional_float(_find(settings, ("stage_temp_k", "stage_temperature_k"))),
        source=source, n_draws_total=len(samples), parameters=parameters)


def read_result_file(path: str | os.PathLike, *, max_draws: int = DEFAULT_MAX_DRAWS
                     ) -> FitEntry:
    """Read a result JSON file (written by ``FitResult.to_json``) into a log entry."""
    file = Path(path)
    if not file.is_file():
        raise InputError("no such result file", path=file)
    from cavchar.result import FitResult

    result = FitResult.from_json(file)
    return entry_from_result(result, source=str(file), max_draws=max_draws)
