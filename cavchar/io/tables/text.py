"""Text tables: CSV/TSV parsing (already decompressed), with errors naming the line.

The header row, the delimiter and the decimal mark are found by
:mod:`cavchar.io.tables.sniff` (lines above the header are an instrument's
preamble and are skipped); ``# key: value`` comments are metadata.  A fast path
parses everything below the header at once; when comments or blank lines sit
between the rows, a slow path drops them and keeps
the source line of every row.  Every cell must be a number (an empty cell is read
as NaN and judged by :func:`cavchar.io.tables.reader.read_table`).
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import numpy as np

from cavchar.errors import InputError
from cavchar.io.tables.layout import FileLayout, plain_name
from cavchar.io.tables.sniff import (
    DECIMAL_SAMPLE_ROWS,
    MAX_PREAMBLE_LINES,
    cell_kind,
    sniff,
    split_cells,
)
from cavchar.io.tables.table import Table, meta_key

__all__ = ["read_text"]

_META_LINE = re.compile(r"^#\s*([A-Za-z][A-Za-z0-9 _-]*?)\s*:\s*(.*?)\s*$")
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


def _next_line(raw: bytes, pos: int) -> int:
    end = raw.find(b"\n", pos)
    return len(raw) if end < 0 else end


def read_text(path: Path, raw: bytes, fmt: str, layout: FileLayout | None = None) -> Table:
    """Table of a text file's (decompressed) bytes ``raw``.

    ``fmt`` (``"csv"`` or ``"tsv"``, from the file name) only matters when the
    delimiter cannot be detected; ``layout`` gives rows to skip, the delimiter
    and the decimal mark (each detected when not given, see
    :mod:`cavchar.io.tables.sniff`).  Column names are the header's cells as
    written (quotes and surrounding blanks removed).
    """
    layout = layout or FileLayout()
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = b"   " + raw[3:]  # keep byte offsets; the blanks are stripped like any
    nul = raw.find(b"\x00")
    if nul >= 0:
        raise InputError("the file holds a NUL byte: it is binary data, not CSV/TSV text",
                         path=path, line=raw.count(b"\n", 0, nul) + 1,
                         hint="give a text file saved as UTF-8, or name a binary file "
                         ".npz/.parquet")
    lines = _Lines(raw)
    metadata: dict[str, str] = {}
    pos, index = 0, 0
    skip = layout.skip_rows or 0
    while index < skip and pos < len(raw):
        pos, index = _next_line(raw, pos) + 1, index + 1
    if skip and pos >= len(raw):
        raise InputError(f"--skip-rows {skip} skips the whole file ({index} lines)", path=path,
                         hint="give the number of lines above the header row")
    # leading comments and blanks, line by line (they are few)
    header_start = -1
    notes: list[str] = []
    while pos < len(raw):
        end = _next_line(raw, pos)
        stripped = raw[pos:end].strip()
        if stripped.startswith(b"#"):
            text = raw[pos:end].decode("utf-8", errors="replace")
            _read_metadata(text, metadata)
            if len(notes) < 3:
                notes.append(text.strip().lstrip("#").strip()[:200])
        elif stripped:
            header_start = pos
            break
        pos, index = end + 1, index + 1
    if header_start < 0:
        raise InputError("the file holds no header line and no data (only comments or blanks)",
                         path=path, hint="give a header line naming the columns, then data rows")
    candidates, comments = _candidates(path, raw, header_start, index)
    default_sep = "\t" if fmt == "tsv" else ","
    found = sniff(path, [(n, t) for n, t, _, _ in candidates], layout.delimiter,
                  layout.decimal, layout.skip_rows is not None, default_sep)
    header_line, header_text, header_pos, header_end = candidates[found.header]
    for number, text in comments:  # comments among the preamble lines
        if number < header_line:
            _read_metadata(text, metadata)
    header_index = header_line - 1
    sep, decimal = found.sep, found.decimal
    names = found.names
    _check_header(path, header_line, names)
    data_start = header_end + 1
    if raw[data_start:].strip() == b"":
        raise InputError("the file has a header but no data rows", path=path,
                         line=header_line, hint="add data rows below the header")
    # fast path: parse everything below the header as it is; if every line became a row
    # (no comment or blank line in between), row i sits on line header_line + 1 + i
    below = raw.count(b"\n", data_start) + (0 if raw.endswith(b"\n") else 1)
    buffer = io.BytesIO(raw)  # shares the bytes object, no copy
    buffer.seek(data_start)
    parse = _Parse(path, lines, header_index, names, sep, decimal)
    frame = parse.numbers(None, buffer, quiet=True)
    if frame is not None and frame[0].size == below and not np.isnan(frame[0]).any():
        row_lines = np.arange(header_line + 1, header_line + 1 + below)
    else:  # slow path: drop comments, blanks and separator-only lines; keep row lines
        data = _data_lines(lines, metadata, header_index, sep)
        if data.size == 0:
            raise InputError("the file has a header but no data rows", path=path,
                             line=header_line, hint="add data rows below the header")
        buffer = _data_buffer(raw, lines.starts, lines.ends, data)
        frame = parse.numbers(data, buffer)
        row_lines = data + 1
    missing = np.zeros(row_lines.size, bool)
    for column in frame:
        missing |= np.isnan(column)
    if missing.any():  # an empty cell may be allowed; a row short of cells never is
        _short_rows(path, lines, row_lines[missing] - 1, sep, len(names))
    columns = dict(zip(names, frame, strict=True))
    described = {"delimiter": _SEP_NAMES[sep], "decimal": "comma" if decimal == "," else "point",
                 "header_line": header_line, "preamble_lines": found.header,
                 "comments": notes}
    return Table(str(path), "tsv" if sep == "\t" else "csv", columns, metadata, row_lines,
                 header_line, lambda line: lines.text(line - 1),
                 line_cells=lambda line: split_cells(lines.text(line - 1), sep),
                 layout=described)


_SEP_NAMES = {"\t": "tab", ";": "semicolon", ",": "comma", None: "whitespace"}


def _candidates(path: Path, raw: bytes, pos: int, index: int) -> list:
    """``(line number, text, start, end)`` of the first non-comment, non-blank lines
    from ``pos`` (0-based line ``index``): the header search and the decimal sample."""
    out, comments = [], []
    limit = MAX_PREAMBLE_LINES + DECIMAL_SAMPLE_ROWS + 2
    while pos < len(raw) and len(out) < limit:
        end = _next_line(raw, pos)
        piece = raw[pos:end]
        if piece.strip() and not piece.strip().startswith(b"#"):
            try:
                text = piece.decode("utf-8").rstrip("\r")
            except UnicodeDecodeError:
                raise InputError("the file is not UTF-8 text", path=path, line=index + 1,
                                 hint="give a CSV/TSV text file (saved as UTF-8), or name a "
                                 "binary file .npz/.parquet") from None
            out.append((index + 1, text, pos, end))
        elif piece.strip():
            comments.append((index + 1, piece.decode("utf-8", errors="replace")))
        pos, index = end + 1, index + 1
    return out, comments


def _data_lines(lines: _Lines, metadata: dict[str, str], header_index: int,
                sep: str | None) -> np.ndarray:
    """0-based indices of the data lines below the header (comments, blanks and lines
    holding only separators dropped)."""
    raw, starts, ends = lines.raw, lines.starts, lines.ends
    b = np.frombuffer(raw, dtype=np.uint8)
    first = b[np.minimum(starts, max(b.size - 1, 0))]
    length = ends - starts
    comment = first == ord("#")
    blank = (length == 0) | ((length == 1) & (first == 13))
    odd = (first == 32) | (first == 9)
    if sep is not None and sep not in " \t":
        odd |= first == ord(sep)
    for i in np.flatnonzero(odd):  # indented or separator-only lines: rare
        stripped = raw[starts[i]: ends[i]].strip()
        blank[i] = not stripped or (sep is not None and not stripped.replace(
            sep.encode(), b"").strip())
        comment[i] = stripped.startswith(b"#")
    for i in np.flatnonzero(comment[header_index:]) + header_index:
        _read_metadata(lines.text(i), metadata)
    data = np.flatnonzero(~comment & ~blank)
    return data[data > header_index]


def _short_rows(path: Path, lines: _Lines, rows: np.ndarray, sep: str | None,
                width: int) -> None:
    """Raise for the first of ``rows`` (0-based lines holding an empty value) that has
    fewer cells than the header: its missing cells are not empty cells."""
    if sep is None:  # blanks cannot write an empty cell: a missing value is a short row
        suspects = rows[:1]
    else:
        b = np.frombuffer(lines.raw, dtype=np.uint8)
        at = np.flatnonzero(b == ord(sep))
        counts = np.searchsorted(at, lines.ends[rows]) - np.searchsorted(at, lines.starts[rows])
        suspects = rows[counts + 1 < width]
    for i in suspects[:100]:  # separators inside quotes are counted exactly here
        count = len(split_cells(lines.text(int(i)), sep))
        if count < width:
            raise InputError(f"this row has {count} cells but the header names {width} "
                             "columns", path=path, line=int(i) + 1,
                             hint=f"give one value per column, separated by {_SEP_WORDS[sep]} "
                             "(an empty cell is written as nothing between two separators)")


def _check_header(path: Path, line: int, names: list[str]) -> None:
    seen: set[str] = set()
    for name in names:
        if not name:
            raise InputError("the header has an empty column name", path=path, line=line,
                             hint="name every column (or remove a trailing separator)")
        if plain_name(name) in seen:
            raise InputError(f"column {plain_name(name)!r} appears twice in the header",
                             path=path, line=line, hint="give each column once")
        seen.add(plain_name(name))


def _data_buffer(raw: bytes, starts, ends, data) -> io.BytesIO:
    """The data lines only (comments and blanks removed), as one buffer."""
    breaks = np.flatnonzero(np.diff(data) != 1)
    run_first = np.concatenate(([data[0]], data[breaks + 1]))
    run_last = np.concatenate((data[breaks], [data[-1]]))
    if run_first.size == 1 and ends[run_last[0]] >= len(raw) - 1:
        buffer = io.BytesIO(raw)  # shares the bytes object, no copy
        buffer.seek(int(starts[run_first[0]]))
        return buffer
    pieces = [raw[starts[i]: ends[j]] for i, j in zip(run_first, run_last, strict=True)]
    return io.BytesIO(b"\n".join(pieces))


#: below this many bytes of rows, a table of plain numbers is read without pandas (whose
#: import, about 0.4 s, is most of what a small file costs); anything else goes to pandas
SMALL_TABLE_BYTES = 1 << 20
_PLAIN_NUMBER_CHARS = frozenset("0123456789.+-eE \t\r\n")


def _plain_numbers(buffer: io.BytesIO, ncols: int, sep: str | None, decimal: str
                   ) -> list[np.ndarray] | None:
    """Columns of a small table whose every line holds exactly ``ncols`` plain decimal
    numbers (digits, sign, point, exponent; no blanks, comments, empty cells or words),
    by Python's correctly rounded ``float``; ``None`` for anything else, which pandas reads."""
    start = buffer.tell()
    with buffer.getbuffer() as view:
        if len(view) - start > SMALL_TABLE_BYTES:
            return None
        chunk = bytes(view[start:])
    try:
        text = chunk.decode("ascii")
    except UnicodeDecodeError:
        return None
    if decimal == ",":
        if "." in text:
            return None
        text = text.replace(",", ".")
    allowed = _PLAIN_NUMBER_CHARS | ({sep} if sep else set())
    if not set(text) <= allowed:
        return None
    lines = text.split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    try:
        rows = [line.rstrip("\r").split(sep) for line in lines]
        if not rows or any(len(row) != ncols for row in rows):
            return None
        values = np.array([[float(cell) for cell in row] for row in rows], dtype=np.float64)
    except ValueError:  # an empty cell, a stray carriage return, "1.2.3", "1e"
        return None
    return [np.ascontiguousarray(values[:, j]) for j in range(ncols)]


class _Parse:
    """pandas' C parser over the rows below the header (small plain tables without it),
    and the errors that name the line it could not read."""

    def __init__(self, path, lines: _Lines, header_index: int, names, sep, decimal) -> None:
        self.path, self.lines, self.header_index = path, lines, header_index
        self.names, self.sep, self.decimal = names, sep, decimal

    def _read(self, buffer, skip_blank: bool):
        import warnings

        import pandas as pd

        with warnings.catch_warnings():
            # a row with more cells than the header: pandas warns and drops cells (or,
            # without index_col=False, makes the first cell an index); here it is an error
            warnings.simplefilter("error", pd.errors.ParserWarning)
            return pd.read_csv(buffer, sep=r"\s+" if self.sep is None else self.sep,
                               decimal=self.decimal, header=None,
                               names=list(range(len(self.names))), index_col=False,
                               dtype=np.float64, keep_default_na=False, na_values=[""],
                               skip_blank_lines=skip_blank, engine="c")

    def numbers(self, data, buffer, quiet: bool = False) -> list[np.ndarray] | None:
        """Float columns of the buffer; on failure None (``quiet``) or an InputError that
        names the offending line."""
        plain = _plain_numbers(buffer, len(self.names), self.sep, self.decimal)
        if plain is not None:
            for column in plain:
                column.setflags(write=False)
            return plain
        import pandas as pd

        try:
            frame = self._read(buffer, quiet)
        except (ValueError, TypeError, UnicodeDecodeError, pd.errors.ParserWarning):
            if quiet:
                return None
            frame = None
        if frame is None or frame.shape[1] != len(self.names):
            if quiet:
                return None
            self._explain(data)
        columns = []
        for j in range(len(self.names)):
            column = np.asarray(frame.iloc[:, j], dtype=np.float64)  # a view, no copy
            column.setflags(write=False)
            columns.append(column)
        return columns

    def _rows(self, data):
        lines = self.lines
        return range(self.header_index + 1, len(lines)) if data is None else data

    def _explain(self, data) -> None:
        """Raise the InputError that says which line the parser could not read."""
        self._field_count(data)
        self._non_numeric(data)
        raise InputError("cannot parse the table", path=self.path,
                         hint="check quotes and separators")

    def _field_count(self, data) -> None:
        n = len(self.names)
        for i in self._rows(data):
            text = self.lines.text(i)
            stripped = text.strip()
            if not stripped or stripped.startswith("#"):
                continue
            count = len(split_cells(text, self.sep))
            if count == n:
                continue
            hint = f"give one value per column ({', '.join(self.names)}), separated by " + \
                _SEP_WORDS[self.sep]
            if count > n and self.sep == ",":
                hint += ("; if the file writes decimal commas (0,5 for 0.5), the cells must be "
                         "separated by semicolons or tabs (--delimiter), or write decimal "
                         "points")
            raise InputError(f"this row has {count} cells but the header names {n} columns",
                             path=self.path, line=int(i) + 1, hint=hint)

    def _non_numeric(self, data) -> None:
        good = {"empty", "int", "dot"} if self.decimal == "." else {"empty", "int", "comma"}
        for i in self._rows(data):
            text = self.lines.text(i)
            if not text.strip() or text.strip().startswith("#"):
                continue
            for name, cell in zip(self.names, split_cells(text, self.sep), strict=False):
                if cell_kind(cell) not in good:
                    _bad_cell(self.path, int(i) + 1, name, cell, self.decimal)


_SEP_WORDS = {"\t": "tabs", ";": "semicolons", ",": "commas", None: "blanks"}


def _bad_cell(path, line: int | None, name: str, cell: str, decimal: str = ".") -> None:
    if cell.lower() in _NAN_WORDS:
        raise InputError(f"column {name!r} holds {cell!r}, which is not a finite number",
                         path=path, line=line,
                         hint="write a finite number (an empty cell is allowed only where "
                         "the format says so, e.g. a lost probe's outcome)")
    kind = cell_kind(cell)
    if kind == "comma":
        raise InputError(f"column {name!r} holds {cell!r}, a number with a decimal comma, "
                         "in a file read with decimal points", path=path, line=line,
                         hint="set --decimal comma (decimal=',' in Python)")
    if kind == "dot":
        raise InputError(f"column {name!r} holds {cell!r}, a number with a decimal point, "
                         "in a file read with decimal commas", path=path, line=line,
                         hint="write every number with the same decimal mark, or set "
                         "--decimal point")
    raise InputError(f"column {name!r} holds {_short(cell)!r}, which is not a number",
                     path=path, line=line, hint="write a plain number such as 0.125 or 3e-4")


def _short(text: str, limit: int = 60) -> str:
    return text if len(text) <= limit else text[:limit] + "..."
