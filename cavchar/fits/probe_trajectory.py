"""Photon-number trajectory behind a probe record: posterior mean and most likely path.

* :func:`reconstruct_trajectory` averages the forward-backward marginals
  ``P(n_t | outcomes, theta)`` over a few posterior draws ``theta`` (so the
  mean photon number carries the parameter uncertainty too) and decodes the
  Viterbi path at the posterior median.
* :func:`viterbi_jump_record` turns a path at probe times into an exact jump
  record (input to ``cavchar fit jumps``): a change between two probes is
  placed at the middle of their interval; a change by several photons inside
  one interval is split into single steps spread evenly over it.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike

from cavchar.models.probes.likelihood import ProbeLikelihood
from cavchar.records import JumpRecord, ProbeRecord

__all__ = ["ProbeTrajectory", "reconstruct_trajectory", "viterbi_jump_record",
           "write_trajectory"]


@dataclass(frozen=True)
class ProbeTrajectory:
    """Trajectory estimate at the probe times.

    Attributes
    ----------
    time, outcome : ndarray (T,)
        Probe times (s) and outcomes (NaN = lost).
    segment : ndarray (T,) of int
    mean : ndarray (T,)
        Posterior mean photon number (marginals averaged over the draws used).
    sd : ndarray (T,)
        Posterior standard deviation of the photon number.
    path : ndarray (T,) of int
        Viterbi path at the posterior median of the parameters.
    draws_used : int
    """

    time: np.ndarray
    outcome: np.ndarray
    segment: np.ndarray
    mean: np.ndarray
    sd: np.ndarray
    path: np.ndarray
    draws_used: int


def reconstruct_trajectory(model: ProbeLikelihood, draws: ArrayLike,
                           max_draws: int = 8) -> ProbeTrajectory:
    """Posterior mean (over ``max_draws`` evenly spaced draws) and Viterbi path (median).

    Parameters
    ----------
    model : ProbeLikelihood
        The exact model of the record.
    draws : array (n, ndim)
        Posterior draws in physical units (parameter order of ``model.names``).
    """
    draws = np.atleast_2d(np.asarray(draws, dtype=float))
    pick = np.unique(np.linspace(0, draws.shape[0] - 1, min(max_draws, draws.shape[0]))
                     .round().astype(int))
    first = np.zeros(len(model.record))
    second = np.zeros(len(model.record))
    for i in pick:
        traj = model.trajectory(draws[i], viterbi=False)  # the path: at the median only
        levels = np.arange(traj.marginals.shape[1], dtype=float)
        first += traj.mean
        second += traj.marginals @ (levels * levels)
    first /= pick.size
    second /= pick.size
    median = np.median(draws, axis=0)
    path = model.trajectory(median).path
    rec = model.record
    segment = np.repeat(rec.segment_ids, np.diff(rec.bounds))
    return ProbeTrajectory(np.asarray(rec.time), np.asarray(rec.outcome), segment, first,
                           np.sqrt(np.maximum(second - first * first, 0.0)), path, int(pick.size))


def viterbi_jump_record(source: ProbeTrajectory | ProbeRecord,
                        path: ArrayLike | None = None) -> JumpRecord:
    """Exact jump record of a photon-number path given at the probe times.

    ``source`` is a :class:`ProbeTrajectory` (its Viterbi path is used) or a
    :class:`~cavchar.records.ProbeRecord` together with ``path`` (T,).  Each
    segment starts at its first probe and ends half a (median) probe interval
    after its last one.  A change
    between probes ``t-1`` and ``t`` by ``m`` photons becomes ``m`` single steps
    at ``t_{t-1} + (i / (m + 1)) (t_t - t_{t-1})``, ``i = 1..m`` (one step: the
    middle of the interval).
    """
    if isinstance(source, ProbeTrajectory):
        time, segment = source.time, source.segment
        path = source.path if path is None else path
        origin = "probe record"
    else:
        time = np.asarray(source.time, dtype=float)
        segment = np.repeat(source.segment_ids, np.diff(source.bounds))
        origin = source.source or "probe record"
        if path is None:
            raise ValueError("give the path (one photon number per probe)")
    path = np.asarray(path, dtype=np.int64)
    if path.shape != time.shape:
        raise ValueError("one photon number per probe is needed")
    cuts = np.r_[0, np.flatnonzero(segment[1:] != segment[:-1]) + 1, time.size]
    out_t, out_n, out_s, ends = [], [], [], []
    for a, b in zip(cuts[:-1], cuts[1:], strict=True):
        t, n = time[a:b], path[a:b]
        rows_t, rows_n = [t[0]], [n[0]]
        for c in np.flatnonzero(np.diff(n)) + 1:
            m = int(abs(n[c] - n[c - 1]))
            step = 1 if n[c] > n[c - 1] else -1
            for i in range(1, m + 1):
                rows_t.append(t[c - 1] + (t[c] - t[c - 1]) * i / (m + 1))
                rows_n.append(int(n[c - 1] + step * i))
        out_t.append(np.asarray(rows_t))
        out_n.append(np.asarray(rows_n))
        out_s.append(np.full(len(rows_t), segment[a]))
        half = 0.5 * float(np.median(np.diff(t))) if t.size > 1 else 1e-9 * max(abs(t[0]), 1.0)
        ends.append(t[-1] + half)
    meta = {"reconstructed_from": origin,
            "method": "Viterbi path of the probe-record hidden Markov model"}
    return JumpRecord(np.concatenate(out_t), np.concatenate(out_n), np.asarray(ends),
                      segment=np.concatenate(out_s), metadata=meta)


def write_trajectory(trajectory: ProbeTrajectory, path: str | os.PathLike,
                     force: bool = False) -> Path:
    """Write ``time, outcome, segment, mean_photons, sd_photons, viterbi_photons`` (any table
    format of :func:`cavchar.io.write_table`)."""
    from cavchar.io.writers import write_table

    columns = {"time": trajectory.time, "outcome": trajectory.outcome,
               "segment": trajectory.segment, "mean_photons": trajectory.mean,
               "sd_photons": trajectory.sd, "viterbi_photons": trajectory.path}
    comments = ["cavchar probe-record trajectory; time in s; mean_photons and sd_photons: "
                f"posterior over {trajectory.draws_used} parameter draws; viterbi_photons: "
                "most likely path at the posterior median"]
    return write_table(path, columns, comments=comments, force=force)
