"""Writers of cavchar's data files: the exact formats the readers take.

The format follows the file name (``.csv``, ``.tsv``, either with ``.gz``,
``.npz``, ``.parquet``); files are written atomically and an existing file is
only replaced with ``force=True``.  Text files round-trip every float exactly.
"""

from __future__ import annotations

import gzip
import io
import json
import os
from collections.abc import Iterable, Mapping
from pathlib import Path

import numpy as np

from cavchar.errors import InputError
from cavchar.io.atomic import check_can_write, write_bytes_atomic
from cavchar.io.tables import METADATA_KEY, PARQUET_METADATA_KEY, table_format
from cavchar.records import JumpRecord, ProbeRecord, RingdownTrace, SampledRecord

__all__ = [
    "write_table",
    "write_jump_record",
    "write_sampled_record",
    "write_probe_record",
    "write_ringdown",
    "write_record",
]


def write_table(
    path: str | os.PathLike,
    columns: Mapping[str, np.ndarray],
    *,
    metadata: Mapping[str, object] | None = None,
    comments: Iterable[str] = (),
    force: bool = False,
) -> Path:
    """Write numeric columns in the format the file name asks for (see :func:`table_format`).

    Float NaN and masked entries (``numpy.ma``) are written as empty cells
    (text), nulls (Parquet) or NaN (NPZ).  Text files round-trip floats exactly
    (shortest representation).  The file is written atomically and an existing
    file is only replaced with ``force=True``.

    Parameters
    ----------
    path
        Destination; ``.csv``, ``.tsv``, either with ``.gz``, ``.npz`` or ``.parquet``.
    columns
        Column name -> 1-D array (all the same length).
    metadata
        Written as ``# key: value`` lines (text) or stored JSON (binary).
    comments
        Free comment lines written first in text files (without the ``#``).
    force
        Replace an existing file.
    """
    target = check_can_write(path, force)
    fmt = table_format(target)
    meta = {str(k): str(v) for k, v in (metadata or {}).items()}
    arrays = {}
    for name, values in columns.items():
        array = np.ma.asarray(values)
        if array.ndim != 1:
            raise ValueError(f"column {name!r} is not 1-D")
        if array.dtype.kind == "b":
            array = array.astype(np.int64)
        elif array.dtype.kind == "f":
            array = np.ma.masked_invalid(array)
        elif array.dtype.kind not in "iu":
            raise ValueError(f"column {name!r} is not numeric ({array.dtype})")
        arrays[name] = array
    if fmt == "npz":
        buffer = io.BytesIO()
        plain = {n: (a.astype(np.float64).filled(np.nan) if np.ma.is_masked(a)
                     else np.asarray(a.data)) for n, a in arrays.items()}
        np.savez_compressed(buffer, **plain, **{METADATA_KEY: np.array(json.dumps(meta))})
        data = buffer.getvalue()
    elif fmt == "parquet":
        data = _parquet_bytes(arrays, meta, target)
    else:
        sep = "\t" if fmt == "tsv" else ","
        head = "".join(f"# {c}\n" for c in comments)
        head += "".join(f"# {k}: {v}\n" for k, v in meta.items())
        head += sep.join(arrays) + "\n"
        data = head.encode("utf-8") + _text_rows(arrays, sep)
        if target.suffix.lower() == ".gz":
            data = gzip.compress(data, mtime=0)
    return write_bytes_atomic(target, data, force=force)


def _text_rows(arrays: Mapping[str, np.ma.MaskedArray], sep: str) -> bytes:
    try:
        import pyarrow as pa
        import pyarrow.csv as pacsv
    except ImportError:
        pa = None
    if pa is not None:
        table = pa.table({n: pa.array(np.asarray(a.data), mask=np.ma.getmaskarray(a))
                          for n, a in arrays.items()})
        buffer = io.BytesIO()
        options = pacsv.WriteOptions(include_header=False, delimiter=sep, quoting_style="none")
        pacsv.write_csv(table, buffer, options)
        return buffer.getvalue()
    import pandas as pd

    data = {}
    for n, a in arrays.items():
        mask = np.ma.getmaskarray(a)
        values = np.asarray(a.data)
        if values.dtype.kind in "iu":
            data[n] = pd.arrays.IntegerArray(values.astype(np.int64), mask)
        else:
            data[n] = np.where(mask, np.nan, values)
    frame = pd.DataFrame(data)
    return frame.to_csv(sep=sep, header=False, index=False, na_rep="").encode("utf-8")


def _parquet_bytes(arrays, meta: dict[str, str], target: Path) -> bytes:
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:
        raise InputError("writing Parquet files needs pyarrow, which is not installed",
                         path=target, hint="pip install pyarrow, or write .csv or .npz") from None
    table = pa.table({n: pa.array(np.asarray(a.data), mask=np.ma.getmaskarray(a))
                      for n, a in arrays.items()})
    table = table.replace_schema_metadata({PARQUET_METADATA_KEY: json.dumps(meta).encode()})
    buffer = io.BytesIO()
    pq.write_table(table, buffer)
    return buffer.getvalue()


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
    meta = {**_meta(record, metadata), "record": "exact change points"}
    return write_table(path, columns, metadata=meta, comments=comments,
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
    meta = {**_meta(record, metadata), "record": "sampled at probe times"}
    return write_table(path, columns, metadata=meta, comments=comments,
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
