"""Readers of cavchar's data files: jump, sampled and probe records, ring-down traces.

The file formats are described in docs/data-formats.md.  Every reader accepts
CSV/TSV (optionally gzip), NPZ and Parquet (see :mod:`cavchar.io.tables`),
checks the file completely and raises one :class:`~cavchar.errors.InputError`
naming the file, the line and what to do.
"""

from __future__ import annotations

import os
import re
from collections.abc import Mapping
from typing import NamedTuple

import numpy as np

from cavchar.errors import InputError
from cavchar.io.tables import Table, check_columns, read_table
from cavchar.io.tables.layout import FileLayout, layout_of, plain_name, split_unit
from cavchar.records import JumpRecord, ProbeRecord, RingdownTrace, SampledRecord
from cavchar.records.jumps import evenly_sampled

__all__ = [
    "read_jump_record",
    "read_sampled_record",
    "read_probe_record",
    "read_ringdown",
    "read_response_table",
    "ResponseTable",
    "RINGDOWN_COLUMNS",
    "HEADER_TIME_UNIT",
    "VALUE_UNIT",
]

#: value column(s) of each ring-down signal kind; populations use count_0, count_1, ...
RINGDOWN_COLUMNS: dict[str, tuple[str, ...]] = {
    "power": ("power",),
    "db": ("power_db",),
    "amplitude": ("amplitude",),
    "iq": ("real", "imag"),
    "mean_n": ("mean_photons",),
    "populations": (),
}
_COUNT = re.compile(r"^count_(\d+)$")


def _whole_ids(table: Table, name: str) -> np.ndarray | None:
    if name not in table:
        return None
    values = table[name]
    bad = values != np.round(values)
    if bad.any():
        row = int(np.argmax(bad))
        raise table.error(f"{name} {values[row]} is not a whole number", row,
                          hint=f"{name} ids must be integers")
    return _frozen(values.astype(np.int64))


def _frozen(array: np.ndarray) -> np.ndarray:
    array.setflags(write=False)
    return array


def _lines(table: Table) -> tuple[np.ndarray, str]:
    """Source line (text) or 1-based row (binary) of every table row."""
    if table.row_lines is not None:
        return _frozen(table.row_lines), "line"
    return _frozen(np.arange(1, table.n_rows + 1)), "row"


def _where(table: Table) -> dict:
    lines, kind = _lines(table)
    return {"lines": lines, "line_kind": kind}


def _end_time_argument(end_time, segment_ids: np.ndarray) -> dict[int, float]:
    if end_time is None:
        return {}
    if isinstance(end_time, Mapping):
        return {int(k): float(v) for k, v in end_time.items()}
    if segment_ids.size > 1:
        raise InputError(f"one end time given for {segment_ids.size} segments",
                         hint="add an end row to each segment, or pass a mapping "
                         "segment id -> end time")
    return {int(segment_ids[0]): float(end_time)}


#: metadata key the writers use to say what a file holds (``record: sampled``, ...)
RECORD_KEY = "record"
_SAMPLED_WORDS = ("cavchar sampled photon-number record",)


def _own_metadata(table: Table) -> dict[str, str]:
    """The file's metadata without the writers' ``record`` key (the record type says it)."""
    return {k: v for k, v in table.metadata.items() if k != RECORD_KEY}


def _says_sampled(table: Table) -> str | None:
    """Why the file says it is a sampled record, or None."""
    kind = table.metadata.get(RECORD_KEY, "").strip().lower()
    if kind.startswith("sampled"):
        return f"its metadata say '{RECORD_KEY}: {table.metadata[RECORD_KEY]}'"
    for comment in table.layout.get("comments", ()):
        if any(w in comment.lower() for w in _SAMPLED_WORDS):
            return "its first comment says it is a sampled photon-number record"
    return None


def read_jump_record(
    path: str | os.PathLike,
    end_time: float | Mapping[int, float] | None = None,
    *,
    columns: Mapping[str, str] | None = None,
    layout: FileLayout | None = None,
    exact_rows: bool | None = None,
) -> JumpRecord:
    """Read an exact jump record (change points).

    Columns ``time`` (s) and ``photons`` (the photon number from this time
    until the next row), optional ``segment`` (integer id).  Each segment ends
    at an explicit end time, given by (first match wins, and sources that are
    both present must agree):

    * an *end row*: the segment's last row with the ``photons`` cell left empty,
      its ``time`` being the end of the segment;
    * a metadata line ``# end_time: 12.5 s`` (a file with one segment);
    * the ``end_time`` argument (s; a number for one segment, or a mapping
      segment id -> end time).

    Parameters
    ----------
    path
        The file (CSV/TSV/.gz/NPZ/Parquet).
    end_time
        End time(s) in s for segments without an end row.  An end time equal to
        the segment's last change is allowed (the last dwell is then censored
        at zero length and contributes nothing).
    columns, layout
        Column mapping ``{"time": "Time (s)", ...}`` and the other layout
        options (:class:`~cavchar.io.tables.layout.FileLayout`).
    exact_rows
        Read the rows as exact change points even when they look sampled
        (evenly spaced rows repeating photon numbers, see below).

    A file whose metadata (``# record: sampled``, written by
    :func:`cavchar.io.writers.write_sampled_record`) say it is a sampled record
    is refused, and so is one whose rows are evenly spaced and often repeat the
    previous photon number (:func:`cavchar.records.jumps.evenly_sampled`):
    photon numbers read at probe times, fitted as change points, give a wrong
    lifetime.  Read such files with :func:`read_sampled_record`.

    Returns
    -------
    JumpRecord

    Raises
    ------
    InputError
        For every problem of the file (see :func:`cavchar.io.tables.read_table`),
        an empty ``photons`` cell that is not a segment's last row, a segment
        without an end time, conflicting end times, and every check of
        :class:`~cavchar.records.JumpRecord` (times, photon numbers, jumps of
        more than one photon), each naming the line.
    """
    layout = layout_of(path, layout, columns, exact_rows=exact_rows or None)
    table = read_table(path, required=("time", "photons"), optional=("segment",),
                       allow_empty=("photons",), layout=layout)
    reason = _says_sampled(table)
    if reason is not None:
        raise InputError(f"this is a sampled record ({reason}): its rows are photon numbers "
                         "at probe times, not change points", path=table.path,
                         hint="use --sampled")
    time, photons = table["time"], table["photons"]
    segment = _whole_ids(table, "segment")
    if not layout.exact_rows:
        rows = ~np.isnan(photons)
        found = evenly_sampled(time[rows], photons[rows],
                               None if segment is None else segment[rows])
        if found is not None:
            raise InputError(f"{found}: this looks like photon numbers sampled at probe times, "
                             "not change points", path=table.path,
                             hint="use --sampled; if the rows really are exact change points, "
                             "add --rows-are-changes")
    ids_all = np.zeros(time.size, np.int64) if segment is None else segment
    change = np.flatnonzero(ids_all[1:] != ids_all[:-1]) + 1
    starts = np.concatenate(([0], change))
    stops = np.concatenate((change, [time.size]))
    is_end = np.isnan(photons)
    ends_here = np.zeros(time.size, bool)
    ends_here[stops - 1] = True
    misplaced = is_end & ~ends_here
    if misplaced.any():
        row = int(np.argmax(misplaced))
        raise table.error("the photons cell is empty but this is not the last row of its "
                          "segment", row, hint="an empty photons cell marks the end row of a "
                          "segment; give the photon number here")
    solo = is_end[starts] & (stops - starts == 1)
    if solo.any():
        row = int(starts[np.argmax(solo)])
        raise table.error("this segment has an end row but no change points", row,
                          hint="give at least one row with a photon number before the end row")
    seg_ids = ids_all[starts]
    from_rows = {int(seg_ids[j]): (float(time[stops[j] - 1]), int(stops[j] - 1))
                 for j in range(seg_ids.size) if is_end[stops[j] - 1]}
    from_meta: dict[int, float] = {}
    if "end_time" in table.metadata:
        from cavchar.units import parse_quantity

        try:
            value = parse_quantity(table.metadata["end_time"], "time")
        except InputError as exc:
            raise InputError(f"metadata end_time: {exc.message}", path=table.path,
                             hint=exc.hint) from None
        if seg_ids.size > 1:
            raise InputError("a '# end_time' line serves a file with one segment, this one "
                             f"has {seg_ids.size}", path=table.path,
                             hint="give each segment an end row instead")
        from_meta = {int(seg_ids[0]): value}
    try:
        from_arg = _end_time_argument(end_time, seg_ids)
    except InputError as exc:
        raise InputError(exc.message, path=table.path, hint=exc.hint) from None
    ends = np.empty(seg_ids.size)
    for j, sid in enumerate(seg_ids.tolist()):
        found = []
        if sid in from_rows:
            found.append(("the end row", from_rows[sid][0]))
        if sid in from_meta:
            found.append(("the '# end_time' line", from_meta[sid]))
        if sid in from_arg:
            found.append(("the end_time option", from_arg[sid]))
        if not found:
            raise InputError(
                f"segment {sid} has no end time", path=table.path,
                line=table.line(int(stops[j] - 1)),
                hint="add an end row (the end time, with the photons cell empty) as the "
                "segment's last row, a '# end_time: 12.5 s' line, or pass end_time "
                "(--end-time)")
        for name, value in found[1:]:
            if not np.isclose(value, found[0][1], rtol=1e-12, atol=0.0):
                row = from_rows[sid][1] if sid in from_rows else None
                raise InputError(
                    f"segment {sid}: {found[0][0]} says it ends at {found[0][1]} s but {name} "
                    f"says {value} s", path=table.path,
                    line=None if row is None else table.line(row),
                    hint="give the end time once")
        ends[j] = found[0][1]
    keep = ~is_end
    lines, kind = _lines(table)
    if seg_ids.size == 1 and is_end[-1]:  # one segment closed by its end row: views
        time, photons, lines = time[:-1], photons[:-1], lines[:-1]
        segment = None if segment is None else segment[:-1]
    elif not keep.all():  # the end rows go; the copies are ours, so records need not copy
        time, photons, lines = _frozen(time[keep]), _frozen(photons[keep]), _frozen(lines[keep])
        segment = None if segment is None else _frozen(segment[keep])
    return JumpRecord(time, photons, ends, segment=segment, metadata=_own_metadata(table),
                      source=table.path, lines=lines, line_kind=kind)


def read_sampled_record(
    path: str | os.PathLike,
    *,
    columns: Mapping[str, str] | None = None,
    layout: FileLayout | None = None,
) -> SampledRecord:
    """Read a sampled photon-number record.

    Columns ``time`` (s, probe times, regular or irregular) and ``photons``
    (photon number observed at that time, whole number >= 0; steps of any size
    are allowed), optional ``segment`` (integer id).  ``columns`` and
    ``layout`` as for :func:`read_jump_record`.  A file whose metadata say it
    is an exact record (``# record: exact``) is refused.

    Raises
    ------
    InputError
        Every problem of the file or of the record, naming the line.
    """
    table = read_table(path, required=("time", "photons"), optional=("segment",),
                       layout=layout_of(path, layout, columns))
    kind = table.metadata.get(RECORD_KEY, "").strip().lower()
    if kind.startswith("exact"):
        raise InputError(f"this is an exact jump record (its metadata say '{RECORD_KEY}: "
                         f"{table.metadata[RECORD_KEY]}'): its rows are change points, not "
                         "samples", path=table.path,
                         hint="fit it without --sampled")
    return SampledRecord(table["time"], table["photons"], segment=_whole_ids(table, "segment"),
                         metadata=_own_metadata(table), source=table.path, **_where(table))


def read_probe_record(
    path: str | os.PathLike,
    *,
    columns: Mapping[str, str] | None = None,
    layout: FileLayout | None = None,
) -> ProbeRecord:
    """Read a raw probe record.

    Columns ``time`` (s) and ``outcome`` (0 or 1; an empty cell is a lost
    probe, whose time still advances the record), optional ``setting`` (probe
    phase in rad) and ``segment`` (integer id).  ``columns`` and ``layout`` as
    for :func:`read_jump_record`.

    Raises
    ------
    InputError
        Every problem of the file or of the record, naming the line.
    """
    table = read_table(path, required=("time", "outcome"), optional=("setting", "segment"),
                       allow_empty=("outcome",), layout=layout_of(path, layout, columns))
    return ProbeRecord(table["time"], table["outcome"],
                       setting=table["setting"] if "setting" in table else None,
                       segment=_whole_ids(table, "segment"), metadata=table.metadata,
                       source=table.path, **_where(table))


def _infer_signal(table: Table) -> str:
    names = set(table.names)
    found = [s for s, cols in RINGDOWN_COLUMNS.items() if cols and set(cols) <= names]
    if any(_COUNT.match(n) for n in names):
        found.append("populations")
    if len(found) == 1:
        return found[0]
    kinds = "; ".join(f"{s}: {' + '.join(c) if c else 'count_0, count_1, ...'}"
                      for s, c in RINGDOWN_COLUMNS.items())
    if not found:
        raise InputError(f"cannot tell the signal kind from the columns ({', '.join(table.names)})",
                         path=table.path, line=table.header_line,
                         hint=f"name the value column(s) for one kind ({kinds}), or pass --signal")
    raise InputError(f"the columns fit several signal kinds ({', '.join(found)})",
                     path=table.path, line=table.header_line, hint="pass --signal to choose one")


_VALUE_NAMES = {"power": "power", "power_db": "db", "amplitude": "amplitude",
                "mean_photons": "mean_n"}
_DB = {"db", "dbm", "dbw", "dbmw", "dbfs"}


def _trace_column(path, layout: FileLayout, signal: str | None) -> tuple[FileLayout, str | None]:
    """A ``trace`` given as a column header: the layout mapping that column to the
    signal's value column, and the signal (from the header's name or unit if not given)."""
    name = str(layout.trace).strip()
    base, unit = split_unit(name)
    if signal is None:
        signal = _VALUE_NAMES.get(plain_name(base))
        if signal == "power" and unit is not None and unit.lower() in _DB:
            signal = "db"
        if signal is None and unit is not None and unit.lower() in _DB:
            signal = "db"
        if signal is None:
            raise InputError(f"cannot tell the signal kind of the trace column {name!r}",
                             path=path, hint="pass --signal (signal= in Python)")
    columns = RINGDOWN_COLUMNS.get(signal, ())
    if len(columns) != 1:
        raise InputError(f"--trace NAME picks one value column; a {signal} trace has "
                         f"{len(columns) or 'several'}", path=path,
                         hint="map the columns with --column instead, e.g. --column "
                         "real=\"I (V)\" --column imag=\"Q (V)\"")
    mapping = {columns[0]: name}
    if "time" not in layout.columns:
        mapping["time"] = layout.columns.get("time", "time")
    return layout.merged(mapping), signal


def _trace_id(trace) -> int | None:
    if isinstance(trace, bool):
        return None
    if isinstance(trace, int):
        return trace
    text = str(trace).strip()
    if text.lstrip("+-").isdigit():
        return int(text)
    return None


def read_ringdown(
    path: str | os.PathLike,
    signal: str | None = None,
    *,
    trace: str | int | None = None,
    columns: Mapping[str, str] | None = None,
    layout: FileLayout | None = None,
) -> RingdownTrace:
    """Read one file of ring-down traces.

    Columns: ``time`` (s); the value column(s) of the signal kind —
    ``power`` (linear power), ``power_db`` (10 log10 of power), ``amplitude``
    (field magnitude), ``real`` and ``imag`` (IQ), ``mean_photons`` (mean
    photon number), or ``count_0``, ``count_1``, ... (shots found with 0, 1, ...
    photons; populations); optional ``sigma`` (known standard deviation per
    point; for IQ per quadrature; not for populations) and ``trace`` (integer
    id, several traces per file).  A ``power`` column whose header gives a dB
    unit (``Power (dBm)``) is read as ``power_db``.

    Parameters
    ----------
    path
        The file.
    signal
        One of :data:`cavchar.records.SIGNALS` (``mean-n`` is accepted for
        ``mean_n``); by default inferred from the column names.
    trace
        Keep one trace: a trace id (whole number) of the ``trace`` column, or
        the header of the value column to fit (a file with one column per
        trace); the other traces are ignored.
    columns, layout
        Column mapping and layout (:class:`~cavchar.io.tables.layout.FileLayout`).

    Raises
    ------
    InputError
        Every problem of the file or the trace, naming the line.
    """
    layout = layout_of(path, layout, columns, trace=trace)
    if signal is not None:
        signal = str(signal).lower().replace("-", "_")
        if signal == "power2":
            signal = "power"
        if signal not in RINGDOWN_COLUMNS:
            raise InputError(f"unknown signal kind {signal!r}", path=os.fspath(path),
                             hint=f"choose one of {', '.join(RINGDOWN_COLUMNS)}")
    trace_id = None
    if layout.trace is not None:
        trace_id = _trace_id(layout.trace)
        if trace_id is None:
            layout, signal = _trace_column(os.fspath(path), layout, signal)
    known = ["time", "sigma", "trace"] + [c for cols in RINGDOWN_COLUMNS.values() for c in cols]
    table = read_table(path, required=("time",), optional=known, prefixed=("count_",),
                       any_columns=True, layout=layout)
    if signal is None:
        signal = _infer_signal(table)
    if signal == "populations":
        check_columns(table, ("time",), ("trace",), prefixed=("count_",))
        levels = sorted(int(_COUNT.match(n).group(1)) for n in table.names if _COUNT.match(n))
        if not levels:
            raise InputError("a populations file needs columns count_0, count_1, ...",
                             path=table.path, line=table.header_line,
                             hint="one column per photon number, counting the shots")
        if levels != list(range(len(levels))):
            missing = sorted(set(range(levels[-1] + 1)) - set(levels))
            raise InputError(f"count columns skip photon number(s) {missing}",
                             path=table.path, line=table.header_line,
                             hint="give count_0 ... count_K without gaps (zeros are fine)")
        if levels[-1] > 10**5:
            raise InputError(f"count columns up to count_{levels[-1]}: too many photon numbers",
                             path=table.path, line=table.header_line,
                             hint="give counts for the photon numbers observed")
        value = np.column_stack([table[f"count_{k}"] for k in levels])
        sigma = None
    else:
        names = RINGDOWN_COLUMNS[signal]
        check_columns(table, ("time", *names), ("sigma", "trace"))
        value = table["real"] + 1j * table["imag"] if signal == "iq" else table[names[0]]
        sigma = table["sigma"] if "sigma" in table else None
    ids = _whole_ids(table, "trace")
    time = table["time"]
    where = _where(table)
    if trace_id is not None:
        if ids is None:
            raise InputError(f"--trace {trace_id}: the file has no trace column", path=table.path,
                             line=table.header_line,
                             hint="a trace id picks rows of the trace column; to pick a value "
                             "column give its header, e.g. --trace \"Power B (dBm)\"")
        keep = ids == trace_id
        if not keep.any():
            present = np.unique(ids)
            shown = ", ".join(str(int(i)) for i in present[:10]) + (
                ", ..." if present.size > 10 else "")
            raise InputError(f"--trace {trace_id}: no such trace (the file has {shown})",
                             path=table.path, hint="give one of the trace ids in the file")
        time, value = time[keep], value[keep]
        sigma = None if sigma is None else sigma[keep]
        where = {"lines": where["lines"][keep], "line_kind": where["line_kind"]}
        ids = None
    metadata = dict(table.metadata)
    if "time_unit" in table.layout:
        metadata[HEADER_TIME_UNIT] = table.layout["time_unit"]
    units = table.layout.get("column_units", {})
    value_unit = next((units[c] for c in RINGDOWN_COLUMNS.get(signal, ()) if c in units), None)
    if value_unit is not None and VALUE_UNIT not in metadata:
        metadata[VALUE_UNIT] = value_unit  # from the header, e.g. "I (V)"
    return RingdownTrace(time, value, signal, sigma=sigma, trace=ids, metadata=metadata,
                         source=table.path, **where)


#: metadata key set when the time column's header gave its unit (times are then in s)
HEADER_TIME_UNIT = "time_unit_from_header"
#: metadata key of the unit of a ring-down's values (a ``# value_unit: V`` line, or the
#: unit in the value column's header); the nuisance parameters carry it
VALUE_UNIT = "value_unit"


class ResponseTable(NamedTuple):
    """A calibrated probe response read from a file.

    ``p_one[i, j]`` = P(outcome 1 | photons[i], settings[j]); ``settings`` is
    None (and ``p_one`` has one column) when the table has no setting column.
    ``photons`` is 0, 1, ..., K.
    """

    photons: np.ndarray
    settings: np.ndarray | None
    p_one: np.ndarray
    source: str


def read_response_table(path: str | os.PathLike) -> ResponseTable:
    """Read a probe response table: columns ``photons``, ``p_one`` (probability of
    outcome 1, in [0, 1]) and optional ``setting`` (rad).

    Every photon number 0..K must appear once for every setting.

    Raises
    ------
    InputError
        Every problem of the file, a probability outside [0, 1], a photon number
        or (photons, setting) pair given twice, and gaps in the grid.
    """
    table = read_table(path, required=("photons", "p_one"), optional=("setting",))
    photons, p_one = table["photons"], table["p_one"]
    bad = (photons != np.round(photons)) | (photons < 0)
    if bad.any():
        row = int(np.argmax(bad))
        raise table.error(f"photon number {photons[row]} is not a whole number >= 0", row,
                          hint="photons must be 0, 1, 2, ...")
    bad = (p_one < 0) | (p_one > 1)
    if bad.any():
        row = int(np.argmax(bad))
        raise table.error(f"p_one {p_one[row]} is not a probability", row,
                          hint="p_one must lie in [0, 1]")
    from cavchar.dynamics import MAX_LEVELS

    big = photons >= MAX_LEVELS
    if big.any():
        row = int(np.argmax(big))
        raise table.error(f"photon number {photons[row]:g} is beyond the largest the models "
                          f"follow ({MAX_LEVELS - 1})", row,
                          hint="give the response up to the photon numbers that occur")
    setting = table["setting"] if "setting" in table else np.zeros_like(photons)
    n = photons.astype(np.int64)
    settings = np.unique(setting)
    grid = np.full((int(n.max()) + 1, settings.size), np.nan)
    col = np.searchsorted(settings, setting)
    for row in range(n.size):
        if not np.isnan(grid[n[row], col[row]]):
            raise table.error(f"photon number {n[row]} at setting {setting[row]} rad is given "
                              "twice", row, hint="give each (photons, setting) pair once")
        grid[n[row], col[row]] = p_one[row]
    holes = np.argwhere(np.isnan(grid))
    if holes.size:
        k, j = holes[0]
        raise InputError(f"the table has no row for photon number {k} at setting "
                         f"{settings[j]} rad", path=table.path,
                         hint="give every photon number 0..K for every setting")
    return ResponseTable(np.arange(grid.shape[0]), settings if "setting" in table else None,
                         grid, table.path)
