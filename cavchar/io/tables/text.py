"""Text tables: CSV/TSV parsing (already decompressed), with errors naming the line.

The first line that is neither blank nor a comment is the header; ``# key: value``
comments are metadata.  A fast path parses everything below the header at once;
when comments or blank lines sit between the rows, a slow path drops them and keeps
the source line of every row.  Every cell must be a number (an empty cell is read
as NaN and judged by :func:`cavchar.io.tables.reader.read_table`).
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import numpy as np

from cavchar.errors import InputError
from cavchar.io.tables.table import Table, meta_key

__all__ = ["read_text"]

_META_LINE = re.compile(r"^#\s*([A-Za-z][A-Za-z0-9 _-]*?)\s*:\s*(.*?)\s*$")
_NUMBER = re.compile(r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$", re.ASCII)
_NAN_WORDS = {"nan", "+nan", "-nan", "inf", "+inf", "-inf", "infinity", "+infinity",
              "-infinity", "na", "n/a", "null", "none"}


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
        metadata[meta_key(match.group(1))] = match.group(2)


def read_text(path: Path, raw: bytes, fmt: str) -> Table:
    """Table of a text file's (decompressed) bytes ``raw``; ``fmt`` is ``"csv"`` or ``"tsv"``
    as told by the file name (a header holding tabs and no commas is read as TSV)."""
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
