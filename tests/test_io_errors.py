"""Every error path of the readers: one InputError naming the file, the line and what to do,
and through the command line exit code 2 with no traceback."""

from __future__ import annotations

import gzip

import numpy as np
import pytest

from cavchar.errors import InputError
from cavchar.io import (
    read_jump_record,
    read_probe_record,
    read_response_table,
    read_ringdown,
    read_sampled_record,
    read_table,
)

JUMPS = ("jumps", read_jump_record)
SAMPLED = ("sampled", read_sampled_record)
PROBES = ("probes", read_probe_record)
RINGDOWN = ("ringdown", read_ringdown)
RESPONSE = ("response", read_response_table)

# (id, reader, file content, expected line (None: no line), words the message must hold)
TEXT_CASES = [
    ("missing-column", JUMPS, "time\n0\n", 1, ["missing column 'photons'"]),
    ("unknown-column", SAMPLED, "time,photons,colour\n0,1,2\n", 1, ["unknown column 'colour'"]),
    ("duplicate-column", SAMPLED, "time,photons,time\n0,1,2\n", 1, ["appears twice"]),
    ("empty-column-name", SAMPLED, "time,photons,\n0,1,\n", 1, ["empty column name"]),
    ("non-numeric", SAMPLED, "time,photons\n0,0\n0.5,abc\n", 3, ["'abc'", "not a number"]),
    ("nan-text", SAMPLED, "time,photons\n0,0\nnan,1\n", 3, ["'nan'", "not a finite number"]),
    ("inf-text", SAMPLED, "time,photons\n0,0\n1,inf\n", 3, ["infinite"]),
    ("overflow", SAMPLED, "time,photons\n0,0\n1e999,1\n", 3, ["infinite"]),
    ("empty-cell", SAMPLED, "time,photons\n0,1\n1,\n", 3, ["empty"]),
    ("too-few-cells", SAMPLED, "time,photons,segment\n0,1,0\n1,1\n", 3, ["2 cells", "3 columns"]),
    ("too-many-cells", SAMPLED, "time,photons\n0,1\n1,1,7\n", 3, ["3 cells", "2 columns"]),
    ("decreasing-time", SAMPLED, "time,photons\n0,0\n2,1\n1,0\n", 4, ["goes back"]),
    ("duplicate-time", SAMPLED, "time,photons\n0,0\n1,1\n1,0\n", 4, ["repeats"]),
    ("negative-photons", SAMPLED, "time,photons\n0,0\n1,-1\n", 3, ["negative"]),
    ("fractional-photons", SAMPLED, "time,photons\n0,0\n1,1.5\n", 3, ["not a whole number"]),
    ("fractional-segment", SAMPLED, "time,photons,segment\n0,0,0\n1,1,0.5\n", 3,
     ["segment", "whole number"]),
    ("segment-split", SAMPLED, "time,photons,segment\n0,0,0\n1,1,1\n2,0,0\n", 4,
     ["starts again"]),
    ("header-only", SAMPLED, "time,photons\n", 1, ["no data rows"]),
    ("only-comments", SAMPLED, "# nothing here\n\n", None, ["no header"]),
    ("empty-after-blank", SAMPLED, "time,photons\n0,1\n\n# note\n1,\n", 5, ["empty"]),
    ("lines-count-comments", SAMPLED, "# a\n\ntime,photons\n# b\n0,0\n\n1,x\n", 7, ["'x'"]),
    ("multi-photon-jump", JUMPS, "time,photons\n0,0\n1,2\n3,\n", 3,
     ["jumps from 0 to 2", "sampled"]),
    ("no-end-time", JUMPS, "time,photons\n0,0\n1,1\n", 3, ["no end time", "end row"]),
    ("end-row-misplaced", JUMPS, "time,photons\n0,0\n1,\n2,0\n3,\n", 3,
     ["not the last row"]),
    ("end-before-last", JUMPS, "# end_time: 0.5 s\ntime,photons\n0,0\n1,1\n", 4,
     ["ends at 0.5 s"]),
    ("end-row-only", JUMPS, "time,photons,segment\n0,0,0\n1,,0\n2,,1\n", 4,
     ["no change points"]),
    ("two-end-times", JUMPS, "# end_time: 5 s\ntime,photons\n0,0\n1,1\n4,\n", 5,
     ["says it ends at 4.0 s", "5.0 s"]),
    ("end-time-metadata-bad", JUMPS, "# end_time: soon\ntime,photons\n0,0\n", None,
     ["end_time"]),
    ("end-time-many-segments", JUMPS, "# end_time: 5 s\ntime,photons,segment\n0,0,0\n1,0,1\n",
     None, ["one segment"]),
    ("outcome-two", PROBES, "time,outcome\n0,0\n1,2\n", 3, ["neither 0 nor 1"]),
    ("setting-empty", PROBES, "time,outcome,setting\n0,0,0\n1,1,\n", 3, ["empty"]),
    ("probe-time-back", PROBES, "time,outcome\n0,0\n1,\n0.5,1\n", 4, ["goes back"]),
    ("amplitude-negative", RINGDOWN, "time,amplitude\n0,1\n1,-0.1\n", 3, ["negative"]),
    ("sigma-zero", RINGDOWN, "time,power,sigma\n0,1,0.1\n1,0.5,0\n", 3, ["not positive"]),
    ("counts-fractional", RINGDOWN, "time,count_0,count_1\n0,3,1\n1,2.5,1\n", 3,
     ["whole number"]),
    ("counts-gap", RINGDOWN, "time,count_0,count_2\n0,3,1\n", 1, ["skip", "[1]"]),
    ("counts-empty-delay", RINGDOWN, "time,count_0,count_1\n0,3,1\n1,0,0\n", 3, ["no counts"]),
    ("sigma-with-counts", RINGDOWN, "time,count_0,sigma\n0,3,1\n", 1, ["unknown column 'sigma'"]),
    ("signal-unknown", RINGDOWN, "time,voltage\n0,1\n", 1, ["cannot tell the signal"]),
    ("signal-ambiguous", RINGDOWN, "time,power,amplitude\n0,1,1\n", 1, ["several signal"]),
    ("iq-missing-imag", RINGDOWN, "time,real,power\n0,1,1\n", 1, ["unknown column 'real'"]),
    ("response-probability", RESPONSE, "photons,p_one\n0,0.1\n1,1.2\n", 3, ["not a probability"]),
    ("response-twice", RESPONSE, "photons,p_one\n0,0.1\n0,0.2\n", 3, ["twice"]),
    ("response-hole", RESPONSE, "photons,p_one,setting\n0,0.1,0\n1,0.9,0\n0,0.5,1\n", None,
     ["no row for photon number 1"]),
]


def _check(exc: InputError, path, line, words) -> None:
    text = str(exc)
    assert str(path) in text, text
    assert exc.line == line, text
    if line is not None:
        assert f"line {line}" in text
    for word in words:
        assert word in text, text
    assert "\n" not in text.strip()  # one message


@pytest.mark.parametrize(("case", "reader", "content", "line", "words"), TEXT_CASES,
                         ids=[c[0] for c in TEXT_CASES])
def test_text_file_errors(tmp_path, case, reader, content, line, words):
    path = tmp_path / f"{case}.csv"
    path.write_text(content)
    with pytest.raises(InputError) as info:
        reader[1](path)
    _check(info.value, path, line, words)
    if case == "iq-missing-imag":  # signal given explicitly: the missing column is named
        with pytest.raises(InputError, match="missing column 'imag'"):
            read_ringdown(path, signal="iq")
        with pytest.raises(InputError, match="unknown signal kind"):
            read_ringdown(path, signal="voltage")


def test_tsv_errors_name_lines(tmp_path):
    path = tmp_path / "record.tsv"
    path.write_text("time\tphotons\n0\t0\n1\tseven\n")
    with pytest.raises(InputError) as info:
        read_sampled_record(path)
    _check(info.value, path, 3, ["'seven'"])


def test_empty_missing_unreadable_and_binary_text(tmp_path):
    empty = tmp_path / "empty.csv"
    empty.write_bytes(b"")
    with pytest.raises(InputError, match="empty") as info:
        read_jump_record(empty)
    assert str(empty) in str(info.value)
    with pytest.raises(InputError, match="not found"):
        read_sampled_record(tmp_path / "absent.csv")
    with pytest.raises(InputError, match="folder"):
        read_sampled_record(tmp_path)
    latin = tmp_path / "latin.csv"
    latin.write_bytes("t\xefme,photons\n0,0\n".encode("latin-1"))
    with pytest.raises(InputError, match="not UTF-8") as info:
        read_sampled_record(latin)
    assert info.value.line == 1


def test_corrupt_and_truncated_gzip(tmp_path):
    good = gzip.compress(b"time,photons\n" + b"".join(b"%d,0\n" % i for i in range(5000)))
    for name, data in [("garbage.csv.gz", b"\x1f\x8b\x08\x00garbage"),
                       ("truncated.csv.gz", good[: len(good) // 2])]:
        path = tmp_path / name
        path.write_bytes(data)
        with pytest.raises(InputError, match="corrupt or truncated") as info:
            read_sampled_record(path)
        assert str(path) in str(info.value)
    # a gzip file named .csv is still recognised by its magic bytes
    disguised = tmp_path / "disguised.csv"
    disguised.write_bytes(gzip.compress(b"time,photons\n0,1\n1,0\n"))
    assert read_sampled_record(disguised).photons.tolist() == [1, 0]


def test_npz_errors_name_rows(tmp_path):
    path = tmp_path / "r.npz"
    np.savez(path, time=np.array([0.0, 1.0, 1.0]), photons=np.array([0, 1, 0]))
    with pytest.raises(InputError) as info:
        read_sampled_record(path)
    assert "row 3" in str(info.value) and "repeats" in str(info.value)
    assert str(path) in str(info.value) and info.value.line is None
    np.savez(path, time=np.array([0.0, 1.0]), photons=np.array([0, 1, 0]))
    with pytest.raises(InputError, match="different lengths"):
        read_sampled_record(path)
    np.savez(path, time=np.zeros((2, 2)), photons=np.array([0, 1]))
    with pytest.raises(InputError, match="shape"):
        read_sampled_record(path)
    np.savez(path, time=np.array(["a", "b"]), photons=np.array([0, 1]))
    with pytest.raises(InputError, match="not real numbers"):
        read_sampled_record(path)
    np.savez(path, time=np.array([0.0, np.nan]), photons=np.array([0, 1]))
    with pytest.raises(InputError, match="row 2: column 'time' holds NaN"):
        read_sampled_record(path)
    broken = tmp_path / "broken.npz"
    broken.write_bytes(b"PK\x03\x04 this is not a zip archive")
    with pytest.raises(InputError, match="not a readable NPZ"):
        read_sampled_record(broken)
    # end rows are removed from exact records; rows still count as in the file
    np.savez(path, time=np.array([0.0, 1.0, 2.0, 0.0, 1.0]),
             photons=np.array([0, 1, np.nan, 0, 3]), segment=np.array([0, 0, 0, 1, 1]))
    with pytest.raises(InputError, match="row 5: the photon number jumps"):
        read_jump_record(path, end_time={1: 4.0})


def test_parquet_errors(tmp_path):
    pa = pytest.importorskip("pyarrow")
    pq = pytest.importorskip("pyarrow.parquet")
    path = tmp_path / "r.parquet"
    pq.write_table(pa.table({"time": ["0", "1"], "photons": [0, 1]}), path)
    with pytest.raises(InputError, match="column 'time' has type string"):
        read_sampled_record(path)
    pq.write_table(pa.table({"time": [0.0, 1.0], "photons": pa.array([0, None])}), path)
    with pytest.raises(InputError, match="row 2: column 'photons' holds NaN"):
        read_sampled_record(path)
    broken = tmp_path / "broken.parquet"
    broken.write_bytes(b"PAR1 truncated")
    with pytest.raises(InputError, match="not a readable Parquet"):
        read_sampled_record(broken)


def test_generic_table_reports_header_and_row_lines(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("# frequency: 6.8 GHz\n# a plain comment\n\ntime, Photons\n 0, 1\n\n1,2\n")
    table = read_table(path, required=("time", "photons"))
    assert table.header_line == 4
    assert table.row_lines.tolist() == [5, 7]
    assert table.metadata == {"frequency": "6.8 GHz"}
    assert table.names == ["time", "photons"]


# ------------------------------------------------------------------ through the CLI

# exact jump records: ``cavchar simulate probes --path FILE`` reads one (always available)
GENERIC = ("non-numeric", "nan-text", "inf-text", "too-few-cells", "too-many-cells",
           "header-only", "only-comments", "unknown-column", "duplicate-column")
PATH_CASES = [c for c in TEXT_CASES if c[1] is JUMPS or c[0] in GENERIC] + [
    ("jump-decreasing", JUMPS, "time,photons\n0,0\n2,1\n1,0\n5,\n", 4, ["goes back"]),
    ("jump-duplicate", JUMPS, "time,photons\n0,0\n1,1\n1,0\n5,\n", 4, ["repeats"]),
    ("jump-negative", JUMPS, "time,photons\n0,0\n1,-1\n5,\n", 3, ["negative"]),
    ("jump-fractional", JUMPS, "time,photons\n0,0\n1,0.5\n5,\n", 3, ["whole number"]),
    ("jump-split", JUMPS, "time,photons,segment\n0,0,0\n1,1,1\n2,,1\n3,0,0\n4,,0\n", 5,
     ["starts again"]),
]


def _cli_ok(code: int, out: str, err: str, path, line) -> None:
    assert code == 2, err
    assert "Traceback" not in err and "Traceback" not in out
    assert str(path) in err
    if line is not None:
        assert f"line {line}" in err


@pytest.mark.parametrize(("case", "reader", "content", "line", "words"), PATH_CASES,
                         ids=[c[0] for c in PATH_CASES])
def test_cli_jump_record_errors_exit_2(tmp_path, run_cli, case, reader, content, line, words):
    path = tmp_path / "path.csv"
    path.write_text(content)
    code, out, err = run_cli("simulate", "probes", "--path", path, "--interval", "1ms",
                             "-o", tmp_path / "out")
    _cli_ok(code, out, err, path, line)
    for word in words:
        assert word in err


def test_cli_empty_and_corrupt_files_exit_2(tmp_path, run_cli):
    for name, data in [("empty.csv", b""), ("bad.csv.gz", b"\x1f\x8b\x08\x00junk")]:
        path = tmp_path / name
        path.write_bytes(data)
        code, out, err = run_cli("simulate", "sampled", "--path", path, "--interval", "1ms",
                                 "-o", tmp_path / "out")
        _cli_ok(code, out, err, path, None)


# the fit commands read sampled, probe and ring-down records (other modules; skipped
# until they are importable)
FIT_CASES = [
    ("jumps", [], "time,photons\n0,0\n1,2\n3,\n", 3),
    ("jumps", ["--sampled"], "time,photons\n0,0\n1,-2\n", 3),
    ("probes", [], "time,outcome\n0,0\n1,2\n", 3),
    ("ringdown", [], "time,power\n0,1\n0,0.5\n", 3),
]


@pytest.mark.parametrize(("kind", "extra", "content", "line"), FIT_CASES)
def test_cli_fit_reader_errors_exit_2(tmp_path, run_cli, kind, extra, content, line):
    path = tmp_path / "bad.csv"
    path.write_text(content)
    code, out, err = run_cli("fit", kind, path, *extra, "-o", tmp_path / "out")
    _cli_ok(code, out, err, path, line)


def test_cli_response_table_errors(tmp_path, run_cli):
    table = tmp_path / "response.csv"
    table.write_text("photons,p_one\n0,0.1\n1,x\n")
    argv = ["simulate", "probes", "--lifetime", "5ms", "--n-thermal", "0.1", "--duration",
            "0.1s", "--interval", "1ms", "--response-table", table, "-o", tmp_path]
    code, out, err = run_cli(*argv)
    assert code == 2 and "Traceback" not in err
    assert f"{table}, line 3" in err
    table.write_text("photons,p_one\n0,0.1\n")  # too short for the photon numbers visited
    code, out, err = run_cli(*argv, "--n-thermal", "2")
    assert code == 2 and "Traceback" not in err and "photon" in err


def test_settings_toml_errors_name_file_and_line():
    # source: the position tomllib (Python standard library) reports for the bad line
    from cavchar.io.toml import loads_toml

    assert loads_toml("a = 1\n[b]\nc = 'x'\n", path="batch.toml", what="the batch file") == \
        {"a": 1, "b": {"c": "x"}}
    with pytest.raises(InputError) as info:
        loads_toml("a = 1\n[b\n", path="batch.toml", what="the batch file", hint="see docs")
    assert info.value.line == 2 and info.value.path == "batch.toml"
    assert info.value.message.startswith("the batch file is not valid TOML")
    with pytest.raises(InputError, match="nested too deeply"):
        loads_toml("a = " + "[" * 5000 + "]" * 5000, path=None, what="the spec file")
