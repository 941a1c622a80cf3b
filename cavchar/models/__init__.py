"""Likelihood models, one subpackage per data shape: :mod:`cavchar.models.jumps`,
:mod:`cavchar.models.probes`, :mod:`cavchar.models.ringdown`; every model follows
:mod:`cavchar.models.protocol`."""
