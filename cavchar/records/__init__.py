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

Modules: :mod:`cavchar.records.base` (the shared validation base),
:mod:`cavchar.records.jumps` (:class:`JumpRecord`, :class:`SampledRecord`),
:mod:`cavchar.records.probes` (:class:`ProbeRecord`),
:mod:`cavchar.records.ringdown` (:class:`RingdownTrace`, :data:`SIGNALS`).
"""

from __future__ import annotations

from cavchar.records.jumps import JumpRecord, JumpSegment, SampledRecord, SampledSegment
from cavchar.records.probes import ProbeRecord, ProbeSegment
from cavchar.records.ringdown import SIGNALS, RingdownTrace, TraceSegment

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
