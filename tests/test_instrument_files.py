"""Files the way instruments write them: preambles, units in headers, semicolons, decimal
commas, extra columns, trailing blank lines, Windows line ends, a UTF-8 byte-order mark.

Every file here is invented for the test.  The check is the file's own content: each
cell's value is known from how the file was written (``"0,5"`` under ``--decimal comma``
is 0.5; ``Time (ms)`` scales by 1e-3), so the readers must return exactly those numbers,
and a fit of an instrument-style file must give the same answer as the fit of the same
numbers in cavchar's plain layout (same seed).  Files that cannot be read right are
refused with one line naming the file (and the line or option), exit code 2.
"""

from __future__ import annotations

import numpy as np
import pytest

from cavchar.io import read_jump_record, read_probe_record, read_ringdown, read_sampled_record
from cavchar.io.tables.layout import FileLayout, LaidOutPath

BOM = "\ufeff"


def _write(path, text: str, encoding: str = "utf-8") -> str:
    path.write_bytes(text.encode(encoding))
    return str(path)


# (id, file name, content, reader, keyword options, expected arrays by attribute)
GOOD = [
    ("preamble-units-in-header", "vna.csv",
     "Instrument: network analyser (invented)\nDate: 2026-01-02 10:00\nIF bandwidth: 1 kHz\n"
     "\nTime (s),Power (dBm)\n0,-10\n0.001,-14.3\n0.002,-18.7\n",
     read_ringdown, {},
     {"signal": "db", "time": [0.0, 1e-3, 2e-3], "value": [-10.0, -14.3, -18.7]}),
    ("semicolons-decimal-commas-ms", "sa.csv",
     "Time (ms);Power (dBm)\n0,0;-10,5\n1,0;-14,25\n2,0;-18,0\n",
     read_ringdown, {},
     {"signal": "db", "time": [0.0, 1e-3, 2e-3], "value": [-10.5, -14.25, -18.0]}),
    ("tab-brackets-us", "scope.tsv",
     "time [us]\tamplitude [V]\n0\t1.0\n10\t0.5\n20\t0.25\n",
     read_ringdown, {},
     {"signal": "amplitude", "time": [0.0, 1e-5, 2e-5], "value": [1.0, 0.5, 0.25]}),
    ("extra-columns-mapped", "export.csv",
     "Index,Time (s),Level (dBm),Phase (deg)\n1,0,-10,3\n2,0.001,-14,4\n3,0.002,-18,5\n",
     read_ringdown, {"columns": {"time": "Time (s)", "power_db": "Level (dBm)"}},
     {"signal": "db", "time": [0.0, 1e-3, 2e-3], "value": [-10.0, -14.0, -18.0]}),
    ("trailing-blank-lines", "jumps.csv",
     "time,photons\n0,0\n1,1\n2,0\n3,\n\n\n   \n",
     read_jump_record, {},
     {"time": [0.0, 1.0, 2.0], "photons": [0, 1, 0], "end_time": [3.0]}),
    ("windows-line-ends", "jumps_win.csv",
     "# cavity: A (invented)\r\ntime,photons\r\n0,0\r\n1.5,1\r\n2,\r\n",
     read_jump_record, {},
     {"time": [0.0, 1.5], "photons": [0, 1], "end_time": [2.0]}),
    ("utf8-byte-order-mark", "probes_bom.csv",
     BOM + "time,outcome\n0,0\n1e-6,1\n2e-6,\n",
     read_probe_record, {},
     {"time": [0.0, 1e-6, 2e-6], "outcome": [0.0, 1.0, np.nan]}),
    ("aligned-blanks-two-word-headers", "aligned.txt",
     "Time (s)    Photon number\n0.0         0\n0.5         1\n1.0         1\n",
     read_sampled_record, {"columns": {"time": "Time (s)", "photons": "Photon number"}},
     {"time": [0.0, 0.5, 1.0], "photons": [0, 1, 1]}),
    ("tab-decimal-comma-metadata-preamble", "counter.tsv",
     "# record: sampled\n# operator: invented\nSweep 3 of 3\n"
     "time\tphotons\n0\t2\n0,25\t1\n0,5\t1\n",
     read_sampled_record, {},
     {"time": [0.0, 0.25, 0.5], "photons": [2, 1, 1]}),
    ("quoted-headers-bom-crlf", "quoted.csv",
     BOM + '"Time (us)","Power (W)"\r\n0,2.0\r\n5,1.0\r\n10,0.5\r\n',
     read_ringdown, {},
     {"signal": "power", "time": [0.0, 5e-6, 1e-5], "value": [2.0, 1.0, 0.5]}),
    ("one-column-per-trace", "two_traces.csv",
     "Time (s);Power A (dBm);Power B (dBm)\n0;-10;-11\n0,001;-13;-15\n0,002;-16;-19\n",
     read_ringdown, {"trace": "Power B (dBm)"},
     {"signal": "db", "time": [0.0, 1e-3, 2e-3], "value": [-11.0, -15.0, -19.0]}),
    ("explicit-skip-delimiter-decimal", "explicit.csv",
     "settings a;b;c\nmore settings\ntime;photons\n0;0\n0,5;1\n",
     read_sampled_record, {"layout": FileLayout(skip_rows=2, delimiter="semicolon",
                                                decimal="comma")},
     {"time": [0.0, 0.5], "photons": [0, 1]}),
]


@pytest.mark.parametrize("case", GOOD, ids=[c[0] for c in GOOD])
def test_instrument_files_are_read_right(tmp_path, case):
    _, name, text, reader, options, expected = case
    record = reader(_write(tmp_path / name, text), **options)
    for attribute, want in expected.items():
        got = getattr(record, attribute)
        if attribute == "signal":
            assert got == want
        else:  # the cells as written, scaled by the header's unit: equal to rounding
            np.testing.assert_allclose(np.asarray(got, float), np.asarray(want, float),
                                       rtol=1e-15, atol=0.0, equal_nan=True)


def test_header_unit_and_preamble_are_reported(tmp_path):
    """The layout found is kept with the record (it goes into the provenance)."""
    path = _write(tmp_path / "vna.csv", GOOD[0][2])
    from cavchar.io.tables import read_table

    table = read_table(path, required=("time",), any_columns=True)
    assert table.layout["time_unit"] == "s"
    assert table.layout["header_line"] == 5
    assert table.layout["preamble_lines"] == 3


def test_laid_out_path_carries_the_options(tmp_path):
    """What ``--column`` etc. build on the command line: a path with its layout."""
    path = _write(tmp_path / "export.csv", GOOD[3][2])
    layout = FileLayout(columns={"time": "Time (s)", "power_db": "3"})
    record = read_ringdown(LaidOutPath(path, layout))
    np.testing.assert_array_equal(record.value, [-10.0, -14.0, -18.0])


# (id, file name, content, encoding, extra command-line options, words the message must hold)
BAD = [
    ("decimal-commas-in-comma-csv", "comma.csv", "time,photons\n0,002,0\n0,004,1\n0,010,\n",
     "utf-8", [], ["line 2", "3 cells", "decimal comma"]),
    ("no-header-row", "noheader.csv", "Instrument: X\nSweep: 3\n0,1\n1,2\n", "utf-8", [],
     ["header row", "--skip-rows"]),
    ("time-header-not-a-time-unit", "volts.csv", "Time (V),photons\n0,0\n1,1\n2,\n",
     "utf-8", [], ["line 1", "not a time unit"]),
    ("not-utf8", "latin1.csv", "Temp (\u00b0C)\ntime,photons\n0,0\n1,1\n2,\n", "latin-1", [],
     ["line 1", "not UTF-8"]),
    ("utf16", "utf16.csv", "time,photons\n0,0\n1,1\n2,\n", "utf-16", [], ["NUL byte"]),
    ("column-option-names-no-column", "map.csv", "Zeit (s),Photonen\n0,0\n1,1\n2,\n", "utf-8",
     ["--column", "time=Time (s)", "--column", "photons=Photonen"],
     ["time='Time (s)' names no column", "Zeit (s)"]),
    ("two-time-columns", "twotimes.csv", "Time (s),time (ms),photons\n0,0,0\n1,1000,1\n",
     "utf-8", [], ["'time' appears twice", "--column time="]),
    ("mixed-delimiters", "mixed.csv", "time;photons\n0;0\n1,1\n2;\n", "utf-8", [],
     ["line 3", "1 cells"]),
    ("thousands-separators", "thousands.csv", "time;photons\n0;0\n1.000,5;1\n2000;\n",
     "utf-8", [], ["line 3", "'1.000,5'", "not a number"]),
    ("comma-both-delimiter-and-decimal", "both.csv", "time,photons\n0,0\n1,1\n2,\n", "utf-8",
     ["--delimiter", "comma", "--decimal", "comma"], ["both the delimiter and the decimal"]),
    ("unknown-delimiter-option", "pipe.csv", "time|photons\n0|0\n", "utf-8",
     ["--delimiter", "pipe"], ["unknown delimiter 'pipe'"]),
    ("skip-rows-past-the-end", "short.csv", "time,photons\n0,0\n", "utf-8",
     ["--skip-rows", "9"], ["--skip-rows 9 skips the whole file"]),
    ("unknown-extra-column", "extra.csv", "time,photons,temperature\n0,0,1\n1,1,2\n2,,3\n",
     "utf-8", [], ["unknown column 'temperature'", "--column"]),
]


def _refused(run_cli, argv: list[str], words: list[str], name: str) -> str:
    code, out, err = run_cli(*argv)
    assert code == 2, (out, err)
    assert "Traceback" not in err and "Traceback" not in out
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert name in lines[0] or "--" in lines[0], err  # names the file or the option
    for word in words:
        assert word in lines[0], (word, err)
    return lines[0]


@pytest.mark.parametrize("case", BAD, ids=[c[0] for c in BAD])
def test_instrument_files_refused_with_one_line(tmp_path, run_cli, monkeypatch, case):
    _, name, text, encoding, options, words = case
    monkeypatch.chdir(tmp_path)
    _write(tmp_path / name, text, encoding)
    _refused(run_cli, ["fit", "jumps", name, *options, "--max-steps", "100", "--quiet"],
             words, name)
    assert sorted(p.name for p in tmp_path.iterdir()) == [name]  # nothing written


def test_trace_id_without_trace_column_is_refused(tmp_path, run_cli, monkeypatch):
    monkeypatch.chdir(tmp_path)
    _write(tmp_path / "one.csv", "time,power\n0,1\n1,0.5\n")
    _refused(run_cli, ["fit", "ringdown", "one.csv", "--trace", "3"],
             ["--trace 3", "no trace column"], "one.csv")


def test_db_column_mapped_to_power_is_refused(tmp_path, run_cli, monkeypatch):
    monkeypatch.chdir(tmp_path)
    _write(tmp_path / "db.csv", "Time (s),P (dBm)\n0,-10\n1,-12\n")
    _refused(run_cli, ["fit", "ringdown", "db.csv", "--column", "time=Time (s)",
                       "--column", "power=P (dBm)"], ["holds dB values", "power_db"], "db.csv")


def test_malformed_column_option_names_the_option(run_cli, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    _write(tmp_path / "r.csv", "time,photons\n0,0\n1,\n")
    _refused(run_cli, ["fit", "jumps", "r.csv", "--column", "time"], ["--column 'time'"],
             "r.csv")


# ---------------------------------------------------------------------- the options in fits

def _ringdown_numbers():
    """An invented dB ring-down: T_c = 1.2 ms, 0.2 dB noise, floor 30 dB down."""
    rng = np.random.default_rng(3)
    time_ms = np.round(np.arange(60) * 0.085, 6)
    level = np.round(10 * np.log10(np.exp(-time_ms / 1.2) + 1e-3)
                     + rng.normal(0, 0.2, time_ms.size), 4)
    return time_ms, level


def _summary(out: str) -> str:
    return "\n".join(line for line in out.splitlines() if "draws, seed" not in line)


def test_ringdown_fit_of_an_instrument_file_equals_the_plain_file(tmp_path, run_cli,
                                                                  monkeypatch):
    """Same numbers in two layouts, same seed: the same posterior, printed the same."""
    monkeypatch.chdir(tmp_path)
    time_ms, level = _ringdown_numbers()
    with open("inst.csv", "w", newline="", encoding="utf-8") as f:
        f.write(BOM + "Instrument;spectrum analyser (invented)\r\nDate;2026-03-01\r\n\r\n"
                "Idx;Time (ms);Level (dBm);Phase (deg)\r\n")
        for i, (t, p) in enumerate(zip(time_ms, level, strict=True)):
            f.write(f"{i};{str(float(t)).replace('.', ',')};"
                    f"{str(float(p)).replace('.', ',')};0,0\r\n")
    # the plain file holds exactly what the reader makes of the instrument's cells
    seconds = np.array([float(str(float(t))) for t in time_ms]) * 1e-3
    with open("plain.csv", "w", encoding="utf-8") as f:
        f.write("# value_unit: dBm\ntime,power_db\n")  # the unit the instrument's header gives
        for t, p in zip(seconds, level, strict=True):
            f.write(f"{float(t)!r},{float(p)!r}\n")
    common = ["--signal", "db", "--max-steps", "200", "--quiet", "--seed", "5",
              "--allow-unconverged"]
    code_plain, out_plain, _ = run_cli("fit", "ringdown", "plain.csv", *common)
    code_inst, out_inst, err = run_cli("fit", "ringdown", "inst.csv", "--column",
                                       "time=Time (ms)", "--column", "power_db=Level (dBm)",
                                       *common)
    assert code_plain == 0 and code_inst == 0, err
    assert _summary(out_inst) == _summary(out_plain)
    assert "T_c" in out_inst


def test_jump_fit_with_skip_rows_delimiter_and_decimal(tmp_path, run_cli, monkeypatch):
    """--skip-rows, --delimiter and --decimal give the plain file's fit exactly."""
    monkeypatch.chdir(tmp_path)
    from cavchar.simulate import simulate_jump_record

    record = simulate_jump_record(1e-3, 0.3, 0.3, seed=11)
    rows = list(zip(record.time.tolist(), record.photons.tolist(), strict=True))
    end = float(record.end_time[0])
    with open("plain.csv", "w", encoding="utf-8") as f:
        f.write("time,photons\n" + "".join(f"{t!r},{n}\n" for t, n in rows) + f"{end!r},\n")
    with open("inst.csv", "w", encoding="utf-8") as f:
        f.write("counter export; run 7\nchannel; 2\n" + "time;photons\n")
        f.write("".join(f"{t!r};{n}\n".replace(".", ",") for t, n in rows))
        f.write(f"{end!r};\n".replace(".", ","))
    common = ["--max-steps", "200", "--quiet", "--seed", "2", "--allow-unconverged"]
    code_plain, out_plain, _ = run_cli("fit", "jumps", "plain.csv", *common)
    code_inst, out_inst, err = run_cli("fit", "jumps", "inst.csv", "--skip-rows", "2",
                                       "--delimiter", "semicolon", "--decimal", "comma",
                                       *common)
    assert code_plain == 0 and code_inst == 0, err
    assert _summary(out_inst) == _summary(out_plain)


def test_rows_are_changes_option_reads_evenly_spaced_rows(tmp_path, run_cli, monkeypatch):
    """The override the 'looks sampled' refusal names exists and is honoured."""
    monkeypatch.chdir(tmp_path)
    photons = [0, 0, 1, 1, 1, 0, 0, 0, 1, 1, 0, 0] * 5
    text = "time,photons\n" + "".join(f"{i * 0.01!r},{n}\n" for i, n in
                                      enumerate(photons)) + f"{len(photons) * 0.01!r},\n"
    _write(tmp_path / "even.csv", text)
    code, _, err = run_cli("fit", "jumps", "even.csv", "--max-steps", "100", "--quiet")
    assert code == 2 and "--rows-are-changes" in err
    code, out, err = run_cli("fit", "jumps", "even.csv", "--rows-are-changes",
                             "--max-steps", "100", "--quiet", "--allow-unconverged")
    assert code == 0, err
    assert "T_c" in out


def test_probe_fit_takes_the_layout_options(tmp_path, run_cli, monkeypatch):
    monkeypatch.chdir(tmp_path)
    _write(tmp_path / "p.csv", "Zeit (us);Ergebnis\n0;0\n1;0\n2;1\n")
    code, _, err = run_cli("fit", "probes", "p.csv", "--column", "time=Zeit (us)",
                           "--column", "outcome=Nope", "--max-steps", "100", "--quiet")
    assert code == 2 and "outcome='Nope' names no column" in err
