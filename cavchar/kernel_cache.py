"""Fill the on-disk cache of compiled kernels once, so that no user waits for a compile.

cavchar's sequential recursions (the hidden-Markov forward pass of probe records, the
compressed exponential sums of ring-downs, the least-squares start) are numba
functions with ``cache=True``: the first call of each signature compiles it and
writes the machine code beside the module (``__pycache__``) or into
``$NUMBA_CACHE_DIR``; every later process loads it in milliseconds.  A fresh install
therefore pays the compile once, in the first fit of each kind.

:func:`prepare_kernels` pays it up front: it fits a tiny simulated record of each kind
(exact and sampled jump records, probe records on a regular clock and at random
times, ring-downs of every signal), which calls every kernel with the argument types
the fits use.  The records are invented and small; the fits are not shown.  Run it
after installing (``cavchar prepare-kernels``), or in a batch worker's start-up.
"""

from __future__ import annotations

import time
import warnings
from collections.abc import Callable, Sequence

import numpy as np

__all__ = ["KINDS", "prepare_kernels"]

#: what :func:`prepare_kernels` can prepare, in its order
KINDS = ("jumps", "sampled", "probes", "probes-irregular", "ringdown")


def _quick():
    from cavchar.inference import SamplerSettings

    return SamplerSettings(seed=1, quiet=True, max_steps=200, allow_unconverged=True)


def _jumps() -> None:
    from cavchar.fits.jumps import fit_jumps
    from cavchar.simulate import simulate_jump_record

    fit_jumps(simulate_jump_record(5e-3, 0.1, 1.0, seed=1), settings=_quick())


def _sampled() -> None:
    from cavchar.fits.jumps import fit_jumps
    from cavchar.simulate import simulate_sampled_record

    fit_jumps(simulate_sampled_record(5e-3, 0.1, np.arange(2000) * 1e-3, seed=2),
              settings=_quick())


def _probes(times: np.ndarray, seed: int) -> None:
    from cavchar.fits.probes import fit_probes
    from cavchar.models.probes.response import FringeResponse
    from cavchar.simulate import simulate_probe_record

    response = FringeResponse(visibility=0.9, phase_per_photon=np.pi, readout_error_0=0.02,
                              readout_error_1=0.04)
    record, _path = simulate_probe_record(5e-3, 0.1, times, response, seed=seed)
    fit_probes(record, response=response, settings=_quick())


def _probes_regular() -> None:
    _probes(np.arange(4000) * 1e-4, 3)
    _regular_levels()


def _regular_levels() -> None:
    """The regular-clock forward kernels for every level count that has its own
    unrolled kernels (N = 2 .. ``MAX_UNROLLED_LEVELS``), for one parameter set and
    for several: a fit picks N from its data (even counts from the truncation rule, odd
    ones where a ceiling of the pilot or of the sampler caps it), so one small fit alone
    leaves some of them to compile later."""
    from cavchar.models.probes import hmm_kernels as hk
    from cavchar.models.probes._unrolled import MAX_UNROLLED_LEVELS

    sequence = hk.ProbeSequence.from_outcomes(np.array([0.0, 1.0, 0.0, 1.0, 1.0, 0.0]))
    for n in range(2, MAX_UNROLLED_LEVELS + 1):
        matrix = np.full((n, n), 1.0 / n)
        emission = hk.emission_table(np.linspace(0.1, 0.9, n)[None])
        for sets in (1, 2):
            hk.forward_loglik(hk.Transitions.regular(np.repeat(matrix[None], sets, axis=0)),
                              np.full(n, 1.0 / n), emission, sequence)


def _probes_irregular() -> None:
    # a sparse record (intervals a fair part of T_c: the uniformization remainder) and a
    # dense one (the remainder in the eigen basis): both forms of the grid route
    rng = np.random.default_rng(4)
    _probes(np.cumsum(rng.exponential(1e-4, 4000)), 4)
    _probes(np.cumsum(rng.exponential(2e-6, 4000)), 5)


def _ringdown() -> None:
    from cavchar.fits.ringdown import fit_ringdown
    from cavchar.simulate import simulate_ringdown

    t = np.linspace(0.0, 10e-3, 400)
    cases = {"power": dict(amplitude=2.0, floor=0.05, noise=0.02),
             "db": dict(amplitude=2.0, floor=0.05, noise=0.1),
             "amplitude": dict(amplitude=2.0, noise=0.05),
             "iq": dict(amplitude=2.0, noise=0.05, detuning=300.0),
             "mean-n": dict(amplitude=3.0, n_th=0.1, noise=0.05)}
    for i, (signal, options) in enumerate(cases.items()):
        trace = simulate_ringdown(signal, t, 2e-3, seed=10 + i, **options)
        fit_ringdown(trace, signal=signal, settings=_quick())
    counts = simulate_ringdown("populations", np.linspace(0, 8e-3, 12), 2e-3, initial=2,
                               shots=400, n_th=0.05, seed=20)
    fit_ringdown(counts, signal="populations", initial=2, settings=_quick())


_STEPS: dict[str, Callable[[], None]] = {
    "jumps": _jumps, "sampled": _sampled, "probes": _probes_regular,
    "probes-irregular": _probes_irregular, "ringdown": _ringdown}


def prepare_kernels(kinds: Sequence[str] = KINDS,
                    report: Callable[[str, float], None] | None = None) -> dict[str, float]:
    """Compile (or load) every kernel the fits of ``kinds`` use; returns the wall time in s
    per kind.  ``report(kind, seconds)`` is called after each kind (progress)."""
    unknown = [k for k in kinds if k not in _STEPS]
    if unknown:
        from cavchar.errors import InputError

        raise InputError(f"unknown kind {', '.join(unknown)}", hint=f"one of {', '.join(KINDS)}")
    times: dict[str, float] = {}
    for kind in kinds:
        start = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # tiny records: the fits' own checks may warn
            _STEPS[kind]()
        times[kind] = time.perf_counter() - start
        if report is not None:
            report(kind, times[kind])
    return times
