"""The generic table reader: format detection, reading, column and value checks."""

from __future__ import annotations

import gzip
import os
import re
import zlib
from collections.abc import Iterable
from pathlib import Path

import numpy as np

from cavchar.errors import InputError
from cavchar.io.tables.binary import read_npz, read_parquet
from cavchar.io.tables.table import Table
from cavchar.io.tables.text import read_text

__all__ = ["read_table", "table_format", "check_columns"]

_GZIP_MAGIC = b"\x1f\x8b"
_ZIP_MAGIC = b"PK\x03\x04"
_PARQUET_MAGIC = b"PAR1"


def table_format(path: str | os.PathLike) -> str:
    """Format chosen from the file name: ``csv``, ``tsv``, ``npz`` or ``parquet``
    (``.gz`` is stripped first; unknown suffixes are read as text)."""
    suffixes = [s.lower() for s in Path(path).suffixes]
    if suffixes and suffixes[-1] == ".gz":
        suffixes = suffixes[:-1]
    last = suffixes[-1] if suffixes else ""
    if last == ".npz":
        return "npz"
    if last in (".parquet", ".pq"):
        return "parquet"
    if last in (".tsv", ".tab"):
        return "tsv"
    return "csv"


def _read_bytes(path: Path) -> bytes:
    try:
        return path.read_bytes()
    except FileNotFoundError:
        raise InputError("file not found", path=path, hint="check the path") from None
    except IsADirectoryError:
        raise InputError("is a folder, not a file", path=path, hint="give a data file") from None
    except OSError as exc:
        raise InputError(f"cannot read the file: {exc.strerror or exc}", path=path,
                         hint="check that it exists and is readable") from None


def read_table(
    path: str | os.PathLike,
    *,
    required: Iterable[str] = (),
    optional: Iterable[str] = (),
    prefixed: Iterable[str] = (),
    allow_empty: Iterable[str] = (),
    any_columns: bool = False,
) -> Table:
    """Read a numeric table and check its columns.

    Parameters
    ----------
    path
        CSV/TSV (optionally ``.gz``), NPZ or Parquet file.
    required
        Columns that must be present.
    optional
        Columns that may be present.
    prefixed
        Prefixes of numbered columns that may be present, e.g. ``"count_"``
        allows ``count_0``, ``count_1``, ...
    allow_empty
        Columns in which an empty cell (NaN) is allowed.
    any_columns
        Accept columns that are neither required, optional nor prefixed (also
        the case when none of these is given).

    Returns
    -------
    Table

    Raises
    ------
    InputError
        Unreadable, empty, corrupt-compressed or non-UTF-8 file; missing,
        unknown or duplicate columns; a row with the wrong number of cells; a
        non-numeric, ``nan`` or infinite cell; an empty cell in a column that
        does not allow it.  The message names the file and the line (or row).
    """
    path = Path(path)
    raw = _read_bytes(path)
    if not raw:
        raise InputError("the file is empty", path=path,
                         hint="give a file with a header line and data rows")
    fmt = table_format(path)
    if raw.startswith(_ZIP_MAGIC):
        fmt = "npz"
    elif raw.startswith(_PARQUET_MAGIC):
        fmt = "parquet"
    if fmt == "npz":
        table = read_npz(path, raw)
    elif fmt == "parquet":
        table = read_parquet(path, raw)
    else:
        if raw.startswith(_GZIP_MAGIC):
            try:
                raw = gzip.decompress(raw)
            except (OSError, EOFError, zlib.error):
                raise InputError("the compressed (gzip) data are corrupt or truncated",
                                 path=path, hint="copy or compress the file again") from None
        table = read_text(path, raw, fmt)
    check_columns(table, required, optional, prefixed, any_columns)
    _check_values(table, set(allow_empty))
    return table


# ---------------------------------------------------------------------------- checks


def check_columns(
    table: Table,
    required: Iterable[str] = (),
    optional: Iterable[str] = (),
    prefixed: Iterable[str] = (),
    any_columns: bool = False,
) -> None:
    """Raise :class:`InputError` (naming the header line) for missing or unknown columns."""
    required = [c.lower() for c in required]
    optional = [c.lower() for c in optional]
    prefixed = [p.lower() for p in prefixed]
    line = table.header_line
    listed = ", ".join(required + optional + [p + "<k>" for p in prefixed])
    missing = [c for c in required if c not in table.columns]
    if missing:
        raise InputError(
            f"missing column{'s' if len(missing) > 1 else ''} {', '.join(map(repr, missing))}"
            f" (the file has {', '.join(table.names)})", path=table.path, line=line,
            hint=f"the header must name {', '.join(required)}"
            + (f"; optional: {', '.join(optional)}" if optional else ""))
    if any_columns or not (required or optional or prefixed):
        return
    pattern = re.compile("^(" + "|".join(map(re.escape, prefixed)) + r")\d+$") if prefixed else None
    for name in table.names:
        if name in required or name in optional or (pattern and pattern.match(name)):
            continue
        raise InputError(f"unknown column {name!r}", path=table.path, line=line,
                         hint=f"allowed columns: {listed}; remove or rename it")


def _check_values(table: Table, allow_empty: set[str]) -> None:
    for name, values in table.columns.items():
        bad = np.isinf(values)
        if name not in allow_empty:
            bad |= np.isnan(values)
        if not bad.any():
            continue
        row = int(np.argmax(bad))
        value = values[row]
        if np.isnan(value):
            if table.row_lines is not None and table.line_text is not None:
                text = table.line_text(table.line(row))
                sep = "\t" if table.format == "tsv" else ","
                count = len(text.split(sep))
                if count < len(table.names):
                    raise table.error(
                        f"this row has {count} cells but the header names "
                        f"{len(table.names)} columns", row,
                        hint=f"give one value per column ({', '.join(table.names)})")
                raise table.error(f"the cell in column {name!r} is empty", row,
                                  hint="every row needs a value in this column")
            raise table.error(f"column {name!r} holds NaN (missing)", row,
                              hint="every row needs a finite value in this column")
        raise table.error(f"column {name!r} holds an infinite value", row,
                          hint="write a finite number (values beyond 1.8e308 overflow)")
