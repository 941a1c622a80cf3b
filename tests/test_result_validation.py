"""Result files are validated on load: crafted or damaged files are refused with one
InputError naming the field, and nothing downstream (summary, log, qualification,
report) ever sees a wrong type, a non-finite draw or a nesting bomb.

The reference for "valid" is RFC 8259 (strict JSON has no NaN/Infinity literals) and
the schema described in docs/inference.md; the starting point of every crafted file is
the schema-1 fixture ``tests/fixtures/fit_result_v1.json``, which must load (the
control: without it every refusal below could be a refusal of everything).
"""

from __future__ import annotations

import copy
import json
import math
from pathlib import Path

import numpy as np
import pytest

from cavchar.errors import InputError
from cavchar.result import FitResult

FIXTURE = Path(__file__).parent / "fixtures" / "fit_result_v1.json"
BASE = json.loads(FIXTURE.read_text(encoding="utf-8"))
SPEC = '[lifetime]\nat_least = "1 us"\ncredibility = 0.95\n'

#: values of the wrong kind put into every field in turn (the default run), and more
HOSTILE = ["<b>x</b>", None, [], True, -1, 2**70, "1e3"]
HOSTILE_MORE = [*HOSTILE, {}, 1e308, -1e308, "", 0, [[[["deep"]]]], "\x1b[31m"]


def _write(path: Path, data) -> Path:
    path.write_text(data if isinstance(data, str) else json.dumps(data), encoding="utf-8")
    return path


def _leaves(value, at=()):
    """Paths of every leaf of the fixture (draw lists: their first element only)."""
    if isinstance(value, dict):
        for key, item in value.items():
            yield from _leaves(item, (*at, key))
    elif isinstance(value, list):
        if at and at[0] == "samples":
            yield (*at, 0)
            return
        for i, item in enumerate(value):
            yield from _leaves(item, (*at, i))
    else:
        yield at
    if isinstance(value, (dict, list)) and at:
        yield at  # the container itself replaced


def _replaced(path: tuple, value):
    data = copy.deepcopy(BASE)
    target = data
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = value
    return data


def test_the_fixture_loads_and_its_summary_works(tmp_path, capsys):
    result = FitResult.from_json(_write(tmp_path / "ok.json", BASE))
    assert result.n_draws == len(BASE["samples"]["lifetime"])
    assert "T_c" in result.one_line("lifetime")
    from cavchar.outputs import print_summary

    print_summary(result)  # the fixture's partial Planck block is said, not a KeyError
    assert "Planck check: incomplete" in capsys.readouterr().out


@pytest.mark.parametrize("values", [
    pytest.param(HOSTILE, id="default"),
    pytest.param(HOSTILE_MORE, id="more", marks=pytest.mark.slow)])
def test_every_field_with_every_wrong_kind_loads_or_is_refused(tmp_path, capsys, values):
    """Hundreds of crafted files: each loads (a free-text field) or raises InputError
    naming the file; never another exception.  What loads must give its printed summary
    without an exception too."""
    from cavchar.outputs import print_summary

    paths = sorted(set(_leaves(BASE)), key=str)
    tried = refused = loaded = 0
    for path in paths:
        for value in values:
            tried += 1
            file = _write(tmp_path / "crafted.json", _replaced(path, value))
            try:
                result = FitResult.from_json(file)
            except InputError as exc:
                refused += 1
                assert "crafted.json" in str(exc)
                continue
            loaded += 1
            print_summary(result)
    capsys.readouterr()
    assert tried > 500 and refused > tried // 2 and loaded > 0
    with capsys.disabled():
        print(f"\ncrafted result files: {tried} tried, {refused} refused, {loaded} loaded, "
              "0 other exceptions", end="")


@pytest.mark.parametrize("literal", ["NaN", "Infinity", "-Infinity"])
def test_non_finite_literals_are_refused(tmp_path, literal):
    text = json.dumps(BASE).replace('"lifetime": [', f'"lifetime": [{literal}, ', 1)
    with pytest.raises(InputError, match=f"literal {literal}.*strict JSON"):
        FitResult.from_json(_write(tmp_path / "r.json", text))


def test_overflowing_number_is_refused(tmp_path):
    text = json.dumps(BASE).replace('"lifetime": [', '"lifetime": [1e999, ', 1)
    with pytest.raises(InputError, match="beyond the range of a double"):
        FitResult.from_json(_write(tmp_path / "r.json", text))


@pytest.mark.parametrize("depth", [40, 100_000])
def test_deep_nesting_is_refused(tmp_path, depth):
    text = json.dumps(_replaced(("extras", "x"), "@@")).replace(
        '"@@"', "[" * depth + "]" * depth)
    with pytest.raises(InputError, match="nest"):
        FitResult.from_json(_write(tmp_path / "r.json", text))


@pytest.mark.parametrize("field, value, words", [
    ("diagnostics.n_walkers", "<script>", "diagnostics.n_walkers"),
    ("diagnostics.n_steps", 1.5, "diagnostics.n_steps"),
    ("settings", [1], "settings"),
    ("settings.sampler", "fast", "settings.sampler"),
    ("extras", 3, "extras"),
    ("provenance", "here", "provenance"),
    ("provenance.input_sha256", "<img src=x onerror=alert(1)>", "provenance.input_sha256"),
    ("seed", "1", "seed"),
    ("converged", "yes", "converged"),
    ("kind", "<svg onload=alert(1)>", "kind"),
    ("parameters", {}, "parameters"),
    ("samples.lifetime", "many", "samples.lifetime"),
    ("samples.lifetime", [1e-3], "samples"),
])
def test_wrong_types_name_the_field(tmp_path, field, value, words):
    data = _replaced(tuple(field.split(".")), value)
    with pytest.raises(InputError) as info:
        FitResult.from_json(_write(tmp_path / "r.json", data))
    message = str(info.value)
    assert words in message and "r.json" in message


def test_all_equal_draws_are_refused(tmp_path):
    data = _replaced(("samples", "lifetime"), [1e-3] * len(BASE["samples"]["lifetime"]))
    with pytest.raises(InputError, match="samples.lifetime.*spread"):
        FitResult.from_json(_write(tmp_path / "r.json", data))


def test_a_saved_result_round_trips(tmp_path):
    """Validation accepts what cavchar writes (the fixture re-saved)."""
    result = FitResult.from_json(_write(tmp_path / "a.json", BASE))
    result.to_json(tmp_path / "b.json")
    again = FitResult.from_json(tmp_path / "b.json")
    np.testing.assert_array_equal(again.column("lifetime"), result.column("lifetime"))


# ------------------------------------------------------------------ qualification

def _qualify(run_cli, tmp_path, text: str):
    _write(tmp_path / "spec.toml", SPEC)
    _write(tmp_path / "r.json", text)
    return run_cli("qualify", str(tmp_path / "spec.toml"), "--result", str(tmp_path / "r.json"))


@pytest.mark.parametrize("literal", ["NaN", "Infinity"])
def test_qualify_never_judges_a_non_finite_draw(tmp_path, run_cli, literal):
    """`qualify --result` with one NaN draw: refused (exit 2), no PASS/FAIL/UNDECIDED."""
    text = json.dumps(BASE).replace('"lifetime": [', f'"lifetime": [{literal}, ', 1)
    code, out, err = _qualify(run_cli, tmp_path, text)
    assert code == 2 and "r.json" in err and "Traceback" not in err
    for word in ("PASS", "FAIL", "UNDECIDED", "nan"):
        assert word not in out


def test_qualify_control_gives_a_verdict(tmp_path, run_cli):
    """The same command on the intact fixture answers (so the refusal above is specific)."""
    code, out, err = _qualify(run_cli, tmp_path, json.dumps(BASE))
    assert code in (0, 4, 5), err
    assert any(word in out for word in ("PASS", "FAIL", "UNDECIDED"))


def test_judge_refuses_non_finite_draws_from_any_source():
    """Draws from a log or built in memory: the verdict function itself refuses NaN."""
    from cavchar.tracking.qualify import Evidence, judge, parse_spec

    spec = parse_spec(SPEC)
    draws = np.full(200, 2e-3)
    draws[7] = math.nan
    with pytest.raises(InputError, match="non-finite"):
        judge(spec.requirements[0], Evidence("fit 3", {"lifetime": draws}))
    draws[7] = 2e-3
    assert judge(spec.requirements[0], Evidence("fit 3", {"lifetime": draws})).status == "PASS"


def test_every_field_of_a_schema_2_file_loads_or_is_refused(tmp_path, capsys):
    """The same sweep over the fixture written again in the current schema (typed kind,
    provenance inputs, the seed only in the settings): never another exception."""
    from cavchar.outputs import print_summary

    current = FitResult.from_json(_write(tmp_path / "v1.json", BASE)).to_dict()
    current["provenance"].update(inputs=[{"path": "record.csv", "sha256": "0" * 64}],
                                 command_line=["cavchar", "fit", "jumps", "record.csv"],
                                 created_at="2026-03-01T11:00:00+00:00")
    FitResult.from_json(_write(tmp_path / "ok.json", current))  # the control loads
    tried = refused = 0
    for path in sorted(set(_leaves(current)), key=str):
        for value in HOSTILE:
            tried += 1
            data = copy.deepcopy(current)
            target = data
            for key in path[:-1]:
                target = target[key]
            target[path[-1]] = value
            try:
                print_summary(FitResult.from_json(_write(tmp_path / "crafted.json", data)))
            except InputError as exc:
                refused += 1
                assert "crafted.json" in str(exc)
    capsys.readouterr()
    assert tried > 500 and refused > tried // 2


@pytest.mark.parametrize("field, value, words", [
    (("kind",), "jumps-exact", "kind should be an object"),  # the schema-1 spelling
    (("kind", "family"), "jumps-exact", "kind.family"),
    (("provenance", "created_at"), "yesterday", "provenance.created_at should be an ISO"),
    (("provenance", "inputs", 0, "sha256"), "<b>x</b>", "provenance.inputs[0].sha256"),
])
def test_schema_2_fields_name_the_field(tmp_path, field, value, words):
    current = FitResult.from_json(_write(tmp_path / "v1.json", BASE)).to_dict()
    current["provenance"]["inputs"] = [{"path": "record.csv", "sha256": "0" * 64}]
    target = current
    for key in field[:-1]:
        target = target[key]
    target[field[-1]] = value
    with pytest.raises(InputError) as info:
        FitResult.from_json(_write(tmp_path / "r.json", current))
    assert words in str(info.value) and "r.json" in str(info.value)
