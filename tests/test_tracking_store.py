"""Cooldown log: round trips, duplicates, names, damaged and foreign files, export/import.

The helpers ``make_result`` and ``fresh_log`` are shared by the other
tests/test_tracking_*.py files.
"""

from __future__ import annotations

import dataclasses
import json
import sqlite3
import warnings

import numpy as np
import pandas as pd
import pytest

from cavchar.errors import CavcharWarning, InputError
from cavchar.tracking.entries import (
    DEFAULT_MAX_DRAWS,
    entry_from_result,
    read_result_file,
    thin_index,
)
from cavchar.tracking.exchange import export_document, export_log, import_log
from cavchar.tracking.store import (
    APPLICATION_ID,
    DEFAULT_LOG_NAME,
    LOG_ENV,
    SCHEMA_VERSION,
    open_log,
    resolve_log_path,
)

FREQ = 6.0e9  # invented test mode, Hz


def make_result(lifetime, n_thermal=None, *, freq=FREQ, stage=0.02, sha="a" * 64, seed=1,
                kind="jumps"):
    """A real FitResult built from given draws (lifetime [s], n_th)."""
    from cavchar.derived import add_derived_quantities
    from cavchar.parameters import ParameterSpec
    from cavchar.priors import LogUniform
    from cavchar.result import FitResult
    from cavchar.result_types import InputFile, Provenance

    columns = {"lifetime": np.asarray(lifetime, dtype=float)}
    specs = [ParameterSpec("lifetime", "s", "T_c", LogUniform(1e-6, 1e3), log_scale=True)]
    if n_thermal is not None:
        columns["n_thermal"] = np.asarray(n_thermal, dtype=float)
        specs.append(ParameterSpec("n_thermal", "", "n_th", LogUniform(1e-6, 1e2),
                                   log_scale=True))
    samples = add_derived_quantities(pd.DataFrame(columns), freq, stage)
    return FitResult(
        kind=kind, specs=tuple(specs), samples=samples, map_values={}, diagnostics={},
        settings={"sampler": {"seed": seed, "quiet": True},
                  "fit": {"freq_hz": freq, "stage_temp_k": stage}},
        provenance=Provenance(inputs=(InputFile("record.csv", sha),),
                              versions={"cavchar": "0.1.0"},
                              created_at="2026-01-01T00:00:00+00:00"))


def random_result(rng, lifetime=2e-3, n_th=1e-3, n=6000, **kw):
    """Gaussian lifetime and log-normal n_th draws (5 % and 10 % wide)."""
    return make_result(rng.normal(lifetime, 0.05 * lifetime, n),
                       np.exp(rng.normal(np.log(n_th), 0.1, n)), **kw)


def fresh_log(path, cooldowns=("cd1", "cd2", "cd3"), cavity="A"):
    log = open_log(path)
    log.add_cavity(cavity, freq_hz=FREQ)
    for i, label in enumerate(cooldowns):
        log.add_cooldown(label, start_date=f"2026-0{i + 1}-01", stage_temp_k=0.01 * (i + 1))
    return log


def test_round_trip(tmp_path):
    rng = np.random.default_rng(1)
    results = [random_result(rng, sha=f"{i:064x}", n=9000 + i) for i in range(3)]
    with fresh_log(tmp_path / "log.sqlite") as log:
        ids = [log.add_fit(entry_from_result(r), "A", c) for r, c in zip(results, ["cd1", "cd2",
                                                                               "cd2"])]
    with open_log(tmp_path / "log.sqlite", create=False) as log:
        for fit_id, result, cooldown in zip(ids, results, ["cd1", "cd2", "cd2"]):
            fit = log.fit(fit_id)
            assert (fit.cavity, fit.cooldown, fit.kind) == ("A", cooldown, "jumps")
            assert fit.settings == result.settings
            assert fit.seed == 1
            assert fit.input_sha256 == result.provenance.inputs[0].sha256
            assert fit.tool_version == "0.1.0"
            assert fit.fitted_at == "2026-01-01T00:00:00+00:00"
            assert fit.freq_hz == FREQ and fit.stage_temp_k == 0.02
            assert fit.n_draws_total == len(result.samples)
            assert list(fit.parameters) == [s.to_dict() for s in result.specs]
            assert fit.summary == json.loads(json.dumps(result.summary().to_dict(orient="index")))
            draws = log.draws(fit_id)
            rows = thin_index(len(result.samples), DEFAULT_MAX_DRAWS)
            assert set(draws) == {"lifetime", "n_thermal", "effective_temperature"}
            for name, values in draws.items():
                expected = result.samples[name].to_numpy()[rows].astype(np.float32)
                np.testing.assert_array_equal(values, expected.astype(float))  # bit for bit
        assert [f.id for f in log.fits(cavity="A", cooldown="cd2")] == ids[1:]
        assert log.integrity_check() == "ok"


def test_thinning_keeps_joint_rows():
    rng = np.random.default_rng(2)
    result = random_result(rng, n=10_001)
    entry = entry_from_result(result)
    pairs = set(zip(result.samples["lifetime"], result.samples["n_thermal"]))
    assert len(entry.draws["lifetime"]) == DEFAULT_MAX_DRAWS
    assert all(p in pairs for p in zip(entry.draws["lifetime"], entry.draws["n_thermal"]))


def test_duplicates_are_found(tmp_path):
    rng = np.random.default_rng(3)
    result = random_result(rng)
    with fresh_log(tmp_path / "log.sqlite") as log:
        first = log.add_fit(entry_from_result(result), "A", "cd1")
        with pytest.raises(InputError, match=f"already in the log as fit {first}"):
            log.add_fit(entry_from_result(result), "A", "cd2")
        with pytest.warns(CavcharWarning, match="not logged again"):
            assert log.add_fit(entry_from_result(result), "A", "cd1", on_duplicate="skip") == first
        # a cosmetic setting (progress output) does not make it another fit
        same = random_result(np.random.default_rng(3))
        quiet = dataclasses.replace(same, settings={
            **same.settings, "sampler": {**same.settings["sampler"], "quiet": False}})
        with pytest.raises(InputError):
            log.add_fit(entry_from_result(quiet), "A", "cd1")
        other_seed = random_result(np.random.default_rng(3), seed=2)
        second = log.add_fit(entry_from_result(other_seed), "A", "cd1")
        again = log.add_fit(entry_from_result(result), "A", "cd1", on_duplicate="keep")
        assert len({first, second, again}) == 3
        assert len(log.fits()) == 3


def test_unknown_names_and_create(tmp_path):
    rng = np.random.default_rng(4)
    entry = entry_from_result(random_result(rng))
    with fresh_log(tmp_path / "log.sqlite") as log:
        with pytest.raises(InputError, match="unknown cavity 'a'") as info:
            log.add_fit(entry, "a", "cd1")
        assert "did you mean A" in str(info.value)
        with pytest.raises(InputError, match="unknown cooldown 'cd9'"):
            log.add_fit(entry, "A", "cd9")
        assert log.fits() == []  # nothing half-written
        fit_id = log.add_fit(entry, "B", "new", create=True)
        assert log.cavity("B").freq_hz == FREQ  # taken from the fit
        assert log.fit(fit_id).cooldown == "new"
        with pytest.raises(InputError, match="already in the log"):
            log.add_cavity("A")
        with pytest.raises(InputError, match="no fit 99"):
            log.fit(99)


def test_failed_write_leaves_nothing(tmp_path, monkeypatch):
    import cavchar.tracking.store as store

    rng = np.random.default_rng(5)
    with fresh_log(tmp_path / "log.sqlite") as log:
        log.add_fit(entry_from_result(random_result(rng, sha="1" * 64)), "A", "cd1")

        def broken(*args, **kwargs):
            raise RuntimeError("disk trouble in the middle of a write")

        monkeypatch.setattr(store, "_write_draws", broken)
        with pytest.raises(RuntimeError):
            log.add_fit(entry_from_result(random_result(rng, sha="2" * 64)), "A", "cd1")
        assert len(log.fits()) == 1
        assert log._query("SELECT COUNT(*) FROM fits")[0][0] == 1


def test_log_path_resolution(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv(LOG_ENV, raising=False)
    assert resolve_log_path() == tmp_path / DEFAULT_LOG_NAME
    monkeypatch.setenv(LOG_ENV, str(tmp_path / "elsewhere.sqlite"))
    assert resolve_log_path() == tmp_path / "elsewhere.sqlite"
    assert resolve_log_path(tmp_path / "x.sqlite") == tmp_path / "x.sqlite"
    with pytest.raises(InputError, match="no cooldown log here"):
        open_log(create=False)
    open_log().close()
    assert (tmp_path / "elsewhere.sqlite").exists()


def test_schema_marks_and_pragmas(tmp_path):
    with open_log(tmp_path / "log.sqlite") as log:
        con = log._con
        assert con.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
        assert con.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
        assert con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def test_bad_files(tmp_path):
    garbage = tmp_path / "garbage.sqlite"
    garbage.write_bytes(np.random.default_rng(6).bytes(8192))
    with pytest.raises(InputError, match="not an SQLite log") as info:
        open_log(garbage)
    assert str(garbage) in str(info.value)

    foreign = tmp_path / "foreign.sqlite"
    con = sqlite3.connect(foreign)
    con.execute("CREATE TABLE invoices (id INTEGER PRIMARY KEY, amount REAL)")
    con.commit()
    con.close()
    with pytest.raises(InputError, match="not a cavchar log.*invoices"):
        open_log(foreign)

    newer = tmp_path / "newer.sqlite"
    open_log(newer).close()
    con = sqlite3.connect(newer)
    con.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    con.close()
    with pytest.raises(InputError, match="newer than this cavchar"):
        open_log(newer)

    # a log whose pages were overwritten after the header
    damaged = tmp_path / "damaged.sqlite"
    with fresh_log(damaged) as log:
        log.add_fit(entry_from_result(random_result(np.random.default_rng(7))), "A", "cd1")
        log._con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    data = bytearray(damaged.read_bytes())
    data[100:] = np.random.default_rng(8).bytes(len(data) - 100)
    damaged.write_bytes(bytes(data))
    with pytest.raises(InputError, match="damaged|cannot use the log|not a cavchar log"):
        with open_log(damaged) as log:
            log.fits()

    empty = tmp_path / "empty.sqlite"
    empty.write_bytes(b"")
    with open_log(empty) as log:  # an empty file becomes a new log
        assert log.cavities() == []


def test_result_file_errors(tmp_path):
    with pytest.raises(InputError, match="no such result file"):
        read_result_file(tmp_path / "missing.json")
    bad = tmp_path / "bad.json"
    bad.write_text('{"hello": 1}')
    with pytest.raises(InputError, match="not a cavchar result"):
        read_result_file(bad)
    draws = 1e-3 * (1 + 0.01 * np.random.default_rng(3).standard_normal(10))
    result = make_result(draws)  # no n_th: still loggable (lifetime only)
    path = tmp_path / "r.json"
    result.to_json(path)
    entry = read_result_file(path)
    assert set(entry.draws) == {"lifetime"} and entry.source == str(path)


def _strip(doc):
    doc = json.loads(json.dumps(doc))
    doc.pop("exported_at")
    for fit in doc["fits"]:
        fit.pop("id")
    return doc


@pytest.mark.parametrize("suffix", ["json", "csv"])
def test_export_is_reimportable(tmp_path, suffix):
    rng = np.random.default_rng(9)
    with fresh_log(tmp_path / "a.sqlite") as log:
        log.add_cavity("B", notes="no fits yet" if suffix == "json" else "")
        for i, cooldown in enumerate(["cd1", "cd2", "cd3"]):
            log.add_fit(entry_from_result(random_result(rng, sha=f"{i:064x}")), "A", cooldown)
        log.add_fit(entry_from_result(make_result(np.full(50, 3e-3), sha="f" * 64,
                                                  kind="ringdown")), "A", "cd3")
        with log.transaction() as con:  # creation dates of the past must survive the trip
            con.execute("UPDATE cavities SET created_at = '2020-01-02T03:04:05+00:00'")
            con.execute("UPDATE cooldowns SET created_at = '2020-01-02T03:04:05+00:00'")
            con.execute("UPDATE fits SET logged_at = '2020-01-02T03:04:05+00:00'")
        path = tmp_path / f"export.{suffix}"
        assert export_log(log, path) == 4
        with pytest.raises(InputError, match="already exists"):
            export_log(log, path)
        original = export_document(log)
        report = import_log(log, path)  # into the same log: everything is already there
        assert (report.fits_added, report.fits_skipped) == (0, 4)
    with open_log(tmp_path / "b.sqlite") as other:
        report = import_log(other, path)
        assert (report.fits_added, report.fits_skipped, report.cooldowns_added) == (4, 0, 3)
        copy = export_document(other)
    if suffix == "csv":  # cavities without fits are only in the JSON export
        original["cavities"] = [c for c in original["cavities"] if c["name"] == "A"]
    assert _strip(copy) == _strip(original)


def test_import_rejects_edited_or_foreign_files(tmp_path):
    rng = np.random.default_rng(10)
    with fresh_log(tmp_path / "a.sqlite") as log:
        log.add_fit(entry_from_result(random_result(rng)), "A", "cd1")
        export_log(log, tmp_path / "e.json")
    doc = json.loads((tmp_path / "e.json").read_text())
    doc["fits"][0]["settings"]["fit"]["stage_temp_k"] = 0.5
    (tmp_path / "edited.json").write_text(json.dumps(doc))
    (tmp_path / "other.json").write_text('{"fits": []}')
    (tmp_path / "other.csv").write_text("a,b\n1,2\n")
    with open_log(tmp_path / "b.sqlite") as other:
        with pytest.raises(InputError, match="do not match their SHA-256"):
            import_log(other, tmp_path / "edited.json")
        assert other.fits() == [] and other.cavities() == []  # one transaction: nothing landed
        with pytest.raises(InputError, match="not a cooldown log export"):
            import_log(other, tmp_path / "other.json")
        with pytest.raises(InputError, match="columns .* are missing"):
            import_log(other, tmp_path / "other.csv")


def test_delete(tmp_path):
    rng = np.random.default_rng(11)
    with fresh_log(tmp_path / "log.sqlite") as log:
        ids = [log.add_fit(entry_from_result(random_result(rng, sha=f"{i:064x}")), "A", "cd1")
               for i in range(3)]
        with pytest.raises(InputError, match="no fit 42"):
            log.delete_fits([ids[0], 42])
        assert len(log.fits()) == 3  # nothing deleted when one id is unknown
        assert log.delete_fits(ids[:2]) == 2
        assert [f.id for f in log.fits()] == ids[2:]
        assert log._query("SELECT COUNT(DISTINCT fit_id) FROM draws")[0][0] == 1


def test_cli_log_commands(tmp_path, run_cli, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv(LOG_ENV, raising=False)
    rng = np.random.default_rng(12)
    random_result(rng, sha="1" * 64).to_json(tmp_path / "r1.json")
    random_result(rng, sha="2" * 64, lifetime=1e-3).to_json(tmp_path / "r2.json")

    code, _, err = run_cli("log", "add", "r1.json", "--cavity", "C", "--cooldown", "x")
    assert code == 2 and "no cooldown log here" in err and "Traceback" not in err
    assert not (tmp_path / "cavchar.sqlite").exists()  # a refused add makes no log
    assert run_cli("log", "cavity", "C", "--freq", "6GHz")[0] == 0
    code, _, err = run_cli("log", "cooldown", "x", "--start", "yesterday")
    assert code == 2 and "not a date" in err
    assert run_cli("log", "cooldown", "x", "--start", "2026-01-05", "--stage-temp", "15mK",
                   "--stage", "still=0.8K")[0] == 0
    code, out, _ = run_cli("log", "add", "r1.json", "r2.json", "--cavity", "C", "--cooldown", "x",
                           "--stage-temp", "30mK")
    assert code == 0 and "as fit 2" in out
    random_result(rng, sha="3" * 64).to_json(tmp_path / "r3.json")
    code, _, err = run_cli("log", "add", "r3.json", "r1.json", "--cavity", "C", "--cooldown", "x")
    assert code == 2 and "already in the log as fit 1" in err  # and r3 is not logged either
    code, out, _ = run_cli("log", "list", "--json")
    rows = json.loads(out)
    assert [r["id"] for r in rows] == [1, 2] and rows[0]["stage_temp_k"] == 0.03
    code, out, _ = run_cli("log", "show", "2")
    assert code == 0 and "lifetime" in out and " ms" in out and "2222" in out
    assert run_cli("log", "show", "7")[0] == 2
    code, _, err = run_cli("log", "delete", "1")
    assert code == 2 and "nothing deleted" in err and "--confirm" in err
    assert len(json.loads(run_cli("log", "list", "--json")[1])) == 2
    assert run_cli("log", "export", "all.csv")[0] == 0
    assert run_cli("log", "delete", "1", "2", "--confirm")[0] == 0
    code, out, _ = run_cli("log", "import", "all.csv")
    assert code == 0 and "imported 2 fit(s)" in out
    code, out, _ = run_cli("log", "check")
    assert code == 0 and "ok (2 fit(s))" in out
    (tmp_path / "junk.sqlite").write_text("not a database at all")
    code, _, err = run_cli("log", "list", "--log-file", "junk.sqlite")
    assert code == 2 and "not an SQLite log" in err


def test_log_fit_result_helper(tmp_path):
    from cavchar.cli.log import log_fit_result

    rng = np.random.default_rng(13)
    result = random_result(rng)
    path = tmp_path / "log.sqlite"
    with pytest.raises(InputError, match="unknown cavity"):
        log_fit_result(result, "A", "cd1", path)
    fit_id = log_fit_result(result, "A", "cd1", path, create=True)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        assert log_fit_result(result, "A", "cd1", path) == fit_id  # duplicate: skipped
    assert any("not logged again" in str(w.message) for w in caught)


def test_fit_log_options(tmp_path, capsys):
    import argparse

    from cavchar.cli.log import add_fit_log_options, log_from_args

    parser = argparse.ArgumentParser()
    add_fit_log_options(parser)
    result = random_result(np.random.default_rng(14))
    assert log_from_args(result, parser.parse_args([])) is None
    args = parser.parse_args(["--log", "A", "cd1", "--log-file", str(tmp_path / "l.sqlite"),
                              "--log-create"])
    fit_id = log_from_args(result, args)
    assert "logged as fit 1 (cavity A, cooldown cd1)" in capsys.readouterr().out
    with open_log(tmp_path / "l.sqlite", create=False) as log:
        assert log.fit(fit_id).cavity == "A"


def test_every_public_tracking_name_imports():
    """The lazy name map of cavchar.tracking points at modules that define each name."""
    import cavchar.tracking as tracking

    for name in tracking.__all__:
        assert getattr(tracking, name) is not None
