"""Ring-down traces of one signal kind (:data:`SIGNALS`), one or more traces.  Times in s."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike

from cavchar.records.base import RecordBase, segment_spans

__all__ = ["RingdownTrace", "TraceSegment", "SIGNALS"]

#: ring-down signal kinds (see :class:`RingdownTrace`)
SIGNALS = ("power", "db", "amplitude", "iq", "mean_n", "populations")


class TraceSegment(NamedTuple):
    """One trace of a :class:`RingdownTrace`: times (s), values, sigma or None."""

    id: int
    time: np.ndarray
    value: np.ndarray
    sigma: np.ndarray | None


@dataclass(frozen=True, eq=False, repr=False)
class RingdownTrace(RecordBase):
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
    metadata, source, lines, line_kind : optional, keyword-only
        As for every record (:class:`~cavchar.records.base.RecordBase`).
    """

    value: np.ndarray
    signal: str
    sigma: np.ndarray | None = None
    trace: np.ndarray | None = None
    trace_ids: np.ndarray = field(init=False)
    bounds: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        self._init_common()
        signal = str(self.signal).lower().replace("-", "_")
        if signal not in SIGNALS:
            raise self._error(f"unknown signal kind {self.signal!r}",
                              hint=f"choose one of {', '.join(SIGNALS)}")
        object.__setattr__(self, "signal", signal)
        time = self._times(hint="give at least one point", noun="trace")
        m = time.size
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
        trace, ids, bounds = self._ordered_groups("trace", self.trace, time)
        self._freeze(time=time, value=value, sigma=sigma, trace=trace, trace_ids=ids,
                     bounds=bounds)

    def _value(self, signal: str, value: ArrayLike, m: int) -> np.ndarray:
        if signal == "iq":
            try:
                array = np.asarray(value)
            except (ValueError, TypeError):
                raise self._error("iq values are not an array of numbers") from None
            if array.ndim != 1 or array.size != m:
                raise self._error(f"an iq trace needs {m} complex values")
            if array.dtype.kind not in "biufc":
                raise self._error(f"iq values hold {array.dtype} data, not numbers",
                                  hint="give complex (or real) numbers")
            array = array.astype(np.complex128)
            bad = ~np.isfinite(array)
            if bad.any():
                raise self._error("iq value is not finite", int(np.argmax(bad)))
            return array
        if signal == "populations":
            try:
                array = np.asarray(value)
            except (ValueError, TypeError):
                raise self._error("counts are not an array of numbers") from None
            if array.ndim != 2 or array.shape[0] != m or array.shape[1] < 1:
                raise self._error(f"a populations trace needs counts of shape ({m}, levels)")
            if array.dtype.kind not in "iu" or (array.dtype.kind == "u" and array.size
                                                 and array.max() >= 2**62):
                array = self._real("counts", array)
                for bad, what in ((~np.isfinite(array), "is not finite"),
                                  (array != np.round(array), "is not a whole number"),
                                  (np.abs(array) >= 2.0**53, "is too large to count")):
                    if bad.any():
                        row, col = np.argwhere(bad)[0]
                        raise self._error(f"count_{col} = {array[row, col]} {what}", int(row),
                                          hint="counts must be whole numbers >= 0")
            counts = array.astype(np.int64)
            if (counts < 0).any():
                row, col = np.argwhere(counts < 0)[0]
                raise self._error(f"count_{col} = {counts[row, col]} is negative", int(row),
                                  hint="counts must be whole numbers >= 0")
            if counts.size and counts.max() >= 2**53:
                row, col = np.argwhere(counts >= 2**53)[0]
                raise self._error(f"count_{col} = {counts[row, col]} is too large to count",
                                  int(row), hint="counts must be whole numbers >= 0")
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

    @property
    def n_traces(self) -> int:
        """Number of traces."""
        return int(self.trace_ids.size)

    @property
    def n_levels(self) -> int | None:
        """Number of photon-number columns of a populations trace (else None)."""
        return int(self.value.shape[1]) if self.signal == "populations" else None

    def traces(self) -> list[TraceSegment]:
        """Per-trace arrays (read-only views), in file order."""
        return [TraceSegment(int(i), self.time[a:b], self.value[a:b],
                             None if self.sigma is None else self.sigma[a:b])
                for i, (a, b) in zip(self.trace_ids, segment_spans(self.bounds), strict=True)]
