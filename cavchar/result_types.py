"""The small typed parts of a :class:`cavchar.result.FitResult`.

Each part is a frozen dataclass with a ``to_dict()`` (its plain-JSON form in the
result file, ``None`` fields left out) and a ``from_dict()`` (its inverse, which
also reads the spellings of result-file schema 1; see docs/inference.md):

* :class:`FitKind` - what was fitted: the family (``jumps``, ``probes``,
  ``ringdown``) and the variant (``exact``, ``sampled``, ``coarse``, a ring-down
  signal); one parser for the compound name ``"jumps-exact"`` of logs and files.
* :class:`InputFile` and :class:`Provenance` - where a result came from: input
  files with their SHA-256, the command line as argv strings (None when the fit
  was called from Python), library versions, the date (ISO 8601, UTC) and the
  platform.  The seed is not part of it: its one home is the sampler settings
  (``FitResult.seed`` reads it there).
* :class:`SamplerDiagnostics` - the diagnostics the ensemble sampler
  (:func:`cavchar.inference.sample_posterior`) and the importance sampler
  (:func:`cavchar.inference.importance.sample_importance`) produce.
* :class:`PlanckCheck` - the comparison of n_th with the Planck occupation of the
  stage (:func:`cavchar.derived.planck_check`).
"""

from __future__ import annotations

import datetime as _dt
import shlex
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, fields
from typing import Any

__all__ = ["FitKind", "InputFile", "Provenance", "SamplerDiagnostics", "PlanckCheck",
           "FrozenDict", "FrozenList", "freeze", "utc_timestamp", "parse_timestamp"]


def _read_only(self: Any, *args: Any, **kwargs: Any) -> None:
    raise TypeError(f"a {type(self).__name__} of a fit result is read-only (copy it with "
                    "dict() or list() to change the copy)")


class FrozenDict(dict):
    """A read-only dict: the mappings of a :class:`~cavchar.result.FitResult` and of its
    parts.  It is a dict for every reader (``json.dumps``, ``==`` with plain dicts,
    ``{**d}``), but each method that would change it raises ``TypeError``; pickling
    and copying give a FrozenDict again."""

    __slots__ = ()
    __setitem__ = __delitem__ = clear = pop = popitem = setdefault = update = _read_only
    __ior__ = _read_only

    def __reduce__(self) -> tuple:
        return FrozenDict, (dict(self),)

    def __repr__(self) -> str:
        return f"FrozenDict({dict.__repr__(self)})"


class FrozenList(list):
    """A read-only list (see :class:`FrozenDict`); equal to a plain list of the same items."""

    __slots__ = ()
    __setitem__ = __delitem__ = append = extend = insert = remove = pop = clear = _read_only
    sort = reverse = __iadd__ = __imul__ = _read_only

    def __reduce__(self) -> tuple:
        return FrozenList, (list(self),)

    def __repr__(self) -> str:
        return f"FrozenList({list.__repr__(self)})"


def freeze(value: Any) -> Any:
    """A read-only deep copy of plain-JSON data: mappings become :class:`FrozenDict`, lists
    and tuples :class:`FrozenList`; numbers, text, None and other objects stay as they are."""
    if isinstance(value, Mapping):
        return FrozenDict({str(k): freeze(v) for k, v in value.items()})
    if isinstance(value, list | tuple):
        return FrozenList(freeze(v) for v in value)
    return value


def utc_timestamp(when: _dt.datetime | None = None) -> str:
    """A date as ISO 8601 in UTC to the second, e.g. ``"2026-12-04T17:32:34+00:00"``."""
    when = _dt.datetime.now(_dt.UTC) if when is None else when.astimezone(_dt.UTC)
    return when.isoformat(timespec="seconds")


def parse_timestamp(text: str) -> _dt.datetime | None:
    """An ISO-8601 date with a time zone as a UTC datetime; None if it is not one."""
    try:
        when = _dt.datetime.fromisoformat(str(text).replace("Z", "+00:00"))
    except ValueError:
        return None
    if when.tzinfo is None:
        return None
    return when.astimezone(_dt.UTC)


def _plain(value: Any) -> Any:
    """A deep copy in plain containers (tuples become lists), for to_dict()."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    return value


def _without_none(pairs: Mapping[str, Any]) -> dict[str, Any]:
    return {k: _plain(v) for k, v in pairs.items() if v is not None}


# ---------------------------------------------------------------------------- kind
@dataclass(frozen=True, order=True)
class FitKind:
    """What was fitted: ``family`` (``"jumps"``, ``"probes"``, ``"ringdown"``, or another
    word) and ``variant`` (``"exact"``, ``"sampled"``, ``"coarse"``, the ring-down signal
    such as ``"mean-n"``; None when the family has one form).

    ``str(kind)`` is the compound name written in logs and shown to people,
    ``"jumps-exact"``; :meth:`parse` is its inverse.
    """

    family: str
    variant: str | None = None

    def __post_init__(self) -> None:
        if not isinstance(self.family, str) or not self.family or "-" in self.family:
            raise ValueError(f"a fit kind needs a family name without '-', not "
                             f"{self.family!r}")
        if self.variant == "":
            object.__setattr__(self, "variant", None)

    @classmethod
    def parse(cls, text: str | FitKind) -> FitKind:
        """``"jumps-exact"`` -> ``FitKind("jumps", "exact")``; ``"ringdown-mean-n"`` ->
        ``FitKind("ringdown", "mean-n")`` (the family is the part before the first ``-``)."""
        if isinstance(text, FitKind):
            return text
        family, _, variant = str(text).partition("-")
        return cls(family, variant or None)

    def __str__(self) -> str:
        return self.family if self.variant is None else f"{self.family}-{self.variant}"

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (family, and variant when there is one)."""
        return _without_none({"family": self.family, "variant": self.variant})

    @classmethod
    def from_dict(cls, data: Mapping[str, Any] | str) -> FitKind:
        """From ``{"family", "variant"}`` (schema 2) or the compound text (schema 1)."""
        if isinstance(data, str):
            return cls.parse(data)
        return cls(str(data["family"]), data.get("variant"))


# ---------------------------------------------------------------------------- provenance
@dataclass(frozen=True)
class InputFile:
    """One input file of a fit: its path as given and the SHA-256 of its bytes (64 hex
    digits; None when it was not hashed)."""

    path: str
    sha256: str | None = None

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form: path and SHA-256 of the file."""
        return {"path": self.path, "sha256": self.sha256}


@dataclass(frozen=True)
class Provenance:
    """Where a result came from (see the module doc).

    Attributes
    ----------
    inputs
        The input files, in the order given, with their SHA-256.
    command_line
        The command as argv strings (``["cavchar", "fit", "jumps", ...]``), or None
        when the fit was called from Python and the caller gave none.
    versions
        Versions of cavchar, Python and the numerical libraries (None: not installed).
    created_at
        When the result was made: ISO 8601 in UTC (:func:`utc_timestamp`).
    platform
        ``platform.platform()`` of the machine that made it.
    """

    inputs: tuple[InputFile, ...] = ()
    command_line: tuple[str, ...] | None = None
    versions: dict[str, str | None] = field(default_factory=dict)
    created_at: str | None = None
    platform: str | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "inputs", tuple(
            f if isinstance(f, InputFile) else InputFile(**f) for f in self.inputs))
        if self.command_line is not None:
            object.__setattr__(self, "command_line", tuple(str(a) for a in self.command_line))
        object.__setattr__(self, "versions", freeze(self.versions))

    @property
    def cavchar_version(self) -> str | None:
        """The cavchar version that made the result (from :attr:`versions`)."""
        return self.versions.get("cavchar")

    @property
    def command(self) -> str | None:
        """The command line as one shell-quoted text (None if none was recorded)."""
        return None if self.command_line is None else shlex.join(self.command_line)

    @property
    def single_input(self) -> InputFile | None:
        """The input file when there was exactly one, else None."""
        return self.inputs[0] if len(self.inputs) == 1 else None

    @property
    def date(self) -> _dt.datetime | None:
        """:attr:`created_at` as a UTC datetime (None when absent)."""
        return None if self.created_at is None else parse_timestamp(self.created_at)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (absent fields left out)."""
        return _without_none({"inputs": [f.to_dict() for f in self.inputs],
                              "command_line": self.command_line, "versions": self.versions,
                              "created_at": self.created_at, "platform": self.platform})

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Provenance:
        """From the schema-2 block, or the schema-1 one (``input_path`` / ``input_sha256``
        as texts or lists, ``command`` text, ``cavchar_version``, ``seed`` - the seed is
        moved to the sampler settings by the caller)."""
        data = dict(data)
        if "inputs" in data:
            inputs = tuple(InputFile(str(f["path"]), f.get("sha256")) for f in data["inputs"])
        else:
            paths, hashes = data.get("input_path"), data.get("input_sha256")
            if paths is None:
                paths = []
            paths = [paths] if isinstance(paths, str) else list(paths)
            hashes = [hashes] if hashes is None or isinstance(hashes, str) else list(hashes)
            if len(hashes) == 1 and len(paths) != 1:
                hashes = hashes * len(paths) if hashes[0] is None else hashes
            if paths and len(hashes) != len(paths):
                raise ValueError("provenance.input_sha256 should have one hash per input_path")
            if not paths and hashes != [None]:  # a hash of an unnamed input
                paths = [""] * len(hashes)
            inputs = tuple(InputFile(str(p), h) for p, h in zip(paths, hashes, strict=False))
        command_line = data.get("command_line")
        if command_line is None and data.get("command"):
            command_line = shlex.split(str(data["command"]))
        versions = dict(data.get("versions") or {})
        if data.get("cavchar_version") is not None and versions.get("cavchar") is None:
            versions["cavchar"] = data["cavchar_version"]
        created = data.get("created_at")
        if created is not None:  # one spelling: ISO 8601 in UTC
            when = parse_timestamp(created)
            created = None if when is None else utc_timestamp(when)
        return cls(inputs=inputs, command_line=command_line, versions=versions,
                   created_at=created, platform=data.get("platform"))


# ---------------------------------------------------------------------------- diagnostics
@dataclass(frozen=True)
class SamplerDiagnostics:
    """What the sampler measured (docs/inference.md, "Diagnostics").

    Per-parameter maps (``tau``, ``ess_bulk``, ``rhat``, ...) hold None where a value
    was not finite.  Fields that a sampler does not produce are None: the
    importance sampler has no walkers, steps, tau or R-hat; the ensemble sampler has
    no ``importance`` report unless it ran as the importance sampler's fallback.
    Whether the run converged is :attr:`cavchar.result.FitResult.converged`.

    Attributes
    ----------
    sampler
        ``"ensemble"``, ``"importance"`` or ``"ensemble (fallback from importance
        sampling: <reason>)"``.
    moves
        The emcee moves (``"importance (PSIS)"`` for the importance sampler).
    failed_checks
        One sentence per convergence check that failed.
    n_walkers, n_steps, burn_in, thin
        Ensemble size, steps run, steps discarded, thinning step.
    n_draws, n_unique_draws
        Draws kept; distinct draws among them (importance resampling).
    tau, tau_relative_change, chain_length_in_tau
        Integrated autocorrelation time [steps] per parameter, its relative change at
        the last check, and kept steps / tau.
    ess, ess_bulk, ess_tail, rhat
        Effective sample sizes (walkers x kept / tau; rank-normalised bulk and tail)
        and the rank-normalised split R-hat per parameter.
    acceptance_fraction
        ``{"mean", "min", "max"}`` over the walkers.
    map
        The MAP search: method, log posterior, sampler coordinates, local scales.
    tau_history
        ``[step, {parameter: tau}]`` at each check.
    importance
        The importance-sampling report (Pareto k-hat, weight ESS, rounds, settings).
    elapsed_s
        Wall time of the sampling [s].
    extra
        Any other field a sampler wrote (kept, plain JSON).
    """

    sampler: str | None = None
    moves: str | None = None
    failed_checks: tuple[str, ...] = ()
    n_walkers: int | None = None
    n_steps: int | None = None
    burn_in: int | None = None
    thin: int | None = None
    n_draws: int | None = None
    n_unique_draws: int | None = None
    tau: dict[str, float | None] | None = None
    tau_relative_change: dict[str, float | None] | None = None
    chain_length_in_tau: dict[str, float | None] | None = None
    ess: dict[str, float | None] | None = None
    ess_bulk: dict[str, float | None] | None = None
    ess_tail: dict[str, float | None] | None = None
    rhat: dict[str, float | None] | None = None
    acceptance_fraction: dict[str, float | None] | None = None
    map: dict[str, Any] | None = None
    tau_history: list[Any] | None = None
    importance: dict[str, Any] | None = None
    elapsed_s: float | None = None
    extra: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        object.__setattr__(self, "failed_checks", tuple(str(t) for t in self.failed_checks))
        for f in fields(self):
            if f.name != "failed_checks":
                object.__setattr__(self, f.name, freeze(getattr(self, f.name)))

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form: the known fields that are set, then any extra field a sampler wrote."""
        out = _without_none({f.name: getattr(self, f.name) for f in fields(self)
                             if f.name != "extra"})
        if not self.failed_checks:
            out.pop("failed_checks", None)
        return {**_plain(self.extra), **out}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any] | None) -> SamplerDiagnostics:
        """From the plain-JSON block of a sampler run or a result file; fields that are not
        attributes go to :attr:`extra`; ``converged`` is left out (its home is the result)."""
        data = dict(data or {})
        data.pop("converged", None)
        known = {f.name for f in fields(cls)} - {"extra"}
        kwargs = {k: data.pop(k) for k in list(data) if k in known}
        if kwargs.get("failed_checks") is None:
            kwargs.pop("failed_checks", None)
        return cls(**kwargs, extra=data)


# ---------------------------------------------------------------------------- Planck check
@dataclass(frozen=True)
class PlanckCheck:
    """The mode's thermal photon number against the Planck occupation of its stage
    (:func:`cavchar.derived.planck_check`).  A check read from an older or partial
    file may lack fields (None); :attr:`complete` says whether it can be stated.

    Attributes
    ----------
    verdict
        ``"hotter than the stage"``, ``"colder than the stage"`` or ``"consistent with
        the stage"``.
    prob_hotter_than_stage
        Fraction of draws with n_th above the stage occupation.
    decision_probability
        The probability a verdict needs (0.95).
    freq_hz, stage_temperature_k, stage_occupation
        Mode frequency [Hz], stage temperature [K], Planck occupation n(nu, T_stage).
    n_thermal, effective_temperature_k, excess_photons
        Median with 68% and 95% intervals (``median, lo68, hi68, lo95, hi95``).
    piles_up_at_zero, pile_up_ratio
        Whether the 2.5% quantile of n_th is below ``pile_up_ratio`` times its 97.5%
        quantile (then quote the one-sided upper limits).
    n_thermal_upper95, effective_temperature_upper95_k
        The 95% upper limits (only when the posterior piles up at zero).
    n_draws
        Draws behind the probabilities.
    """

    verdict: str | None = None
    prob_hotter_than_stage: float | None = None
    decision_probability: float | None = None
    freq_hz: float | None = None
    stage_temperature_k: float | None = None
    stage_occupation: float | None = None
    n_thermal: dict[str, float] | None = None
    effective_temperature_k: dict[str, float] | None = None
    excess_photons: dict[str, float] | None = None
    piles_up_at_zero: bool = False
    pile_up_ratio: float | None = None
    n_thermal_upper95: float | None = None
    effective_temperature_upper95_k: float | None = None
    n_draws: int | None = None

    @property
    def complete(self) -> bool:
        """Whether the check holds what a statement of it needs."""
        needed = (self.prob_hotter_than_stage, self.stage_temperature_k, self.verdict)
        return all(v is not None for v in needed) and (
            self.effective_temperature_k is not None
            or self.effective_temperature_upper95_k is not None)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (absent fields left out; ``piles_up_at_zero`` always given)."""
        out = _without_none({f.name: getattr(self, f.name) for f in fields(self)})
        out["piles_up_at_zero"] = bool(self.piles_up_at_zero)
        return out

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> PlanckCheck:
        """From the plain-JSON block (unknown keys are refused: they would be lost)."""
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(data) - known)
        if unknown:
            raise ValueError(f"checks.planck has unknown fields {unknown}")
        return cls(**dict(data))

    def __post_init__(self) -> None:
        for name in ("n_thermal", "effective_temperature_k", "excess_photons"):
            object.__setattr__(self, name, freeze(getattr(self, name)))


def as_argv(command_line: Sequence[str] | str | None) -> tuple[str, ...] | None:
    """A command line as argv strings (a text is split as a POSIX shell would)."""
    if command_line is None:
        return None
    if isinstance(command_line, str):
        return tuple(shlex.split(command_line))
    return tuple(str(a) for a in command_line)
