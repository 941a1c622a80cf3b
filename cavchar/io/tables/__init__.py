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

Modules: :mod:`~cavchar.io.tables.reader` (:func:`read_table`, format detection
and the column and value checks), :mod:`~cavchar.io.tables.text` (CSV/TSV),
:mod:`~cavchar.io.tables.binary` (NPZ, Parquet), :mod:`~cavchar.io.tables.table`
(the :class:`Table`).
"""

from __future__ import annotations

from cavchar.io.tables.binary import METADATA_KEY, PARQUET_METADATA_KEY
from cavchar.io.tables.reader import check_columns, read_table, table_format
from cavchar.io.tables.table import Table

__all__ = ["Table", "read_table", "table_format", "check_columns", "METADATA_KEY",
           "PARQUET_METADATA_KEY"]
