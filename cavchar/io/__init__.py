"""Reading and writing cavchar's data files (formats: docs/data-formats.md).

* :mod:`cavchar.io.tables` — one generic numeric table reader (CSV/TSV,
  optionally gzip, NPZ, Parquet when pyarrow is importable);
* :mod:`cavchar.io.readers` — jump, sampled and probe records, ring-down traces,
  probe response tables, each validated with errors naming file and line;
* :mod:`cavchar.io.writers` — the same formats back (and a generic table writer);
* :mod:`cavchar.io.atomic` — atomic output that never overwrites without ``force``.
"""

from cavchar.io.atomic import check_can_write, write_bytes_atomic, write_text_atomic
from cavchar.io.readers import (
    ResponseTable,
    read_jump_record,
    read_probe_record,
    read_response_table,
    read_ringdown,
    read_sampled_record,
)
from cavchar.io.tables import Table, read_table
from cavchar.io.writers import (
    write_jump_record,
    write_probe_record,
    write_record,
    write_ringdown,
    write_sampled_record,
    write_table,
)

__all__ = [
    "check_can_write",
    "write_bytes_atomic",
    "write_text_atomic",
    "Table",
    "read_table",
    "write_table",
    "read_jump_record",
    "read_sampled_record",
    "read_probe_record",
    "read_ringdown",
    "read_response_table",
    "ResponseTable",
    "write_jump_record",
    "write_sampled_record",
    "write_probe_record",
    "write_ringdown",
    "write_record",
]
