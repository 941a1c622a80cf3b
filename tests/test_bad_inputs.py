"""The bad-input table: every reader and every command answers a bad file or option with
exit code 2 and one line on stderr naming the file or the option, no traceback, and
writes nothing.

Each case runs ``cavchar`` in-process (``main([...])``) in an empty temporary folder
holding only the case's input files; the folder must hold exactly those files
afterwards (no output, no log, no temporary file).  The cases cover the defect classes
of the hardening issue (comma-decimal rows, crafted result files, runaway sizes,
out-of-range options, crafted binary files, deep TOML, oversized ids) and the checks
the readers already had.  ``test_counts`` prints how many cases were tried and handled.
"""

from __future__ import annotations

import gzip
import io
import json
import os
import zipfile
from pathlib import Path

import numpy as np
import pytest

FIXTURE = Path(__file__).parent / "fixtures" / "fit_result_v1.json"
RESULT = json.loads(FIXTURE.read_text(encoding="utf-8"))

JUMPS = "time,photons\n0,0\n0.01,1\n0.02,0\n0.05,1\n0.08,\n"
POWER = "time,power\n" + "".join(f"{t * 1e-4:.6g},{np.exp(-t / 10):.6g}\n" for t in range(40))
PROBES = "time,outcome\n0,0\n1e-6,1\n2e-6,0\n3e-6,\n4e-6,1\n"
SPEC = '[lifetime]\nat_least = "1 ms"\ncredibility = 0.95\n'


def _npz(**arrays) -> bytes:
    buffer = io.BytesIO()
    np.savez(buffer, **arrays)
    return buffer.getvalue()


def _npz_with_text_member() -> bytes:
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        archive.writestr("time.npy", _npy(np.arange(3.0)))
        archive.writestr("photons.txt", "0\n1\n0\n")
    return buffer.getvalue()


def _npy(array: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    np.save(buffer, array)
    return buffer.getvalue()


def _parquet(table_builder) -> bytes:
    pa = pytest.importorskip("pyarrow")
    import pyarrow.parquet as pq

    buffer = io.BytesIO()
    pq.write_table(table_builder(pa), buffer)
    return buffer.getvalue()


def _parquet_big_ints(pa):
    return pa.table({"time": pa.array([0, 2**60, 2**60 + 1], pa.int64()),
                     "photons": pa.array([0, 1, 0], pa.int64())})


def _parquet_bad_metadata(pa):
    table = pa.table({"time": [0.0, 1.0, 2.0], "photons": [0, 1, 0]})
    return table.replace_schema_metadata({b"cavchar.metadata": b"\xff\xfe{\x00"})


def _result(**changes) -> str:
    data = json.loads(json.dumps(RESULT))
    for dotted, value in changes.items():
        keys = dotted.split("__")
        target = data
        for key in keys[:-1]:
            target = target[key]
        target[keys[-1]] = value
    return json.dumps(data)


def _deep_json(depth: int) -> str:
    return "[" * depth + "]" * depth


def _nan_draw() -> str:
    text = _result()
    return text.replace('"lifetime": [', '"lifetime": [NaN, ', 1)


# (id, {file: content}, argv, words the line must hold)
CASES: list[tuple[str, dict, list[str], list[str]]] = [
    # ---------------------------------------------------------------- exact jump records
    ("missing-file", {}, ["fit", "jumps", "nope.csv"], ["nope.csv"]),
    ("folder-not-file", {"adir/x": ""}, ["fit", "jumps", "adir"], ["adir"]),
    ("empty-file", {"e.csv": ""}, ["fit", "jumps", "e.csv"], ["e.csv", "empty"]),
    ("comma-decimal-extra-field", {"c.csv": "time,photons\n0,002,0\n0,004,1\n"},
     ["fit", "jumps", "c.csv"], ["c.csv", "line 2", "decimal comma"]),
    ("extra-cell", {"x.csv": "time,photons\n0,0\n1,1,5\n2,\n"}, ["fit", "jumps", "x.csv"],
     ["line 3", "3 cells"]),
    ("nan-literal", {"n.csv": "time,photons\n0,0\nnan,1\n2,\n"}, ["fit", "jumps", "n.csv"],
     ["line 3", "'nan'"]),
    ("overflowing-number", {"o.csv": "time,photons\n0,0\n1e999,1\n"},
     ["fit", "jumps", "o.csv"], ["line 3", "infinite"]),
    ("time-goes-back", {"b.csv": "time,photons\n0,0\n2,1\n1,0\n3,\n"},
     ["fit", "jumps", "b.csv"], ["line 4"]),
    ("two-photon-jump", {"j.csv": "time,photons\n0,0\n1,2\n3,\n"}, ["fit", "jumps", "j.csv"],
     ["line 3", "--sampled"]),
    ("no-end-time", {"ne.csv": "time,photons\n0,0\n1,1\n"}, ["fit", "jumps", "ne.csv"],
     ["no end time", "--end-time"]),
    ("end-time-before-last-change", {"r.csv": "time,photons\n0,0\n1,1\n"},
     ["fit", "jumps", "r.csv", "--end-time", "0.5s"], ["r.csv"]),
    ("end-time-negative", {"r.csv": "time,photons\n0,0\n1,1\n"},
     ["fit", "jumps", "r.csv", "--end-time", "-1s"], ["r.csv"]),
    ("end-time-without-unit", {"r.csv": JUMPS}, ["fit", "jumps", "r.csv", "--end-time", "5"],
     ["--end-time", "5ms"]),
    ("gzip-corrupt", {"g.csv.gz": gzip.compress(JUMPS.encode())[:25]},
     ["fit", "jumps", "g.csv.gz"], ["g.csv.gz", "gzip"]),
    ("sampled-file-as-exact", {"s.csv": "# record: sampled\n" + JUMPS},
     ["fit", "jumps", "s.csv"], ["s.csv", "--sampled"]),
    ("evenly-spaced-repeats", {"ev.csv": "time,photons\n" + "".join(
        f"{i * 0.01:.2f},{n}\n" for i, n in enumerate([0, 0, 1, 1, 1, 0, 0, 0, 1, 1] * 4))
        + "0.40,\n"}, ["fit", "jumps", "ev.csv"], ["ev.csv", "--rows-are-changes"]),
    ("exact-file-as-sampled", {"x.csv": "# record: exact\ntime,photons\n0,0\n1,1\n2,1\n"},
     ["fit", "jumps", "x.csv", "--sampled"], ["x.csv", "exact"]),
    ("binary-junk", {"junk.csv": bytes(range(256)) * 4}, ["fit", "jumps", "junk.csv"],
     ["junk.csv"]),
    ("escape-codes-in-a-cell", {"esc.csv": "time,photons\n0,0\n1,\x1b[2J\x1b[31mred\n2,\n"},
     ["fit", "jumps", "esc.csv"], ["esc.csv", "line 3"]),
    ("two-megabyte-cell", {"big.csv": "time,photons\n0,0\n1," + "x" * 2_000_000 + "\n2,\n"},
     ["fit", "jumps", "big.csv"], ["big.csv", "line 3", "xxx..."]),
    # ---------------------------------------------------------------- binary readers
    ("text-named-npz", {"t.npz": JUMPS}, ["fit", "jumps", "t.npz"], ["t.npz", "text table"]),
    ("text-named-parquet", {"t.parquet": JUMPS}, ["fit", "jumps", "t.parquet"],
     ["t.parquet", "text table"]),
    ("npz-text-member", {"t.npz": _npz_with_text_member()}, ["fit", "jumps", "t.npz"],
     ["t.npz"]),
    ("npz-string-array", {"s.npz": _npz(time=np.array(["0", "1"]), photons=np.array([0, 1]))},
     ["fit", "jumps", "s.npz", "--sampled"], ["s.npz", "time"]),
    ("npz-complex-array", {"z.npz": _npz(time=np.array([0.0, 1.0, 2.0]) + 1j,
                                         photons=np.array([0, 1, 1]))},
     ["fit", "jumps", "z.npz", "--sampled"], ["z.npz", "time"]),
    ("npz-deep-metadata", {"d.npz": _npz(time=np.array([0.0, 1.0]), photons=np.array([0, 1]),
                                         __metadata__=np.array(_deep_json(100_000)))},
     ["fit", "jumps", "d.npz", "--sampled"], ["d.npz", "metadata"]),
    ("npz-pickled-object", {"p.npz": _npz(time=np.array([0.0, 1.0]),
                                          photons=np.array([{}, {}], dtype=object))},
     ["fit", "jumps", "p.npz", "--sampled"], ["p.npz"]),
    ("npz-2d-column", {"m.npz": _npz(time=np.zeros((2, 2)), photons=np.array([0, 1]))},
     ["fit", "jumps", "m.npz", "--sampled"], ["m.npz", "shape"]),
    ("parquet-int-above-2-53", {"big.parquet": _parquet(_parquet_big_ints)},
     ["fit", "jumps", "big.parquet", "--sampled"], ["big.parquet"]),
    ("parquet-non-utf8-metadata", {"meta.parquet": _parquet(_parquet_bad_metadata)},
     ["fit", "jumps", "meta.parquet", "--sampled"], ["meta.parquet", "metadata"]),
    ("parquet-truncated", {"cut.parquet": b"PAR1" + b"\x00" * 40},
     ["fit", "jumps", "cut.parquet"], ["cut.parquet"]),
    ("layout-options-on-npz", {"ok.npz": _npz(time=np.array([0.0, 1.0]),
                                              photons=np.array([0, 1]))},
     ["fit", "jumps", "ok.npz", "--sampled", "--skip-rows", "2"], ["--skip-rows"]),
    # ---------------------------------------------------------------- fit options
    ("freq-without-unit", {"r.csv": JUMPS}, ["fit", "jumps", "r.csv", "--freq", "7.412"],
     ["--freq", "7.412GHz"]),
    ("freq-overflows", {"r.csv": JUMPS}, ["fit", "jumps", "r.csv", "--freq", "1e300THz"],
     ["--freq"]),
    ("stage-temp-negative", {"r.csv": JUMPS},
     ["fit", "jumps", "r.csv", "--stage-temp", "-5mK"], ["--stage-temp"]),
    ("walkers-too-few", {"r.csv": JUMPS}, ["fit", "jumps", "r.csv", "--walkers", "3"],
     ["--walkers"]),
    ("max-steps-absurd", {"r.csv": JUMPS}, ["fit", "jumps", "r.csv", "--max-steps", "1e12"],
     ["--max-steps"]),
    ("seed-negative", {"r.csv": JUMPS}, ["fit", "jumps", "r.csv", "--seed", "-1"],
     ["--seed"]),
    ("prior-unreadable", {"r.csv": JUMPS},
     ["fit", "jumps", "r.csv", "--prior", "lifetime=bananas"], ["--prior lifetime"]),
    ("prior-unknown-name", {"r.csv": JUMPS},
     ["fit", "jumps", "r.csv", "--prior", "detuning=uniform:0,1"],
     ["--prior", "detuning", "lifetime, n_thermal"]),
    ("prior-given-twice", {"r.csv": JUMPS},
     ["fit", "jumps", "r.csv", "--prior", "lifetime=loguniform:1ms,1s", "--prior",
      "lifetime=loguniform:1us,1s"], ["--prior lifetime", "twice"]),
    ("prior-stage-needs-freq", {"r.csv": JUMPS},
     ["fit", "jumps", "r.csv", "--prior", "n_thermal=stage"], ["--prior n_thermal=stage"]),
    ("log-without-cavity", {"r.csv": JUMPS}, ["fit", "jumps", "r.csv", "--log"],
     ["--log", "--cavity"]),
    ("cavity-without-log", {"r.csv": JUMPS}, ["fit", "jumps", "r.csv", "--cavity", "A"],
     ["--cavity"]),
    ("log-missing", {"r.csv": JUMPS},
     ["fit", "jumps", "r.csv", "--log", "--cavity", "A", "--cooldown", "C1",
      "--log-file", "none.sqlite"], ["none.sqlite", "--log-create"]),
    ("report-without-out", {"r.csv": JUMPS}, ["fit", "jumps", "r.csv", "--report",
                                             "--max-steps", "100", "--quiet"],
     ["--report", "--out"]),
    ("column-malformed", {"r.csv": JUMPS}, ["fit", "jumps", "r.csv", "--column", "=x"],
     ["--column"]),
    ("decimal-unknown", {"r.csv": JUMPS}, ["fit", "jumps", "r.csv", "--decimal", "semi"],
     ["--decimal"]),
    # ---------------------------------------------------------------- ring-downs
    ("n0-negative", {"p.csv": POWER}, ["fit", "ringdown", "p.csv", "--signal", "mean-n",
                                        "--n0", "-5"], ["--n0"]),
    ("start-time-before-first-sample", {"p.csv": POWER},
     ["fit", "ringdown", "p.csv", "--start-time", "-1ms"], ["--start-time", "p.csv"]),
    ("start-time-after-last-sample", {"p.csv": POWER},
     ["fit", "ringdown", "p.csv", "--start-time", "1s"], ["--start-time", "p.csv"]),
    ("time-unit-unknown", {"p.csv": POWER}, ["fit", "ringdown", "p.csv", "--time-unit", "ft"],
     ["--time-unit"]),
    ("signal-mismatch", {"p.csv": POWER}, ["fit", "ringdown", "p.csv", "--signal", "iq"],
     ["p.csv"]),
    ("initial-unreadable", {"p.csv": POWER},
     ["fit", "ringdown", "p.csv", "--initial", "abc"], ["--initial"]),
    ("prior-name-unknown", {"p.csv": POWER},
     ["fit", "ringdown", "p.csv", "--prior", "colour=uniform:0,1"], ["colour"]),
    ("prior-reversed-bounds", {"p.csv": POWER},
     ["fit", "ringdown", "p.csv", "--prior", "lifetime=loguniform:1s,1us"], ["lifetime"]),
    ("trace-id-absent", {"p.csv": POWER}, ["fit", "ringdown", "p.csv", "--trace", "7"],
     ["--trace 7", "p.csv"]),
    ("trace-header-absent", {"p.csv": POWER},
     ["fit", "ringdown", "p.csv", "--trace", "Level B (dBm)"], ["Level B (dBm)"]),
    ("sigma-zero", {"s.csv": "time,power,sigma\n0,1,0.1\n1,0.5,0\n"},
     ["fit", "ringdown", "s.csv"], ["s.csv", "line 3"]),
    ("mixed-signal-files", {"p.csv": POWER, "a.csv": POWER.replace("power", "amplitude")},
     ["fit", "ringdown", "p.csv", "a.csv"], ["signal"]),
    # ---------------------------------------------------------------- probe records
    ("outcome-two", {"o.csv": "time,outcome\n0,0\n1e-6,2\n"}, ["fit", "probes", "o.csv"],
     ["o.csv", "line 3"]),
    ("visibility-above-one", {"q.csv": PROBES},
     ["fit", "probes", "q.csv", "--visibility", "1.5"], ["--visibility"]),
    ("readout-error-negative", {"q.csv": PROBES},
     ["fit", "probes", "q.csv", "--readout-error-0", "-0.1"], ["--readout-error-0"]),
    ("phase-unreadable", {"q.csv": PROBES},
     ["fit", "probes", "q.csv", "--phase-per-photon", "abc"], ["--phase-per-photon"]),
    ("response-table-missing", {"q.csv": PROBES},
     ["fit", "probes", "q.csv", "--response-table", "none.csv"], ["none.csv"]),
    ("response-probability-above-one", {"q.csv": PROBES,
                                        "t.csv": "photons,p_one\n0,0.1\n1,1.2\n"},
     ["fit", "probes", "q.csv", "--response-table", "t.csv"], ["t.csv", "line 3"]),
    ("response-photon-number-huge", {"q.csv": PROBES,
                                     "t.csv": "photons,p_one\n0,0.1\n1e10,0.9\n"},
     ["fit", "probes", "q.csv", "--response-table", "t.csv"], ["t.csv"]),
    ("initial-photons-huge", {"q.csv": PROBES},
     ["fit", "probes", "q.csv", "--initial-photons", "100000"], ["--initial-photons"]),
    ("block-probes-zero", {"q.csv": PROBES},
     ["fit", "probes", "q.csv", "--coarse", "--block-probes", "0"], ["--block-probes"]),
    # ---------------------------------------------------------------- simulate
    ("simulate-duration-huge", {}, ["simulate", "jumps", "--lifetime", "1ms",
                                    "--n-thermal", "0.1", "--duration", "1e12s",
                                    "--file", "out.csv"], ["--duration"]),
    ("simulate-interval-tiny", {}, ["simulate", "sampled", "--lifetime", "1ms",
                                    "--n-thermal", "0.1", "--duration", "1s",
                                    "--interval", "1e-12s", "--file", "out.csv"],
     ["--interval"]),
    ("simulate-n-thermal-huge", {}, ["simulate", "jumps", "--lifetime", "1ms",
                                     "--n-thermal", "1e6", "--duration", "1s",
                                     "--file", "out.csv"], ["--n-thermal"]),
    ("simulate-levels-huge", {}, ["simulate", "ringdown", "--lifetime", "1ms",
                                  "--duration", "5ms", "--signal", "populations",
                                  "--levels", "100000", "--file", "out.csv"], ["--levels"]),
    ("simulate-points-huge", {}, ["simulate", "ringdown", "--lifetime", "1ms",
                                  "--duration", "5ms", "--signal", "power",
                                  "--points", "1e10", "--file", "out.csv"], ["--points"]),
    ("simulate-lifetime-zero", {}, ["simulate", "jumps", "--lifetime", "0s",
                                    "--n-thermal", "0.1", "--duration", "1s",
                                    "--file", "out.csv"], ["--lifetime"]),
    ("simulate-visibility-two", {}, ["simulate", "probes", "--lifetime", "1ms",
                                     "--n-thermal", "0.1", "--duration", "10ms",
                                     "--interval", "10us", "--visibility", "2",
                                     "--file", "out.csv"], ["--visibility"]),
    ("simulate-no-overwrite", {"out.csv": "keep\n"},
     ["simulate", "jumps", "--lifetime", "1ms", "--n-thermal", "0.1", "--duration", "10ms",
      "--file", "out.csv"], ["out.csv", "--force"]),
    # ---------------------------------------------------------------- thermal, plan
    ("thermal-bare-frequency", {}, ["thermal", "--freq", "7.412"], ["--freq", "GHz"]),
    ("thermal-negative-temperature", {}, ["thermal", "--freq", "5GHz", "--temp", "-5mK"],
     ["--temp"]),
    ("thermal-negative-n", {}, ["thermal", "--freq", "5GHz", "--n-thermal", "-1"],
     ["--n-thermal"]),
    ("plan-target-negative", {}, ["plan", "jumps", "--lifetime", "1ms", "--n-thermal", "0.1",
                                  "--target-lifetime", "-0.1", "--no-check"],
     ["--target-lifetime"]),
    ("plan-record-length-huge", {}, ["plan", "jumps", "--lifetime", "1ms", "--n-thermal",
                                     "0.1", "--record-length", "1e300s", "--no-check"],
     ["--record-length"]),
    # ---------------------------------------------------------------- result files
    ("report-missing-result", {}, ["report", "none.json", "-o", "r.html"], ["none.json"]),
    ("report-not-json", {"bad.json": "{not json"}, ["report", "bad.json", "-o", "r.html"],
     ["bad.json"]),
    ("report-nan-literal", {"nan.json": _nan_draw()}, ["report", "nan.json", "-o", "r.html"],
     ["nan.json", "NaN"]),
    ("report-infinity-literal", {"inf.json": _result().replace(
        '"seed": ', '"seed": Infinity, "x": ', 1)}, ["report", "inf.json", "-o", "r.html"],
     ["inf.json"]),
    ("report-deep-nesting", {"deep.json": _result(extras__x="@@").replace(
        '"@@"', _deep_json(50_000))}, ["report", "deep.json", "-o", "r.html"], ["deep.json"]),
    ("report-walkers-text", {"w.json": _result(diagnostics__n_walkers="<script>x</script>")},
     ["report", "w.json", "-o", "r.html"], ["w.json", "diagnostics.n_walkers"]),
    ("report-steps-text", {"w.json": _result(diagnostics__n_steps="1e3")},
     ["report", "w.json", "-o", "r.html"], ["w.json", "diagnostics.n_steps"]),
    ("report-settings-list", {"w.json": _result(settings=[1, 2])},
     ["report", "w.json", "-o", "r.html"], ["w.json", "settings"]),
    ("report-provenance-number", {"w.json": _result(provenance=5)},
     ["report", "w.json", "-o", "r.html"], ["w.json", "provenance"]),
    ("report-draws-text", {"w.json": _result(samples__lifetime=["a", "b"])},
     ["report", "w.json", "-o", "r.html"], ["w.json", "samples"]),
    ("report-draws-all-equal", {"w.json": _result(
        samples__lifetime=[1e-3] * len(RESULT["samples"]["lifetime"]))},
     ["report", "w.json", "-o", "r.html"], ["w.json", "lifetime"]),
    ("report-draws-ragged", {"w.json": _result(samples__lifetime=[1e-3, 2e-3])},
     ["report", "w.json", "-o", "r.html"], ["w.json", "samples"]),
    ("report-top-level-list", {"w.json": "[1, 2, 3]"}, ["report", "w.json", "-o", "r.html"],
     ["w.json"]),
    ("report-schema-future", {"w.json": _result(schema="99.0")},
     ["report", "w.json", "-o", "r.html"], ["w.json", "schema"]),
    ("report-no-overwrite", {"w.json": _result(), "r.html": "keep"},
     ["report", "w.json", "-o", "r.html"], ["r.html", "--force"]),
    # ---------------------------------------------------------------- qualify, budget
    ("qualify-spec-missing", {"w.json": _result()},
     ["qualify", "none.toml", "--result", "w.json"], ["none.toml"]),
    ("qualify-spec-syntax", {"w.json": _result(), "s.toml": "[lifetime\nat_least = 1"},
     ["qualify", "s.toml", "--result", "w.json"], ["s.toml"]),
    ("qualify-spec-deep", {"w.json": _result(), "s.toml": "x = " + "[" * 5000 + "]" * 5000},
     ["qualify", "s.toml", "--result", "w.json"], ["s.toml"]),
    ("qualify-spec-unknown-quantity", {"w.json": _result(),
                                       "s.toml": "[colour]\nat_least = 1\n"},
     ["qualify", "s.toml", "--result", "w.json"], ["s.toml", "colour"]),
    ("qualify-credibility-out-of-range", {"w.json": _result(), "s.toml": SPEC.replace(
        "0.95", "1.5")}, ["qualify", "s.toml", "--result", "w.json"], ["s.toml"]),
    ("qualify-nan-draw", {"w.json": _nan_draw(), "s.toml": SPEC},
     ["qualify", "s.toml", "--result", "w.json"], ["w.json"]),
    ("budget-bad-result", {"w.json": "[]"}, ["budget", "--result", "w.json"], ["w.json"]),
    ("budget-t-hot-negative", {}, ["budget", "--result", "w.json", "--t-hot-max", "-1K"],
     ["--t-hot-max"]),
    # ---------------------------------------------------------------- log, trend, batch
    ("log-list-folder-missing", {}, ["log", "list", "--log-file", "no/such/dir/x.sqlite"],
     ["x.sqlite"]),
    ("log-list-not-sqlite", {"fake.sqlite": "hello, not a database\n" * 20},
     ["log", "list", "--log-file", "fake.sqlite"], ["fake.sqlite"]),
    ("log-show-huge-id", {}, ["log", "show", "1" + "0" * 40, "--log-file", "x.sqlite"],
     ["1000"]),
    ("log-add-no-log", {"w.json": _result()},
     ["log", "add", "w.json", "--cavity", "A", "--cooldown", "C1", "--log-file", "x.sqlite"],
     ["x.sqlite"]),
    ("log-import-wrong-version", {"e.json": json.dumps({"format": "cavchar-log-export",
                                                        "version": 99, "fits": []})},
     ["log", "import", "e.json", "--log-file", "x.sqlite"], ["e.json"]),
    ("log-import-wrong-containers", {"e.json": json.dumps({"format": "cavchar-log-export",
                                                           "version": 1, "fits": "all"})},
     ["log", "import", "e.json", "--log-file", "x.sqlite"], ["e.json"]),
    ("log-import-not-json", {"e.json": "\x00\x01garbage"},
     ["log", "import", "e.json", "--log-file", "x.sqlite"], ["e.json"]),
    ("trend-log-missing", {}, ["trend", "--cavity", "A", "--log-file", "x.sqlite"],
     ["x.sqlite"]),
    ("trend-drop-above-one", {}, ["trend", "--cavity", "A", "--drop", "1.5",
                                  "--log-file", "x.sqlite"], ["--drop"]),
    ("batch-file-missing", {}, ["batch", "check", "none.toml"], ["none.toml"]),
    ("batch-file-deep", {"b.toml": "x = " + "[" * 5000 + "]" * 5000},
     ["batch", "check", "b.toml"], ["b.toml"]),
    ("batch-file-syntax", {"b.toml": "[[entry]\nkind = 'jumps'"}, ["batch", "check", "b.toml"],
     ["b.toml"]),
]


def _listing(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


def _outcome(case, tmp_path: Path, run_cli) -> tuple[int, str, str, list[str], list[str]]:
    _, files, argv, _ = case
    for name, content in files.items():
        path = tmp_path / name
        path.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content, encoding="utf-8")
    before = _listing(tmp_path)
    code, out, err = run_cli(*argv)
    return code, out, err, before, _listing(tmp_path)


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_bad_input_is_refused_in_one_line(case, tmp_path, run_cli, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv("CAVCHAR_LOG", raising=False)
    words = case[3]
    code, out, err, before, after = _outcome(case, tmp_path, run_cli)
    assert "Traceback" not in err and "Traceback" not in out, err
    assert code == 2, (code, out, err)
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    for word in words:
        assert word in lines[0], (word, lines[0])
    assert len(lines[0]) <= 1000
    assert lines[0].isprintable()  # no terminal escape code or control character printed
    assert "pickle" not in lines[0].lower()  # never advise pickle
    assert after == before, "files were written"


def test_counts(capsys):
    """The table is as large as the issue asks (at least 60 cases)."""
    assert len(CASES) >= 60
    assert len({c[0] for c in CASES}) == len(CASES)
    with capsys.disabled():
        print(f"\nbad-input table: {len(CASES)} cases", end="")


def test_binary_helpers_make_what_they_say():
    """The crafted archive really holds a non-.npy member (else the case tests nothing)."""
    with zipfile.ZipFile(io.BytesIO(_npz_with_text_member())) as archive:
        assert sorted(archive.namelist()) == ["photons.txt", "time.npy"]
    assert os.path.basename(FIXTURE) == "fit_result_v1.json"
