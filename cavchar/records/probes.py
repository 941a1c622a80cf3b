"""Raw probe records: the 0/1 outcome of every probe (NaN = lost), with optional
probe settings (rad) and segments.  Times in s."""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from cavchar.records.base import SegmentedRecord, segment_spans

__all__ = ["ProbeRecord", "ProbeSegment"]


class ProbeSegment(NamedTuple):
    """One segment of a :class:`ProbeRecord`: times (s), outcomes, settings (rad) or None."""

    id: int
    time: np.ndarray
    outcome: np.ndarray
    setting: np.ndarray | None


@dataclass(frozen=True, eq=False, repr=False)
class ProbeRecord(SegmentedRecord):
    """Raw outcome of every probe.

    Parameters
    ----------
    time : array (m,)
        Probe times in s, strictly increasing within each segment.
    outcome : array (m,)
        0.0 or 1.0; NaN for a lost probe (its time still advances the record).
    setting : array (m,), optional
        Probe phase setting in rad of each probe (when settings are interleaved).
    segment, metadata, source, lines, line_kind : optional
        As for every segmented record (:class:`~cavchar.records.base.SegmentedRecord`).
    """

    outcome: np.ndarray
    setting: np.ndarray | None = None
    segment: np.ndarray | None = None

    def __post_init__(self) -> None:
        self._init_common()
        time = self._times(hint="give at least one probe")
        m = time.size
        outcome = self._float("outcome", self.outcome, m, allow_nan=True)
        bad = ~np.isnan(outcome) & (outcome != 0) & (outcome != 1)
        if bad.any():
            row = int(np.argmax(bad))
            raise self._error(f"outcome {outcome[row]} is neither 0 nor 1", row,
                              hint="write 0 or 1, or leave the cell empty for a lost probe")
        setting = None if self.setting is None else self._float("setting", self.setting, m)
        segment, ids, bounds = self._ordered_groups("segment", self.segment, time)
        self._freeze(time=time, outcome=outcome, setting=setting, segment=segment,
                     segment_ids=ids, bounds=bounds)

    def __repr__(self) -> str:
        return (f"ProbeRecord({self.time.size} probes, {self.n_lost} lost, "
                f"{self.segment_ids.size} segment(s), source={self.source!r})")

    @property
    def n_lost(self) -> int:
        """Number of lost probes (NaN outcome)."""
        return int(np.count_nonzero(np.isnan(self.outcome)))

    @property
    def lost(self) -> np.ndarray:
        """Boolean mask (m,) of lost probes."""
        return np.isnan(self.outcome)

    def settings_used(self) -> np.ndarray:
        """Distinct settings in rad (sorted); ``[0.0]`` when the record has none."""
        return np.zeros(1) if self.setting is None else np.unique(self.setting)

    def segments(self) -> list[ProbeSegment]:
        """Per-segment arrays (read-only views), in file order."""
        return [ProbeSegment(int(i), self.time[a:b], self.outcome[a:b],
                             None if self.setting is None else self.setting[a:b])
                for i, (a, b) in zip(self.segment_ids, segment_spans(self.bounds), strict=True)]
