"""Binary tables: NPZ (one 1-D array per column, metadata JSON in ``__metadata__``) and
Parquet (when pyarrow is importable; metadata JSON under ``cavchar.metadata``)."""

from __future__ import annotations

import io
import json
import zlib
from pathlib import Path

import numpy as np

from cavchar.errors import InputError
from cavchar.io.tables.table import Table, meta_key

__all__ = ["read_npz", "read_parquet", "METADATA_KEY", "PARQUET_METADATA_KEY"]

METADATA_KEY = "__metadata__"
PARQUET_METADATA_KEY = b"cavchar.metadata"


def read_npz(path: Path, raw: bytes) -> Table:
    """Table of an NPZ file's bytes ``raw`` (``path`` names it in errors)."""
    import zipfile

    try:
        archive = np.load(io.BytesIO(raw), allow_pickle=False)
        keys = list(archive.keys())
        arrays = {k: archive[k] for k in keys}
    except (zipfile.BadZipFile, OSError, ValueError, EOFError, zlib.error) as exc:
        raise InputError(f"not a readable NPZ file ({exc})", path=path,
                         hint="write it with numpy.savez of 1-D numeric arrays") from None
    metadata: dict[str, str] = {}
    if METADATA_KEY in arrays:
        metadata = _metadata_from_json(path, str(arrays.pop(METADATA_KEY)))
    columns: dict[str, np.ndarray] = {}
    for key, value in arrays.items():
        name = key.strip().lower()
        if name in columns:
            raise InputError(f"column {name!r} appears twice", path=path,
                             hint="give each column once")
        if value.ndim != 1:
            raise InputError(f"array {key!r} has shape {value.shape}, not one column", path=path,
                             hint="store one 1-D array per column")
        if value.dtype.kind not in "biuf":
            raise InputError(f"column {name!r} holds {value.dtype} data, not real numbers",
                             path=path, hint="store numeric (integer or float) arrays")
        columns[name] = value.astype(np.float64)
    return _binary_table(path, "npz", columns, metadata)


def read_parquet(path: Path, raw: bytes) -> Table:
    """Table of a Parquet file's bytes ``raw`` (needs pyarrow; ``path`` names it in errors)."""
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:
        raise InputError("reading Parquet files needs pyarrow, which is not installed",
                         path=path, hint="pip install pyarrow, or use CSV or NPZ") from None
    try:
        table = pq.read_table(pa.BufferReader(raw))
    except (pa.ArrowException, OSError) as exc:
        raise InputError(f"not a readable Parquet file ({exc})", path=path,
                         hint="write it again, or use CSV or NPZ") from None
    meta = table.schema.metadata or {}
    metadata = {}
    if PARQUET_METADATA_KEY in meta:
        metadata = _metadata_from_json(path, meta[PARQUET_METADATA_KEY].decode("utf-8"))
    columns: dict[str, np.ndarray] = {}
    for name, column in zip(table.column_names, table.columns, strict=True):
        key = name.strip().lower()
        if key in columns:
            raise InputError(f"column {key!r} appears twice", path=path,
                             hint="give each column once")
        kind = column.type
        if not (pa.types.is_integer(kind) or pa.types.is_floating(kind)
                or pa.types.is_boolean(kind) or pa.types.is_null(kind)):
            raise InputError(f"column {key!r} has type {kind}, not numbers", path=path,
                             hint="store numeric columns")
        values = column.cast(pa.float64()).to_numpy(zero_copy_only=False)
        columns[key] = np.asarray(values, dtype=np.float64)
    return _binary_table(path, "parquet", columns, metadata)


def _metadata_from_json(path: Path, text: str) -> dict[str, str]:
    try:
        data = json.loads(text)
    except json.JSONDecodeError:
        raise InputError("the stored metadata are not valid JSON", path=path,
                         hint="write metadata as a JSON object of strings") from None
    if not isinstance(data, dict):
        raise InputError("the stored metadata are not a JSON object", path=path,
                         hint="write metadata as a JSON object of strings")
    return {meta_key(str(k)): str(v) for k, v in data.items()}


def _binary_table(path: Path, fmt: str, columns: dict, metadata: dict) -> Table:
    if not columns:
        raise InputError("the file holds no columns", path=path,
                         hint="store one 1-D array per column")
    lengths = {name: len(v) for name, v in columns.items()}
    if len(set(lengths.values())) > 1:
        raise InputError("columns have different lengths: "
                         + ", ".join(f"{k} {v}" for k, v in lengths.items()), path=path,
                         hint="every column needs one value per row")
    if next(iter(lengths.values())) == 0:
        raise InputError("the file holds no data rows", path=path, hint="add data rows")
    for column in columns.values():
        column.setflags(write=False)
    return Table(str(path), fmt, columns, metadata)
