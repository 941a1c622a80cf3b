"""Likelihood of raw QND probe records: a hidden Markov model of the photon number.

* :mod:`cavchar.models.probes.likelihood` — the exact forward likelihood of a record
  (:class:`~cavchar.models.probes.likelihood.ProbeLikelihood`), the truncation, the
  routes for regular and irregular probe times, the trajectory;
* :mod:`cavchar.models.probes.blocks` — the coarse block likelihood of long records
  with its measured bias bound;
* :mod:`cavchar.models.probes.response` — the probe response families
  (Ramsey fringe with readout errors, calibrated tables);
* :mod:`cavchar.models.probes.hmm_kernels` — the compiled forward / backward /
  Viterbi recursions; :mod:`cavchar.models.probes._unrolled` writes the fully
  unrolled forward kernels of small truncations.
"""
