"""Memory of cavchar: the cooldown log and the comparisons built on it.

* :mod:`cavchar.tracking.entries` what a logged fit holds, read from a result;
* :mod:`cavchar.tracking.store`   SQLite log of cavities, cooldowns and fits
  (with a compact copy of the posterior draws of the key parameters);
* :mod:`cavchar.tracking.trend`   lifetime, n_th and effective temperature per
  cooldown, and the probability that the lifetime fell;
* :mod:`cavchar.tracking.qualify` PASS / FAIL / UNDECIDED against a TOML spec;
* :mod:`cavchar.tracking.budget`  which logged fits enter the thermal budget of each
  cooldown (the budget model itself: :mod:`cavchar.fits.budget`).

Names are imported lazily so that ``import cavchar.tracking`` stays light.
"""

from __future__ import annotations

from cavchar._lazy import lazy_exports

_PUBLIC = {
    "CooldownLog": "cavchar.tracking.store",
    "FitEntry": "cavchar.tracking.entries",
    "open_log": "cavchar.tracking.store",
    "resolve_log_path": "cavchar.tracking.store",
    "entry_from_result": "cavchar.tracking.entries",
    "read_result_file": "cavchar.tracking.entries",
    "log_fit_result": "cavchar.tracking.store",
    "cooldown_trend": "cavchar.tracking.trend",
    "drop_probability": "cavchar.tracking.trend",
    "read_spec": "cavchar.tracking.qualify",
    "qualify": "cavchar.tracking.qualify",
    "cooldown_budgets": "cavchar.tracking.budget",
}

__all__, __getattr__, __dir__ = lazy_exports(__name__, _PUBLIC)
