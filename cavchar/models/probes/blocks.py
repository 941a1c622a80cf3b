"""Coarse-grained probe-record likelihood for long records, with a measured bias bound.

Blocks: consecutive probes of a segment are grouped ``B`` at a time.  The
coarse model holds the photon number constant inside a block and lets it move
only between block starts, with the exact transition matrix over the time
between the starts (so it is an exact hidden Markov model of the chain read at
the block starts).  A block's emission is the product of its probes':

    log e_b(n) = sum_c  count_b(c) log P(c | n)

with ``count_b(c)`` the number of probes of outcome/setting code ``c`` in the
block.  Blocks with equal counts share one emission, so per parameter set the
cost is one forward step per block plus one exponential per distinct count
pattern and photon number; the whole record costs about ``1/B`` of the exact
pass.

The approximation errs only for blocks in which the photon number changes.
Its effect on the posterior is measured, not assumed (:func:`bias_check`):
the exact log-likelihood is evaluated on a subset of the coarse posterior
draws, ``Delta = log L_exact - log L_coarse``, and the importance weights
``w = exp(Delta)`` turn coarse-posterior averages into exact-posterior ones.
For any parameter ``theta`` the shift of the posterior mean obeys
(Cauchy-Schwarz)

    |E_exact[theta] - E_coarse[theta]| / sd_coarse(theta) = |Cov(theta, w)| / (E[w] sd(theta))
                                                           <= sd(w) / E[w],

so the coefficient of variation of the weights bounds the bias of every
posterior mean in units of its posterior sd; it is reported with the
realised shifts and the weights' effective sample size (importance sampling
as in Owen, *Monte Carlo theory, methods and examples*, ch. 9).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from cavchar.models.probes import hmm_kernels as hk
from cavchar.models.probes.likelihood import ProbeLikelihood, probe_steps

__all__ = ["BlockedProbeLikelihood", "bias_check", "block_size", "BIAS_LIMIT_SD"]

#: largest accepted bias bound (posterior sd units) before a warning
BIAS_LIMIT_SD = 0.2
#: log of the floor put under impossible outcomes inside a block (exp(-690) ~ 1e-300)
_LOG_FLOOR = math.log(1e-300)


def block_size(dwell_s: float, probe_interval_s: float, fraction: float = 0.01) -> int:
    """Probes per block so that a block lasts ``fraction`` of the dwell time ``dwell_s``."""
    if not (dwell_s > 0 and probe_interval_s > 0):
        return 1
    return max(1, int(fraction * dwell_s / probe_interval_s))


class BlockedProbeLikelihood:
    """Coarse-grained log-likelihood ``(k, ndim) -> (k,)`` (see the module docstring).

    Parameters
    ----------
    exact : ProbeLikelihood
        The exact model of the same record (also used by :func:`bias_check`).
    block_probes : int
        Probes per block B (>= 1; B = 1 reproduces the exact likelihood).
    """

    def __init__(self, exact: ProbeLikelihood, block_probes: int) -> None:
        if int(block_probes) < 1:
            raise ValueError("a block holds at least one probe")
        self.exact = exact
        self.block_probes = int(block_probes)
        self.names = exact.names
        seq = exact.sequence
        codes = seq.codes.astype(np.int64)
        starts = seq.starts
        seg_len = np.diff(starts)
        per_seg = -(-seg_len // self.block_probes)  # blocks per segment (ceil)
        block_starts_seg = np.concatenate(([0], np.cumsum(per_seg)))
        # block id of every probe
        seg_of = np.repeat(np.arange(seg_len.size), seg_len)
        within = np.arange(codes.size) - starts[seg_of]
        block_id = block_starts_seg[seg_of] + within // self.block_probes
        n_blocks = int(block_starts_seg[-1])
        first_probe = starts[:-1][np.repeat(np.arange(seg_len.size), per_seg)] + \
            self.block_probes * (np.arange(n_blocks) - np.repeat(block_starts_seg[:-1], per_seg))
        seen = (codes % 3) != hk.LOST  # lost probes carry no emission
        n_codes = seq.n_codes
        counts = np.bincount(block_id[seen] * n_codes + codes[seen],
                             minlength=n_blocks * n_codes).reshape(n_blocks, n_codes)
        keep = np.flatnonzero(np.arange(n_codes) % 3 != hk.LOST)
        patterns, pattern_of_block = np.unique(counts[:, keep], axis=0, return_inverse=True)
        self._keep = keep
        self.patterns = patterns.astype(float)  # (U, C_seen)
        self.sequence = hk.ProbeSequence.from_codes(pattern_of_block.reshape(-1),
                                                    patterns.shape[0], block_starts_seg)
        times = np.asarray(exact.record.time)
        self.block_times = times[first_probe]
        last_probe = np.minimum(first_probe + self.block_probes,
                                np.repeat(starts[1:], per_seg)) - 1
        self.block_span = float(np.max(times[last_probe] - times[first_probe]))
        self.steps = probe_steps(self.block_times, block_starts_seg)
        self._fixed: dict[int, tuple] = {}

    @property
    def n_blocks(self) -> int:
        """Number of blocks of ``block_probes`` probes (a segment's last may be shorter)."""
        return self.sequence.n_probes

    @property
    def ndim(self) -> int:
        """Number of parameters: those of the exact model (lifetime, n_thermal, free response)."""
        return self.exact.ndim

    def describe(self) -> dict:
        """What the bias check records about the approximation: block size (probes), number
        of blocks and the longest block (s)."""
        return {"block_probes": self.block_probes, "n_blocks": self.n_blocks,
                "block_span_s": self.block_span}

    def _pattern_emission(self, p1: np.ndarray):
        """Scaled block emissions (k, U, N) and their log scales (k, U)."""
        table = hk.emission_table(p1)[:, self._keep, :]  # (k, C_seen, N)
        with np.errstate(divide="ignore"):
            log_e = np.maximum(np.log(table), _LOG_FLOOR)
        le = np.einsum("uc,kcn->kun", self.patterns, log_e)
        top = le.max(axis=2)
        return np.exp(le - top[:, :, None]), top

    def __call__(self, theta: ArrayLike) -> np.ndarray:
        """Coarse log-likelihood of each row of ``theta`` (k, ndim); -inf outside the support."""
        return self.exact.evaluate(theta, self._forward)

    def _forward(self, levels, kappa, n_th, free) -> np.ndarray:
        ex = self.exact
        n_levels = int(levels.max())
        if free is None:
            if n_levels not in self._fixed:
                self._fixed[n_levels] = self._pattern_emission(ex.prob_one(None, n_levels, 1))
            emis, offs = self._fixed[n_levels]
        else:
            emis, offs = self._pattern_emission(ex.prob_one(free, n_levels, kappa.size))
        tr = ex._transitions(kappa, n_th, levels, self.steps, ex.irregular)
        return hk.forward_loglik(tr, ex.initial_law(n_th, levels), emis, self.sequence, offs)


def bias_check(coarse, draws: np.ndarray, *, max_draws: int = 256, batch: int = 32,
               limit_sd: float = BIAS_LIMIT_SD) -> dict[str, Any]:
    """Importance-weight check of an approximate posterior against the exact likelihood.

    Parameters
    ----------
    coarse : BlockedProbeLikelihood or QuantizedProbeLikelihood
        The approximate likelihood; its ``exact`` attribute is the exact one, and its
        ``describe()`` says what the approximation was (added to the returned dict).
    draws : array (n, ndim)
        Draws from the approximate posterior (physical units).
    max_draws : int
        Draws checked (evenly spaced through ``draws``); each costs one exact pass.
    batch : int
        Parameter sets per likelihood call.
    limit_sd : float
        Bound accepted by the caller (posterior sd), recorded as ``limit_sd``.

    Returns
    -------
    dict
        ``n_checked``; ``loglik_difference`` (mean, sd, min, max of
        ``log L_exact - log L_approximate``); ``bias_bound_sd`` (coefficient of
        variation of the weights: bound on every posterior-mean shift in sd);
        ``shift_sd`` per parameter (importance-weighted minus plain mean, in sd);
        ``weight_ess``; ``corrected_mean`` per parameter; ``limit_sd``; and the entries
        of ``coarse.describe()``.
    """
    draws = np.asarray(draws, dtype=float)
    pick = np.unique(np.linspace(0, draws.shape[0] - 1, min(max_draws, draws.shape[0]))
                     .round().astype(int))
    sub = draws[pick]
    ll_c = np.concatenate([coarse(sub[i:i + batch]) for i in range(0, sub.shape[0], batch)])
    ll_e = np.concatenate([coarse.exact(sub[i:i + batch])
                           for i in range(0, sub.shape[0], batch)])
    good = np.isfinite(ll_c) & np.isfinite(ll_e)
    delta = ll_e[good] - ll_c[good]
    sub = sub[good]
    w = np.exp(delta - delta.max())
    w /= w.sum()
    n = w.size
    cv = math.sqrt(max(n * float(np.sum(w * w)) - 1.0, 0.0))
    mean = sub.mean(axis=0)
    sd = sub.std(axis=0, ddof=1) if n > 1 else np.full(sub.shape[1], np.nan)
    wmean = w @ sub
    with np.errstate(divide="ignore", invalid="ignore"):
        shift = (wmean - mean) / sd
    names = list(coarse.names)
    return {
        "n_checked": int(n),
        **coarse.describe(),
        "loglik_difference": {"mean": float(delta.mean()), "sd": float(delta.std()),
                              "min": float(delta.min()), "max": float(delta.max())},
        "bias_bound_sd": cv,
        "shift_sd": {k: float(v) for k, v in zip(names, shift, strict=True)},
        "weight_ess": float(1.0 / np.sum(w * w)),
        "corrected_mean": {k: float(v) for k, v in zip(names, wmean, strict=True)},
        "limit_sd": float(limit_sd),
        "method": "importance weights exp(log L_exact - log L_approximate) on posterior "
                  "draws of the approximate likelihood; |mean shift| / sd <= sd(w) / mean(w) "
                  "(Cauchy-Schwarz)",
    }
