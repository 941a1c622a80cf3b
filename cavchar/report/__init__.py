"""Self-contained HTML reports of fit results (and of the cooldown log's outputs).

``write_report(results, out_path, force=False, ...)`` writes one HTML file with
everything embedded; see :mod:`cavchar.report.html`.  Names are resolved lazily,
so importing this package loads neither matplotlib nor corner.
"""

from __future__ import annotations

from cavchar._lazy import lazy_exports

_PUBLIC = {
    "write_report": "cavchar.report.html",
    "render_report": "cavchar.report.html",
    "load_results": "cavchar.report.html",
    "result_label": "cavchar.report.html",
    "Section": "cavchar.report.sections",
}

__all__, __getattr__, __dir__ = lazy_exports(__name__, _PUBLIC)
