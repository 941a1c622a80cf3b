"""Photon-number records: exact change points (:class:`JumpRecord`) and the photon
number observed at probe times (:class:`SampledRecord`).  Times in s."""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from cavchar.records.base import SegmentedRecord, segment_spans

__all__ = ["JumpRecord", "SampledRecord", "JumpSegment", "SampledSegment", "evenly_sampled"]

#: fewest steps (rows after the first, within segments) before the rows are judged
EVEN_MIN_STEPS = 8
#: fraction of steps equal to the median step that makes the rows evenly spaced
EVEN_FRACTION = 0.9
#: fraction of rows repeating the previous photon number that marks a sampled record
REPEAT_FRACTION = 0.1

_SAMPLED_HINT = ("if the photon number was observed at probe times (several jumps may happen "
                 "between rows), read the file as a sampled record (read_sampled_record, or "
                 "--sampled on the command line)")


def evenly_sampled(time, photons, segment=None) -> str | None:
    """Why rows look like photon numbers read at probe times, or None.

    Rows of an exact record are change points: their spacing is random (the
    dwell times of a Markov chain) and a row rarely repeats the previous photon
    number.  Samples on a probe clock are evenly spaced and mostly repeat it.
    The rows are judged sampled when there are at least :data:`EVEN_MIN_STEPS`
    steps within segments, at least :data:`EVEN_FRACTION` of them equal the
    median step (to 1e-6 of it), and at least :data:`REPEAT_FRACTION` of them
    repeat the previous photon number.

    Parameters
    ----------
    time, photons : array (m,)
        Row times (s) and photon numbers.
    segment : array (m,), optional
        Segment ids; steps across a segment boundary do not count.

    Returns
    -------
    str or None
        A sentence naming the spacing and the share of repeats, when sampled.
    """
    time = np.asarray(time, dtype=float)
    photons = np.asarray(photons, dtype=float)
    if time.size < 2:
        return None
    inside = np.ones(time.size - 1, bool)
    if segment is not None:
        segment = np.asarray(segment)
        inside = segment[1:] == segment[:-1]
    step = np.diff(time)[inside]
    if step.size < EVEN_MIN_STEPS or not np.all(np.isfinite(step)):
        return None
    median = float(np.median(step))
    if not median > 0:
        return None
    even = np.abs(step - median) <= 1e-6 * median
    repeats = (photons[1:] == photons[:-1])[inside]
    if even.mean() < EVEN_FRACTION or repeats.mean() < REPEAT_FRACTION:
        return None
    return (f"the rows are evenly spaced (every {median:.6g} s) and {repeats.mean():.0%} of "
            "them repeat the previous photon number")


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


@dataclass(frozen=True, eq=False, repr=False)
class JumpRecord(SegmentedRecord):
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
    segment, metadata, source, lines, line_kind : optional
        As for every segmented record (:class:`~cavchar.records.base.SegmentedRecord`).
    """

    photons: np.ndarray
    end_time: np.ndarray
    segment: np.ndarray | None = None

    def __post_init__(self) -> None:
        self._init_common()
        time = self._times(hint="give at least one change point")
        m = time.size
        photons = self._integers("photon number", self.photons, m, minimum=0)
        segment, ids, bounds = self._ordered_groups("segment", self.segment, time)
        end = np.atleast_1d(self._real("end_time", self.end_time))
        if end.size == 1 and ids.size > 1:
            raise self._error(f"one end time given for {ids.size} segments",
                              hint="give one end time per segment (an end row in each)")
        if end.shape != ids.shape:
            raise self._error(f"{end.size} end times for {ids.size} segments",
                              hint="give one end time per segment")
        last = bounds[1:] - 1
        first = bounds[:-1]
        bad = ~np.isfinite(end) | (end < time[last]) | (end <= time[first])
        if bad.any():
            j = int(np.argmax(bad))
            if np.isfinite(end[j]) and end[j] >= time[last[j]]:
                raise self._error(f"segment {ids[j]} ends at {end[j]} s, where it starts: it "
                                  "spans no time", int(last[j]),
                                  hint="give an end time after the segment's first row")
            raise self._error(f"segment {ids[j]} ends at {end[j]} s, before its last change "
                              f"at {time[last[j]]} s", int(last[j]),
                              hint="the end time must not come before the last row of its "
                              "segment (it may equal it: the last dwell then has zero "
                              "length)")
        step = np.diff(photons)
        inside = np.ones(max(m - 1, 0), bool)
        inside[bounds[1:-1] - 1] = False
        bad = inside & (np.abs(step) > 1)
        if bad.any():
            row = int(np.argmax(bad)) + 1
            raise self._error(f"the photon number jumps from {photons[row - 1]} to "
                              f"{photons[row]} at {time[row]} s; an exact record changes by "
                              "one photon at a time", row, hint=_SAMPLED_HINT)
        self._freeze(time=time, photons=photons, end_time=end, segment=segment, segment_ids=ids,
                     bounds=bounds)

    def __repr__(self) -> str:
        return (f"JumpRecord({self.time.size} rows, {self.n_jumps} jumps, "
                f"{self.segment_ids.size} segment(s), {self.observed_time:.6g} s observed, "
                f"source={self.source!r})")

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
        """Largest photon number in the record."""
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
                for i, (a, b), e in zip(self.segment_ids, segment_spans(self.bounds),
                                        self.end_time, strict=True)]


@dataclass(frozen=True, eq=False, repr=False)
class SampledRecord(SegmentedRecord):
    """Photon number observed at probe times (regular or irregular), per segment.

    Unlike a :class:`JumpRecord`, consecutive samples may differ by any number
    of photons (several jumps can happen between two samples).

    Parameters
    ----------
    time : array (m,)
        Probe times in s, strictly increasing within each segment.
    photons : array (m,)
        Photon number observed at each time (whole numbers >= 0).
    segment, metadata, source, lines, line_kind : optional
        As for every segmented record (:class:`~cavchar.records.base.SegmentedRecord`).
    """

    photons: np.ndarray
    segment: np.ndarray | None = None

    def __post_init__(self) -> None:
        self._init_common()
        time = self._times(hint="give at least one sample")
        photons = self._integers("photon number", self.photons, time.size, minimum=0)
        segment, ids, bounds = self._ordered_groups("segment", self.segment, time)
        self._freeze(time=time, photons=photons, segment=segment, segment_ids=ids, bounds=bounds)

    def __repr__(self) -> str:
        return (f"SampledRecord({self.time.size} samples, {self.segment_ids.size} segment(s), "
                f"source={self.source!r})")

    @property
    def max_photons(self) -> int:
        """Largest photon number in the record."""
        return int(self.photons.max())

    def segments(self) -> list[SampledSegment]:
        """Per-segment arrays (read-only views), in file order."""
        return [SampledSegment(int(i), self.time[a:b], self.photons[a:b])
                for i, (a, b) in zip(self.segment_ids, segment_spans(self.bounds), strict=True)]
