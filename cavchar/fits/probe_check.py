"""Posterior predictive check of a probe record: does the record look like the fitted model?

Replicated records are simulated from posterior draws with the project's own
simulator (:func:`cavchar.simulate.probes.simulate_probe_record`: a Gillespie
path of the damped mode and the probe response of that draw), at the record's
own probe times, settings and segments, with the record's lost probes lost.
Each of a few summary statistics ``T`` of the outcomes is computed on the
record and on every replicate; the posterior predictive p-value of ``T`` is the
share of replicates at least as extreme (Gelman, Meng & Stern, Statistica
Sinica 6, 733 (1996); Gelman et al., *Bayesian Data Analysis*, 3rd ed. 2013,
ch. 6).

Statistics (outcomes ``y`` in {0, 1}; lost probes skipped; pairs never span two
segments):

* ``fraction_of_ones[s]``: share of ones at each probe setting ``s``;
* ``block_spread``: standard deviation, over 10 blocks of consecutive probes, of
  the block mean of ``y`` minus its setting's mean (drifts of the response or of
  the mode over the record);
* ``switch_fraction``: share of consecutive kept probes whose outcomes differ
  (the number of runs of equal outcomes, Wald & Wolfowitz, Ann. Math. Stat. 11,
  147 (1940));
* ``single_probe_runs``: share of runs of equal outcomes that are one probe long
  (isolated readout flips show here);
* ``autocorrelation_lag_L``: autocorrelation of the setting-centred outcomes at
  lags ``L`` = 1, 2, 5, 10, 20, 50, 100, 200 probes (those below 1/20 of the record).

A statistic is flagged when its two-sided normal tail
``2 Phi(-|T_obs - mean| / sd)`` over the replicates is below ``alpha / K``
(Bonferroni over the ``K`` statistics, family-wise ``alpha`` = 0.01) *and* no
replicate is as extreme as the record (the empirical p-value sits at its
resolution ``2 / (R + 1)``).  The normal tail extends the resolution of ``R``
replicates; every statistic is an average over many probes.  Posterior
predictive p-values are conservative (Meng, Ann. Stat. 22, 1142 (1994)): under
the model the false-alarm rate is at most ``alpha`` and in practice lower.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from cavchar.errors import InputError, ModelMisfitWarning

__all__ = ["probe_record_statistics", "probe_predictive_check", "FAMILY_ALPHA", "REPLICATES"]

#: family-wise false-alarm rate of the check (Bonferroni over the statistics)
FAMILY_ALPHA = 0.01
#: replicated records (fewer for long records, at least MIN_REPLICATES)
REPLICATES = 200
MIN_REPLICATES = 50
#: probes simulated at most over all replicates (sets R for long records)
SIMULATED_PROBES = 40_000_000
#: outcomes held in memory at once (replicates are summarized in chunks of this many)
CHUNK_PROBES = 4_000_000
#: blocks of the block-spread statistic; lags (probes) of the autocorrelations
BLOCKS = 10
LAGS = (1, 2, 5, 10, 20, 50, 100, 200)


class _Layout:
    """Where the kept probes are: pairs within segments, settings, blocks, lag pairs."""

    def __init__(self, lost: np.ndarray, bounds: np.ndarray, setting_index: np.ndarray):
        m = lost.size
        keep = ~lost
        seg = np.zeros(m, np.int64)
        seg[bounds[1:-1]] = 1
        seg = np.cumsum(seg)
        self.keep = np.flatnonzero(keep)
        if self.keep.size < 2 * BLOCKS:
            raise InputError(f"only {self.keep.size} probes were not lost; the model check "
                             f"needs at least {2 * BLOCKS}")
        kseg = seg[self.keep]
        self.same = kseg[1:] == kseg[:-1]  # consecutive kept probes in one segment
        self.setting = setting_index[self.keep]
        self.n_settings = int(setting_index.max()) + 1
        self.block = np.minimum(np.arange(self.keep.size) * BLOCKS // self.keep.size,
                                BLOCKS - 1)
        self.block_starts = np.searchsorted(self.block, np.arange(BLOCKS))
        self.block_counts = np.bincount(self.block, minlength=BLOCKS)
        self.lags = [lag for lag in LAGS if lag < m / 20]
        self.m = m
        # pair (i, i + lag) of probe indices counts when both are kept and in one segment
        self.lag_weights = []
        for lag in self.lags:
            ok = keep[:-lag] & keep[lag:] & (seg[:-lag] == seg[lag:])
            self.lag_weights.append(ok.astype(float))

    def names(self) -> list[str]:
        out = [f"fraction_of_ones[{s}]" for s in range(self.n_settings)]
        out += ["block_spread", "switch_fraction", "single_probe_runs"]
        out += [f"autocorrelation_lag_{lag}" for lag in self.lags]
        return out


def _statistics(y: np.ndarray, lay: _Layout) -> np.ndarray:
    """Statistics (R, K) of kept outcomes ``y`` (R, n) (order of ``_Layout.names``)."""
    r = y.shape[0]
    cols = []
    centred = np.empty_like(y)
    for s in range(lay.n_settings):
        mask = lay.setting == s
        mean = y[:, mask].mean(axis=1) if mask.any() else np.full(r, np.nan)
        cols.append(mean)
        centred[:, mask] = y[:, mask] - mean[:, None]
    block_means = np.add.reduceat(centred, lay.block_starts, axis=1) / lay.block_counts
    cols.append(block_means.std(axis=1))
    differ = y[:, 1:] != y[:, :-1]
    pairs = max(int(lay.same.sum()), 1)
    cols.append((differ & lay.same).sum(axis=1) / pairs)
    # a run starts where the outcome changes or a segment starts; a run is one probe long
    # when it starts at k and the next run starts at k + 1 (or the sequence ends)
    start = np.ones_like(y, dtype=bool)
    start[:, 1:] = differ | ~lay.same
    nxt = np.ones_like(start)
    nxt[:, :-1] = start[:, 1:]
    cols.append((start & nxt).sum(axis=1) / start.sum(axis=1))
    var = (centred * centred).mean(axis=1)
    full = np.zeros((r, lay.m))  # centred outcomes at every probe, 0 where lost
    full[:, lay.keep] = centred
    for weight in lay.lag_weights:
        lag = lay.m - weight.size
        pairs = weight.sum()
        if pairs > 0:
            cov = (full[:, :-lag] * full[:, lag:]) @ weight / pairs
            cols.append(np.where(var > 0, cov / np.where(var > 0, var, 1.0), 0.0))
        else:
            cols.append(np.full(r, np.nan))
    return np.column_stack(cols)


def probe_record_statistics(record) -> dict[str, float]:
    """The check's statistics of one probe record (plain dict, names as in the check)."""
    from cavchar.models.probes.likelihood import group_settings

    _, index = group_settings(record.setting, len(record))
    lay = _Layout(np.isnan(record.outcome), np.asarray(record.bounds), index)
    values = _statistics(np.asarray(record.outcome)[lay.keep][None], lay)[0]
    return dict(zip(lay.names(), values.tolist(), strict=True))


def _table_model(table):
    """A calibrated table as a callable ``(photons, settings) -> P(1)``; a replicated path
    that climbs above the table's last row (rare: the fit's truncation rule keeps the
    record's expected visits there below 0.01) uses that row."""
    columns = {}

    def p_one(photons: np.ndarray, settings: np.ndarray) -> np.ndarray:
        uniq, index = np.unique(settings, return_inverse=True)
        key = tuple(uniq.tolist())
        if key not in columns:
            columns[key] = table.prob_one(None, table.max_photons + 1, uniq)[0][0]  # (S, N)
        return columns[key][index.reshape(-1), np.minimum(photons, table.max_photons)]

    return p_one


def _replicate_count(m: int, replicates: int | None) -> int:
    if replicates is not None:
        return int(replicates)
    return int(min(REPLICATES, max(MIN_REPLICATES, SIMULATED_PROBES // max(m, 1))))


def probe_predictive_check(
    record,
    response,
    draws: np.ndarray,
    rng: np.random.Generator,
    *,
    initial: str | int = "stationary",
    replicates: int | None = None,
    alpha: float = FAMILY_ALPHA,
) -> dict:
    """Posterior predictive check of a probe record (module docstring).

    Parameters
    ----------
    record : ProbeRecord
        The fitted record.
    response : FringeResponse or TableResponse
        The response of the fit (its fitted parameters are columns 2.. of ``draws``).
    draws : array (s, 2 + n_free)
        Posterior draws ``(T_c [s], n_th, fitted response parameters...)``.
    rng : numpy.random.Generator
        Source of the draws used and of the replicated records (seeded by the caller).
    initial
        ``"stationary"`` or the Fock state each segment starts in (as in the fit).
    replicates
        Number R of replicated records (default 200, fewer for records above 200,000
        probes, at least 50).
    alpha
        Family-wise false-alarm rate (Bonferroni over the statistics).

    Returns
    -------
    dict
        Plain JSON: ``method``, ``statistics`` (per statistic: observed value,
        replicate mean and sd, ``z``, ``p_value`` (two-sided, empirical),
        ``normal_tail_p_value``, ``flagged``), ``settings`` (rad),
        ``replicates``, ``p_value_resolution``, ``threshold`` (per statistic),
        ``family_alpha``, ``smallest_p_value`` (of the normal tails), ``misfit``,
        ``flags`` (sentences).  A misfit also raises a
        :class:`~cavchar.errors.ModelMisfitWarning`.
    """
    from cavchar.models.probes.likelihood import group_settings
    from cavchar.simulate.probes import simulate_probe_record

    m = len(record)
    values, index = group_settings(record.setting, m)
    lost = np.isnan(np.asarray(record.outcome))
    lay = _Layout(lost, np.asarray(record.bounds), index)
    names = lay.names()
    observed = _statistics(np.asarray(record.outcome)[lay.keep][None], lay)[0]
    count = _replicate_count(m, replicates)
    draws = np.asarray(draws, dtype=float)
    pick = rng.choice(draws.shape[0], size=count, replace=draws.shape[0] < count)
    free = getattr(response, "free_names", ())
    start = None if isinstance(initial, str) else int(initial)
    times = np.asarray(record.time)
    chunk = max(1, min(count, CHUNK_PROBES // max(lay.keep.size, 1)))
    replicated = []
    for lo in range(0, count, chunk):
        reps = np.empty((min(chunk, count - lo), lay.keep.size))
        for j, i in enumerate(pick[lo:lo + chunk]):
            theta = draws[i]
            model = (response.with_values(dict(zip(free, theta[2:], strict=True)))
                     if hasattr(response, "with_values") else _table_model(response))
            rep, _ = simulate_probe_record(float(theta[0]), float(theta[1]), times, model,
                                           settings=record.setting, segment=record.segment,
                                           initial=start, seed=rng)
            reps[j] = rep.outcome[lay.keep]
        replicated.append(_statistics(reps, lay))
    replicated = np.concatenate(replicated)
    threshold = alpha / len(names)
    resolution = 2.0 / (count + 1)
    rows, flags, tails = [], [], []
    for k, name in enumerate(names):
        t_obs, t_rep = float(observed[k]), replicated[:, k]
        t_rep = t_rep[np.isfinite(t_rep)]
        if not math.isfinite(t_obs) or t_rep.size < 2:
            continue
        mean, sd = float(t_rep.mean()), float(t_rep.std(ddof=1))
        p_hi = (1 + int(np.sum(t_rep >= t_obs))) / (t_rep.size + 1)
        p_lo = (1 + int(np.sum(t_rep <= t_obs))) / (t_rep.size + 1)
        p_emp = min(1.0, 2.0 * min(p_hi, p_lo))
        if sd > 0:
            z = (t_obs - mean) / sd
            tail = math.erfc(abs(z) / math.sqrt(2.0))
        else:
            z, tail = (0.0, 1.0) if t_obs == mean else (math.copysign(math.inf, t_obs - mean),
                                                        0.0)
        flagged = bool(tail < threshold and p_emp <= 2.0 / (t_rep.size + 1))
        tails.append(tail)
        rows.append({"statistic": name, "observed": t_obs, "replicate_mean": mean,
                     "replicate_sd": sd, "z": z if math.isfinite(z) else None,
                     "p_value": p_emp, "normal_tail_p_value": tail, "flagged": flagged})
        if flagged:
            flags.append(f"{name} is {t_obs:.4g} against {mean:.4g} +- {sd:.2g} in records "
                         f"replicated from the fit (z = {z:+.1f})")
    misfit = bool(flags)
    out = {
        "method": "posterior predictive check: records replicated from posterior draws with "
                  "the fitted response (same probe times, settings, segments and lost "
                  "probes); two-sided p-values, flagged when the normal tail is below "
                  f"{alpha:g}/{len(names)} (Bonferroni) and no replicate is as extreme",
        "statistics": rows,
        "settings_rad": [float(v) for v in values],
        "replicates": int(count),
        "p_value_resolution": resolution,
        "threshold": threshold,
        "family_alpha": alpha,
        "smallest_p_value": min(tails) if tails else None,
        "misfit": misfit,
        "flags": flags,
    }
    if misfit:
        warnings.warn("posterior predictive check of the probe outcomes: " + "; ".join(flags)
                      + ". The record does not look like the fitted model: check the probe "
                      "response (visibility, readout errors, phases) and the record",
                      ModelMisfitWarning, stacklevel=3)
    return out
