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
from cavchar.io.tables.layout import TIME_UNITS, FileLayout, layout_of, plain_name, split_unit
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


def _looks_like_text(raw: bytes) -> bool:
    head = raw[:4096]
    try:
        text = head.decode("utf-8")
    except UnicodeDecodeError as exc:  # a character cut at the end of the sample is fine
        if exc.start < len(head) - 4:
            return False
        text = head[: exc.start].decode("utf-8")
    return all(c.isprintable() or c in "\r\n\t" for c in text)


def read_table(
    path: str | os.PathLike,
    *,
    required: Iterable[str] = (),
    optional: Iterable[str] = (),
    prefixed: Iterable[str] = (),
    allow_empty: Iterable[str] = (),
    any_columns: bool = False,
    layout: FileLayout | None = None,
    columns: dict[str, str] | None = None,
) -> Table:
    """Read a numeric table and check its columns.

    Column names are the header's (or the stored arrays') names in lower case
    with blanks read as ``_``; a unit in parentheses or brackets after a name
    (``Time (ms)``, ``time [us]``) is split off.  The unit of the ``time``
    column converts its values to seconds (:data:`TIME_UNITS`); ``power`` in
    dB, dBm or dBW is read as ``power_db``.

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
    layout
        :class:`~cavchar.io.tables.layout.FileLayout`: column mapping, rows to
        skip, delimiter, decimal mark (a :class:`LaidOutPath` brings its own).
    columns
        Column mapping ``cavchar name -> the file's header text`` (added to the
        layout's); the file's other columns are then ignored unless their name
        is one the format knows.

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
    layout = layout_of(path, layout, columns)
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
    if fmt in ("npz", "parquet") and (layout.skip_rows is not None or layout.delimiter
                                      or layout.decimal):
        raise InputError(f"--skip-rows, --delimiter and --decimal are for text files, not "
                         f"{fmt.upper()}", path=path, hint="leave these options out")
    if fmt in ("npz", "parquet") and not raw.startswith((_ZIP_MAGIC, _PARQUET_MAGIC,
                                                          b"\x93NUMPY")):
        kind = "a text table" if _looks_like_text(raw) else "neither"
        raise InputError(f"the file is named .{path.suffix.lstrip('.').lower()} but is not "
                         f"an NPZ or Parquet file (it is {kind})", path=path,
                         hint="name a text table .csv or .tsv" if kind == "a text table"
                         else "give a numpy .npz archive, a Parquet file or a text table")
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
        table = read_text(path, raw, fmt, layout)
    table = _name_columns(table, layout, list(required) + list(optional), list(prefixed))
    check_columns(table, required, optional, prefixed, any_columns)
    _check_values(table, set(allow_empty))
    return table


# ---------------------------------------------------------------------------- naming

_DB_UNITS = {"db", "dbm", "dbw", "dbmw", "dbfs"}


def _name_columns(table: Table, layout: FileLayout, known: list[str],
                  prefixed: list[str]) -> Table:
    """The table with its columns named as cavchar names them (mapping, units, dB)."""
    headers = table.names
    line = table.header_line
    bases = [split_unit(h) for h in headers]
    fulls = [plain_name(h) for h in headers]
    plains = [plain_name(b) for b, _ in bases]
    listed = ", ".join(repr(h) for h in headers)
    names: list[str | None] = [None] * len(headers)
    for canonical, target in layout.columns.items():
        want = plain_name(target)
        hits = [i for i, f in enumerate(fulls) if f == want]
        if not hits:
            hits = [i for i, p in enumerate(plains) if p == want]
        if not hits and target.isdigit() and 1 <= int(target) <= len(headers):
            hits = [int(target) - 1]
        if not hits:
            raise InputError(f"the column mapping {canonical}={target!r} names no column of "
                             f"the file (its columns: {listed})", path=table.path, line=line,
                             hint="give the header text as written, or the column's position "
                             "(1, 2, ...)")
        if len(hits) > 1:
            raise InputError(f"the column mapping {canonical}={target!r} fits several columns "
                             f"({', '.join(repr(headers[i]) for i in hits)})", path=table.path,
                             line=line, hint="give the whole header text, unit included")
        i = hits[0]
        if names[i] is not None:
            raise InputError(f"the column {headers[i]!r} is mapped twice ({names[i]} and "
                             f"{canonical})", path=table.path, line=line,
                             hint="map each column once")
        names[i] = canonical
    known_set = set(known)

    def is_known(name: str) -> bool:
        return name in known_set or any(name.startswith(p) and name[len(p):].isdigit()
                                        for p in prefixed)

    ignored = []
    for i, (plain, (_, unit)) in enumerate(zip(plains, bases, strict=True)):
        if names[i] is not None:
            continue
        name = plain if unit is not None else fulls[i]
        if name == "power" and unit is not None and unit.lower() in _DB_UNITS:
            name = "power_db"
        if layout.columns and not is_known(name):
            ignored.append(headers[i])
            continue
        names[i] = name
    seen: dict[str, str] = {}
    for i, name in enumerate(names):
        if name is None:
            continue
        if name in seen:
            raise InputError(f"column {name!r} appears twice in the header ({seen[name]!r} and "
                             f"{headers[i]!r})", path=table.path, line=line,
                             hint="give each column once, or choose one with --column "
                             f"{name}=HEADER")
        seen[name] = headers[i]
    columns: dict[str, np.ndarray] = {}
    info = dict(table.layout)
    for i, name in enumerate(names):
        if name is None:
            continue
        values = table.columns[headers[i]]
        unit = bases[i][1]
        if name == "power" and unit is not None and unit.lower() in _DB_UNITS:
            raise InputError(f"the column {headers[i]!r} mapped to power holds dB values",
                             path=table.path, line=line,
                             hint=f'map it to power_db instead (--column power_db='
                             f'"{headers[i]}", --signal db)')
        if name == "time" and unit is not None:
            factor = _time_factor(table, headers[i], unit)
            if factor != 1.0:
                values = values * factor
                values.setflags(write=False)
            info["time_unit"] = unit
        elif unit is not None:
            info.setdefault("column_units", {})[name] = unit
        columns[name] = values
    info["file_columns"] = len(headers)
    if ignored:
        info["ignored_columns"] = ignored
    if not columns:
        raise InputError("no column of the file is used", path=table.path, line=line,
                         hint="map the columns to read with --column NAME=HEADER")
    return Table(table.path, table.format, columns, table.metadata, table.row_lines,
                 table.header_line, table.line_text, table.line_cells, info)


def _time_factor(table: Table, header: str, unit: str) -> float:
    key = unit.strip()
    factor = TIME_UNITS.get(key, TIME_UNITS.get(key.lower()))
    if factor is None:
        raise InputError(f"the time column {header!r} has the unit {unit!r}, which is not a "
                         "time unit", path=table.path, line=table.header_line,
                         hint="write the unit as s, ms, us or ns, or leave it out for seconds")
    return factor


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
                         hint=f"allowed columns: {listed}; remove or rename it, or name the "
                         "columns to read with --column NAME=HEADER (the others are then "
                         "ignored)")


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
            if table.row_lines is not None and table.line_cells is not None:
                count = len(table.line_cells(table.line(row)))
                width = int(table.layout.get("file_columns", len(table.names)))
                if count < width:
                    raise table.error(
                        f"this row has {count} cells but the header names "
                        f"{width} columns", row,
                        hint=f"give one value per column ({', '.join(table.names)})")
                raise table.error(f"the cell in column {name!r} is empty", row,
                                  hint="every row needs a value in this column")
            raise table.error(f"column {name!r} holds NaN (missing)", row,
                              hint="every row needs a finite value in this column")
        raise table.error(f"column {name!r} holds an infinite value", row,
                          hint="write a finite number (values beyond 1.8e308 overflow)")
