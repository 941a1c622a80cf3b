"""One generic reader for numeric tables: CSV/TSV (optionally gzip), NPZ, Parquet.

Text files
    The first line that is neither blank nor a comment is the header (column
    names, case-insensitive).  Lines whose first non-blank character is ``#``
    are comments; a comment of the form ``# key: value`` is metadata (keys are
    case-insensitive, spaces and hyphens read as ``_``).  Separator: tab for
    ``.tsv``/``.tab``, comma for ``.csv``; otherwise tab when the header holds
    one, else comma.  A ``.gz`` file (or any file starting with the gzip magic
    bytes) is decompressed first.  Every cell must be a number; an empty cell is
    *missing* and only allowed in the columns a format names (``allow_empty``).
    ``nan``/``inf`` written out are refused: they are never valid data.
NPZ
    One 1-D numeric array per column (all the same length); metadata as a JSON
    object in the string array ``__metadata__``.  NaN marks a missing cell.
Parquet (when pyarrow is importable)
    One numeric column per column; nulls (or NaN) mark missing cells; metadata
    as JSON under the schema metadata key ``cavchar.metadata``.

Errors are :class:`~cavchar.errors.InputError` naming the file and the line
(text files; the header is counted like every other line, comments included)
or the row (binary files, 1-based), and what to do.
"""

from __future__ import annotations

import gzip
import io
import json
import os
import re
import zlib
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from cavchar.errors import InputError

__all__ = ["Table", "read_table", "table_format", "check_columns", "METADATA_KEY",
           "PARQUET_METADATA_KEY"]

_GZIP_MAGIC = b"\x1f\x8b"
_ZIP_MAGIC = b"PK\x03\x04"
_PARQUET_MAGIC = b"PAR1"
METADATA_KEY = "__metadata__"
PARQUET_METADATA_KEY = b"cavchar.metadata"
_META_LINE = re.compile(r"^#\s*([A-Za-z][A-Za-z0-9 _-]*?)\s*:\s*(.*?)\s*$")
_NUMBER = re.compile(r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$", re.ASCII)
_NAN_WORDS = {"nan", "+nan", "-nan", "inf", "+inf", "-inf", "infinity", "+infinity",
              "-infinity", "na", "n/a", "null", "none"}


def _meta_key(text: str) -> str:
    return re.sub(r"[\s-]+", "_", text.strip().lower())


@dataclass(frozen=True, eq=False)
class Table:
    """A numeric table read from a file.

    Attributes
    ----------
    path : str
        The file it came from.
    format : str
        ``"csv"``, ``"tsv"``, ``"npz"`` or ``"parquet"``.
    columns : dict[str, ndarray]
        Column name (lower case) -> float64 array of shape (n_rows,); NaN marks
        an empty (missing) cell, which only ``allow_empty`` columns can hold.
    metadata : dict[str, str]
        ``# key: value`` comments (text) or the stored metadata (binary).
    row_lines : ndarray or None
        1-based source line of each row (text files); None for binary files.
    header_line : int or None
        1-based line of the header (text files).
    """

    path: str
    format: str
    columns: dict[str, np.ndarray]
    metadata: dict[str, str] = field(default_factory=dict)
    row_lines: np.ndarray | None = None
    header_line: int | None = None
    line_text: Callable[[int], str] | None = field(default=None, repr=False)

    @property
    def names(self) -> list[str]:
        """Column names in file order."""
        return list(self.columns)

    @property
    def n_rows(self) -> int:
        return len(next(iter(self.columns.values()))) if self.columns else 0

    def __contains__(self, name: object) -> bool:
        return name in self.columns

    def __getitem__(self, name: str) -> np.ndarray:
        return self.columns[name]

    def line(self, row: int) -> int | None:
        """Source line of ``row`` (0-based) in a text file, else None."""
        return None if self.row_lines is None else int(self.row_lines[row])

    def where(self, row: int) -> str:
        """``"line 7"`` (text files) or ``"row 6"`` (binary files) for a 0-based row."""
        line = self.line(row)
        return f"line {line}" if line is not None else f"row {row + 1}"

    def error(self, message: str, row: int | None = None, hint: str | None = None) -> InputError:
        """An :class:`InputError` for ``row`` (0-based), naming the file and the line."""
        if row is None:
            return InputError(message, path=self.path, hint=hint)
        line = self.line(row)
        if line is None:
            message = f"row {row + 1}: {message}"
        return InputError(message, path=self.path, line=line, hint=hint)


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
        table = _read_npz(path, raw)
    elif fmt == "parquet":
        table = _read_parquet(path, raw)
    else:
        if raw.startswith(_GZIP_MAGIC):
            try:
                raw = gzip.decompress(raw)
            except (OSError, EOFError, zlib.error):
                raise InputError("the compressed (gzip) data are corrupt or truncated",
                                 path=path, hint="copy or compress the file again") from None
        table = _read_text(path, raw, fmt)
    check_columns(table, required, optional, prefixed, any_columns)
    _check_values(table, set(allow_empty))
    return table


# ---------------------------------------------------------------------------- text


class _Lines:
    """Line index of a text file, built only when needed (slow path or an error)."""

    def __init__(self, raw: bytes) -> None:
        self.raw = raw
        self._starts: np.ndarray | None = None
        self._ends: np.ndarray | None = None

    def _build(self) -> None:
        b = np.frombuffer(self.raw, dtype=np.uint8)
        newlines = np.flatnonzero(b == 10)
        starts = np.concatenate(([0], newlines + 1))
        ends = np.concatenate((newlines, [b.size]))
        if starts[-1] >= b.size:  # the file ends with a newline
            starts, ends = starts[:-1], ends[:-1]
        self._starts, self._ends = starts, ends

    @property
    def starts(self) -> np.ndarray:
        if self._starts is None:
            self._build()
        return self._starts

    @property
    def ends(self) -> np.ndarray:
        if self._ends is None:
            self._build()
        return self._ends

    def __len__(self) -> int:
        return int(self.starts.size)

    def text(self, i: int) -> str:
        """Text of 0-based line ``i`` (without the line break)."""
        return self.raw[self.starts[i]: self.ends[i]].decode("utf-8", errors="replace").rstrip(
            "\r")


def _read_metadata(text: str, metadata: dict[str, str]) -> None:
    match = _META_LINE.match(text.strip())
    if match:
        metadata[_meta_key(match.group(1))] = match.group(2)


def _read_text(path: Path, raw: bytes, fmt: str) -> Table:
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = b"   " + raw[3:]  # keep byte offsets; the blanks are stripped like any
    lines = _Lines(raw)
    metadata: dict[str, str] = {}
    # leading comments and blanks, line by line (they are few)
    pos, index, header_start = 0, 0, -1
    while pos < len(raw):
        end = raw.find(b"\n", pos)
        end = len(raw) if end < 0 else end
        stripped = raw[pos:end].strip()
        if stripped.startswith(b"#"):
            _read_metadata(raw[pos:end].decode("utf-8", errors="replace"), metadata)
        elif stripped:
            header_start = pos
            break
        pos, index = end + 1, index + 1
    if header_start < 0:
        raise InputError("the file holds no header line and no data (only comments or blanks)",
                         path=path, hint="give a header line naming the columns, then data rows")
    header_index, header_line = index, index + 1
    end = raw.find(b"\n", header_start)
    end = len(raw) if end < 0 else end
    try:
        header = raw[header_start:end].decode("utf-8").strip()
    except UnicodeDecodeError:
        raise InputError("the file is not UTF-8 text", path=path, line=header_line,
                         hint="give a CSV/TSV text file, or name a binary file .npz/.parquet"
                         ) from None
    sep = "\t" if fmt == "tsv" or ("\t" in header and "," not in header) else ","
    names = [n.strip().strip('"').strip().lower() for n in header.split(sep)]
    fmt = "tsv" if sep == "\t" else "csv"
    _check_header(path, header_line, names)
    if raw.find(b"\n", header_start, len(raw) - 1) < 0:
        raise InputError("the file has a header but no data rows", path=path,
                         line=header_line, hint="add data rows below the header")
    # fast path: parse everything below the header as it is; if every line became a row
    # (no comment or blank line in between), row i sits on line header_line + 1 + i
    below = raw.count(b"\n", header_start) - (1 if raw.endswith(b"\n") else 0)
    buffer = io.BytesIO(raw)  # shares the bytes object, no copy
    buffer.seek(header_start)
    frame = _parse_numbers(path, lines, None, header_index, names, sep, buffer, quiet=True)
    if frame is not None and frame[0].size == below:
        row_lines = np.arange(header_line + 1, header_line + 1 + below)
    else:  # slow path: drop comments and blanks, keep the line of every row
        data = _data_lines(lines, metadata, header_index)
        if data.size == 1:
            raise InputError("the file has a header but no data rows", path=path,
                             line=header_line, hint="add data rows below the header")
        buffer = _data_buffer(raw, lines.starts, lines.ends, data)
        frame = _parse_numbers(path, lines, data, header_index, names, sep, buffer)
        row_lines = data[1:] + 1
    columns = dict(zip(names, frame, strict=True))
    return Table(str(path), fmt, columns, metadata, row_lines, header_line,
                 lambda line: lines.text(line - 1))


def _data_lines(lines: _Lines, metadata: dict[str, str], header_index: int) -> np.ndarray:
    """0-based indices of the header and data lines (comments and blanks dropped)."""
    raw, starts, ends = lines.raw, lines.starts, lines.ends
    b = np.frombuffer(raw, dtype=np.uint8)
    first = b[starts]
    length = ends - starts
    comment = first == ord("#")
    blank = (length == 0) | ((length == 1) & (first == 13))
    for i in np.flatnonzero((first == 32) | (first == 9)):  # indented lines: rare
        stripped = raw[starts[i]: ends[i]].strip()
        blank[i] = not stripped
        comment[i] = stripped.startswith(b"#")
    for i in np.flatnonzero(comment[header_index:]) + header_index:
        _read_metadata(lines.text(i), metadata)
    data = np.flatnonzero(~comment & ~blank)
    return data[data >= header_index]


def _check_header(path: Path, line: int, names: list[str]) -> None:
    seen: set[str] = set()
    for name in names:
        if not name:
            raise InputError("the header has an empty column name", path=path, line=line,
                             hint="name every column (or remove a trailing separator)")
        if name in seen:
            raise InputError(f"column {name!r} appears twice in the header", path=path,
                             line=line, hint="give each column once")
        seen.add(name)


def _data_buffer(raw: bytes, starts, ends, data) -> io.BytesIO:
    """The header and data lines only (comments and blanks removed), as one buffer."""
    breaks = np.flatnonzero(np.diff(data) != 1)
    run_first = np.concatenate(([data[0]], data[breaks + 1]))
    run_last = np.concatenate((data[breaks], [data[-1]]))
    if run_first.size == 1 and ends[run_last[0]] >= len(raw) - 1:
        buffer = io.BytesIO(raw)  # shares the bytes object, no copy
        buffer.seek(int(starts[run_first[0]]))
        return buffer
    pieces = [raw[starts[i]: ends[j]] for i, j in zip(run_first, run_last, strict=True)]
    return io.BytesIO(b"\n".join(pieces))


def _parse_numbers(path, lines: _Lines, data, header_index: int, names, sep, buffer,
                   quiet: bool = False) -> list[np.ndarray] | None:
    """Float columns of the buffer; on failure None (``quiet``) or an InputError that
    names the offending line."""
    import pandas as pd

    options = dict(sep=sep, header=0, keep_default_na=False, na_values=[""],
                   skip_blank_lines=quiet, engine="c")
    try:
        frame = pd.read_csv(buffer, dtype=np.float64, **options)
    except (ValueError, TypeError, UnicodeDecodeError):  # ParserError is a ValueError
        if quiet:
            return None
        frame = None
    if frame is None or frame.shape[1] != len(names):
        if quiet:
            return None
        buffer.seek(0)
        _explain_failure(path, lines, data, header_index, names, sep, buffer)
    columns = []
    for j in range(len(names)):
        column = np.asarray(frame.iloc[:, j], dtype=np.float64)  # a view, no copy
        column.setflags(write=False)
        columns.append(column)
    return columns


def _explain_failure(path, lines: _Lines, data, header_index: int, names, sep, buffer) -> None:
    """Raise the InputError that says which line the parser could not read."""
    import pandas as pd

    options = dict(sep=sep, header=0, keep_default_na=False, na_values=[""],
                   skip_blank_lines=False, engine="c")
    try:
        pd.read_csv(buffer, dtype=np.float64, **options)
    except pd.errors.ParserError as exc:
        _raise_field_count(path, lines, data, header_index, names, sep)
        raise InputError(f"cannot parse the table ({exc})", path=path,
                         hint="check quotes and separators") from None
    except (ValueError, TypeError):
        _raise_non_numeric(path, lines, data, header_index, names, sep)
        raise InputError("the table holds cells that are not numbers", path=path,
                         hint="every cell must be a number") from None
    except UnicodeDecodeError:
        raise InputError("the file is not UTF-8 text", path=path,
                         hint="give a CSV/TSV text file") from None
    _raise_field_count(path, lines, data, header_index, names, sep)
    raise InputError("cannot parse the table", path=path, hint="check quotes and separators")


def _rows(lines: _Lines, data, header_index: int):
    """0-based indices of the data lines below the header."""
    return range(header_index + 1, len(lines)) if data is None else data[1:]


def _raise_field_count(path, lines: _Lines, data, header_index: int, names, sep) -> None:
    for i in _rows(lines, data, header_index):
        count = len(lines.text(i).split(sep))
        if count != len(names):
            raise InputError(
                f"this row has {count} cells but the header names {len(names)} columns",
                path=path, line=int(i) + 1,
                hint=f"give one value per column ({', '.join(names)}), separated by "
                + ("tabs" if sep == "\t" else "commas"))


def _raise_non_numeric(path, lines: _Lines, data, header_index: int, names, sep) -> None:
    for i in _rows(lines, data, header_index):
        cells = [c.strip().strip('"').strip() for c in lines.text(i).split(sep)]
        for name, cell in zip(names, cells, strict=False):
            if cell and not _NUMBER.match(cell):
                _bad_cell(path, int(i) + 1, name, cell)


def _bad_cell(path, line: int | None, name: str, cell: str) -> None:
    if cell.lower() in _NAN_WORDS:
        raise InputError(f"column {name!r} holds {cell!r}, which is not a finite number",
                         path=path, line=line,
                         hint="write a finite number (an empty cell is allowed only where "
                         "the format says so, e.g. a lost probe's outcome)")
    raise InputError(f"column {name!r} holds {cell!r}, which is not a number",
                     path=path, line=line, hint="write a plain number such as 0.125 or 3e-4")


# ---------------------------------------------------------------------------- binary


def _read_npz(path: Path, raw: bytes) -> Table:
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


def _read_parquet(path: Path, raw: bytes) -> Table:
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
    return {_meta_key(str(k)): str(v) for k, v in data.items()}


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
