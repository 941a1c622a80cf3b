"""Reading and writing cavchar's data files (formats: docs/data-formats.md).

* :mod:`cavchar.io.tables` — one generic numeric table reader (CSV/TSV,
  optionally gzip, NPZ, Parquet when pyarrow is importable);
* :mod:`cavchar.io.readers` — jump, sampled and probe records, ring-down traces,
  probe response tables, each validated with errors naming file and line;
* :mod:`cavchar.io.writers` — the same formats back (and a generic table writer);
* :mod:`cavchar.io.atomic` — atomic output that never overwrites without ``force``.
"""

from cavchar.io import readers as _readers
from cavchar.io import writers as _writers
from cavchar.io.atomic import check_can_write, write_bytes_atomic, write_text_atomic
from cavchar.io.readers import *  # noqa: F403 (the names of each module's __all__)
from cavchar.io.tables import Table, read_table
from cavchar.io.writers import *  # noqa: F403

__all__ = ["check_can_write", "write_bytes_atomic", "write_text_atomic", "Table", "read_table",
           *_readers.__all__, *_writers.__all__]
