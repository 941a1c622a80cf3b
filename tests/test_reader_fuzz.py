"""Fuzzing every reader and result loading with hypothesis: whatever the bytes, the only
exception a reader may raise is the documented :class:`~cavchar.errors.InputError`.

Inputs are drawn three ways: raw bytes; text tables built from a vocabulary of cells
that instrument files and damaged files hold (numbers with either decimal mark, empty
cells, ``nan`` words, huge integers, markup, quotes, separators, line ends, a byte-order
mark, a preamble); and binary containers (NPZ with members of every dtype and shape,
Parquet with every column type and arbitrary metadata bytes), plus result files mutated
from the schema-1 fixture.  Reader options (column mapping, rows to skip, delimiter,
decimal mark, trace) are drawn too.  The default run draws a bounded number of examples
per reader (seeded by hypothesis' database-free derandomised mode, so the run is
reproducible); ``-m slow`` draws many more.
"""

from __future__ import annotations

import io
import json
import os
import tempfile
import zipfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cavchar.errors import InputError
from cavchar.io import (
    read_jump_record,
    read_probe_record,
    read_response_table,
    read_ringdown,
    read_sampled_record,
)
from cavchar.io.tables.layout import FileLayout

FIXTURE = Path(__file__).parent / "fixtures" / "fit_result_v1.json"
BASE = json.loads(FIXTURE.read_text(encoding="utf-8"))

QUICK = settings(max_examples=40, deadline=None, derandomize=True, database=None,
                 suppress_health_check=list(HealthCheck))
LONG = settings(max_examples=1500, deadline=None, derandomize=True, database=None,
                suppress_health_check=list(HealthCheck))

READERS = {
    "jumps": lambda p, **kw: read_jump_record(p, **kw),
    "sampled": lambda p, **kw: read_sampled_record(p, **kw),
    "probes": lambda p, **kw: read_probe_record(p, **kw),
    "ringdown": lambda p, **kw: read_ringdown(p, **kw),
    "ringdown-trace": lambda p, **kw: read_ringdown(p, trace=kw.pop("trace", 1), **kw),
    "response": lambda p, **kw: read_response_table(p),
}

NAMES = ["time", "photons", "outcome", "setting", "segment", "trace", "power", "power_db",
         "amplitude", "real", "imag", "mean_photons", "sigma", "count_0", "count_1",
         "count_3", "p_one", "Time (s)", "time [ms]", "Power (dBm)", "power (W)", "Time (V)",
         "", " ", "time", "<b>x</b>", '"time"', "Zeit (µs)", "count_99999999999"]
CELLS = ["0", "1", "2", "-1", "0.5", "0,5", "1e-3", "1E3", "1e999", "-0", ".5", "5.",
         "nan", "NaN", "inf", "-inf", "NA", "", " ", "abc", "1.000,5", "99999999999999999999",
         "1e-320", "0x10", "1_000", "+1", "--1", '"1"', "'2'", "<script>", "\x00", "\x1b[2J",
         "€", "1;2", "1,2,3", "#", "# end_time: 2 s", "# record: sampled", "1\t2"]
SEPARATORS = [",", ";", "\t", " ", "  ", ", "]
ENDINGS = ["\n", "\r\n", "\r"]


@pytest.fixture(scope="module")
def folder():
    with tempfile.TemporaryDirectory() as name:
        yield Path(name)


def _call(reader: str, path: Path, options: dict) -> None:
    try:
        if isinstance(options.get("layout"), tuple):  # built here: it may refuse them too
            skip, delimiter, decimal = options["layout"]
            options["layout"] = FileLayout(skip_rows=skip, delimiter=delimiter,
                                           decimal=decimal)
        READERS[reader](path, **options)
    except InputError as exc:
        assert str(exc)  # a message, naming something
    except RecursionError:  # pragma: no cover - reported as the failure it is
        raise AssertionError("RecursionError escaped a reader") from None


@st.composite
def text_tables(draw) -> bytes:
    sep = draw(st.sampled_from(SEPARATORS))
    end = draw(st.sampled_from(ENDINGS))
    width = draw(st.integers(1, 5))
    header = draw(st.lists(st.sampled_from(NAMES), min_size=width, max_size=width))
    rows = draw(st.lists(st.lists(st.sampled_from(CELLS), min_size=max(width - 1, 0),
                                  max_size=width + 1), max_size=12))
    lines = []
    if draw(st.booleans()):
        lines += draw(st.lists(st.sampled_from(["Instrument: X", "# record: exact",
                                                "# end_time: 5 s", "Date;2026-01-01", "",
                                                "# signal: populations", "a,b,c"]),
                               max_size=3))
    lines.append(sep.join(header))
    lines += [sep.join(row) for row in rows]
    if draw(st.booleans()):
        lines += ["", ""]
    text = end.join(lines) + (end if draw(st.booleans()) else "")
    if draw(st.booleans()):
        text = "\ufeff" + text
    encoding = draw(st.sampled_from(["utf-8", "utf-8", "latin-1", "utf-16"]))
    return text.encode(encoding, errors="replace")


layouts = st.one_of(
    st.just({}),
    st.fixed_dictionaries({}, optional={
        "columns": st.dictionaries(st.sampled_from(["time", "photons", "outcome", "power_db",
                                                    "power", "x", ""]),
                                   st.sampled_from(NAMES + ["1", "2", "9"]), max_size=2),
    }),
    st.builds(lambda skip, delim, dec: {"layout": (skip, delim, dec)},
              st.none() | st.integers(0, 4),
              st.none() | st.sampled_from(["comma", "semicolon", "tab", "whitespace"]),
              st.none() | st.sampled_from(["point", "comma"])),
)


def _write(folder: Path, name: str, data: bytes) -> Path:
    path = folder / name
    path.write_bytes(data)
    return path


def _fuzz_text(folder, reader, data, options, suffix):
    _call(reader, _write(folder, f"f{suffix}", data), dict(options))


def _fuzz_bytes(folder, reader, data, suffix):
    _call(reader, _write(folder, f"b{suffix}", data), {})


def _npz_member(draw, kind: str, n: int) -> np.ndarray:
    """One NPZ member of the given kind and length."""
    return {
        "float": lambda: np.asarray(draw(st.lists(st.floats(allow_nan=True),
                                                  min_size=n, max_size=n)), float),
        "int": lambda: np.arange(n, dtype=np.int64) - 1,
        "bigint": lambda: np.array([2**62, 2**63 - 1][: max(n, 1)], np.int64),
        "uint": lambda: np.array([2**64 - 1] * max(n, 1), np.uint64),
        "complex": lambda: np.arange(n) + 1j,
        "str": lambda: np.array(["a"] * n),
        "bool": lambda: np.ones(n, bool),
        "2d": lambda: np.zeros((n, 2)),
        "empty": lambda: np.array([]),
        "nan": lambda: np.full(n, np.nan),
        "meta-deep": lambda: np.array("[" * 5000 + "]" * 5000),
        "meta-bad": lambda: np.array("{not json"),
        "meta-ok": lambda: np.array(json.dumps({"record": "sampled", "end_time": "2 s"})),
    }[kind]()


@st.composite
def npz_files(draw) -> bytes:
    members = {}
    for _ in range(draw(st.integers(0, 4))):
        name = draw(st.sampled_from(NAMES[:17] + ["__metadata__", "x y", "time"]))
        kind = draw(st.sampled_from(["float", "int", "bigint", "complex", "str", "bool",
                                     "2d", "empty", "nan", "meta-deep", "meta-bad",
                                     "meta-ok", "uint"]))
        n = draw(st.integers(0, 6))
        values = _npz_member(draw, kind, n)
        members[name] = values
    buffer = io.BytesIO()
    if draw(st.booleans()) or not members:
        with zipfile.ZipFile(buffer, "w") as archive:
            for name, value in members.items():
                member = io.BytesIO()
                np.save(member, value)
                archive.writestr(name + ".npy", member.getvalue())
            if draw(st.booleans()):
                archive.writestr(draw(st.sampled_from(["notes.txt", "time.npy", "x.npy"])),
                                 draw(st.binary(max_size=40)))
    else:
        np.savez(buffer, **members)
    data = buffer.getvalue()
    if draw(st.booleans()):  # truncate or flip a byte
        cut = draw(st.integers(0, max(len(data) - 1, 0)))
        data = data[:cut] if draw(st.booleans()) else \
            data[:cut] + bytes([data[cut] ^ 0xFF]) + data[cut + 1:] if data else data
    return data


def _parquet_column(draw, pa, kind: str, n: int):
    """One Parquet column of the given kind and length."""
    return {
        "float": lambda: pa.array(draw(st.lists(st.floats(), min_size=n, max_size=n)),
                                  pa.float64()),
        "int": lambda: pa.array(list(range(n)), pa.int64()),
        "bigint": lambda: pa.array([2**60 + i for i in range(n)], pa.int64()),
        "str": lambda: pa.array(["x"] * n),
        "bool": lambda: pa.array([True] * n),
        "null": lambda: pa.array([None] * n, pa.float64()),
        "list": lambda: pa.array([[1.0]] * n),
        "date": lambda: pa.array([0] * n, pa.date32()),
        "decimal": lambda: pa.array([1] * n, pa.decimal128(5, 2)),
    }[kind]()


@st.composite
def parquet_files(draw) -> bytes:
    pa = pytest.importorskip("pyarrow")
    import pyarrow.parquet as pq

    n = draw(st.integers(0, 5))
    columns = {}
    for _ in range(draw(st.integers(0, 4))):
        name = draw(st.sampled_from(NAMES[:17]))
        kind = draw(st.sampled_from(["float", "int", "bigint", "str", "bool", "null",
                                     "list", "date", "decimal"]))
        columns[name] = _parquet_column(draw, pa, kind, n)
    table = pa.table(columns) if columns else pa.table({"time": pa.array([], pa.float64())})
    if draw(st.booleans()):
        table = table.replace_schema_metadata({b"cavchar.metadata": draw(st.sampled_from([
            b"\xff\xfe", b"{not json", b"[" * 5000, b'{"record": "exact"}', b"[]",
            json.dumps({"end_time": "1e999 s"}).encode()]))})
    buffer = io.BytesIO()
    pq.write_table(table, buffer)
    data = buffer.getvalue()
    if draw(st.booleans()):
        cut = draw(st.integers(0, len(data) - 1))
        data = data[:cut] + data[cut + 1:]
    return data


@st.composite
def result_texts(draw) -> str:
    """The fixture with one subtree replaced by a random JSON value, or raw text."""
    if draw(st.integers(0, 9)) == 0:
        return draw(st.text(max_size=200))
    data = json.loads(json.dumps(BASE))
    value = draw(st.recursive(
        st.none() | st.booleans() | st.integers(-2**70, 2**70) | st.floats(allow_nan=False,
                                                                           allow_infinity=False)
        | st.text(max_size=20),
        lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner,
                                                                     max_size=4),
        max_leaves=10))
    target = data
    path = []
    while isinstance(target, (dict, list)) and target and draw(st.booleans()):
        key = draw(st.sampled_from(sorted(target) if isinstance(target, dict)
                                   else list(range(len(target)))))
        path.append(key)
        if not isinstance(target[key], (dict, list)):
            break
        target = target[key]
    if path:
        holder = data
        for key in path[:-1]:
            holder = holder[key]
        holder[path[-1]] = value
    text = json.dumps(data)
    literal = draw(st.sampled_from(["", "NaN", "Infinity", "1e999"]))
    if literal:
        text = text.replace('"lifetime": [', f'"lifetime": [{literal}, ', 1)
    return text


def _load_result(folder: Path, text: str) -> None:
    from cavchar.result import FitResult

    path = folder / "r.json"
    path.write_text(text, encoding="utf-8")
    try:
        FitResult.from_json(path)
    except InputError as exc:
        assert str(exc)


# ------------------------------------------------------------------- the tests

def _text_test(config):
    @config
    @given(reader=st.sampled_from(sorted(READERS)), data=text_tables(), options=layouts)
    def run(folder, reader, data, options):
        _fuzz_text(folder, reader, data, options, ".csv")

    return run


def _bytes_test(config):
    @config
    @given(reader=st.sampled_from(sorted(READERS)), data=st.binary(max_size=300),
           suffix=st.sampled_from([".csv", ".tsv", ".gz", ".csv.gz", ".npz", ".parquet"]))
    def run(folder, reader, data, suffix):
        _fuzz_bytes(folder, reader, data, suffix)

    return run


def _container_test(config, files, suffix):
    """A fuzz test of every reader on binary containers drawn from ``files()``."""
    @config
    @given(reader=st.sampled_from(sorted(READERS)), data=files())
    def run(folder, reader, data):
        _fuzz_bytes(folder, reader, data, suffix)

    return run


def _result_test(config):
    @config
    @given(text=result_texts())
    def run(folder, text):
        _load_result(folder, text)

    return run


test_text_tables = _text_test(QUICK)
test_raw_bytes = _bytes_test(QUICK)
test_npz_archives = _container_test(QUICK, npz_files, ".npz")
test_parquet_files = _container_test(QUICK, parquet_files, ".parquet")
test_result_files = _result_test(QUICK)

test_text_tables_long = pytest.mark.slow(_text_test(LONG))
test_raw_bytes_long = pytest.mark.slow(_bytes_test(LONG))
test_npz_archives_long = pytest.mark.slow(_container_test(LONG, npz_files, ".npz"))
test_parquet_files_long = pytest.mark.slow(_container_test(LONG, parquet_files, ".parquet"))
test_result_files_long = pytest.mark.slow(_result_test(LONG))


def test_fuzz_inputs_reach_the_readers(folder):
    """Control: the generators make files that readers accept, not only refuse (else the
    fuzz would test the first check alone)."""
    ok = folder / "ok.csv"
    ok.write_bytes(b"time,photons\r\n0,0\r\n0.5,1\r\n")
    assert read_sampled_record(ok).photons.tolist() == [0, 1]
    assert os.path.getsize(ok) > 0
