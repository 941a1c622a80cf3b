"""Words and numbers of the report: intervals in readable units, the Planck check in
plain sentences, small HTML tables.

Numbers: a median and its interval share one display unit (an SI prefix chosen
from the median by :func:`cavchar.units.format_quantity`, or a power of ten for
large or small dimensionless numbers such as Q); decimals follow the Particle
Data Group rounding rule applied to the smaller half-width of the 68 %
interval (leading digits 100-354: two significant digits, 355-949: one,
950-999: round up to two; PDG, Review of Particle Physics, "Rounding", from
memory), the same rule :meth:`cavchar.result.FitResult.one_line` uses.

HTML is escaped by construction: every fragment of the page is a
:class:`markupsafe.Markup` built with :func:`html` (whose arguments are
escaped unless they are Markup themselves) or :func:`table_html`; the page is
filled by a jinja2 template with autoescaping, so a value that reached it as
plain text is shown as text, never read as markup.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Iterable, Mapping, Sequence
from typing import TYPE_CHECKING, Any

from markupsafe import Markup, escape

from cavchar.units import decimals_for

if TYPE_CHECKING:
    from cavchar.result_types import PlanckCheck

__all__ = ["esc", "html", "Markup", "number_text", "display_scale", "decimals_for",
           "format_number", "bound_decimals", "format_interval_row",
           "format_quantity_text", "planck_sentences", "probability_text", "table_html",
           "prior_text"]

_POWERS = {"-": "⁻", "0": "⁰", "1": "¹", "2": "²", "3": "³", "4": "⁴", "5": "⁵", "6": "⁶",
           "7": "⁷", "8": "⁸", "9": "⁹"}


def esc(value: Any) -> Markup:
    """HTML-escaped text of any value (Markup passes unchanged; None gives "")."""
    if value is None:
        return Markup("")
    if isinstance(value, Markup):
        return value
    return escape(str(value))


def html(template: str, *args: Any, **kwargs: Any) -> Markup:
    """An HTML fragment: ``template`` (our own constant markup) with ``{}`` fields filled
    by escaped values (a :class:`Markup` argument is inserted as it is).

    ``html("<p>{}</p>", "<b>")`` gives ``<p>&lt;b&gt;</p>``.
    """
    return Markup(template).format(*(esc(a) for a in args),
                                   **{k: esc(v) for k, v in kwargs.items()})


def _is_real(value: Any) -> bool:
    return isinstance(value, numbers.Real) and not isinstance(value, bool) \
        and math.isfinite(value)


def number_text(value: Any, spec: str = ".4g") -> str:
    """``format(value, spec)`` for a finite number; "–" for None or a non-finite number;
    any other value as its text (escaped later like all text)."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "–"
    if _is_real(value):
        return format(value, spec)
    return str(value)


def display_scale(median: float, dimension: str) -> tuple[float, str]:
    """(factor, unit text): SI value / factor is shown followed by the unit text.

    Dimensionless numbers outside [1e-3, 1e4) get a power of ten (``"× 10⁹"``);
    others an SI prefix (``"ms"``, ``"mK"``, ``"kHz"``).
    """
    from cavchar.units import format_quantity, parse_quantity

    if not math.isfinite(median):
        return 1.0, ""
    if dimension in ("dimensionless", "phase", "rate"):
        unit = {"phase": "rad", "rate": "1/s"}.get(dimension, "")
        magnitude = abs(median)
        if magnitude == 0 or 1e-3 <= magnitude < 1e4:
            return 1.0, unit
        exponent = math.floor(math.log10(magnitude))
        power = "".join(_POWERS[c] for c in str(exponent))
        return 10.0**exponent, f"× 10{power}" + (f" {unit}" if unit else "")
    text = format_quantity(median, dimension)
    unit = text.split(" ", 1)[1] if " " in text else ""
    factor = parse_quantity("1" + unit, dimension) if unit else 1.0
    return factor, unit


def bound_decimals(value: float, decimals: int) -> int:
    """Decimals for an interval bound: ``decimals``, or more when the bound would show
    fewer than two significant digits (a wide, skewed interval whose lower end is far
    below the median: ``7 [0.20 – 251] K``, never ``7 [0 – 251] K``)."""
    if not (value is not None and math.isfinite(value) and value != 0):
        return decimals
    lead = math.floor(math.log10(abs(value)))
    return max(decimals, 1 - lead) if lead + 1 + decimals < 2 else decimals


def format_number(value: float, decimals: int) -> str:
    """``value`` with ``decimals`` places (negative: rounded to tens, hundreds ...)."""
    if value is None or not math.isfinite(value):
        return "–"
    if decimals < 0:
        step = 10.0**-decimals
        return f"{round(value / step) * step:.0f}"
    return f"{value:.{decimals}f}"


def format_interval_row(row: Mapping[str, float], dimension: str) -> dict[str, str]:
    """Median, 68 % and 95 % intervals of one summary row as display strings.

    Parameters
    ----------
    row
        Mapping with ``median``, ``lo68``, ``hi68``, ``lo95``, ``hi95`` in SI units.
    dimension
        Dimension name of :mod:`cavchar.units`.

    Returns
    -------
    dict
        ``median``, ``interval68`` ("a – b"), ``interval95``, ``errors`` ("+x/−y"),
        ``unit`` (display unit text).
    """
    med = float(row["median"])
    factor, unit = display_scale(med, dimension)
    m, lo68, hi68 = med / factor, row["lo68"] / factor, row["hi68"] / factor
    lo95, hi95 = row["lo95"] / factor, row["hi95"] / factor
    plus, minus = hi68 - m, m - lo68
    d = decimals_for(min(plus, minus) if min(plus, minus) > 0 else max(plus, minus))
    if m != 0 and math.isfinite(m):  # never more than 6 significant digits
        d = min(d, 5 - math.floor(math.log10(abs(m))))
    f = format_number

    def bound(v: float) -> str:
        return format_number(v, bound_decimals(v, d))

    return {
        "median": f(m, d),
        "interval68": f"{bound(lo68)} – {bound(hi68)}",
        "interval95": f"{bound(lo95)} – {bound(hi95)}",
        "errors": f"+{f(plus, d)}/−{f(minus, d)}",
        "unit": unit,
    }


def format_quantity_text(value: float, dimension: str, digits: int = 3) -> str:
    """One value with its unit (``"20 mK"``, ``"2.31 × 10⁹"``); text that is not a
    number is returned as it is."""
    if not _is_real(value):
        return number_text(value)
    factor, unit = display_scale(value, dimension)
    text = f"{value / factor:.{digits}g}"
    return f"{text} {unit}".strip()


def probability_text(p: float, n_draws: int | None = None) -> str:
    """A posterior probability, never shown as exactly 1 or 0
    (:func:`cavchar.derived.format_probability`: ``"> 0.999 (Monte Carlo resolution ...)"``)."""
    from cavchar.derived import format_probability

    return format_probability(p, n_draws)


def _interval_words(block: Mapping[str, float], dimension: str) -> str:
    row = format_interval_row(block, dimension)
    unit = f" {row['unit']}" if row["unit"] else ""
    return f"{row['median']} ({row['errors']}){unit}"


def planck_sentences(check: PlanckCheck) -> list[str]:
    """The Planck check of a result (:attr:`cavchar.result.FitResult.planck`) as plain
    sentences."""
    t_stage = format_quantity_text(
        math.nan if check.stage_temperature_k is None else check.stage_temperature_k,
        "temperature")
    p = check.prob_hotter_than_stage
    n = check.n_draws
    decide = 0.95 if check.decision_probability is None else float(check.decision_probability)
    n_stage = math.nan if check.stage_occupation is None else check.stage_occupation
    out = []
    teff = check.effective_temperature_k
    if check.piles_up_at_zero and check.n_thermal_upper95 is not None:
        t_up = format_quantity_text(check.effective_temperature_upper95_k, "temperature")
        n_up = format_quantity_text(check.n_thermal_upper95, "dimensionless", 2)
        temp_words = f"effective temperature below {t_up} (n_th < {n_up}, 95% upper limits)"
    elif teff:
        temp_words = f"effective temperature {_interval_words(teff, 'temperature')}"
    else:
        temp_words = ""
    tail = f"; {temp_words}" if temp_words else ""
    if p is None:
        return ["No Planck comparison is available for this fit."]
    if p >= decide:
        out.append(f"The mode is hotter than its {t_stage} stage with probability "
                   f"{probability_text(p, n)}{tail}.")
    elif p <= 1 - decide:
        out.append(f"The mode is not hotter than its {t_stage} stage: the probability that it "
                   f"is hotter is only {probability_text(p, n)}{tail}.")
    else:
        out.append(f"These data cannot tell whether the mode is hotter than its {t_stage} stage "
                   f"(probability {probability_text(p, n)}){tail}.")
    n_th = check.n_thermal
    if n_th:
        excess = check.excess_photons
        words = (f"Thermal photon number {_interval_words(n_th, 'dimensionless')} against a "
                 f"Planck occupation of {format_quantity_text(n_stage, 'dimensionless')} at the "
                 "stage temperature")
        if excess:
            words += f"; excess {_interval_words(excess, 'dimensionless')}"
        out.append(words + " (68% credible intervals).")
    return out


def prior_text(prior: Mapping[str, Any] | None, dimension: str) -> str:
    """A prior's description from its ``to_dict()`` form, bounds in readable units."""
    if not prior:
        return "–"
    family = str(prior.get("family", "?"))

    def q(key: str) -> str:
        value = prior.get(key)
        return "–" if value is None else format_quantity_text(float(value), dimension, 3)

    if family in ("loguniform", "log-uniform"):
        return f"log-uniform on [{q('low')}, {q('high')}]"
    if family == "uniform":
        return f"uniform on [{q('low')}, {q('high')}]"
    if family == "normal":
        text = f"normal, mean {q('mean')}, sd {q('sd')}"
        if prior.get("low") is not None or prior.get("high") is not None:
            text += f", cut to [{q('low')}, {q('high')}]"
        return text
    if family in ("lognormal", "log-normal"):
        return f"log-normal, median {q('median')}, width {prior.get('sigma_log', '?')} in ln"
    if family == "beta":
        shapes = f"{prior.get('a', '?'):g}, {prior.get('b', '?'):g}"
        return f"beta({shapes}) on [{q('low')}, {q('high')}]"
    return family


def table_html(header: Sequence[str], rows: Iterable[Sequence[Any]], *,
               css_class: str = "grid", caption: str | None = None,
               raw: bool = False, numeric_from: int = 1) -> Markup:
    """A small HTML table; every cell, heading and the caption is escaped unless it is
    :class:`Markup` (built with :func:`html`).

    ``raw=True`` is kept for callers that pass cells they escaped themselves: their
    plain strings are then taken as HTML.  Columns from ``numeric_from`` on are
    right-aligned (class ``num``).
    """
    def cell(value: Any) -> Markup:
        if raw and not isinstance(value, Markup):
            return Markup("" if value is None else str(value))
        return esc(value)

    parts = [html('<table class="{}">', css_class)]
    if caption:
        parts.append(html("<caption>{}</caption>", caption))
    parts.append(Markup("<thead><tr>") + Markup("").join(
        html('<th scope="col"{}>{}</th>', Markup(" class=num") if i >= numeric_from else "", h)
        for i, h in enumerate(header)) + Markup("</tr></thead><tbody>"))
    for row in rows:
        cells = []
        for i, value in enumerate(row):
            klass = Markup(' class="num"') if i >= numeric_from else ""
            template = '<th scope="row"{}>{}</th>' if i == 0 else "<td{}>{}</td>"
            cells.append(html(template, klass, cell(value)))
        parts.append(Markup("<tr>") + Markup("").join(cells) + Markup("</tr>"))
    parts.append(Markup("</tbody></table>"))
    return Markup("").join(parts)
