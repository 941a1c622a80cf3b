"""How a file is laid out: column mapping, rows to skip, delimiter, decimal mark, trace.

Instruments write tables their own way (``Time (s);Power (dBm)`` with decimal
commas, a preamble of settings above the header, extra columns).  A
:class:`FileLayout` says what the readers cannot find out by themselves; every
field is optional and what is not given is detected (see
:mod:`cavchar.io.tables.sniff`), or refused with a message naming the option.

:class:`LaidOutPath` ties a layout to a path (``os.PathLike``), so a path can
carry its layout through code that only passes paths on (the command line does
this for the fit commands).
"""

from __future__ import annotations

import os
import re
from collections.abc import Mapping
from dataclasses import dataclass, field

from cavchar.errors import InputError

__all__ = ["FileLayout", "LaidOutPath", "layout_of", "split_unit", "plain_name",
           "TIME_UNITS", "DELIMITERS", "parse_column_option"]

#: seconds per unit of a time column, as written in a header, e.g. ``Time (ms)``
TIME_UNITS: dict[str, float] = {"s": 1.0, "sec": 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6,
                                "μs": 1e-6, "ns": 1e-9, "ps": 1e-12, "min": 60.0}
#: delimiter names accepted by ``--delimiter`` -> the separator (``None`` = runs of blanks)
DELIMITERS: dict[str, str | None] = {",": ",", "comma": ",", ";": ";", "semicolon": ";",
                                     "\t": "\t", "tab": "\t", "\\t": "\t",
                                     "whitespace": None, "space": None, " ": None}
_UNIT = re.compile(r"^(.*?)\s*[\(\[]\s*([^\(\)\[\]]*?)\s*[\)\]]\s*$")


def split_unit(header: str) -> tuple[str, str | None]:
    """``"Time (ms)"`` -> ``("Time", "ms")``; ``"time [s]"`` -> ``("time", "s")``;
    a header without a unit in parentheses or brackets -> ``(header, None)``."""
    match = _UNIT.match(header.strip())
    if match and match.group(1):
        return match.group(1).strip(), match.group(2).strip()
    return header.strip(), None


def plain_name(text: str) -> str:
    """Column name as the readers use it: lower case, runs of blanks read as ``_``."""
    return re.sub(r"\s+", "_", text.strip().strip('"').strip().lower())


@dataclass(frozen=True)
class FileLayout:
    """What the readers are told about a file's layout (all optional).

    Attributes
    ----------
    columns : mapping str -> str
        cavchar column name -> the file's column (its header text, case and
        surrounding blanks ignored, or its 1-based position as digits), e.g.
        ``{"time": "Time (s)", "power_db": "Power (dBm)"}``.  When given, the
        file's other columns are ignored.
    skip_rows : int or None
        Number of lines above the header to skip (an instrument's preamble);
        by default the header row is found by itself.
    delimiter : str or None
        ``","``, ``";"``, ``"tab"`` or ``"whitespace"``; by default detected.
    decimal : str or None
        ``"."`` or ``","``; by default detected.
    trace : str, int or None
        One trace of a file with several: a ``trace`` id (a whole number) or
        the header of the value column to fit.
    exact_rows : bool
        Exact jump records only: the rows are change points even though they are
        evenly spaced and repeat photon numbers (see
        :func:`cavchar.io.readers.read_jump_record`).
    """

    columns: Mapping[str, str] = field(default_factory=dict)
    skip_rows: int | None = None
    delimiter: str | None = None
    decimal: str | None = None
    trace: str | int | None = None
    exact_rows: bool = False

    def __post_init__(self) -> None:
        columns = {}
        for key, value in dict(self.columns or {}).items():
            if not isinstance(key, str) or not isinstance(value, (str, int)) or \
                    isinstance(value, bool):
                raise InputError(f"cannot use the column mapping {key!r}: {value!r}",
                                 hint='map a cavchar column name to a header text, e.g. '
                                 'time="Time (s)"')
            name = plain_name(key)
            if not name:
                raise InputError("a column mapping has an empty name",
                                 hint='write NAME=HEADER, e.g. time="Time (s)"')
            columns[name] = str(value).strip()
            if not columns[name]:
                raise InputError(f"the column mapping for {name!r} names no column",
                                 hint='write NAME=HEADER, e.g. time="Time (s)"')
        object.__setattr__(self, "columns", columns)
        if self.skip_rows is not None:
            if isinstance(self.skip_rows, bool) or not isinstance(self.skip_rows, int) or \
                    self.skip_rows < 0 or self.skip_rows > 10**6:
                raise InputError(f"cannot skip {self.skip_rows!r} rows",
                                 hint="--skip-rows takes a whole number of lines >= 0")
        if self.delimiter is not None:
            key = self.delimiter if self.delimiter in DELIMITERS else \
                str(self.delimiter).strip().lower()
            if key not in DELIMITERS:
                raise InputError(f"unknown delimiter {self.delimiter!r}",
                                 hint="--delimiter takes comma, semicolon, tab or whitespace")
            object.__setattr__(self, "delimiter", "whitespace" if DELIMITERS[key] is None
                               else DELIMITERS[key])
        if self.decimal is not None:
            text = str(self.decimal).strip().lower()
            text = {"point": ".", "dot": ".", "period": ".", "comma": ","}.get(text, text)
            if text not in (".", ","):
                raise InputError(f"unknown decimal mark {self.decimal!r}",
                                 hint="--decimal takes point (.) or comma (,)")
            object.__setattr__(self, "decimal", text)
        if self.decimal == "," and self.delimiter == ",":
            raise InputError("a comma cannot be both the delimiter and the decimal mark",
                             hint="choose --delimiter semicolon (or tab) with --decimal comma")
        if self.trace is not None and not isinstance(self.trace, (str, int)):
            raise InputError(f"cannot use the trace {self.trace!r}",
                             hint="--trace takes a trace id (whole number) or a column header")

    @property
    def given(self) -> bool:
        """True when anything differs from the defaults."""
        return bool(self.columns) or self.skip_rows is not None or self.delimiter is not None \
            or self.decimal is not None or self.trace is not None or self.exact_rows

    def merged(self, columns: Mapping[str, str] | None = None, **changes) -> FileLayout:
        """A copy with ``columns`` added to the mapping and other fields replaced
        where the new value is not None."""
        values = {"columns": {**dict(self.columns), **dict(columns or {})},
                  "skip_rows": self.skip_rows, "delimiter": self.delimiter,
                  "decimal": self.decimal, "trace": self.trace, "exact_rows": self.exact_rows}
        values.update({k: v for k, v in changes.items() if v is not None})
        return FileLayout(**values)

    def describe(self) -> dict:
        """Plain-JSON description (for provenance)."""
        return {"columns": dict(self.columns), "skip_rows": self.skip_rows,
                "delimiter": self.delimiter, "decimal": self.decimal,
                "trace": self.trace, "exact_rows": self.exact_rows}


class LaidOutPath(os.PathLike):
    """A file path together with the :class:`FileLayout` to read it with.

    Anything that accepts a path accepts it (``os.fspath`` gives the path); the
    readers use its layout.
    """

    def __init__(self, path: str | os.PathLike, layout: FileLayout) -> None:
        self.path = os.fspath(path)
        self.layout = layout

    def __fspath__(self) -> str:
        return self.path

    def __str__(self) -> str:
        return self.path

    def __repr__(self) -> str:
        return f"LaidOutPath({self.path!r}, {self.layout!r})"


def layout_of(path: object, layout: FileLayout | None = None,
              columns: Mapping[str, str] | None = None, **changes) -> FileLayout:
    """The layout to read ``path`` with: the one a :class:`LaidOutPath` carries, then
    ``layout``, then ``columns`` and the other ``changes`` (later ones win)."""
    result = getattr(path, "layout", None)
    if not isinstance(result, FileLayout):
        result = FileLayout()
    if layout is not None:
        if not isinstance(layout, FileLayout):
            raise TypeError("layout must be a FileLayout")
        result = result.merged(layout.columns, skip_rows=layout.skip_rows,
                               delimiter=layout.delimiter, decimal=layout.decimal,
                               trace=layout.trace, exact_rows=layout.exact_rows or None)
    if columns or any(v is not None for v in changes.values()):
        result = result.merged(columns, **changes)
    return result


def parse_column_option(text: str) -> tuple[str, str]:
    """``'time=Time (s)'`` (quotes around the header allowed) -> ``("time", "Time (s)")``."""
    name, sep, header = str(text).partition("=")
    header = header.strip()
    if len(header) >= 2 and header[0] == header[-1] and header[0] in "\"'":
        header = header[1:-1]
    if not sep or not name.strip() or not header.strip():
        raise InputError(f"cannot read --column {text!r}",
                         hint='write NAME=HEADER, e.g. --column time="Time (s)"')
    return plain_name(name), header.strip()
