"""Validated data records: jump records, sampled records, probe records, ring-down traces.

Each record is a frozen dataclass of read-only numpy arrays plus metadata.  The
constructor checks everything a model relies on and raises
:class:`~cavchar.errors.InputError` naming the source file and line when the
record came from a file (``source`` and ``lines``), or the 1-based row
otherwise.  Units are SI: times in seconds, probe settings in radians.

Several independent stretches of data (segments of a jump or probe record,
traces of a ring-down) are told apart by an integer id column; the rows of one
segment must be contiguous and in increasing time.  Nothing links the end of
one segment to the start of the next, so acquisition gaps are never read as
dwell time.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike

from cavchar.errors import InputError

__all__ = [
    "JumpRecord",
    "SampledRecord",
    "ProbeRecord",
    "RingdownTrace",
    "JumpSegment",
    "SampledSegment",
    "ProbeSegment",
    "TraceSegment",
    "SIGNALS",
]

#: ring-down signal kinds (see :class:`RingdownTrace`)
SIGNALS = ("power", "db", "amplitude", "iq", "mean_n", "populations")

_SAMPLED_HINT = ("if the photon number was observed at probe times (several jumps may happen "
                 "between rows), read the file as a sampled record (read_sampled_record, or "
                 "--sampled on the command line)")


class JumpSegment(NamedTuple):
    """One segment of a :class:`JumpRecord`: change times (s), photon numbers, end time (s)."""

    id: int
    time: np.ndarray
    photons: np.ndarray
    end_time: float


class SampledSegment(NamedTuple):
    """One segment of a :class:`SampledRecord`: probe times (s) and photon numbers."""

    id: int
    time: np.ndarray
    photons: np.ndarray


class ProbeSegment(NamedTuple):
    """One segment of a :class:`ProbeRecord`: times (s), outcomes, settings (rad) or None."""

    id: int
    time: np.ndarray
    outcome: np.ndarray
    setting: np.ndarray | None


class TraceSegment(NamedTuple):
    """One trace of a :class:`RingdownTrace`: times (s), values, sigma or None."""

    id: int
    time: np.ndarray
    value: np.ndarray
    sigma: np.ndarray | None


def _readonly(array: np.ndarray, given: object = None) -> np.ndarray:
    """``array`` made read-only, copied only if it is a writeable array of the caller
    (``given``): the caller's arrays are never frozen, nor aliased while writeable.
    Read-only input arrays are kept as they are (no copy)."""
    array = np.ascontiguousarray(array)
    if array.flags.writeable and isinstance(given, np.ndarray) and np.may_share_memory(
            array, given):
        array = array.copy()
    array.setflags(write=False)
    return array


@dataclass(frozen=True, eq=False, repr=False)
class _Record:
    """Shared metadata, source tracking and validation helpers."""

    def _init_common(self) -> None:
        meta = MappingProxyType({str(k): str(v) for k, v in dict(self.metadata or {}).items()})
        object.__setattr__(self, "metadata", meta)
        if self.lines is not None:
            lines = np.asarray(self.lines, dtype=np.int64)
            object.__setattr__(self, "lines", _readonly(lines, self.lines))

    def _error(self, message: str, row: int | None = None, hint: str | None = None) -> InputError:
        line = None
        if row is not None:
            if self.lines is not None and 0 <= row < len(self.lines):
                if self.line_kind == "line":
                    line = int(self.lines[row])
                else:
                    message = f"{self.line_kind} {int(self.lines[row])}: {message}"
            else:
                message = f"row {row + 1}: {message}"
        return InputError(message, path=self.source, line=line, hint=hint)

    def _float(self, name: str, values: ArrayLike, n: int | None, allow_nan: bool = False):
        array = np.asarray(values, dtype=np.float64)
        if array.ndim != 1 or (n is not None and array.size != n):
            raise self._error(f"{name} must be a 1-D array" + (f" of {n} values" if n else ""))
        bad = np.isinf(array) if allow_nan else ~np.isfinite(array)
        if bad.any():
            row = int(np.argmax(bad))
            raise self._error(f"{name} is not a finite number ({array[row]})", row,
                              hint=f"every {name} must be a finite number")
        return array

    def _integers(self, name: str, values: ArrayLike, n: int, minimum: int | None = None):
        raw = np.asarray(values)
        if raw.dtype.kind in "iu":
            array = raw.astype(np.int64)
        else:
            floats = self._float(name, raw, n)
            big = np.abs(floats) >= 2.0**62  # beyond int64: astype would wrap
            array = np.where(big, 0.0, floats).astype(np.int64) if big.any() else \
                floats.astype(np.int64)
            bad = (array != floats) | big
            if bad.any():
                row = int(np.argmax(bad))
                raise self._error(f"{name} {floats[row]} is not a whole number", row,
                                  hint=f"{name} must be whole numbers")
        if array.ndim != 1 or array.size != n:
            raise self._error(f"{name} must be a 1-D array of {n} values")
        if minimum is not None and (array < minimum).any():
            row = int(np.argmax(array < minimum))
            raise self._error(f"{name} {array[row]} is negative", row,
                              hint=f"{name} must be >= {minimum}")
        return array

    def _groups(self, name: str, ids: ArrayLike | None, n: int):
        """Integer ids per row -> (ids, unique ids in order, bounds (k+1,))."""
        array = np.zeros(n, np.int64) if ids is None else self._integers(name, ids, n)
        change = np.flatnonzero(array[1:] != array[:-1]) + 1
        bounds = np.concatenate(([0], change, [n])).astype(np.int64)
        order = array[bounds[:-1]]
        if np.unique(order).size != order.size:
            seen: set[int] = set()
            for start, value in zip(bounds[:-1], order, strict=True):
                if int(value) in seen:
                    raise self._error(
                        f"{name} {value} starts again after other {name}s", int(start),
                        hint=f"keep the rows of each {name} together, in increasing time")
                seen.add(int(value))
        return array, order, bounds

    def _increasing(self, time: np.ndarray, bounds: np.ndarray, name: str) -> None:
        """Strictly increasing times inside every group."""
        if time.size < 2:
            return
        step = np.diff(time)
        inside = np.ones(time.size - 1, bool)
        inside[bounds[1:-1] - 1] = False  # steps across a group boundary don't count
        bad = inside & (step <= 0)
        if bad.any():
            row = int(np.argmax(bad)) + 1
            what = "repeats" if step[row - 1] == 0 else "goes back from"
            raise self._error(f"time {time[row]} s {what} the previous row's {time[row - 1]} s",
                              row, hint=f"times must increase strictly within each {name}; "
                              f"start a new {name} for data taken again")

    def quantity(self, key: str, dimension: str, default: float | None = None) -> float | None:
        """Metadata value ``key`` parsed as a quantity (SI), e.g. ``quantity("frequency",
        "frequency")`` for ``# frequency: 6.8 GHz``; ``default`` when absent."""
        from cavchar.units import parse_quantity

        if key not in self.metadata:
            return default
        try:
            return parse_quantity(self.metadata[key], dimension)
        except InputError as exc:
            raise InputError(f"metadata {key!r}: {exc.message}", path=self.source,
                             hint=exc.hint) from None


def _segments_of(bounds: np.ndarray):
    return zip(bounds[:-1], bounds[1:], strict=True)


@dataclass(frozen=True, eq=False, repr=False)
class JumpRecord(_Record):
    """Exact photon-number change points of one or more segments.

    Row ``i`` says the photon number is ``photons[i]`` from ``time[i]`` until
    the next row of its segment, or until the segment's ``end_time``.  Within a
    segment consecutive photon numbers differ by at most one (an exact record
    resolves every jump; a repeated number is allowed and is no jump).

    Parameters
    ----------
    time : array (m,)
        Change times in s, strictly increasing within each segment.  The first
        row of a segment is its start (its photon number is the initial state).
    photons : array (m,)
        Photon number (whole number >= 0) from this row on.
    end_time : float or array (k,)
        End of each segment in s (after its last row), in order of appearance;
        a scalar serves a single segment.
    segment : array (m,), optional
        Integer segment id of each row (default: one segment, id 0).
    metadata : mapping, optional
        Free ``key -> value`` strings (e.g. ``frequency: 6.8 GHz``).
    source, lines, line_kind : optional
        File, 1-based line (``line_kind="line"``, text files) or row
        (``line_kind="row"``, binary files) of each record row in that file,
        used in error messages.
    """

    time: np.ndarray
    photons: np.ndarray
    end_time: np.ndarray
    segment: np.ndarray | None = None
    metadata: Mapping[str, str] = field(default_factory=dict)
    source: str | None = None
    lines: np.ndarray | None = None
    line_kind: str = "line"
    segment_ids: np.ndarray = field(init=False)
    bounds: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        self._init_common()
        time = self._float("time", self.time, None)
        m = time.size
        if m == 0:
            raise self._error("the record has no rows", hint="give at least one change point")
        photons = self._integers("photon number", self.photons, m, minimum=0)
        segment, ids, bounds = self._groups("segment", self.segment, m)
        self._increasing(time, bounds, "segment")
        end = np.atleast_1d(np.asarray(self.end_time, dtype=np.float64))
        if end.size == 1 and ids.size > 1:
            raise self._error(f"one end time given for {ids.size} segments",
                              hint="give one end time per segment (an end row in each)")
        if end.shape != ids.shape:
            raise self._error(f"{end.size} end times for {ids.size} segments",
                              hint="give one end time per segment")
        last = bounds[1:] - 1
        bad = ~np.isfinite(end) | (end <= time[last])
        if bad.any():
            j = int(np.argmax(bad))
            raise self._error(f"segment {ids[j]} ends at {end[j]} s, not after its last change "
                              f"at {time[last[j]]} s", int(last[j]),
                              hint="the end time must come after the last row of its segment")
        step = np.diff(photons)
        inside = np.ones(max(m - 1, 0), bool)
        inside[bounds[1:-1] - 1] = False
        bad = inside & (np.abs(step) > 1)
        if bad.any():
            row = int(np.argmax(bad)) + 1
            raise self._error(f"the photon number jumps from {photons[row - 1]} to "
                              f"{photons[row]} at {time[row]} s; an exact record changes by "
                              "one photon at a time", row, hint=_SAMPLED_HINT)
        for name, value in (("time", time), ("photons", photons), ("end_time", end),
                            ("segment", segment), ("segment_ids", ids), ("bounds", bounds)):
            object.__setattr__(self, name, _readonly(value, getattr(self, name, None)))

    def __repr__(self) -> str:
        return (f"JumpRecord({self.time.size} rows, {self.n_jumps} jumps, "
                f"{self.segment_ids.size} segment(s), {self.observed_time:.6g} s observed, "
                f"source={self.source!r})")

    def __len__(self) -> int:
        return int(self.time.size)

    @property
    def n_segments(self) -> int:
        return int(self.segment_ids.size)

    @property
    def n_jumps(self) -> int:
        """Number of one-photon jumps (rows whose photon number differs from the previous)."""
        step = np.diff(self.photons)
        step[self.bounds[1:-1] - 1] = 0
        return int(np.count_nonzero(step))

    @property
    def observed_time(self) -> float:
        """Total observed time in s: sum over segments of end time minus first row time."""
        return float(np.sum(self.end_time - self.time[self.bounds[:-1]]))

    @property
    def max_photons(self) -> int:
        return int(self.photons.max())

    def dwell_times(self) -> np.ndarray:
        """Time in s each row's photon number is held (m,): next row's time (or the
        segment's end time) minus this row's time.  The first and last dwell of a
        segment are censored by the segment's start and end."""
        following = np.empty_like(self.time)
        following[:-1] = self.time[1:]
        following[self.bounds[1:] - 1] = self.end_time
        return following - self.time

    def segments(self) -> list[JumpSegment]:
        """Per-segment arrays (read-only views), in file order."""
        return [JumpSegment(int(i), self.time[a:b], self.photons[a:b], float(e))
                for i, (a, b), e in zip(self.segment_ids, _segments_of(self.bounds),
                                        self.end_time, strict=True)]


@dataclass(frozen=True, eq=False, repr=False)
class SampledRecord(_Record):
    """Photon number observed at probe times (regular or irregular), per segment.

    Unlike a :class:`JumpRecord`, consecutive samples may differ by any number
    of photons (several jumps can happen between two samples).

    Parameters
    ----------
    time : array (m,)
        Probe times in s, strictly increasing within each segment.
    photons : array (m,)
        Photon number observed at each time (whole numbers >= 0).
    segment : array (m,), optional
        Integer segment id of each row (default one segment, id 0).
    metadata, source, lines, line_kind : optional
        As for :class:`JumpRecord`.
    """

    time: np.ndarray
    photons: np.ndarray
    segment: np.ndarray | None = None
    metadata: Mapping[str, str] = field(default_factory=dict)
    source: str | None = None
    lines: np.ndarray | None = None
    line_kind: str = "line"
    segment_ids: np.ndarray = field(init=False)
    bounds: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        self._init_common()
        time = self._float("time", self.time, None)
        if time.size == 0:
            raise self._error("the record has no rows", hint="give at least one sample")
        photons = self._integers("photon number", self.photons, time.size, minimum=0)
        segment, ids, bounds = self._groups("segment", self.segment, time.size)
        self._increasing(time, bounds, "segment")
        for name, value in (("time", time), ("photons", photons), ("segment", segment),
                            ("segment_ids", ids), ("bounds", bounds)):
            object.__setattr__(self, name, _readonly(value, getattr(self, name, None)))

    def __repr__(self) -> str:
        return (f"SampledRecord({self.time.size} samples, {self.segment_ids.size} segment(s), "
                f"source={self.source!r})")

    def __len__(self) -> int:
        return int(self.time.size)

    @property
    def n_segments(self) -> int:
        return int(self.segment_ids.size)

    @property
    def max_photons(self) -> int:
        return int(self.photons.max())

    def segments(self) -> list[SampledSegment]:
        """Per-segment arrays (read-only views), in file order."""
        return [SampledSegment(int(i), self.time[a:b], self.photons[a:b])
                for i, (a, b) in zip(self.segment_ids, _segments_of(self.bounds), strict=True)]


@dataclass(frozen=True, eq=False, repr=False)
class ProbeRecord(_Record):
    """Raw outcome of every probe.

    Parameters
    ----------
    time : array (m,)
        Probe times in s, strictly increasing within each segment.
    outcome : array (m,)
        0.0 or 1.0; NaN for a lost probe (its time still advances the record).
    setting : array (m,), optional
        Probe phase setting in rad of each probe (when settings are interleaved).
    segment : array (m,), optional
        Integer segment id of each row (default one segment, id 0).
    metadata, source, lines, line_kind : optional
        As for :class:`JumpRecord`.
    """

    time: np.ndarray
    outcome: np.ndarray
    setting: np.ndarray | None = None
    segment: np.ndarray | None = None
    metadata: Mapping[str, str] = field(default_factory=dict)
    source: str | None = None
    lines: np.ndarray | None = None
    line_kind: str = "line"
    segment_ids: np.ndarray = field(init=False)
    bounds: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        self._init_common()
        time = self._float("time", self.time, None)
        m = time.size
        if m == 0:
            raise self._error("the record has no rows", hint="give at least one probe")
        outcome = self._float("outcome", self.outcome, m, allow_nan=True)
        bad = ~np.isnan(outcome) & (outcome != 0) & (outcome != 1)
        if bad.any():
            row = int(np.argmax(bad))
            raise self._error(f"outcome {outcome[row]} is neither 0 nor 1", row,
                              hint="write 0 or 1, or leave the cell empty for a lost probe")
        setting = None if self.setting is None else self._float("setting", self.setting, m)
        segment, ids, bounds = self._groups("segment", self.segment, m)
        self._increasing(time, bounds, "segment")
        for name, value in (("time", time), ("outcome", outcome), ("setting", setting),
                            ("segment", segment), ("segment_ids", ids), ("bounds", bounds)):
            object.__setattr__(self, name, None if value is None
                               else _readonly(value, getattr(self, name, None)))

    def __repr__(self) -> str:
        return (f"ProbeRecord({self.time.size} probes, {self.n_lost} lost, "
                f"{self.segment_ids.size} segment(s), source={self.source!r})")

    def __len__(self) -> int:
        return int(self.time.size)

    @property
    def n_segments(self) -> int:
        return int(self.segment_ids.size)

    @property
    def n_lost(self) -> int:
        return int(np.count_nonzero(np.isnan(self.outcome)))

    @property
    def lost(self) -> np.ndarray:
        """Boolean mask (m,) of lost probes."""
        return np.isnan(self.outcome)

    def settings_used(self) -> np.ndarray:
        """Distinct settings in rad (sorted); ``[0.0]`` when the record has none."""
        return np.zeros(1) if self.setting is None else np.unique(self.setting)

    def segments(self) -> list[ProbeSegment]:
        """Per-segment arrays (read-only views), in file order."""
        return [ProbeSegment(int(i), self.time[a:b], self.outcome[a:b],
                             None if self.setting is None else self.setting[a:b])
                for i, (a, b) in zip(self.segment_ids, _segments_of(self.bounds), strict=True)]


@dataclass(frozen=True, eq=False, repr=False)
class RingdownTrace(_Record):
    """One or more ring-down traces of one signal kind.

    Parameters
    ----------
    time : array (m,)
        Time in s, strictly increasing within each trace.
    value : array
        Shape (m,) float for ``power`` (linear, any power unit), ``db``
        (10 log10 of power), ``amplitude`` (field magnitude, >= 0) and
        ``mean_n`` (mean photon number); shape (m,) complex for ``iq``; shape
        (m, K) whole-number counts of photon numbers 0..K-1 at each delay for
        ``populations``.
    signal : str
        One of :data:`SIGNALS`.
    sigma : array (m,), optional
        Known standard deviation of each point (> 0), in the value's unit (for
        ``iq``: of each quadrature).  Not used for ``populations``.
    trace : array (m,), optional
        Integer trace id of each row (default one trace, id 0).
    metadata, source, lines, line_kind : optional
        As for :class:`JumpRecord`.
    """

    time: np.ndarray
    value: np.ndarray
    signal: str
    sigma: np.ndarray | None = None
    trace: np.ndarray | None = None
    metadata: Mapping[str, str] = field(default_factory=dict)
    source: str | None = None
    lines: np.ndarray | None = None
    line_kind: str = "line"
    trace_ids: np.ndarray = field(init=False)
    bounds: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        self._init_common()
        signal = str(self.signal).lower().replace("-", "_")
        if signal not in SIGNALS:
            raise self._error(f"unknown signal kind {self.signal!r}",
                              hint=f"choose one of {', '.join(SIGNALS)}")
        object.__setattr__(self, "signal", signal)
        time = self._float("time", self.time, None)
        m = time.size
        if m == 0:
            raise self._error("the trace has no rows", hint="give at least one point")
        value = self._value(signal, self.value, m)
        sigma = None
        if self.sigma is not None:
            if signal == "populations":
                raise self._error("a populations trace takes no sigma (counts are multinomial)")
            sigma = self._float("sigma", self.sigma, m)
            if (sigma <= 0).any():
                row = int(np.argmax(sigma <= 0))
                raise self._error(f"sigma {sigma[row]} is not positive", row,
                                  hint="a standard deviation must be > 0")
        trace, ids, bounds = self._groups("trace", self.trace, m)
        self._increasing(time, bounds, "trace")
        for name, item in (("time", time), ("value", value), ("sigma", sigma),
                           ("trace", trace), ("trace_ids", ids), ("bounds", bounds)):
            object.__setattr__(self, name, None if item is None
                               else _readonly(item, getattr(self, name, None)))

    def _value(self, signal: str, value: ArrayLike, m: int) -> np.ndarray:
        if signal == "iq":
            array = np.asarray(value)
            if array.ndim != 1 or array.size != m:
                raise self._error(f"an iq trace needs {m} complex values")
            array = array.astype(np.complex128)
            bad = ~np.isfinite(array)
            if bad.any():
                raise self._error("iq value is not finite", int(np.argmax(bad)))
            return array
        if signal == "populations":
            array = np.asarray(value)
            if array.ndim != 2 or array.shape[0] != m or array.shape[1] < 1:
                raise self._error(f"a populations trace needs counts of shape ({m}, levels)")
            if array.dtype.kind not in "iu":
                array = np.asarray(array, dtype=np.float64)
                for bad, what in ((~np.isfinite(array), "is not finite"),
                                  (array != np.round(array), "is not a whole number")):
                    if bad.any():
                        row, col = np.argwhere(bad)[0]
                        raise self._error(f"count_{col} = {array[row, col]} {what}", int(row),
                                          hint="counts must be whole numbers >= 0")
            counts = array.astype(np.int64)
            if (counts < 0).any():
                row, col = np.argwhere(counts < 0)[0]
                raise self._error(f"count_{col} = {counts[row, col]} is negative", int(row),
                                  hint="counts must be whole numbers >= 0")
            empty = counts.sum(axis=1) == 0
            if empty.any():
                raise self._error("no counts at this delay", int(np.argmax(empty)),
                                  hint="every delay needs at least one counted shot")
            return counts
        array = self._float(signal if signal != "db" else "power_db", value, m)
        if signal == "amplitude" and (array < 0).any():
            row = int(np.argmax(array < 0))
            raise self._error(f"amplitude {array[row]} is negative", row,
                              hint="an amplitude is a magnitude (>= 0); for signed or complex "
                              "data use the iq signal")
        return array

    def __repr__(self) -> str:
        return (f"RingdownTrace({self.signal}, {self.time.size} points, "
                f"{self.trace_ids.size} trace(s), source={self.source!r})")

    def __len__(self) -> int:
        return int(self.time.size)

    @property
    def n_traces(self) -> int:
        return int(self.trace_ids.size)

    @property
    def n_levels(self) -> int | None:
        """Number of photon-number columns of a populations trace (else None)."""
        return int(self.value.shape[1]) if self.signal == "populations" else None

    def traces(self) -> list[TraceSegment]:
        """Per-trace arrays (read-only views), in file order."""
        return [TraceSegment(int(i), self.time[a:b], self.value[a:b],
                             None if self.sigma is None else self.sigma[a:b])
                for i, (a, b) in zip(self.trace_ids, _segments_of(self.bounds), strict=True)]
