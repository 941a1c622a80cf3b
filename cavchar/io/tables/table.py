"""The :class:`Table` every table reader returns, and the normalisation of metadata keys."""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from cavchar.errors import InputError

__all__ = ["Table", "meta_key"]


def meta_key(text: str) -> str:
    """Metadata key as stored: lower case, runs of spaces and hyphens read as ``_``."""
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
    line_text, line_cells : callable or None
        Text and cells of a 1-based line (text files; for error messages).
    layout : dict
        How the file was read: delimiter, decimal mark, header line, preamble
        lines skipped, the time unit of the header, columns ignored (plain JSON).
    """

    path: str
    format: str
    columns: dict[str, np.ndarray]
    metadata: dict[str, str] = field(default_factory=dict)
    row_lines: np.ndarray | None = None
    header_line: int | None = None
    line_text: Callable[[int], str] | None = field(default=None, repr=False)
    line_cells: Callable[[int], list[str]] | None = field(default=None, repr=False)
    layout: dict = field(default_factory=dict)

    @property
    def names(self) -> list[str]:
        """Column names in file order."""
        return list(self.columns)

    @property
    def n_rows(self) -> int:
        """Number of rows (0 for a table without columns)."""
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
