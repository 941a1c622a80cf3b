"""Writers of cavchar's data files: the exact formats the readers take.

The format follows the file name (``.csv``, ``.tsv``, either with ``.gz``,
``.npz``, ``.parquet``); files are written atomically and an existing file is
only replaced with ``force=True``.  Text files round-trip every float exactly.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from cavchar.io.tables import write_table
from cavchar.records import JumpRecord, ProbeRecord, RingdownTrace, SampledRecord

__all__ = [
    "write_jump_record",
    "write_sampled_record",
    "write_probe_record",
    "write_ringdown",
    "write_record",
]


def _meta(record, extra: Mapping[str, object] | None) -> dict[str, str]:
    meta = dict(record.metadata)
    meta.update({str(k): str(v) for k, v in (extra or {}).items()})
    return meta


def _needs_ids(ids: np.ndarray) -> bool:
    return ids.size > 1 or int(ids[0]) != 0


def write_jump_record(
    record: JumpRecord,
    path: str | os.PathLike,
    force: bool = False,
    metadata: Mapping[str, object] | None = None,
) -> Path:
    """Write an exact jump record: columns ``time``, ``photons`` (and ``segment``
    when there are several segments), each segment closed by an end row whose
    ``photons`` cell is empty.  ``metadata`` adds ``# key: value`` lines."""
    stops = record.bounds[1:]
    time = np.insert(record.time, stops, record.end_time)
    photons = np.ma.array(np.insert(record.photons, stops, 0))
    photons[stops + np.arange(stops.size)] = np.ma.masked
    columns: dict[str, np.ndarray] = {"time": time, "photons": photons}
    if _needs_ids(record.segment_ids):
        columns["segment"] = np.insert(record.segment, stops, record.segment_ids)
    comments = ["cavchar exact jump record; time in s; photons holds from its time until the "
                "next row; an empty photons cell marks the end of a segment"]
    return write_table(path, columns, metadata=_meta(record, metadata), comments=comments,
                       force=force)


def write_sampled_record(
    record: SampledRecord,
    path: str | os.PathLike,
    force: bool = False,
    metadata: Mapping[str, object] | None = None,
) -> Path:
    """Write a sampled record: columns ``time``, ``photons`` (and ``segment``)."""
    columns: dict[str, np.ndarray] = {"time": record.time, "photons": record.photons}
    if _needs_ids(record.segment_ids):
        columns["segment"] = record.segment
    comments = ["cavchar sampled photon-number record; time in s; photons observed at that time"]
    return write_table(path, columns, metadata=_meta(record, metadata), comments=comments,
                       force=force)


def write_probe_record(
    record: ProbeRecord,
    path: str | os.PathLike,
    force: bool = False,
    metadata: Mapping[str, object] | None = None,
) -> Path:
    """Write a probe record: columns ``time``, ``outcome`` (empty = lost probe),
    ``setting`` (rad, when present) and ``segment`` (when several)."""
    columns: dict[str, np.ndarray] = {"time": record.time, "outcome": record.outcome}
    if record.setting is not None:
        columns["setting"] = record.setting
    if _needs_ids(record.segment_ids):
        columns["segment"] = record.segment
    comments = ["cavchar probe record; time in s; outcome 0 or 1, empty = probe lost"
                + ("; setting = probe phase in rad" if record.setting is not None else "")]
    return write_table(path, columns, metadata=_meta(record, metadata), comments=comments,
                       force=force)


def write_ringdown(
    trace: RingdownTrace,
    path: str | os.PathLike,
    force: bool = False,
    metadata: Mapping[str, object] | None = None,
) -> Path:
    """Write ring-down traces with the value columns of their signal kind
    (see :func:`cavchar.io.readers.read_ringdown`)."""
    from cavchar.io.readers import RINGDOWN_COLUMNS

    columns: dict[str, np.ndarray] = {"time": trace.time}
    if trace.signal == "iq":
        columns["real"] = trace.value.real.copy()
        columns["imag"] = trace.value.imag.copy()
    elif trace.signal == "populations":
        for k in range(trace.value.shape[1]):
            columns[f"count_{k}"] = trace.value[:, k].copy()
    else:
        columns[RINGDOWN_COLUMNS[trace.signal][0]] = trace.value
    if trace.sigma is not None:
        columns["sigma"] = trace.sigma
    if _needs_ids(trace.trace_ids):
        columns["trace"] = trace.trace
    comments = [f"cavchar ring-down trace, signal {trace.signal}; time in s"]
    return write_table(path, columns, metadata=_meta(trace, metadata), comments=comments,
                       force=force)


def write_record(record, path: str | os.PathLike, force: bool = False,
                 metadata: Mapping[str, object] | None = None) -> Path:
    """Write any record with the writer of its type."""
    writers = {JumpRecord: write_jump_record, SampledRecord: write_sampled_record,
               ProbeRecord: write_probe_record, RingdownTrace: write_ringdown}
    for kind, writer in writers.items():
        if isinstance(record, kind):
            return writer(record, path, force=force, metadata=metadata)
    raise TypeError(f"cannot write a {type(record).__name__}")
