"""The interface every likelihood model of cavchar follows.

A model holds its data (read-only) and answers three things:

* ``specs``: one :class:`~cavchar.parameters.ParameterSpec` per sampled parameter,
  in the order of the columns of ``theta`` (physical units; priors included);
* ``log_likelihood(theta)``: pure and batched, ``theta`` of shape ``(k, ndim)`` in
  physical units to ``(k,)`` log-likelihoods, ``-inf`` outside the support, never NaN;
  the same ``theta`` always gives the same answer (no state changes inside a call);
* ``initial_guess()``: a starting point, shape ``(ndim,)``, that needs no user input.

The samplers (:mod:`cavchar.inference`) need only ``log_likelihood`` and the specs;
the fit layer (:mod:`cavchar.fits`) builds a model from a record and the user's priors.
Models: :class:`cavchar.models.jumps.ExactJumpModel`,
:class:`cavchar.models.jumps.SampledJumpModel`, the ring-down models of
:mod:`cavchar.models.ringdown` and the probe-record likelihood of
:mod:`cavchar.models.probes.likelihood`.
"""

from __future__ import annotations

from typing import Protocol, runtime_checkable

import numpy as np

from cavchar.parameters import ParameterSpec

__all__ = ["LikelihoodModel"]


@runtime_checkable
class LikelihoodModel(Protocol):
    """A pure, batched likelihood with its parameter specifications (module docstring)."""

    specs: tuple[ParameterSpec, ...]

    def log_likelihood(self, theta: np.ndarray) -> np.ndarray:
        """``(k, ndim)`` parameter sets (physical units) -> ``(k,)`` log-likelihoods."""
        ...

    def initial_guess(self) -> np.ndarray:
        """A starting point of shape ``(ndim,)`` in physical units."""
        ...
