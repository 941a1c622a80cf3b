"""Likelihood models of photon-number jump records: exact change points (sufficient
statistics) and samples at probe times (transition matrices), and the dwell-time
posterior predictive check of exact records.

* :mod:`cavchar.models.jumps.likelihood` — statistics, log-likelihoods, model objects;
* :mod:`cavchar.models.jumps.dwell_check` — dwell times per photon number against
  the fitted exponential laws.
"""

from cavchar.models.jumps import likelihood as _likelihood
from cavchar.models.jumps.likelihood import *  # noqa: F403 (the names of its __all__)

__all__ = list(_likelihood.__all__)
