"""Small tables of plain numbers are read without pandas, to the same values.

Outside reference: ``pandas.read_csv`` on the same file (its default conversion is
the correctly rounded one since pandas 3, as Python's ``float``).  And a
structural check: reading a small plain table in a fresh interpreter does not import
pandas (its import is most of what a small fit's start costs), while a table that
needs the general parser (a comment between the rows) does (negative control).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from cavchar.io.tables.reader import read_table
from cavchar.io.tables.text import SMALL_TABLE_BYTES

REPO = Path(__file__).resolve().parents[1]


def _numbers(seed: int, rows: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    values = rng.standard_normal((rows, 3)) * 10.0 ** rng.integers(-12, 12, (rows, 3))
    values[::7, 1] = np.round(values[::7, 1])  # some integers
    return values


@pytest.mark.parametrize("sep,decimal,fmt", [(",", ".", repr), ("\t", ".", "{:.17g}".format),
                                            (";", ",", repr), (" ", ".", "{:.6e}".format)],
                         ids=["comma-repr", "tab-17g", "semicolon-decimal-comma",
                              "space-6e"])
def test_plain_table_matches_pandas_round_trip(tmp_path, sep, decimal, fmt):
    values = _numbers(3, 500)
    lines = ["time,a,b".replace(",", sep)]
    for row in values:
        cells = [fmt(float(v)) for v in row]
        if decimal == ",":
            cells = [c.replace(".", ",") for c in cells]
        lines.append(sep.join(cells))
    path = tmp_path / "t.csv"
    path.write_text("\n".join(lines) + "\n")
    table = read_table(path, any_columns=True)
    reference = pd.read_csv(path, sep=r"\s+" if sep == " " else sep, decimal=decimal)
    for name in ("time", "a", "b"):
        np.testing.assert_array_equal(table.columns[name], reference[name].to_numpy(float))
    assert table.row_lines.tolist() == list(range(2, 502))


PROBE = """
import json, sys
from cavchar.io.tables.reader import read_table
t = read_table(sys.argv[1], any_columns=True)
print(json.dumps({"rows": int(t.columns["time"].size), "pandas": "pandas" in sys.modules}))
"""


def _read_in_fresh_process(path: Path) -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    out = subprocess.run([sys.executable, "-c", PROBE, str(path)], env=env,
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_small_plain_table_does_not_import_pandas(tmp_path):
    values = _numbers(4, 1000)
    plain = tmp_path / "plain.csv"
    rows = (",".join(repr(float(v)) for v in row) for row in values)
    plain.write_text("time,a,b\n" + "\n".join(rows) + "\n")
    assert plain.stat().st_size < SMALL_TABLE_BYTES
    assert _read_in_fresh_process(plain) == {"rows": 1000, "pandas": False}
    # control: a comment between the rows takes the general parser, which is pandas
    text = plain.read_text().splitlines()
    commented = tmp_path / "commented.csv"
    commented.write_text("\n".join(text[:10] + ["# a note"] + text[10:]) + "\n")
    assert _read_in_fresh_process(commented) == {"rows": 1000, "pandas": True}


@pytest.mark.parametrize("cell", ["", "nan", "1_000", "1.2.3", "0x10", "1e"])
def test_anything_but_plain_numbers_goes_to_the_general_parser(tmp_path, cell):
    # the general parser's answers (NaN for an empty cell, refusal of words) are kept:
    # the result equals the one from before the plain path existed
    path = tmp_path / "t.csv"
    path.write_text(f"time,a\n1.0,2.0\n2.0,{cell}\n3.0,4.0\n")
    try:
        table = read_table(path, any_columns=True, allow_empty=("a",))
    except Exception as error:  # noqa: BLE001 - compared with pandas' own verdict below
        message = str(error)
        assert "line 3" in message, message
        return
    reference = pd.read_csv(path)
    assert reference["a"].dtype == np.float64  # pandas read a number (or NaN) there too
    np.testing.assert_array_equal(table.columns["a"], reference["a"].to_numpy(float))
