"""FitResult: summary against numpy, JSON round trip, atomic output, one-line format.

Sources: numpy.quantile / mean / std as the reference for the summary; the Particle Data
Group rounding rule for quoted errors (Review of Particle Physics, introduction, from
memory); strict JSON per RFC 8259 (no NaN), checked by Python's json module.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from cavchar.errors import ConvergenceWarning, InputError
from cavchar.parameters import ParameterSpec
from cavchar.priors import LogUniform, Normal
from cavchar.result import SCHEMA_VERSION, FitResult
from cavchar.result_types import FitKind, InputFile, Provenance, SamplerDiagnostics

FIXTURES = Path(__file__).parent / "fixtures"
Q68 = (stats.norm.cdf(-1.0), stats.norm.cdf(1.0))  # 0.158655, 0.841345


def make_result(n: int = 2000, seed: int = 3) -> FitResult:
    """A result from synthetic draws (no sampling), with every field filled."""
    rng = np.random.default_rng(seed)
    lifetime = np.exp(rng.normal(np.log(1.2e-3), 0.03, n))
    n_th = np.exp(rng.normal(np.log(0.02), 0.4, n))  # skewed: asymmetric interval
    samples = pd.DataFrame({"lifetime": lifetime, "n_thermal": n_th,
                            "quality_factor": 2 * np.pi * 6.2e9 * lifetime,
                            "log_posterior": rng.normal(size=n)})
    specs = (ParameterSpec("lifetime", "s", "T_c", LogUniform(1e-6, 10.0), log_scale=True),
             ParameterSpec("n_thermal", "", "n_th", Normal(0.0, 0.1, 0.0, math.inf),
                           log_scale=True))
    return FitResult(kind="jumps", specs=specs, samples=samples,
                     map_values={"lifetime": 1.2e-3, "n_thermal": 0.019},
                     diagnostics={"tau": {"lifetime": 7.1, "n_thermal": np.float64(7.5)},
                                  "rhat": {"lifetime": 1.002, "n_thermal": float("nan")},
                                  "n_steps": np.int64(1500)},
                     settings={"sampler": {"seed": 42, "n_walkers": 32}, "fit": {"freq_hz": 6.2e9}},
                     provenance={"input_sha256": "0" * 64, "seed": 42,
                                 "versions": {"cavchar": "0.1.0"}},
                     checks={"planck": {"piles_up_at_zero": False}},
                     extras={"record_length_s": 12.5})


def test_summary_matches_numpy():
    result = make_result()
    table = result.summary()
    assert list(table.index) == ["lifetime", "n_thermal", "quality_factor"]  # no bookkeeping
    for name in table.index:
        x = result.samples[name].to_numpy()
        row = table.loc[name]
        np.testing.assert_allclose(
            [row.lo95, row.lo68, row["median"], row.hi68, row.hi95],
            np.quantile(x, [0.025, Q68[0], 0.5, Q68[1], 0.975]), rtol=1e-15)
        assert row["mean"] == pytest.approx(np.mean(x), rel=1e-15)
        assert row["sd"] == pytest.approx(np.std(x, ddof=1), rel=1e-14)
    assert table.loc["lifetime", "unit"] == "s" and table.loc["n_thermal", "unit"] == ""
    assert table.loc["lifetime", "map"] == 1.2e-3
    assert math.isnan(table.loc["quality_factor", "map"])
    # asymmetric interval kept asymmetric (log-normal draws: upper arm longer)
    row = table.loc["n_thermal"]
    assert row.hi68 - row["median"] > 1.2 * (row["median"] - row.lo68)


def test_json_round_trip(tmp_path):
    result = make_result()
    path = result.to_json(tmp_path / "fit.json")
    text = path.read_text()

    def no_constants(name):
        raise AssertionError(f"non-standard JSON constant {name}")

    data = json.loads(text, parse_constant=no_constants)  # plain, strict JSON
    assert data["schema"] == SCHEMA_VERSION and data["settings"]["sampler"]["seed"] == 42
    # each fact once: the seed only in the sampler settings, the kind typed
    assert "seed" not in data and "seed" not in data["provenance"]
    assert data["kind"] == {"family": "jumps"}
    assert data["summary"]["lifetime"]["unit"] == "s"
    back = FitResult.from_json(path)
    pd.testing.assert_frame_equal(back.samples, result.samples, check_exact=True)
    assert back.specs == result.specs
    for name in ("kind", "settings", "provenance", "checks", "planck", "extras", "converged"):
        assert getattr(back, name) == getattr(result, name)
    assert back.diagnostics == result.diagnostics
    assert back.diagnostics.rhat["n_thermal"] is None  # NaN stored as null
    assert back.diagnostics.n_steps == 1500 and back.seed == 42
    assert back.provenance.inputs[0].sha256 == "0" * 64
    assert back.planck is not None and not back.planck.piles_up_at_zero
    assert back.to_dict() == result.to_dict()
    assert back.map_values == result.map_values
    pd.testing.assert_frame_equal(back.summary(), result.summary())


def test_to_json_never_overwrites_without_force(tmp_path):
    result = make_result(n=50)
    target = tmp_path / "fit.json"
    target.write_text("keep me")
    with pytest.raises(InputError, match="exists"):
        result.to_json(target)
    assert target.read_text() == "keep me"
    result.to_json(target, force=True)
    assert FitResult.from_json(target).kind == FitKind("jumps")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fit.json"]  # no temp files left


def test_write_draws_csv_round_trip(tmp_path):
    result = make_result(n=300)
    path = result.write_draws(tmp_path / "draws.csv")
    back = pd.read_csv(path)
    pd.testing.assert_frame_equal(back, result.samples, check_exact=True)
    with pytest.raises(InputError):
        result.write_draws(tmp_path / "draws.csv")
    gz = result.write_draws(tmp_path / "draws.csv.gz")
    pd.testing.assert_frame_equal(pd.read_csv(gz),
                                  result.samples, check_exact=True)


def test_write_draws_parquet(tmp_path):
    pytest.importorskip("pyarrow")
    result = make_result(n=300)
    path = result.write_draws(tmp_path / "draws.parquet")
    pd.testing.assert_frame_equal(pd.read_parquet(path), result.samples, check_exact=True)


def _with_draws(name: str, unit: str, label: str, draws: np.ndarray) -> FitResult:
    spec = ParameterSpec(name, unit, label, LogUniform(1e-30, 1e30), log_scale=True)
    return FitResult(kind="test", specs=(spec,), samples=pd.DataFrame({name: draws}),
                     map_values={}, diagnostics={}, settings={}, provenance={})


def split_normal_draws(median: float, upper: float, lower: float, n: int = 20001):
    """Draws whose 68% quantiles sit (to about 1e-4 relative) at median + upper, median - lower."""
    z = stats.norm.ppf((np.arange(n) + 0.5) / n)
    return median + np.where(z > 0, upper, lower) * z


@pytest.mark.parametrize(("name", "unit", "label", "median", "upper", "lower", "expected"), [
    ("lifetime", "s", "T_c", 1.21e-3, 0.040e-3, 0.030e-3,
     "T_c = 1.210(+0.040/-0.030) ms (68% credible)"),       # 300: two digits
    ("lifetime", "s", "T_c", 1.21e-3, 0.05e-3, 0.04e-3,
     "T_c = 1.21(+0.05/-0.04) ms (68% credible)"),          # 400: one digit
    ("lifetime", "s", "T_c", 0.5, 0.0097, 0.0098,
     "T_c = 500(+10/-10) ms (68% credible)"),               # 970: rounds up to 10, two digits
    ("quality_factor", "", "Q", 4.2e10, 0.12e10, 0.11e10,
     "Q = 4.20(+0.12/-0.11)e10 (68% credible)"),
    ("n_thermal", "", "n_th", 0.052, 0.010, 0.008,
     "n_th = 0.052(+0.010/-0.008) (68% credible)"),
    ("effective_temperature", "K", "T_eff", 0.0768, 0.0061, 0.0052,
     "T_eff = 77(+6/-5) mK (68% credible)"),                 # 520: one digit
])
def test_one_line(name, unit, label, median, upper, lower, expected):
    result = _with_draws(name, unit, label, split_normal_draws(median, upper, lower))
    assert result.one_line(name) == expected


def test_one_line_upper_limit():
    rng = np.random.default_rng(1)
    draws = np.exp(rng.uniform(np.log(1e-7), np.log(3e-3), 5000))
    result = _with_draws("n_thermal", "", "n_th", draws)
    line = result.one_line("n_thermal", upper_limit=True)
    assert line == f"n_th < {np.quantile(draws, 0.95):.3g} (95% upper limit)"


@pytest.mark.parametrize("content", ['{"a": 1}', '{"schema": "cavchar-fit-result/99"}',
                                     '{"schema": "cavchar-fit-result/1", "kind": "x"}',
                                     "{not json"])
def test_from_json_rejects_other_files(tmp_path, content):
    path = tmp_path / "bad.json"
    path.write_text(content)
    with pytest.raises(InputError):
        FitResult.from_json(path)


def test_fixture_of_schema_1_still_reads():
    # tests/fixtures/fit_result_v1.json was written by schema 1; every later cavchar must
    # read it.  Its stored summary block must agree with the summary recomputed from draws.
    path = FIXTURES / "fit_result_v1.json"
    result = FitResult.from_json(path)
    stored = json.loads(path.read_text())["summary"]
    assert result.kind == FitKind("jumps") and result.seed == 42
    assert result.parameter_names == ["lifetime", "n_thermal"]
    table = result.summary()
    for name, row in stored.items():
        for column in ("median", "mean", "sd", "lo68", "hi68", "lo95", "hi95"):
            assert table.loc[name, column] == pytest.approx(row[column], rel=1e-12)
    assert isinstance(result.specs[1].prior, Normal) and result.specs[1].prior.high == math.inf


def test_from_run_adds_derived_quantities_and_checks():
    from cavchar.inference import SamplerSettings, sample_posterior

    def loglike(x):
        return (-0.5 * (np.log(x[:, 0] / 1.2e-3) / 0.05) ** 2
                - 0.5 * (np.log(x[:, 1] / 0.02) / 0.3) ** 2)

    specs = [ParameterSpec("lifetime", "s", "T_c", LogUniform(1e-6, 10.0), log_scale=True),
             ParameterSpec("n_thermal", "", "n_th", LogUniform(1e-6, 10.0), log_scale=True)]
    with pytest.warns(ConvergenceWarning):
        run = sample_posterior(loglike, specs, [1e-3, 0.01],
                               SamplerSettings(seed=9, quiet=True, max_steps=300, chunk=300,
                                               allow_unconverged=True))
    result = FitResult.from_run("jumps", run, freq_hz=6.2e9, stage_temp_k=0.03,
                                fit_settings={"mode": "exact"})
    for column in ("quality_factor", "linewidth", "effective_temperature", "excess_photons",
                   "log_posterior", "log_likelihood"):
        assert column in result.samples.columns
    assert result.planck.verdict == "hotter than the stage" and "planck" not in result.checks
    assert result.settings["sampler"]["seed"] == 9 and result.seed == 9
    assert result.settings["fit"] == {"freq_hz": 6.2e9, "stage_temp_k": 0.03, "mode": "exact"}
    assert result.provenance.versions["emcee"] is not None
    assert result.provenance.command_line is None  # the Python API records no command
    assert result.map_values["quality_factor"] == pytest.approx(
        2 * np.pi * 6.2e9 * result.map_values["lifetime"])
    assert not result.converged and result.trace is not None


def test_sha256_of_file_known_vector(tmp_path):
    # FIPS 180-2, appendix B.1: SHA-256("abc")
    from cavchar.provenance import collect_provenance, sha256_of_file

    path = tmp_path / "abc.txt"
    path.write_bytes(b"abc")
    digest = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    assert sha256_of_file(path) == digest
    assert sha256_of_file(path, chunk_bytes=1) == digest  # chunked reading
    prov = collect_provenance(path, command_line=["cavchar", "fit"])
    assert prov.inputs[0].sha256 == digest and prov.command_line == ("cavchar", "fit")
    assert set(prov.versions) >= {"cavchar", "numpy", "scipy", "emcee"}
    assert prov.date is not None and prov.created_at.endswith("+00:00")  # UTC
    with pytest.raises(InputError):
        sha256_of_file(tmp_path / "missing.csv")


def test_plain_json_fast_paths_match_the_element_by_element_form():
    # outside reference: the standard library's strict JSON encoder (allow_nan=False)
    # accepts the result, and every cell equals the element-by-element conversion
    import json as std_json
    import math

    from cavchar.result import to_plain_json

    rng = np.random.default_rng(3)
    values = rng.normal(size=(3, 50))
    values[0, 3], values[1, 7], values[2, 9] = np.nan, np.inf, -np.inf
    cases = [values, values.astype(np.float32), list(values[0]), np.arange(6).reshape(2, 3),
             np.array([True, False]), [1.0, 2, 3.5]]
    for case in cases:
        plain = to_plain_json(case)
        std_json.dumps(plain, allow_nan=False)
        flat = np.asarray(case, dtype=float).ravel()
        cells = np.asarray(plain, dtype=object).ravel()
        for a, b in zip(flat, cells, strict=True):
            assert (b is None) if not math.isfinite(a) else (b == a and type(b) in (int, float,
                                                                                    bool))


def test_schema_1_is_migrated_to_one_home_per_fact(tmp_path):
    """The schema-1 fixture read and written again: schema 2, the seed once (sampler
    settings), the kind typed, the inputs as path/hash pairs, nothing else lost."""
    path = FIXTURES / "fit_result_v1.json"
    old = json.loads(path.read_text())
    result = FitResult.from_json(path)
    assert result.provenance.inputs == (InputFile("", "0" * 64),)
    assert result.provenance.cavchar_version == "0.1.0"
    assert result.diagnostics.tau == old["diagnostics"]["tau"]
    assert result.planck is not None and result.planck.piles_up_at_zero is False
    assert not result.planck.complete
    new = result.to_dict()
    assert new["schema"] == "cavchar-fit-result/2" and "seed" not in new
    assert new["settings"] == old["settings"] and new["extras"] == old["extras"]
    assert new["checks"] == old["checks"] and new["map"] == old["map"]
    again = FitResult.from_json(result.to_json(tmp_path / "v2.json"))
    assert again.to_dict() == new


def test_schema_1_provenance_spellings():
    """Parallel lists of paths and hashes, the command as text, the version twice and a
    date with an offset: one typed provenance with one spelling of each."""
    prov = Provenance.from_dict({
        "input_path": ["a.csv", "b.csv"], "input_sha256": ["1" * 64, "2" * 64],
        "command": "cavchar fit jumps 'my file.csv' --seed 3", "cavchar_version": "0.1.0",
        "versions": {"numpy": "2.0"}, "created_at": "2026-03-01T12:00:00+01:00",
        "seed": 3})
    assert prov.inputs == (InputFile("a.csv", "1" * 64), InputFile("b.csv", "2" * 64))
    assert prov.command_line == ("cavchar", "fit", "jumps", "my file.csv", "--seed", "3")
    assert prov.command == "cavchar fit jumps 'my file.csv' --seed 3"
    assert prov.versions == {"numpy": "2.0", "cavchar": "0.1.0"}
    assert prov.created_at == "2026-03-01T11:00:00+00:00"  # the same instant, in UTC
    assert Provenance.from_dict(prov.to_dict()) == prov
    with pytest.raises(ValueError, match="one hash per input_path"):
        Provenance.from_dict({"input_path": ["a", "b"], "input_sha256": ["1" * 64] * 3})


def test_fit_kind_parses_the_compound_names():
    assert FitKind.parse("jumps-exact") == FitKind("jumps", "exact")
    assert FitKind.parse("ringdown-mean-n") == FitKind("ringdown", "mean-n")
    assert FitKind.parse("probes") == FitKind("probes")
    for text in ("jumps-exact", "ringdown-mean-n", "probes"):
        assert str(FitKind.parse(text)) == text


def test_diagnostics_keep_unknown_fields_and_drop_the_repeated_verdict():
    diag = SamplerDiagnostics.from_dict({"converged": True, "n_steps": 10, "custom": [1]})
    assert diag.n_steps == 10 and diag.extra == {"custom": [1]}
    assert diag.to_dict() == {"n_steps": 10, "custom": [1]}


def test_result_is_read_only_all_the_way_down():
    """No field of a result can be changed in place, so summary() and to_json() stay
    what the fit gave; pickling (dask workers) and copying keep it so."""
    import copy
    import dataclasses
    import pickle

    result = make_result(n=200)
    before = result.to_dict()
    attempts = [
        lambda: result.settings.__setitem__("fit", {}),
        lambda: result.settings["sampler"].update(seed=1),
        lambda: result.checks.setdefault("x", 1),
        lambda: result.extras.pop("record_length_s"),
        lambda: result.map_values.__setitem__("lifetime", 1.0),
        lambda: result.provenance.versions.__setitem__("cavchar", "9"),
        lambda: result.diagnostics.tau.__setitem__("lifetime", 0.0),
        lambda: result.column("lifetime").__setitem__(0, 1.0),
    ]
    for attempt in attempts:
        with pytest.raises((TypeError, ValueError)):
            attempt()
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.provenance.created_at = "yesterday"  # type: ignore[misc]
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.kind.family = "probes"  # type: ignore[misc]
    assert result.to_dict() == before
    for other in (pickle.loads(pickle.dumps(result)), copy.deepcopy(result)):
        assert other.to_dict() == before
        with pytest.raises(TypeError):
            other.settings["sampler"]["seed"] = 1
    json.dumps(result.settings)  # still plain JSON to every reader
    assert result.settings == {"sampler": {"seed": 42, "n_walkers": 32},
                               "fit": {"freq_hz": 6.2e9}}


def test_fit_kind_family_is_one_word():
    with pytest.raises(ValueError):
        FitKind("jumps-exact")  # the compound name is parsed, not taken as a family
    with pytest.raises(ValueError):
        FitKind.parse("-exact")
