"""What the cooldown log stores: record types, their encodings, and the
conversion of a fit result into a log entry.

A :class:`FitEntry` is built from a :class:`~cavchar.result.FitResult` by
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
from typing import TYPE_CHECKING, Any

import numpy as np

from cavchar.errors import InputError

if TYPE_CHECKING:
    from cavchar.result import FitResult

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
        """SHA-256 of the settings that decide the result (kind, model, settings, seed,
        parameters)."""
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


def _summary_dict(result: FitResult) -> dict:
    return json.loads(canonical_json(result.summary().to_dict(orient="index")))


def _optional_float(value: Any) -> float | None:
    try:
        return None if value is None else float(value)
    except (TypeError, ValueError):
        return None


def entry_from_result(result: FitResult, *, source: str | None = None,
                      max_draws: int = DEFAULT_MAX_DRAWS) -> FitEntry:
    """A log entry from a fit result.

    Parameters
    ----------
    result
        The fit result (draws of some of :data:`KEY_PARAMETERS`; settings, seed,
        provenance and summary are read from its typed fields).
    source
        Where it came from (e.g. the result file), stored for information.
    max_draws
        Draws kept (evenly thinned, the same rows for every parameter).
    """
    names = [p for p in KEY_PARAMETERS if p in result.quantity_names()]
    if not names:
        raise InputError(f"the result has none of the columns {', '.join(KEY_PARAMETERS)}",
                         path=source)
    rows = thin_index(result.n_draws, int(max_draws))
    draws = {p: np.asarray(result.column(p), dtype=float)[rows] for p in names}
    settings = json.loads(canonical_json(result.settings))
    fit = settings.get("fit") if isinstance(settings.get("fit"), Mapping) else {}
    provenance = result.provenance
    model = fit.get("model")
    shas = [f.sha256 for f in provenance.inputs if f.sha256]
    parameters = tuple(json.loads(canonical_json([s.to_dict() for s in result.specs])))
    summary = _summary_dict(result)
    limits = {}  # quantities whose posterior reaches a prior bound: limits only
    for p in names:
        try:
            found = result.prior_limit(p)
        except (KeyError, TypeError, ValueError, AttributeError):  # a damaged check block
            found = None
        if found is not None:
            limits[p] = {"kind": found["kind"], "limit": found["limit"], "text": found["text"]}
    if limits:
        summary[PRIOR_LIMITS] = json.loads(canonical_json(limits).replace("NaN", "null"))
    return FitEntry(
        kind=str(result.kind), draws=draws, model=None if model is None else str(model),
        settings=settings, seed=json.loads(canonical_json(result.seed)),
        summary=summary,
        input_sha256=",".join(shas) if shas else None,  # several input files: joined
        tool_version=provenance.cavchar_version,
        fitted_at=provenance.created_at,
        freq_hz=_optional_float(fit.get("freq_hz")),
        stage_temp_k=_optional_float(fit.get("stage_temp_k")),
        source=source, n_draws_total=result.n_draws, parameters=parameters)


def read_result_file(path: str | os.PathLike, *, max_draws: int = DEFAULT_MAX_DRAWS
                     ) -> FitEntry:
    """Read a result JSON file (written by ``FitResult.to_json``) into a log entry."""
    file = Path(path)
    if not file.is_file():
        raise InputError("no such result file", path=file)
    from cavchar.result import FitResult

    result = FitResult.from_json(file)
    return entry_from_result(result, source=str(file), max_draws=max_draws)
