"""The self-contained HTML report of one or several fit results.

One file holds everything: figures are embedded as base64 PNG, the style sheet
is inline and nothing refers to the network.  The page is filled from the
package templates ``cavchar/templates/report.html`` and ``report.css``
(:class:`string.Template` placeholders).

For each result: a summary table of lifetime, Q, linewidth, n_th and effective
temperature with 68 % and 95 % intervals and units; one-line forms for papers
and log books; the Planck check in words; the data with the posterior fit and
the model checks; corner plot, chain traces and convergence diagnostics;
priors, settings and provenance.  With several results also a comparison table
and figure; further sections (trend, qualification, thermal budget from
:mod:`cavchar.tracking`, or any :class:`Section`) follow; the cautions close
the page.
"""

from __future__ import annotations

import json
import os
import sys
from collections.abc import Mapping, Sequence
from datetime import UTC, datetime
from importlib import resources
from pathlib import Path
from string import Template
from typing import Any

from cavchar.errors import InputError
from cavchar.report.figures import Figure, comparison_figure, data_figures, sampler_figures
from cavchar.report.sections import (
    CAUTIONS_HTML,
    Section,
    checks_html,
    diagnostics_html,
    oneliners_html,
    planck_html,
    priors_html,
    provenance_html,
    summary_table_html,
)
from cavchar.report.text import esc, format_interval_row, table_html

__all__ = ["write_report", "render_report", "load_results", "Section", "result_label"]

#: rows of the comparison table: column, heading, dimension
_COMPARE_ROWS = (("lifetime", "T_c", "time"), ("quality_factor", "Q", "dimensionless"),
                 ("n_thermal", "n_th", "dimensionless"),
                 ("effective_temperature", "T_eff", "temperature"))


def load_results(results: Sequence[Any]) -> tuple[list[Any], list[str | None]]:
    """FitResults from results or result-file paths; also the file each came from."""
    from cavchar.result import FitResult

    if isinstance(results, (str, os.PathLike)) or hasattr(results, "samples"):
        results = [results]
    loaded, sources = [], []
    for item in results:
        if isinstance(item, (str, os.PathLike)):
            loaded.append(FitResult.from_json(item))
            sources.append(str(item))
        elif hasattr(item, "samples") and hasattr(item, "kind"):
            loaded.append(item)
            sources.append(None)
        else:
            raise InputError(f"cannot report on a {type(item).__name__}",
                             hint="give FitResult objects or result JSON files")
    if not loaded:
        raise InputError("a report needs at least one result")
    return loaded, sources


def result_label(result: Any, source: str | None = None) -> str:
    """Short name of a result: its kind and input file (or result file)."""
    path = (result.provenance or {}).get("input_path")
    if isinstance(path, list):
        path = path[0] + (f" (+{len(path) - 1})" if len(path) > 1 else "") if path else None
    name = Path(path).name if path else (Path(source).name if source else "no input file")
    return f"{result.kind} · {name}"


def _template(name: str) -> str:
    return resources.files("cavchar").joinpath("templates", name).read_text(encoding="utf-8")


def _close(fig: Any) -> None:
    """Release a figure made through pyplot (figures on a bare Agg canvas need nothing)."""
    pyplot = sys.modules.get("matplotlib.pyplot")
    if pyplot is not None:
        pyplot.close(fig)


#: resolution of the embedded PNG figures (dots per inch): sharp on screen, light in bytes
REPORT_DPI = 120.0


def _figure_html(item: Figure, number: str) -> str:
    from cavchar.plots.common import figure_data_uri

    try:
        # figures come laid out (tight_layout / corner's margins): one rendering pass
        uri = figure_data_uri(item.figure, dpi=REPORT_DPI, tight=False)
        width, height = (int(round(v * REPORT_DPI)) for v in item.figure.get_size_inches())
    finally:
        _close(item.figure)
    caption = f"<b>Figure {esc(number)}. {esc(item.title)}.</b> {esc(item.caption)}"
    return (f'<figure><img src="{uri}" alt="{esc(item.title)}" '
            f'style="max-width:min(100%, {width}px)" data-height="{height}">'
            f"<figcaption>{caption}</figcaption></figure>")


class _Counter:
    def __init__(self) -> None:
        self.n = 0

    def next(self) -> str:
        self.n += 1
        return str(self.n)


def _status_line(result: Any) -> str:
    d = result.diagnostics or {}
    state = ('<span class="badge pass">CONVERGED</span>' if result.converged
             else '<span class="badge fail">NOT CONVERGED</span>')
    parts = [f"{len(result.samples)} posterior draws", f"seed {esc(result.seed)}"]
    if d.get("n_walkers"):
        parts.append(f"{d['n_walkers']} walkers × {d.get('n_steps', '?')} steps")
    return f'<p class="status">{state} {" · ".join(parts)}</p>'


def _result_section(index: int, result: Any, label: str, *, truths: Mapping | None,
                    record: Any, counter: _Counter, figures: bool = True) -> tuple[str, str]:
    anchor = f"fit-{index}"
    parts = [f'<section class="fit" id="{anchor}">',
             f"<h2>{index}. {esc(label)}</h2>", _status_line(result)]
    parts.append("<h3>Summary</h3>")
    parts.append(summary_table_html(result, index, truths))
    parts.append("<h3>In one line</h3>")
    parts.append(oneliners_html(result))
    planck = (result.checks or {}).get("planck")
    parts.append("<h3>Planck check</h3>")
    parts.append(planck_html(planck, result))
    if figures:
        made, notes = data_figures(result, record)
        parts.append("<h3>Data and fit</h3>")
        for fig in made:
            parts.append(_figure_html(fig, counter.next()))
        for note in notes:
            parts.append(f'<p class="note">{esc(note)}</p>')
    details = ["<h3>Model checks</h3>", checks_html(result), "<h3>Posterior and sampler</h3>"]
    if figures:
        for fig in sampler_figures(result, truths=dict(truths) if truths else None):
            details.append(_figure_html(fig, counter.next()))
    details.append(diagnostics_html(result))
    details.append("<h3>Priors and settings</h3>")
    details.append(priors_html(result))
    settings = json.dumps(result.settings, indent=1, sort_keys=True)
    details.append(f"<details><summary>every setting of this fit (JSON)</summary>"
                   f"<pre>{esc(settings)}</pre></details>")
    details.append("<h3>Provenance</h3>")
    details.append(provenance_html(result))
    if figures:
        parts += details
    else:  # a compact section: the rest folded away
        parts.append('<details class="fold"><summary>model checks, convergence, priors and '
                     "provenance of this fit (its figures are left out to keep the page "
                     "short; the result file holds every draw)</summary>"
                     + "".join(details) + "</details>")
    parts.append("</section>")
    return anchor, "\n".join(parts)


def _comparison_section(results: Sequence[Any], labels: Sequence[str],
                        counter: _Counter) -> str:
    header = ["result"] + [f"{h} (95% interval)" for _, h, _ in _COMPARE_ROWS]
    rows = []
    for result, label in zip(results, labels, strict=True):
        table = result.summary()
        cells = [esc(label)]
        for name, _, dim in _COMPARE_ROWS:
            if name not in table.index:
                cells.append("–")
                continue
            text = format_interval_row(table.loc[name], dim)
            unit = f" {esc(text['unit'])}" if text["unit"] else ""
            cells.append(f"{esc(text['median'])} "
                         f"<span class=mono>[{esc(text['interval95'])}]</span>{unit}")
        rows.append(cells)
    parts = ['<section class="comparison" id="comparison">', "<h2>Results side by side</h2>",
             table_html(header, rows, raw=True, css_class="grid summary",
                        caption="median and equal-tailed 95% credible interval of each result")]
    fig = comparison_figure(results, labels)
    if fig is not None:
        parts.append(_figure_html(Figure(
            "Lifetime, thermal photons and effective temperature of each result",
            "Point: median; thick bar: 68% interval; thin bar: 95% interval. Each result "
            "keeps its own marker and colour.", fig), counter.next()))
    parts.append("</section>")
    return "\n".join(parts)


def _extra(section: Any, counter: _Counter) -> Section:
    if isinstance(section, Section):
        return section
    from cavchar.report.tracking import section_for

    return section_for(section, figure_html=lambda fig: _figure_html(fig, counter.next()))


def render_report(
    results: Sequence[Any],
    *,
    title: str | None = None,
    labels: Sequence[str] | None = None,
    truths: Sequence[Mapping[str, float] | None] | None = None,
    records: Sequence[Any] | None = None,
    extra_sections: Sequence[Any] = (),
    intro: str | None = None,
    figures: bool | Sequence[bool] = True,
) -> str:
    """The report as one HTML string (see :func:`write_report` for the arguments)."""
    from cavchar import __version__

    loaded, sources = load_results(results)
    n = len(loaded)
    labels = list(labels) if labels is not None else [
        result_label(r, s) for r, s in zip(loaded, sources, strict=True)]
    truths = list(truths) if truths is not None else [None] * n
    records = list(records) if records is not None else [None] * n
    draw = [bool(figures)] * n if isinstance(figures, bool) else [bool(f) for f in figures]
    if not (len(labels) == len(truths) == len(records) == len(draw) == n):
        raise InputError("labels, truths, records and figures need one entry per result")
    counter = _Counter()
    contents, body = [], []
    if n > 1:
        body.append(_comparison_section(loaded, labels, counter))
        contents.append('<li><a href="#comparison">Results side by side</a></li>')
    for i, (result, label) in enumerate(zip(loaded, labels, strict=True), start=1):
        anchor, text = _result_section(i, result, label, truths=truths[i - 1],
                                       record=records[i - 1], counter=counter,
                                       figures=draw[i - 1])
        body.append(text)
        contents.append(f'<li><a href="#{anchor}">{esc(label)}</a></li>')
    used: set[str] = {"comparison", "cautions", *(f"fit-{i}" for i in range(1, n + 1))}
    for j, raw in enumerate(extra_sections, start=1):
        section = _extra(raw, counter)
        anchor = section.anchor or f"extra-{j}"
        if anchor in used:
            anchor = f"{anchor}-{j}"
        used.add(anchor)
        body.append(f'<section class="extra" id="{esc(anchor)}"><h2>{esc(section.title)}</h2>'
                     f"{section.html}</section>")
        contents.append(f'<li><a href="#{esc(anchor)}">{esc(section.title)}</a></li>')
    contents.append('<li><a href="#cautions">Cautions</a></li>')
    now = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    kinds = sorted({r.kind for r in loaded})
    byline = (f"{n} fit result{'s' if n > 1 else ''} ({', '.join(kinds)}) · written {now} · "
              f"cavchar {__version__}")
    page = Template(_template("report.html"))
    return page.substitute(
        title=esc(title or ("Cavity fit report" if n == 1 else "Cavity fit report: "
                            f"{n} results")),
        version=esc(__version__), byline=esc(byline), generated=esc(now),
        intro=f'<p class="statement">{esc(intro)}</p>' if intro else "",
        css=_template("report.css"), contents="\n".join(contents), body="\n".join(body),
        cautions=CAUTIONS_HTML,
    )


def write_report(
    results: Sequence[Any] | Any,
    out_path: str | os.PathLike,
    *,
    force: bool = False,
    title: str | None = None,
    labels: Sequence[str] | None = None,
    truths: Sequence[Mapping[str, float] | None] | None = None,
    records: Sequence[Any] | None = None,
    extra_sections: Sequence[Any] = (),
    intro: str | None = None,
    figures: bool | Sequence[bool] = True,
) -> Path:
    """Write one self-contained HTML report of fit results.

    Parameters
    ----------
    results
        FitResult objects and/or paths of result JSON files (one or a list).
    out_path
        The HTML file to write (atomically).
    force
        Replace an existing file; without it an existing file is an
        :class:`~cavchar.errors.InputError` raised before any work is done.
    title
        Page title (default: "Cavity fit report").
    labels
        One short name per result (default: kind and input file name).
    truths
        Per result, known true values in SI units by column name (simulated
        data): shown in the summary table and the corner plot.
    records
        Per result, the fitted record (default: re-read from the input file
        named in the provenance, if it is unchanged).
    extra_sections
        Further sections: :class:`Section` objects, or the objects returned by
        :func:`cavchar.tracking.cooldown_trend`, :func:`cavchar.tracking.qualify`
        and :func:`cavchar.tracking.thermal_budget`.
    intro
        A paragraph of plain text under the title.
    figures
        Draw the figures of every result (True), of none, or per result.

    Returns
    -------
    Path
        The file written.
    """
    from cavchar.io.atomic import check_can_write, write_text_atomic

    target = check_can_write(out_path, force)
    text = render_report(results, title=title, labels=labels, truths=truths, records=records,
                         extra_sections=extra_sections, intro=intro, figures=figures)
    return write_text_atomic(target, text, force=force)
