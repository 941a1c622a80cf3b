"""Report sections for the cooldown log's outputs: trend, qualification, thermal budget.

Each takes the object returned by :mod:`cavchar.tracking` (``Trend``,
``CavityComparison``, ``Qualification``, ``Budget``) and gives a
:class:`~cavchar.report.sections.Section` with a table and, where
:mod:`cavchar.plots.trend` offers one, a figure.  A trend's table names the fits
of each row and the stage temperature of each point (per quantity when the
lifetime and n_th come from fits at different stages).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from cavchar.derived import format_probability_error
from cavchar.quantities import short_label
from cavchar.report.figures import Figure
from cavchar.report.sections import Section
from cavchar.report.text import esc, format_interval_row, format_quantity_text, table_html

__all__ = ["section_for", "trend_section", "comparison_section", "qualification_section",
           "budget_section"]

FigureHtml = Callable[[Figure], str]


def _styled(plot, obj):
    """Draw with the cavchar look (the plotting function's own rc settings still apply);
    the colour cycle without line styles, since such functions set their own."""
    from cycler import cycler

    from cavchar.plots.style import PALETTE, apply_style

    with apply_style({"axes.prop_cycle": cycler(color=list(PALETTE))}):
        return plot(obj)


def _interval_cell(stats: Any, dimension: str) -> str:
    if stats is None:
        return "–"
    row = {"median": stats.median, "lo68": stats.lo68, "hi68": stats.hi68,
           "lo95": stats.lo95, "hi95": stats.hi95}
    text = format_interval_row(row, dimension)
    unit = f" {text['unit']}" if text["unit"] else ""
    return f"{text['median']} [{text['interval95']}]{unit}"


_SHORT = {name: short_label(name) for name in ("lifetime", "n_thermal")}


def _row_cell(row: Any, name: str, dimension: str) -> str:
    """A trend cell: median [95%], or the one-sided limit of a quantity whose posterior
    reaches a prior bound (never a median and interval of the prior's edge)."""
    limit = getattr(row, "limits", {}).get(name)
    if limit is None:
        return _interval_cell(row.stats.get(name), dimension)
    from cavchar.tracking.trend import limit_text

    return limit_text(limit, dimension, format_quantity_text)


def _by_quantity(row: Any, text) -> str:
    """One value per row when T_c and n_th come from fits alike in ``text``, else
    ``"T_c <a>; n_th <b>"``."""
    values = {q: text(c) for q, c in row.sources.items() if q in _SHORT}
    if not values:
        return text(None)
    if len(set(values.values())) == 1:
        return next(iter(values.values()))
    return "; ".join(f"{_SHORT[q]} {v}" for q, v in values.items())


def _stage_text(choice: Any) -> str:
    t = None if choice is None else choice.stage_temp_k
    return "–" if t is None else format_quantity_text(t, "temperature")


def _trend_table(trend: Any) -> list[str]:
    """The table of one trend, the fits each row uses and why, and the trend's notes."""
    ref = trend.reference
    drop = f"P(T_c fell by > {100 * trend.fraction:g}% vs {ref})" if ref else "drop probability"
    header = ["cooldown", "date", "fits", "fit kind", "stage temperature", "T_c [95%]",
              "n_th [95%]", "T_eff [95%]", drop]
    rows = []
    for row in trend.rows:
        p = row.drop_probability
        p_text = "reference" if row.fit_id == trend.reference_fit else (
            "–" if p is None else format_probability_error(p, row.drop_mc_error))
        rows.append([row.cooldown, row.start_date or "–",
                     ", ".join(str(i) for i in row.fit_ids),
                     _by_quantity(row, lambda c: "–" if c is None else c.kind),
                     _by_quantity(row, _stage_text),
                     _row_cell(row, "lifetime", "time"),
                     _row_cell(row, "n_thermal", "dimensionless"),
                     _row_cell(row, "effective_temperature", "temperature"),
                     p_text])
    freq = format_quantity_text(trend.freq_hz, "frequency", 5) if trend.freq_hz else "unknown"
    used = []
    for row in trend.rows:
        for q, c in row.sources.items():
            if q in _SHORT:
                name = "T_c" if q == "lifetime" else "n_th and T_eff"
                used.append(f"<li>{esc(row.cooldown)}: {name} from fit {c.fit_id} "
                            f"({esc(c.kind)}, stage {esc(_stage_text(c))}): "
                            f"{esc(c.reason)}</li>")
        used += [f"<li>{esc(row.cooldown)}: note: {esc(n)}</li>" for n in row.notes]
    parts = [f"<p>Cavity <b>{esc(trend.cavity)}</b> (mode frequency {esc(freq)}), "
             f"{esc(trend.selection)}. Medians and equal-tailed 95% credible intervals are "
             "each fit's own (the numbers of its result); the drop probability compares each "
             "cooldown's lifetime draws with the reference's (± its Monte Carlo error).</p>",
             table_html(header, rows, css_class="grid summary"),
             "<details><summary>fits used and why</summary><ul>" + "".join(used)
             + "</ul></details>"]
    parts += [f'<p class="note">{esc(n)}</p>' for n in trend.notes]
    return parts


def trend_section(trend: Any, figure_html: FigureHtml) -> Section:
    """Lifetime, n_th and effective temperature per cooldown, with drop probabilities, the
    fit ids of each row and the stage temperature of each point."""
    from cavchar.plots.trend import plot_trend

    parts = _trend_table(trend)
    parts.append(figure_html(Figure(
        f"Trend of cavity {trend.cavity} across cooldowns",
        "Median with 68% (thick) and 95% (thin) intervals per cooldown; the lifetime points "
        "carry the probability that the lifetime fell against the reference.",
        _styled(plot_trend, trend))))
    return Section(f"Trend across cooldowns: {trend.cavity}", "".join(parts), "trend")


def comparison_section(comparison: Any, figure_html: FigureHtml) -> Section:
    """Several cavities' trends side by side and P(T_c of the first > T_c of each other)."""
    parts = []
    for trend in comparison.trends:
        parts.append(f"<h3>{esc(trend.cavity)}</h3>")
        parts += _trend_table(trend)
    rows = [[f"P(T_c {r.cavity_a} > T_c {r.cavity_b})",
             f"{r.cooldown_a} (fit {r.fit_a})", f"{r.cooldown_b} (fit {r.fit_b})",
             format_probability_error(r.probability, r.mc_error), r.basis] for r in comparison.rows]
    parts.append("<h3>Lifetime comparison</h3>")
    if rows:
        parts.append("<p>Independent posteriors of different records: the probability is "
                     "taken over all pairs of the two fits' stored draws (± its Monte Carlo "
                     "error).</p>")
        parts.append(table_html(["probability", "cooldown of the first", "cooldown of the "
                                 "other", "value", "pair"], rows, css_class="grid"))
    else:
        parts.append("<p>No cooldown of these cavities has lifetimes to compare.</p>")
    from cavchar.plots.trend import plot_trend

    names = ", ".join(t.cavity for t in comparison.trends)
    parts.append(figure_html(Figure(
        f"Trends of cavities {names} across cooldowns",
        "The cavities side by side on the same axes: median with 68% (thick) and 95% "
        "(thin) intervals per cooldown.", _styled(plot_trend, comparison))))
    title = " and ".join(t.cavity for t in comparison.trends)
    return Section(f"Trend across cooldowns: {title}", "".join(parts), "trend")


_BADGE = {"PASS": "pass", "FAIL": "fail", "UNDECIDED": "undecided"}


def _badge(status: str) -> str:
    return f'<span class="badge {_BADGE.get(status, "warn")}">{esc(status)}</span>'


def qualification_section(qualification: Any, figure_html: FigureHtml) -> Section:
    """PASS / FAIL / UNDECIDED per requirement of a spec."""
    from cavchar.tracking.qualify import QUANTITIES

    spec = qualification.spec
    rows = []
    for v in qualification.verdicts:
        dim = QUANTITIES[v.requirement.quantity][0]
        estimate = "–"
        if v.median is not None:
            estimate = (f"{format_quantity_text(v.median, dim, 3)} "
                        f"[{format_quantity_text(v.lo95, dim, 3)} – "
                        f"{format_quantity_text(v.hi95, dim, 3)}]")
        p = "–" if v.probability is None else format_probability_error(v.probability, v.mc_error)
        evidence = v.evidence.description if v.evidence is not None else "none"
        rows.append([esc(v.requirement.describe()), _badge(v.status), esc(p), esc(estimate),
                     esc(evidence), esc(v.hint or "")])
    title = spec.title or "Qualification"
    parts = [f'<p class="statement">{_badge(qualification.status)} {esc(title)}'
             + (f" (spec file {esc(spec.path)})" if spec.path else "") + "</p>",
             "<p>A requirement passes when the posterior probability that it is met reaches "
             "its credibility, fails when the probability that it is not met does, and is "
             "undecided otherwise.</p>",
             table_html(["requirement", "verdict", "P(met)", "median [95%]", "evidence", "note"],
                        rows, css_class="grid", raw=True, numeric_from=9)]
    if spec.notes:
        parts.append(f'<p class="note">{esc(spec.notes)}</p>')
    return Section(f"Qualification: {title}", "".join(parts), "qualification")


def budget_section(budget: Any, figure_html: FigureHtml) -> Section:
    """The thermal budget: n_th against stage temperature and the stated model."""
    points = [[p["label"], format_quantity_text(p["stage_temp_k"], "temperature"),
               format_quantity_text(p["planck_occupation"], "dimensionless", 3),
               _interval_cell(_Stats(p, "n_thermal_"), "dimensionless"), p["approximation"]]
              for p in budget.points]
    params = []
    for fit in (budget.excess, budget.two_bath):
        if fit is None:
            continue
        for name, stats in fit.parameters.items():
            dim = "temperature" if "temperature" in name else "dimensionless"
            params.append([f"{fit.model}: {name.replace('_', ' ')}",
                           _interval_cell(stats, dim), "yes" if fit.converged else "no"])
    freq = format_quantity_text(budget.freq_hz, "frequency", 5)
    limit = (" The excess reaches down to its prior floor: only its upper limit means "
             "something." if budget.excess_is_upper_limit else "")
    parts = [f'<p class="statement">Stated model: <b>{esc(budget.model)}</b>. '
             f"{esc(budget.reason)}.{esc(limit)}</p>",
             f"<p>Mode frequency {esc(freq)}; each point is one fit's posterior of n_th.</p>",
             table_html(["measurement", "stage temperature", "Planck occupation",
                         "n_th [95%]", "likelihood from"], points, css_class="grid"),
             table_html(["budget parameter", "median [95%]", "converged"], params,
                        css_class="grid")]
    parts += [f'<p class="note">{esc(n)}</p>' for n in budget.notes]
    from cavchar.plots.trend import plot_budget

    parts.append(figure_html(Figure(
        "Thermal photons against stage temperature",
        "Measured n_th (68% and 95% intervals), the Planck occupation of the stage and the "
        "stated budget model (median and 95% band).", _styled(plot_budget, budget))))
    return Section("Thermal budget", "".join(parts), "budget")


class _Stats:
    """Interval fields from a budget point's flat ``n_thermal_*`` keys."""

    def __init__(self, point: dict, prefix: str) -> None:
        self.median = point[prefix + "median"]
        self.lo68, self.hi68 = point[prefix + "lo68"], point[prefix + "hi68"]
        self.lo95, self.hi95 = point[prefix + "lo95"], point[prefix + "hi95"]


def section_for(obj: Any, figure_html: FigureHtml) -> Section:
    """The report section of a Trend, Qualification or Budget object."""
    name = type(obj).__name__
    if name == "Trend":
        return trend_section(obj, figure_html)
    if name == "CavityComparison":
        return comparison_section(obj, figure_html)
    if name == "Qualification":
        return qualification_section(obj, figure_html)
    if name == "Budget":
        return budget_section(obj, figure_html)
    if isinstance(obj, tuple) and len(obj) == 2 and all(isinstance(x, str) for x in obj):
        return Section(obj[0], obj[1])
    from cavchar.errors import InputError

    raise InputError(f"the report cannot show a {name} as a section",
                     hint="give a Section, a Trend, a Qualification or a Budget")
