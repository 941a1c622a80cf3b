"""Self-contained HTML reports of fit results (and of the cooldown log's outputs).

``write_report(results, out_path, force=False, ...)`` writes one HTML file with
everything embedded; see :mod:`cavchar.report.html`.  Names are resolved lazily,
so importing this package loads neither matplotlib nor corner.
"""

from __future__ import annotations

import importlib

_PUBLIC = {
    "write_report": "cavchar.report.html",
    "render_report": "cavchar.report.html",
    "load_results": "cavchar.report.html",
    "result_label": "cavchar.report.html",
    "Section": "cavchar.report.sections",
}

__all__ = list(_PUBLIC)


def __getattr__(name: str):
    if name in _PUBLIC:
        return getattr(importlib.import_module(_PUBLIC[name]), name)
    raise AttributeError(f"module 'cavchar.report' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(__all__)
