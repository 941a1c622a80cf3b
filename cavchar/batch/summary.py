"""The batch summary: one row per entry (table, CSV, printed text, report section)."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import pandas as pd

if TYPE_CHECKING:
    from cavchar.result import FitResult

__all__ = ["SUMMARY_COLUMNS", "summary_row", "summary_text", "summary_section"]

#: columns of the summary table and of summary.csv (SI units: seconds)
SUMMARY_COLUMNS = (
    "label", "line", "kind", "status", "exit_class", "cavity", "cooldown",
    "lifetime_median_s", "lifetime_lo95_s", "lifetime_hi95_s",
    "n_thermal_median", "n_thermal_lo95", "n_thermal_hi95",
    "converged", "rhat_max", "wall_s", "attempts", "seed", "file", "folder", "message",
)


def summary_row(entry, status: str, exit_class: int, result: FitResult | None = None,
                *,
                wall_s: float = math.nan, attempts: int = 0, folder: str | None = None,
                message: str = "") -> dict[str, Any]:
    """The summary row of one entry (NaN where the entry has no result)."""
    row: dict[str, Any] = {
        "label": entry.label, "line": entry.line, "kind": entry.kind, "status": status,
        "exit_class": exit_class,
        "cavity": entry.cavity or "", "cooldown": entry.cooldown or "",
        "converged": None, "rhat_max": math.nan, "wall_s": wall_s, "attempts": attempts,
        "seed": entry.seed, "file": " ".join(entry.files), "folder": folder or "",
        "message": message,
    }
    for name, prefix, unit in (("lifetime", "lifetime", "_s"), ("n_thermal", "n_thermal", "")):
        for col in ("median", "lo95", "hi95"):
            row[f"{prefix}_{col}{unit}"] = math.nan
    if result is not None:
        table = result.summary()
        for name, unit in (("lifetime", "_s"), ("n_thermal", "")):
            if name in table.index:
                for col in ("median", "lo95", "hi95"):
                    row[f"{name}_{col}{unit}"] = float(table.loc[name, col])
        row["converged"] = bool(result.converged)
        rhat = result.diagnostics.rhat or {}
        values = [v for v in rhat.values() if isinstance(v, int | float) and math.isfinite(v)]
        row["rhat_max"] = max(values) if values else math.nan
    return row


def _interval(median: float, lo: float, hi: float, dimension: str) -> str:
    from cavchar.units import format_quantity

    if not math.isfinite(median):
        return "-"
    if dimension == "dimensionless":
        return f"{median:.3g} [{lo:.3g}, {hi:.3g}]"
    text = format_quantity(median, dimension, 3)
    unit = text.split(" ")[-1] if " " in text else ""
    scale = median / float(text.split(" ")[0]) if float(text.split(" ")[0]) else 1.0
    return f"{median / scale:.3g} [{lo / scale:.3g}, {hi / scale:.3g}] {unit}".rstrip()


def _rows(table: pd.DataFrame) -> list[list[str]]:
    rows = []
    for _, r in table.iterrows():
        conv = "-" if r["converged"] is None or pd.isna(r["converged"]) else (
            "yes" if r["converged"] else "NO")
        wall = f"{r['wall_s']:.1f} s" if math.isfinite(r["wall_s"]) else "-"
        rows.append([r["label"], r["kind"], r["status"],
                     _interval(r["lifetime_median_s"], r["lifetime_lo95_s"],
                               r["lifetime_hi95_s"], "time"),
                     _interval(r["n_thermal_median"], r["n_thermal_lo95"],
                               r["n_thermal_hi95"], "dimensionless"),
                     conv, wall, str(int(r["attempts"]))])
    return rows


_HEADER = ("entry", "kind", "status", "T_c median [95%]", "n_th median [95%]", "converged",
           "wall", "attempts")


def summary_text(table: pd.DataFrame, path: str | None = None) -> str:
    """The summary as a plain-text table (lifetime in s/ms/us, 95% credible intervals),
    followed by one line per failed entry with its message (``path``, the batch file,
    and the entry's line in it first, when known)."""
    rows = _rows(table)
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(_HEADER)]
    lines = ["  ".join(h.ljust(w) for h, w in zip(_HEADER, widths))]
    lines += ["  ".join(c.ljust(w) for c, w in zip(r, widths)) for r in rows]
    for _, r in table.iterrows():
        if r["exit_class"] != 0:
            where = ""
            if path is not None:
                line = r["line"]
                where = path + (f", line {int(line)}" if line is not None and not pd.isna(line)
                                else "") + ": "
            lines.append(f"{where}{r['label']}: {r['status']} (exit class {r['exit_class']}): "
                         f"{r['message']}")
    return "\n".join(lines)


def summary_section(table: pd.DataFrame, title: str = "Batch summary"):
    """The summary as a report :class:`~cavchar.report.sections.Section` (every entry,
    failures with their messages)."""
    from cavchar.report.sections import Section
    from cavchar.report.text import esc, table_html

    body = table_html(_HEADER, _rows(table), numeric_from=3,
                      caption="one row per entry; 95% equal-tailed credible intervals")
    failed = table[table["exit_class"] != 0]
    if len(failed):
        body += "<p>Entries without a result:</p><ul>" + "".join(
            f"<li>{esc(r['label'])}: {esc(r['status'])} (exit class {r['exit_class']}): "
            f"{esc(r['message'])}</li>" for _, r in failed.iterrows()) + "</ul>"
    return Section(title, body, anchor="batch-summary")


def as_frame(rows: Sequence[dict[str, Any]]) -> pd.DataFrame:
    """The summary DataFrame (columns :data:`SUMMARY_COLUMNS`, one row per entry)."""
    return pd.DataFrame(list(rows), columns=list(SUMMARY_COLUMNS))
