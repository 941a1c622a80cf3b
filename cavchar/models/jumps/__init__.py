"""Likelihood models of photon-number jump records: exact change points (sufficient
statistics) and samples at probe times (transition matrices), and the dwell-time
posterior predictive check of exact records.

* :mod:`cavchar.models.jumps.likelihood` — statistics, log-likelihoods, model objects;
* :mod:`cavchar.models.jumps.dwell_check` — dwell times per photon number against
  the fitted exponential laws.
"""

from cavchar.models.jumps.likelihood import (
    ExactJumpModel,
    JumpStatistics,
    SampledJumpModel,
    SampledTransitions,
    dwell_times,
    exact_fisher_information,
    exact_log_likelihood,
    exact_log_likelihood_rates,
    jump_statistics,
    sampled_log_likelihood,
    sampled_transitions,
)

__all__ = [
    "JumpStatistics",
    "jump_statistics",
    "exact_log_likelihood",
    "exact_log_likelihood_rates",
    "SampledTransitions",
    "sampled_transitions",
    "sampled_log_likelihood",
    "dwell_times",
    "exact_fisher_information",
    "ExactJumpModel",
    "SampledJumpModel",
]
