"""Raw probe records: 0/1 outcomes drawn from a response on a hidden photon-number path.

* :func:`simulate_probe_record` — the hidden path is simulated as in
  :func:`cavchar.simulate.jumps.simulate_sampled_record`;
* :func:`probes_on_path` — the same on a given path (an exact jump record).

Outcome ``k`` is 1 with probability ``P(1 | n_k, setting_k)`` (the Ramsey-fringe
and table models of :mod:`cavchar.models.probes.response`, or any callable); each probe
may be lost (outcome NaN).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from numpy.typing import ArrayLike

from cavchar.errors import InputError
from cavchar.records import JumpRecord, ProbeRecord, SampledRecord
from cavchar.simulate._common import Seed, check_physics, rng_from, truth_metadata
from cavchar.simulate.jumps import photons_at, sample_path

__all__ = ["simulate_probe_record", "probes_on_path"]


def _response_probabilities(response, photons: np.ndarray, setting: np.ndarray) -> np.ndarray:
    """P(1) per probe from a response model (``prob_one``) or a plain callable."""
    if hasattr(response, "prob_one"):
        unique, index = np.unique(setting, return_inverse=True)
        table, valid = response.prob_one(None, int(photons.max()) + 1, unique)
        if not bool(np.asarray(valid).reshape(-1)[0]):
            raise InputError("the probe response parameters are outside their physical range")
        return np.asarray(table)[0][index.reshape(-1), photons]
    return np.asarray(response(photons, setting), dtype=float)


def simulate_probe_record(
    lifetime: float,
    n_th: float,
    times: ArrayLike,
    response: object,
    *,
    settings: ArrayLike | None = None,
    segment: ArrayLike | None = None,
    loss: float = 0.0,
    initial: int | None = None,
    seed: Seed = None,
    metadata: Mapping[str, object] | None = None,
) -> tuple[ProbeRecord, SampledRecord]:
    """Raw probe outcomes from a hidden photon-number path.

    The hidden path is that of :func:`simulate_sampled_record`; outcome ``k``
    is 1 with probability ``response(n_k, setting_k)``; each probe is lost
    (outcome NaN) with probability ``loss``.

    Parameters
    ----------
    times : array (m,)
        Probe times in s.
    response : response model or callable
        A :class:`cavchar.models.probes.response.FringeResponse` or
        :class:`~cavchar.models.probes.response.TableResponse` with fixed parameters
        (anything with their ``prob_one(None, n_levels, settings)``), or a
        callable ``response(photons (m,), settings (m,)) -> P(1) (m,)``.
    settings : float or array, optional
        Probe phase settings in rad: one value, one per probe, or a shorter
        sequence repeated cyclically (interleaved settings).  None: no setting
        column (setting 0 is passed to the response).
    loss : float
        Probability that a probe is lost.

    Returns
    -------
    (ProbeRecord, SampledRecord)
        The probe record and the hidden photon number at each probe (the truth).
    """
    check_physics(lifetime, n_th)
    times = np.asarray(times, dtype=float)
    rng = rng_from(seed)
    segment, photons = sample_path(1.0 / lifetime, n_th, times, segment, initial, rng)
    return _probe_outcomes(times, photons, segment, response, settings, loss, rng,
                           truth_metadata(lifetime, n_th, seed, metadata))


def probes_on_path(
    path: JumpRecord,
    times: ArrayLike,
    response: object,
    *,
    settings: ArrayLike | None = None,
    segment: ArrayLike | None = None,
    loss: float = 0.0,
    seed: Seed = None,
    metadata: Mapping[str, object] | None = None,
) -> tuple[ProbeRecord, SampledRecord]:
    """Probe outcomes on a given photon-number path (an exact jump record, e.g. from
    another simulator); arguments as for :func:`simulate_probe_record`."""
    times = np.asarray(times, dtype=float)
    photons = photons_at(path, times, segment)
    segment = np.full(times.size, path.segment_ids[0]) if segment is None else segment
    meta = {**dict(path.metadata), **{str(k): str(v) for k, v in (metadata or {}).items()}}
    if path.source:
        meta["hidden_path"] = path.source
    return _probe_outcomes(times, photons, np.asarray(segment), response, settings, loss,
                           rng_from(seed), meta)


def _probe_outcomes(times, photons, segment, response, settings, loss, rng, meta):
    if not 0 <= loss < 1:
        raise InputError(f"the probe loss must lie in [0, 1), not {loss}")
    setting = None if settings is None else np.resize(np.asarray(settings, float), times.size)
    p_one = _response_probabilities(response, photons,
                                    np.zeros(times.size) if setting is None else setting)
    if p_one.shape != times.shape or np.any(~np.isfinite(p_one)) or np.any(
            (p_one < 0) | (p_one > 1)):
        raise InputError("the probe response must give one probability in [0, 1] per probe")
    outcome = (rng.random(times.size) < p_one).astype(float)
    if loss > 0:
        outcome[rng.random(times.size) < loss] = np.nan
    describe = getattr(response, "describe", None)
    if callable(describe) and describe().get("kind") == "fringe":
        meta.update({f"true_{k}": repr(v) for k, v in describe().items()
                     if k not in ("kind", "roles")})
    truth = SampledRecord(times, photons, segment=segment, metadata=meta)
    return ProbeRecord(times, outcome, setting=setting, segment=segment, metadata=meta), truth
