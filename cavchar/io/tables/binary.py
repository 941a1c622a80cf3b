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
        if not hasattr(archive, "keys"):  # a bare .npy file under an .npz name
            raise InputError("the file is a single numpy array, not an NPZ archive of columns",
                             path=path, hint="write it with numpy.savez(path, time=..., ...)")
        keys = list(archive.keys())
        arrays = {k: archive[k] for k in keys}
    except InputError:
        raise
    except ValueError as exc:
        text = "it holds Python objects, which cavchar never loads" if "pickle" in str(exc) \
            else _short(exc)
        raise InputError(f"not a readable NPZ file ({text})", path=path,
                         hint="write it with numpy.savez of 1-D numeric arrays") from None
    except (zipfile.BadZipFile, OSError, EOFError, zlib.error, KeyError, TypeError,
            NotImplementedError, RuntimeError, OverflowError, MemoryError) as exc:
        raise InputError(f"not a readable NPZ file ({_short(exc)})", path=path,
                         hint="write it with numpy.savez of 1-D numeric arrays") from None
    metadata: dict[str, str] = {}
    if METADATA_KEY in arrays:
        value = arrays.pop(METADATA_KEY)
        if not isinstance(value, np.ndarray) or value.dtype.kind not in "US" or value.size != 1:
            raise InputError(f"the {METADATA_KEY} member is not one string", path=path,
                             hint="store the metadata as numpy.array(json.dumps({...}))")
        metadata = _metadata_from_json(path, str(value.reshape(())[()]))
    columns: dict[str, np.ndarray] = {}
    for key, value in arrays.items():
        name = key.strip()
        if not isinstance(value, np.ndarray):
            raise InputError(f"the archive member {key!r} is not a numpy array (.npy)",
                             path=path, hint="store only numpy arrays, one per column")
        if name in columns:
            raise InputError(f"column {name!r} appears twice", path=path,
                             hint="give each column once")
        if value.ndim != 1:
            raise InputError(f"array {key!r} has shape {value.shape}, not one column", path=path,
                             hint="store one 1-D array per column")
        if value.dtype.kind not in "biuf":
            raise InputError(f"column {name!r} holds {value.dtype} data, not real numbers",
                             path=path, hint="store numeric (integer or float) arrays")
        _check_exact_integers(path, name, value)
        columns[name] = value.astype(np.float64)
    return _binary_table(path, "npz", columns, metadata)


#: integers beyond this magnitude have no exact float64
_EXACT = 2**53


def _check_exact_integers(path: Path, name: str, value: np.ndarray) -> None:
    if value.dtype.kind in "iu" and value.size:
        big = (value > _EXACT) | ((value < -_EXACT) if value.dtype.kind == "i" else False)
        if np.any(big):
            row = int(np.argmax(big))
            raise InputError(f"row {row + 1}: column {name!r} holds the integer {value[row]}, "
                             "beyond 2^53, which a float cannot hold exactly", path=path,
                             hint="store such values as floats (e.g. seconds, not "
                             "nanosecond counts), or subtract an offset first")


def _short(exc: object, limit: int = 120) -> str:
    text = f"{type(exc).__name__}: {exc}" if isinstance(exc, BaseException) else str(exc)
    text = " ".join(text.split())
    return text if len(text) <= limit else text[:limit] + "..."


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
    except (pa.ArrowException, OSError, ValueError, TypeError, KeyError, IndexError,
            OverflowError, MemoryError, RuntimeError, NotImplementedError) as exc:
        raise InputError(f"not a readable Parquet file ({_short(exc)})", path=path,
                         hint="write it again, or use CSV or NPZ") from None
    meta = table.schema.metadata or {}
    metadata = {}
    if PARQUET_METADATA_KEY in meta:
        try:
            text = meta[PARQUET_METADATA_KEY].decode("utf-8")
        except UnicodeDecodeError:
            raise InputError("the stored metadata are not UTF-8 text", path=path,
                             hint="write metadata as a JSON object of strings") from None
        metadata = _metadata_from_json(path, text)
    columns: dict[str, np.ndarray] = {}
    for name, column in zip(table.column_names, table.columns, strict=True):
        key = name.strip()
        if key in columns:
            raise InputError(f"column {key!r} appears twice", path=path,
                             hint="give each column once")
        kind = column.type
        if not (pa.types.is_integer(kind) or pa.types.is_floating(kind)
                or pa.types.is_boolean(kind) or pa.types.is_null(kind)):
            raise InputError(f"column {key!r} has type {kind}, not numbers", path=path,
                             hint="store numeric columns")
        if pa.types.is_integer(kind):
            try:
                ints = column.to_numpy(zero_copy_only=False)
            except (pa.ArrowException, ValueError, TypeError) as exc:
                raise InputError(f"column {key!r} cannot be read ({_short(exc)})",
                                 path=path, hint="store numeric columns") from None
            if ints.dtype.kind in "iu":
                _check_exact_integers(path, key, ints)
        try:
            values = column.cast(pa.float64()).to_numpy(zero_copy_only=False)
        except (pa.ArrowException, ValueError, TypeError, OverflowError) as exc:
            raise InputError(f"column {key!r} cannot be read as numbers ({_short(exc)})",
                             path=path, hint="store numeric columns") from None
        columns[key] = np.asarray(values, dtype=np.float64)
    return _binary_table(path, "parquet", columns, metadata)


def _metadata_from_json(path: Path, text: str) -> dict[str, str]:
    try:
        data = json.loads(text)
    except (json.JSONDecodeError, RecursionError, ValueError):
        raise InputError("the stored metadata are not valid JSON (or nested too deeply)",
                         path=path, hint="write metadata as a flat JSON object of strings"
                         ) from None
    if not isinstance(data, dict):
        raise InputError("the stored metadata are not a JSON object", path=path,
                         hint="write metadata as a JSON object of strings")
    out = {}
    for k, v in data.items():
        if isinstance(v, (dict, list)):
            raise InputError(f"the stored metadata value of {str(k)[:40]!r} is not a plain "
                             "value", path=path,
                             hint="write metadata as a flat JSON object of strings")
        out[meta_key(str(k))] = str(v)
    return out


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
