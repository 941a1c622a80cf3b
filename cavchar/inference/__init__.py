"""Posterior sampling shared by every fit kind: emcee driver, convergence loop, diagnostics.

Public API::

    from cavchar.inference import sample_posterior, SamplerSettings, PosteriorRun
"""

from __future__ import annotations

from cavchar.inference.sampler import LogLikelihood, PosteriorRun, SamplerSettings, sample_posterior

__all__ = ["sample_posterior", "SamplerSettings", "PosteriorRun", "LogLikelihood"]
