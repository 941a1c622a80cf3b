"""Seeded simulators of every data shape cavchar reads.

Physics (one thermally damped mode; see :mod:`cavchar.dynamics`): from photon
number ``n`` the mode jumps up at rate ``kappa n_th (n + 1)`` and down at rate
``kappa (1 + n_th) n``, ``kappa = 1 / T_c`` with ``T_c`` the energy lifetime.
By default each segment starts in a state drawn from the stationary
Bose–Einstein law ``P_n = n_th^n / (1 + n_th)^(n+1)``.

* :func:`simulate_jump_record` — exact change points by the Gillespie
  algorithm (Gillespie, J. Phys. Chem. 81, 2340 (1977)): exponential waiting
  time with the total exit rate, then up or down in proportion to the rates.
  The chain is simulated without truncation.
* :func:`simulate_sampled_record` — the exact path read at given probe times.
* :func:`simulate_probe_record` — 0/1 probe outcomes drawn from a response
  ``P(1 | n, setting)`` (the Ramsey-fringe and table models of
  :mod:`cavchar.models.probes.response`, or any callable), optionally with lost probes.
* :func:`probes_on_path` — the same on a given path (an exact jump record).
* :func:`simulate_ringdown` — power, dB, amplitude, IQ, mean photon number and
  Fock-population ring-down traces with their noise models.

Every function takes ``seed`` (an int, a :class:`numpy.random.Generator` or
None) and is reproducible bit for bit with the same seed and arguments.

Modules: :mod:`cavchar.simulate.jumps` (Gillespie kernel, jump paths, jump and
sampled records, probe times), :mod:`cavchar.simulate.probes` (probe records),
:mod:`cavchar.simulate.ringdown` (ring-down traces); ``_common`` holds the seed
handling, parameter checks and truth metadata they share.
"""

from __future__ import annotations

from cavchar.simulate import jumps as _jumps
from cavchar.simulate import probes as _probes
from cavchar.simulate import ringdown as _ringdown
from cavchar.simulate._common import Seed as Seed  # the type of every ``seed`` argument
from cavchar.simulate.jumps import *  # noqa: F403 (the names of each module's __all__)
from cavchar.simulate.probes import *  # noqa: F403
from cavchar.simulate.ringdown import *  # noqa: F403

__all__ = [*_jumps.__all__, *_probes.__all__, *_ringdown.__all__]
