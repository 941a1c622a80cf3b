"""Records: validation, per-segment views, read-only arrays and exact file round trips."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cavchar.errors import InputError
from cavchar.io import (
    read_jump_record,
    read_probe_record,
    read_ringdown,
    read_sampled_record,
    write_jump_record,
    write_probe_record,
    write_record,
    write_ringdown,
    write_sampled_record,
)
from cavchar.records import JumpRecord, ProbeRecord, RingdownTrace, SampledRecord

FORMATS = ["r.csv", "r.tsv", "r.csv.gz", "r.tsv.gz", "r.npz", "r.parquet"]


def _two_segments() -> JumpRecord:
    return JumpRecord([0.0, 1.0, 2.0, 0.5, 0.7], [0, 1, 0, 2, 3], [3.0, 1.0],
                      segment=[0, 0, 0, 5, 5], metadata={"frequency": "6.8 GHz"})


def test_jump_record_views_and_dwell_times():
    record = _two_segments()
    first, second = record.segments()
    assert (first.id, second.id) == (0, 5)
    assert first.photons.tolist() == [0, 1, 0] and first.end_time == 3.0
    assert second.time.tolist() == [0.5, 0.7] and second.end_time == 1.0
    # hand computation: dwell = next time (or the segment end) - time
    assert np.allclose(record.dwell_times(), [1.0, 1.0, 1.0, 0.2, 0.3])
    assert record.n_jumps == 3  # the step 0 -> 2 across segments is no jump
    assert record.observed_time == pytest.approx(3.0 + 0.5)
    assert record.max_photons == 3 and record.n_segments == 2 and len(record) == 5
    assert record.quantity("frequency", "frequency") == pytest.approx(6.8e9)
    assert record.quantity("absent", "time", default=1.5) == 1.5


def test_arrays_are_read_only_copies():
    time = np.array([0.0, 1.0])
    record = SampledRecord(time, np.array([0, 3]))
    assert time.flags.writeable  # the caller's array is not frozen
    time[0] = -5.0
    assert record.time[0] == 0.0
    with pytest.raises(ValueError):
        record.time[0] = 1.0
    with pytest.raises(AttributeError):
        record.time = time  # frozen dataclass


def test_repeated_photon_number_is_allowed_and_no_jump():
    record = JumpRecord([0.0, 1.0, 2.0], [1, 1, 0], 3.0)
    assert record.n_jumps == 1


@pytest.mark.parametrize(
    ("kwargs", "words"),
    [
        (dict(time=[0, 1], photons=[0, 2], end_time=3), ["jumps from 0 to 2", "sampled"]),
        (dict(time=[0, 1], photons=[0, 1], end_time=0.5), ["before its last change"]),
        (dict(time=[0], photons=[1], end_time=0), ["spans no time"]),
        (dict(time=[0, 1], photons=[0, 1], end_time=[2, 3]), ["2 end times for 1 segments"]),
        (dict(time=[0, 1], photons=[0, 1], end_time=3, segment=[0, 1]), ["one end time"]),
        (dict(time=[0, 1, 2], photons=[0, 1, 0], end_time=[3, 3], segment=[0, 1, 0]),
         ["starts again"]),
        (dict(time=[0, 0], photons=[0, 1], end_time=3), ["repeats"]),
        (dict(time=[0, 1], photons=[0, -1], end_time=3), ["negative"]),
        (dict(time=[0, 1], photons=[0, 0.5], end_time=3), ["whole number"]),
        (dict(time=[0, np.nan], photons=[0, 1], end_time=3), ["not a finite number"]),
        (dict(time=[], photons=[], end_time=3), ["no rows"]),
    ],
)
def test_jump_record_validation(kwargs, words):
    with pytest.raises(InputError) as info:
        JumpRecord(**kwargs)
    for word in words:
        assert word in str(info.value)


def test_validation_names_source_line():
    with pytest.raises(InputError) as info:
        SampledRecord([0.0, 2.0, 1.0], [0, 0, 0], source="data.csv", lines=[4, 6, 9])
    assert info.value.line == 9 and info.value.path == "data.csv"
    with pytest.raises(InputError, match="row 3: time") as info:
        SampledRecord([0.0, 2.0, 1.0], [0, 0, 0], source="data.npz", lines=[1, 2, 3],
                      line_kind="row")
    assert info.value.line is None


def test_probe_record():
    record = ProbeRecord([0.0, 1.0, 2.0, 3.0], [0, np.nan, 1, 1], setting=[0, 1, 0, 1],
                         segment=[2, 2, 2, 2])
    assert record.n_lost == 1 and record.lost.tolist() == [False, True, False, False]
    assert record.settings_used().tolist() == [0.0, 1.0]
    (part,) = record.segments()
    assert part.id == 2 and np.isnan(part.outcome[1])
    with pytest.raises(InputError, match="neither 0 nor 1"):
        ProbeRecord([0.0, 1.0], [0, 0.5])
    with pytest.raises(InputError, match="setting"):
        ProbeRecord([0.0, 1.0], [0, 1], setting=[0, np.nan])
    assert ProbeRecord([0.0], [1]).settings_used().tolist() == [0.0]


def test_ringdown_trace_kinds():
    power = RingdownTrace([0, 1, 0, 1], [1.0, 0.5, 1.1, 0.4], "power", trace=[0, 0, 1, 1])
    assert power.n_traces == 2 and [t.id for t in power.traces()] == [0, 1]
    iq = RingdownTrace([0, 1], [1 + 1j, 0.5], "iq", sigma=[0.1, 0.1])
    assert iq.value.dtype == np.complex128
    counts = RingdownTrace([0, 1], [[3, 1], [2, 2]], "populations")
    assert counts.n_levels == 2 and counts.value.dtype == np.int64
    assert RingdownTrace([0], [0.2], "mean-n").signal == "mean_n"
    with pytest.raises(InputError, match="unknown signal"):
        RingdownTrace([0], [1.0], "voltage")
    with pytest.raises(InputError, match="negative"):
        RingdownTrace([0], [-1.0], "amplitude")
    with pytest.raises(InputError, match="not positive"):
        RingdownTrace([0], [1.0], "power", sigma=[0.0])
    with pytest.raises(InputError, match="no sigma"):
        RingdownTrace([0], [[1, 2]], "populations", sigma=[1.0])
    with pytest.raises(InputError, match="count_1 = -1"):
        RingdownTrace([0], [[1, -1]], "populations")
    with pytest.raises(InputError, match="goes back"):
        RingdownTrace([0, 1, 0.5], [1.0, 0.5, 0.4], "db")


@pytest.mark.parametrize("name", FORMATS)
def test_round_trip_every_record_in_every_format(tmp_path, name):
    pytest.importorskip("pyarrow") if name.endswith(".parquet") else None
    jumps = _two_segments()
    path = write_jump_record(jumps, tmp_path / f"j{name}")
    back = read_jump_record(path)
    for field in ("time", "photons", "end_time", "segment", "segment_ids"):
        assert np.array_equal(getattr(back, field), getattr(jumps, field)), field
    assert dict(back.metadata) == dict(jumps.metadata)

    sampled = SampledRecord([0.1, 0.35, 0.6], [2, 0, 4], metadata={"note": "x"})
    back = read_sampled_record(write_sampled_record(sampled, tmp_path / f"s{name}"))
    assert np.array_equal(back.time, sampled.time) and np.array_equal(back.photons, [2, 0, 4])

    probes = ProbeRecord([0.0, 1e-4, 2e-4], [1, np.nan, 0], setting=[0.0, np.pi / 2, 0.0],
                         segment=[3, 3, 4])
    back = read_probe_record(write_probe_record(probes, tmp_path / f"p{name}"))
    assert np.array_equal(back.outcome, probes.outcome, equal_nan=True)
    assert np.array_equal(back.setting, probes.setting)
    assert back.segment_ids.tolist() == [3, 4]

    for signal, value in [("power", [1.0, 0.25]), ("db", [0.0, -6.02]),
                          ("amplitude", [1.0, 0.5]), ("iq", [1 + 2j, -0.5 - 1e-9j]),
                          ("mean_n", [2.0, 0.1]), ("populations", [[4, 1, 0], [1, 3, 1]])]:
        sigma = None if signal == "populations" else [0.1, 0.2]
        trace = RingdownTrace([0.0, 1e-3], value, signal, sigma=sigma, trace=[7, 7])
        back = read_ringdown(write_ringdown(trace, tmp_path / f"{signal}{name}"))
        assert back.signal == signal
        assert np.array_equal(back.value, trace.value)
        assert back.trace_ids.tolist() == [7]


def test_writers_refuse_to_overwrite_without_force(tmp_path):
    record = SampledRecord([0.0, 1.0], [0, 1])
    path = write_record(record, tmp_path / "s.csv")
    with pytest.raises(InputError, match="--force"):
        write_record(record, path)
    write_record(SampledRecord([0.0, 1.0], [0, 2]), path, force=True)
    assert read_sampled_record(path).photons.tolist() == [0, 2]
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temp files left


finite = st.floats(min_value=-1e12, max_value=1e12, allow_nan=False, allow_infinity=False)


@settings(max_examples=40, deadline=None)
@given(start=finite, steps=st.lists(st.floats(min_value=1e-300, max_value=1e6,
                                                 allow_nan=False), min_size=1, max_size=30),
       moves=st.lists(st.sampled_from([-1, 0, 1]), min_size=30, max_size=30))
def test_csv_round_trip_is_exact_for_any_floats(tmp_path_factory, start, steps, moves):
    # property: text files keep every float bit for bit (shortest repr round trip)
    time = start + np.cumsum(np.asarray(steps))
    if np.any(np.diff(time) <= 0) or not np.all(np.isfinite(time)):
        return  # rounding made two times equal: not a valid record
    photons = np.maximum(0, 3 + np.cumsum(moves[: time.size]))
    if np.any(np.abs(np.diff(photons)) > 1):
        return
    end = time[-1] + 1.0
    if end <= time[-1]:
        return
    record = JumpRecord(time, photons, end)
    path = tmp_path_factory.mktemp("rt") / "r.csv"
    back = read_jump_record(write_jump_record(record, path))
    assert np.array_equal(back.time, record.time)
    assert back.end_time[0] == record.end_time[0]


def test_atomic_writes(tmp_path):
    from cavchar.io import check_can_write, write_bytes_atomic, write_text_atomic

    target = write_text_atomic(tmp_path / "new" / "deeper" / "notes.txt", "first\n")
    assert target.read_text() == "first\n"  # missing folders are created
    with pytest.raises(InputError, match="--force"):
        write_bytes_atomic(target, b"second")
    assert target.read_text() == "first\n"  # untouched
    write_bytes_atomic(target, b"second", force=True)
    assert target.read_bytes() == b"second"
    with pytest.raises(InputError, match="is a folder"):
        check_can_write(tmp_path, force=True)
    blocker = tmp_path / "plain-file"
    blocker.write_text("x")
    with pytest.raises(InputError, match="not a folder"):
        check_can_write(blocker / "inside.csv")
    assert sorted(p.name for p in target.parent.iterdir()) == ["notes.txt"]  # no temp files
