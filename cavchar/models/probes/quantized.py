"""Interval-quantized probe-record likelihood for irregular probe times, with a bias check.

Probes at random (Poisson) times have as many distinct intervals as probes;
the exact grid route (:mod:`cavchar.models.probes.likelihood`) pays for that
with a remainder step per probe.  Here each interval is mapped to one of at
most ``K`` representative intervals and the forward pass runs on the
``indexed`` route: per parameter set a table of ``K`` exactly computed
transition matrices ``P(d_b) = expm(Q d_b)`` and per probe the index ``b`` of
its representative (the cost of a few distinct spacings).

Bins: when the record's intervals take at most ``K`` distinct values (equal up
to a relative 1e-9) each value is its own bin and the route is exact.
Otherwise the bins are geometric between the shortest and the longest interval
(equal ratio ``rho = (max / min)^(1/K)`` of their edges; empty bins dropped),
and each bin's representative is the mean of its intervals, so the total time
of every bin, hence of the record, is kept.  Why geometric: a path that stays
at one photon number contributes ``exp(-Gamma dt)`` per interval, whose log is
linear in ``dt`` (kept exactly by the bin mean); an interval in which the
photon number jumps contributes about ``Gamma' dt``, whose log changes by
``log(d_b / dt)``, at most ``log rho`` whatever the interval's length.

The approximation is measured, not assumed: :func:`cavchar.models.probes.blocks.bias_check`
evaluates the exact likelihood at posterior draws of the quantized one and
bounds the shift of every posterior mean, in posterior sd, by the coefficient
of variation of the importance weights ``exp(log L_exact - log L_quantized)``
(Owen, *Monte Carlo theory, methods and examples*, ch. 9).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike

from cavchar.models.probes.likelihood import (
    STEP_RTOL,
    ProbeLikelihood,
    ProbeSteps,
    probe_intervals,
)

__all__ = ["QuantizedProbeLikelihood", "quantize_intervals", "QUANTIZE_BINS"]

#: representative intervals of the quantized route (doubled when the bias check fails)
QUANTIZE_BINS = 128
#: largest memory (bytes) of the matrix tables of one call: parameter sets beyond it are
#: evaluated in chunks (the table and its temporaries take about 3 K N^2 doubles per set)
TABLE_BYTES = 256 * 2**20


def quantize_intervals(time: ArrayLike, starts: ArrayLike, bins: int,
                       rtol: float = STEP_RTOL) -> tuple[ProbeSteps, dict]:
    """Map each probe interval to one of at most ``bins`` representatives (module docstring).

    Parameters
    ----------
    time : array (T,)
        Probe times in s.
    starts : array (S + 1,)
        Index of the first probe of each segment, then T.
    bins : int
        Largest number K of representative intervals (>= 1).
    rtol : float
        Relative tolerance under which two intervals count as equal.

    Returns
    -------
    steps : ProbeSteps
        Kind ``"indexed"`` (``"regular"`` for a single representative): the
        representatives (s) and each probe's index (0 at segment starts); ``dts``
        are the true intervals.
    info : dict
        ``bins`` (representatives used), ``exact`` (True when every distinct interval
        is its own representative), ``largest_ratio`` (largest ratio of a bin's upper to
        lower edge, 1 when exact), ``largest_relative_change`` (largest
        ``|d_b - dt| / dt`` over the probes).
    """
    if int(bins) < 1:
        raise ValueError("at least one representative interval is needed")
    bins = int(bins)
    dts, inside = probe_intervals(time, starts)
    inner = dts[inside]
    idx = np.zeros(dts.size, np.int32)
    if inner.size == 0:
        return ProbeSteps("regular", np.array([0.0]), idx, dts), {
            "bins": 1, "exact": True, "largest_ratio": 1.0, "largest_relative_change": 0.0}
    uniq = np.unique(inner)
    new = np.ones(uniq.size, bool)
    new[1:] = uniq[1:] > uniq[:-1] * (1.0 + rtol)
    exact = int(new.sum()) <= bins
    if exact:  # each distinct interval (up to rtol) is its own bin
        label = (np.cumsum(new) - 1)[np.searchsorted(uniq, inner)]
        ratio = 1.0
    else:
        positive = inner[inner > 0]
        lo, hi = float(positive.min()), float(inner.max())
        edges = np.geomspace(lo, hi, bins + 1)
        label = np.clip(np.searchsorted(edges, inner, side="right") - 1, 0, bins - 1)
        ratio = float(edges[1] / edges[0])
    used, label = np.unique(label, return_inverse=True)
    count = np.bincount(label)
    reps = np.bincount(label, weights=inner) / count  # bin mean: the bin's total time kept
    idx[inside] = label
    with np.errstate(divide="ignore", invalid="ignore"):
        change = np.abs(reps[label] - inner) / inner
    change = float(np.max(np.where(inner > 0, change, 0.0)))
    kind = "regular" if reps.size == 1 else "indexed"
    return ProbeSteps(kind, reps, idx, dts), {
        "bins": int(used.size), "exact": bool(exact), "largest_ratio": ratio,
        "largest_relative_change": change}


class QuantizedProbeLikelihood:
    """Interval-quantized log-likelihood ``(k, ndim) -> (k,)`` (module docstring).

    Parameters
    ----------
    exact : ProbeLikelihood
        The exact model of the same record (also used by the bias check).
    bins : int
        Largest number K of representative intervals.
    """

    def __init__(self, exact: ProbeLikelihood, bins: int = QUANTIZE_BINS) -> None:
        self.exact = exact
        self.bins = int(bins)
        self.names = exact.names
        self.steps, self.info = quantize_intervals(exact.record.time, exact.record.bounds,
                                                   self.bins)

    @property
    def ndim(self) -> int:
        """Number of parameters: those of the exact model (lifetime, n_thermal, free response)."""
        return self.exact.ndim

    def describe(self) -> dict:
        """What the bias check and the result record about the approximation."""
        return {"route": "quantized intervals", "bins_allowed": self.bins,
                "bins_used": self.info["bins"], "quantization_exact": self.info["exact"],
                "largest_bin_ratio": self.info["largest_ratio"],
                "largest_relative_change": self.info["largest_relative_change"]}

    def __call__(self, theta: ArrayLike) -> np.ndarray:
        """Quantized log-likelihood of each row of ``theta`` (k, ndim); -inf outside the
        support."""
        return self.exact.evaluate(theta, self._forward)

    def _forward(self, levels, kappa, n_th, free) -> np.ndarray:
        from cavchar.models.probes import hmm_kernels as hk

        ex = self.exact
        n = int(levels.max())
        per_set = 3 * 8 * self.steps.steps.size * n * n
        chunk = max(1, TABLE_BYTES // per_set)
        out = np.empty(kappa.size)
        for i in range(0, kappa.size, chunk):
            sl = slice(i, i + chunk)
            tr = ex._transitions(kappa[sl], n_th[sl], levels[sl], self.steps)
            f = None if free is None else free[sl]
            # the chunk's own truncation: its transitions have as many levels as it needs
            emis = hk.emission_table(ex.prob_one(f, tr.n_levels, tr.n_sets))
            out[sl] = hk.forward_loglik(tr, ex.initial_law(n_th[sl], levels[sl]), emis,
                                        ex.sequence)
        return out


def bins_text(info: dict) -> str:
    """Short description of the quantization, e.g. for a benchmark line."""
    if info.get("quantization_exact", info.get("exact")):
        return f"{info.get('bins_used', info.get('bins'))} intervals, exact"
    ratio = info.get("largest_bin_ratio", info.get("largest_ratio"))
    return (f"{info.get('bins_used', info.get('bins'))} bins, edge ratio {ratio:.3f} "
            f"(log {math.log(ratio):.3f})")
