"""Shared base of the validated records: metadata, source tracking and the checks
every record runs (finite numbers, whole numbers, contiguous groups, increasing times).

Errors are :class:`~cavchar.errors.InputError` naming the source file and line
when the record came from a file (``source`` and ``lines``), or the 1-based row
otherwise.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

import numpy as np
from numpy.typing import ArrayLike

from cavchar.errors import InputError

__all__ = ["RecordBase", "SegmentedRecord", "readonly_array", "segment_spans"]


def readonly_array(array: np.ndarray, given: object = None) -> np.ndarray:
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
class RecordBase:
    """Shared metadata, source tracking and validation helpers.

    Fields common to every record: ``time`` (array (m,), s; the first positional
    field, validated by each record) and the keyword-only

    metadata : mapping, optional
        Free ``key -> value`` strings (e.g. ``frequency: 6.8 GHz``).
    source, lines, line_kind : optional
        File, 1-based line (``line_kind="line"``, text files) or row
        (``line_kind="row"``, binary files) of each record row in that file,
        used in error messages.
    """

    time: np.ndarray
    metadata: Mapping[str, str] = field(default_factory=dict, kw_only=True)
    source: str | None = field(default=None, kw_only=True)
    lines: np.ndarray | None = field(default=None, kw_only=True)
    line_kind: str = field(default="line", kw_only=True)

    def _init_common(self) -> None:
        meta = MappingProxyType({str(k): str(v) for k, v in dict(self.metadata or {}).items()})
        object.__setattr__(self, "metadata", meta)
        if self.lines is not None:
            lines = np.asarray(self.lines, dtype=np.int64)
            object.__setattr__(self, "lines", readonly_array(lines, self.lines))

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

    def _real(self, name: str, values: ArrayLike) -> np.ndarray:
        """``values`` as float64; text, complex and other non-real arrays are refused
        (a complex array is never cut to its real part)."""
        try:
            raw = np.asarray(values)
        except (ValueError, TypeError) as exc:  # ragged nested sequences
            raise self._error(f"{name} is not an array of numbers ({exc})",
                              hint=f"give {name} as a 1-D array of real numbers") from None
        kind = raw.dtype.kind
        if kind == "c":
            raise self._error(f"{name} holds complex numbers; their imaginary part would be "
                              "lost", hint=f"give {name} as real numbers (complex samples "
                              "belong to the iq signal)")
        if kind in "USV" or kind in "Mm":
            raise self._error(f"{name} holds {raw.dtype} values, not numbers",
                              hint=f"give {name} as real numbers (convert text first)")
        if kind == "O":
            try:
                return raw.astype(np.float64)
            except (TypeError, ValueError):
                raise self._error(f"{name} holds values that are not real numbers",
                                  hint=f"give {name} as real numbers") from None
        if kind == "u" and raw.size and raw.max() >= 2**63:
            raise self._error(f"{name} holds an integer beyond 2^63",
                              hint=f"give {name} as real numbers of sensible size")
        return raw.astype(np.float64, copy=False)

    def _float(self, name: str, values: ArrayLike, n: int | None, allow_nan: bool = False):
        array = self._real(name, values)
        if array.ndim != 1 or (n is not None and array.size != n):
            raise self._error(f"{name} must be a 1-D array" + (f" of {n} values" if n else ""))
        bad = np.isinf(array) if allow_nan else ~np.isfinite(array)
        if bad.any():
            row = int(np.argmax(bad))
            raise self._error(f"{name} is not a finite number ({array[row]})", row,
                              hint=f"every {name} must be a finite number")
        return array

    def _integers(self, name: str, values: ArrayLike, n: int, minimum: int | None = None):
        raw = np.asarray(values) if isinstance(values, np.ndarray) else None
        if raw is None:
            try:
                raw = np.asarray(values)
            except (ValueError, TypeError) as exc:
                raise self._error(f"{name} is not an array of numbers ({exc})") from None
        if raw.dtype.kind in "iu" and not (raw.dtype.kind == "u" and raw.size
                                            and raw.max() >= 2**62):
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

    def _times(self, hint: str, noun: str = "record") -> np.ndarray:
        """The ``time`` column in s as float64, refused when the record has no rows."""
        time = self._float("time", self.time, None)
        if time.size == 0:
            raise self._error(f"the {noun} has no rows", hint=hint)
        return time

    def _ordered_groups(self, name: str, ids: ArrayLike | None, time: np.ndarray):
        """:meth:`_groups` of ``ids`` over the rows of ``time``, then the check that
        ``time`` increases strictly inside every group."""
        array, order, bounds = self._groups(name, ids, time.size)
        self._increasing(time, bounds, name)
        return array, order, bounds

    def _freeze(self, **arrays: np.ndarray | None) -> None:
        """Store each validated array as a read-only field (``None`` stays ``None``);
        the caller's own arrays are never frozen (:func:`readonly_array`)."""
        for name, value in arrays.items():
            object.__setattr__(self, name, None if value is None
                               else readonly_array(value, getattr(self, name, None)))

    def __len__(self) -> int:
        """Number of rows (change points, samples, probes or trace points)."""
        return int(self.time.size)

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


@dataclass(frozen=True, eq=False, repr=False)
class SegmentedRecord(RecordBase):
    """A record whose rows fall into segments: ``segment_ids`` (ids in file order) and
    ``bounds`` (row where each segment starts, then the row count), both set by the
    record's validation.

    segment : array (m,), optional
        Integer segment id of each row (default: one segment, id 0); the rows of a
        segment stand together.
    metadata, source, lines, line_kind : optional, keyword-only
        As for every record (:class:`RecordBase`).
    """

    segment_ids: np.ndarray = field(init=False)
    bounds: np.ndarray = field(init=False)

    @property
    def n_segments(self) -> int:
        """Number of segments."""
        return int(self.segment_ids.size)


def segment_spans(bounds: np.ndarray):
    """``(start, stop)`` row spans of the groups delimited by ``bounds`` (k+1,)."""
    return zip(bounds[:-1], bounds[1:], strict=True)

