"""Finding the header row, the delimiter and the decimal mark of a text table.

Rule (documented in docs/data-formats.md): the header is the first line that
is not a comment (``#``) or blank, has at least two cells, none of them a
number, and is followed by a row of numbers with as many cells.  Lines above
it are an instrument's preamble and are skipped.  Delimiters tried: tab,
semicolon, comma, runs of blanks; the one that reads the header and the first
row alike wins (tab before blanks when both do).  A comma decimal mark is
detected from the first rows when the delimiter is not a comma.  Whatever cannot
be decided is an :class:`~cavchar.errors.InputError` naming the option to set.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

from cavchar.errors import InputError

__all__ = ["Sniffed", "sniff", "split_cells", "cell_kind", "MAX_PREAMBLE_LINES"]

#: how many lines above the header are searched for it
MAX_PREAMBLE_LINES = 200
#: data rows below the header used to decide the decimal mark
DECIMAL_SAMPLE_ROWS = 50
_DOT = re.compile(r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$", re.ASCII)
_COMMA = re.compile(r"^[+-]?(?:\d+,\d*|,\d+)(?:[eE][+-]?\d+)?$", re.ASCII)
_ORDER = ("\t", ";", ",", None)  # None = runs of blanks
_NAMES = {"\t": "tab", ";": "semicolon", ",": "comma", None: "whitespace"}


@dataclass(frozen=True)
class Sniffed:
    """Where the header is (index into the candidate lines), the separator
    (``None`` = runs of blanks), the decimal mark and the header cells."""

    header: int
    sep: str | None
    decimal: str
    names: list[str]
    found: bool


def split_cells(text: str, sep: str | None) -> list[str]:
    """Cells of one line (quotes and blanks around cells removed)."""
    parts = text.split() if sep is None else text.split(sep)
    return [p.strip().strip('"').strip() for p in parts]


def _split_header(text: str, sep: str | None, n_data: int) -> list[str]:
    cells = split_cells(text, sep)
    if sep is None and len(cells) != n_data:  # "Time (s)  Power (dBm)": split at 2+ blanks
        wide = [c.strip().strip('"').strip() for c in re.split(r"\s{2,}|\t", text.strip())]
        if len(wide) == n_data:
            return wide
    return cells


def cell_kind(cell: str) -> str:
    """``"empty"``, ``"int"`` (digits only), ``"dot"`` (decimal point), ``"comma"``
    (decimal comma) or ``"text"``."""
    if not cell:
        return "empty"
    if _DOT.match(cell):
        return "int" if cell.lstrip("+-").isdigit() else "dot"
    if _COMMA.match(cell):
        return "comma"
    return "text"


def _numeric_row(cells: list[str], sep: str | None) -> bool:
    kinds = [cell_kind(c) for c in cells]
    if all(k == "empty" for k in kinds):
        return False
    allowed = {"empty", "int", "dot"} | ({"comma"} if sep != "," else set())
    return all(k in allowed for k in kinds)


def _viable(header: str, row: str, sep: str | None) -> list[str] | None:
    cells = split_cells(row, sep)
    if len(cells) < 2 or not _numeric_row(cells, sep):
        return None
    names = _split_header(header, sep, len(cells))
    if len(names) != len(cells) or any(cell_kind(n) in ("int", "dot", "comma")
                                        for n in names) or all(not n for n in names):
        return None  # a header names columns: a number there makes it a data row
    return names


def sniff(path: Path, lines: list[tuple[int, str]], delimiter: str | None,
          decimal: str | None, fixed_header: bool, default_sep: str) -> Sniffed:
    """Header, separator and decimal mark from the candidate lines.

    Parameters
    ----------
    lines
        ``(1-based line number, text)`` of the non-comment, non-blank lines from
        the first possible header on (at most ``MAX_PREAMBLE_LINES`` +
        ``DECIMAL_SAMPLE_ROWS``).
    delimiter, decimal
        As given by the user (``"whitespace"`` for blanks) or None.
    fixed_header
        The first line is the header (``--skip-rows`` was given).
    default_sep
        The separator the file name suggests, used when nothing can be detected
        (the parser then names the line it cannot read).
    """
    seps = _ORDER if delimiter is None else (None if delimiter == "whitespace" else delimiter,)
    last = 1 if fixed_header else min(len(lines) - 1, MAX_PREAMBLE_LINES)
    for h in range(max(last, 0)):
        header, row = lines[h][1], lines[h + 1][1]
        found = []
        for sep in seps:
            names = _viable(header, row, sep)
            if names is not None:
                found.append((sep, names))
        if not found:
            continue
        if len(found) > 1 and found[-1][0] is None:
            found = found[:-1]  # a delimiter that reads the file beats runs of blanks
        if len(found) > 1:
            options = " and ".join(_NAMES[s] for s, _ in found)
            raise InputError(f"cannot tell the delimiter: {options} both read the header "
                             f"(line {lines[h][0]}) and the first row alike", path=path,
                             hint="set --delimiter comma, semicolon, tab or whitespace "
                             "(delimiter= in Python)")
        sep, names = found[0]
        return Sniffed(h, sep, decimal or _decimal(path, lines[h + 1:], sep), names, True)
    # nothing fits: read the first line as the header, the parser names what is wrong
    sep = default_sep if delimiter is None else (None if delimiter == "whitespace"
                                                  else delimiter)
    if delimiter is None and lines and "\t" in lines[0][1] and "," not in lines[0][1]:
        sep = "\t"
    if delimiter is None and len(lines) > 1:  # a header and a row of as many cells, one of
        for other in _ORDER[:3]:               # them no number: the parser names that cell
            head, row = split_cells(lines[0][1], other), split_cells(lines[1][1], other)
            if len(head) >= 2 and len(head) == len(row) and not any(
                    cell_kind(c) in ("int", "dot", "comma") for c in head):
                sep = other
                break
    names = split_cells(lines[0][1], sep) if lines else []
    if delimiter is None and not fixed_header and len(names) < 2:
        wide = next((n for n, text in lines[1:] if any(
            len(split_cells(text, s)) >= 2 and _numeric_row(split_cells(text, s), s)
            for s in _ORDER)), None)
        if wide is not None:
            raise InputError(f"cannot find the header row: line {lines[0][0]} names one column "
                             f"but line {wide} holds several numbers, and no line above a "
                             "row of numbers names as many columns", path=path,
                             hint="give a header line naming every column, or set --skip-rows "
                             "N (lines above the header) and --delimiter")
    return Sniffed(0, sep, decimal or ".", names, False)


def _decimal(path: Path, rows: list[tuple[int, str]], sep: str | None) -> str:
    if sep == ",":
        return "."
    dot = comma = None
    for number, text in rows[:DECIMAL_SAMPLE_ROWS]:
        for cell in split_cells(text, sep):
            kind = cell_kind(cell)
            if kind == "dot" and dot is None:
                dot = (number, cell)
            elif kind == "comma" and comma is None:
                comma = (number, cell)
    if comma is None:
        return "."
    if dot is not None:
        raise InputError(f"the rows mix decimal points (line {dot[0]}: {dot[1]!r}) and decimal "
                         f"commas (line {comma[0]}: {comma[1]!r})", path=path,
                         hint="set --decimal point or --decimal comma (decimal= in Python)")
    return ","
