"""The self-contained HTML report of one or several fit results.

One file holds everything: figures are embedded as base64 PNG, the style sheet
is inline and nothing refers to the network.  The page is filled from the
package templates ``cavchar/templates/report.html`` (jinja2, autoescaping on)
and ``report.css``.

Safety: every value from a result reaches the page escaped (fragments are
:class:`markupsafe.Markup` built by :func:`cavchar.report.text.html`, the
template escapes whatever else it gets), and the page carries a
Content-Security-Policy (:data:`CONTENT_SECURITY_POLICY`) that forbids every
script and every outside resource.  Figures are drawn from what the result
holds; the input file named in a result's provenance is never opened, unless
``reread_inputs=True`` asks for it and its SHA-256 matches the recorded one.

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
from typing import TYPE_CHECKING, Any

from cavchar.errors import InputError
from cavchar.report.figures import (
    Figure,
    comparison_figure,
    data_figures,
    load_input_record,
    sampler_figures,
)
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
from cavchar.report.text import Markup, format_interval_row, html, table_html

if TYPE_CHECKING:
    from cavchar.result import FitResult

__all__ = ["write_report", "render_report", "load_results", "Section", "result_label",
           "result_summary_html", "CONTENT_SECURITY_POLICY"]

#: the page's Content-Security-Policy: no script, no outside resource, images only as
#: embedded data, the inline style sheet
CONTENT_SECURITY_POLICY = ("default-src 'none'; script-src 'none'; img-src data:; "
                           "style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'")

#: rows of the comparison table: column, heading, dimension
_COMPARE_ROWS = (("lifetime", "T_c", "time"), ("quality_factor", "Q", "dimensionless"),
                 ("n_thermal", "n_th", "dimensionless"),
                 ("effective_temperature", "T_eff", "temperature"))


def load_results(results: Sequence[FitResult | str | os.PathLike]
                 ) -> tuple[list[FitResult], list[str | None]]:
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


def result_label(result: FitResult, source: str | None = None) -> str:
    """Short name of a result: its kind and input file (or result file)."""
    inputs = [f.path for f in result.provenance.inputs if f.path]
    name = (Path(inputs[0]).name + (f" (+{len(inputs) - 1})" if len(inputs) > 1 else "")
            if inputs else Path(source).name if source else "no input file")
    return f"{result.kind} · {name}"


def _template(name: str) -> str:
    return resources.files("cavchar").joinpath("templates", name).read_text(encoding="utf-8")


def _page_template():
    """The jinja2 page template, autoescaping every value that is not Markup."""
    import jinja2

    env = jinja2.Environment(autoescape=True, undefined=jinja2.StrictUndefined,
                             keep_trailing_newline=True)
    return env.from_string(_template("report.html"))


def _close(fig: Any) -> None:
    """Release a figure made through pyplot (figures on a bare Agg canvas need nothing)."""
    pyplot = sys.modules.get("matplotlib.pyplot")
    if pyplot is not None:
        pyplot.close(fig)


#: resolution of the embedded PNG figures (dots per inch): sharp on screen, light in bytes
REPORT_DPI = 120.0


def _figure_html(item: Figure, number: str) -> Markup:
    from cavchar.plots.posterior import figure_data_uri

    try:
        # figures come laid out (tight_layout / corner's margins): one rendering pass
        uri = figure_data_uri(item.figure, dpi=REPORT_DPI, tight=False)
        width, height = (int(round(v * REPORT_DPI)) for v in item.figure.get_size_inches())
    finally:
        _close(item.figure)
    return html('<figure><img src="{}" alt="{}" style="max-width:min(100%, {}px)" '
                'data-height="{}"><figcaption><b>Figure {}. {}.</b> {}</figcaption></figure>',
                uri, item.title, width, height, number, item.title, item.caption)


class _Counter:
    def __init__(self) -> None:
        self.n = 0

    def next(self) -> str:
        self.n += 1
        return str(self.n)


def _status_line(result: FitResult) -> Markup:
    d = result.diagnostics
    state = (Markup('<span class="badge pass">CONVERGED</span>') if result.converged is True
             else Markup('<span class="badge fail">NOT CONVERGED</span>'))
    parts = [f"{len(result.samples)} posterior draws", f"seed {result.seed}"]
    if d.n_walkers:
        parts.append(f"{d.n_walkers} walkers × {d.n_steps if d.n_steps is not None else '?'}"
                     " steps")
    return html('<p class="status">{} {}</p>', state, " · ".join(parts))


def _result_section(index: int, result: FitResult, label: str, *, truths: Mapping | None,
                    record: Any, counter: _Counter, figures: bool = True,
                    reread_input: bool = False) -> tuple[str, Markup]:
    anchor = f"fit-{index}"
    parts = [html('<section class="fit" id="{}">', anchor),
             html("<h2>{}. {}</h2>", index, label), _status_line(result)]
    parts.append(Markup("<h3>Summary</h3>"))
    parts.append(summary_table_html(result, index, truths))
    parts.append(Markup("<h3>In one line</h3>"))
    parts.append(oneliners_html(result))
    parts.append(Markup("<h3>Planck check</h3>"))
    parts.append(planck_html(result))
    if figures:
        notes: list[str] = []
        if record is None and reread_input:
            record, why = load_input_record(result)
            if record is None:
                notes.append(f"The input file was not read again: {why}.")
        made, more = data_figures(result, record)
        parts.append(Markup("<h3>Data and fit</h3>"))
        for fig in made:
            parts.append(_figure_html(fig, counter.next()))
        for note in notes + more:
            parts.append(html('<p class="note">{}</p>', note))
    details = [Markup("<h3>Model checks</h3>"), checks_html(result),
               Markup("<h3>Posterior and sampler</h3>")]
    if figures:
        notes = []
        made = sampler_figures(result, truths=dict(truths) if truths else None, notes=notes)
        for fig in made:
            details.append(_figure_html(fig, counter.next()))
        for note in notes:
            details.append(html('<p class="note">{}</p>', note))
    details.append(diagnostics_html(result))
    details.append(Markup("<h3>Priors and settings</h3>"))
    details.append(priors_html(result))
    settings = json.dumps(result.settings, indent=1, sort_keys=True, default=str)
    details.append(html("<details><summary>every setting of this fit (JSON)</summary>"
                        "<pre>{}</pre></details>", settings))
    details.append(Markup("<h3>Provenance</h3>"))
    details.append(provenance_html(result))
    if figures:
        parts += details
    else:  # a compact section: the rest folded away
        parts.append(html('<details class="fold"><summary>model checks, convergence, priors '
                          "and provenance of this fit (its figures are left out to keep the "
                          "page short; the result file holds every draw)</summary>{}</details>",
                          Markup("").join(details)))
    parts.append(Markup("</section>"))
    return anchor, Markup("\n").join(parts)


def _comparison_section(results: Sequence[FitResult], labels: Sequence[str],
                        counter: _Counter) -> Markup:
    header = ["result"] + [f"{h} (95% interval)" for _, h, _ in _COMPARE_ROWS]
    rows = []
    for result, label in zip(results, labels, strict=True):
        table = result.summary()
        cells: list[Any] = [label]
        for name, _, dim in _COMPARE_ROWS:
            if name not in table.index:
                cells.append("–")
                continue
            text = format_interval_row(table.loc[name], dim)
            cells.append(html("{} <span class=mono>[{}]</span>{}", text["median"],
                              text["interval95"], f" {text['unit']}" if text["unit"] else ""))
        rows.append(cells)
    parts = [Markup('<section class="comparison" id="comparison">'),
             Markup("<h2>Results side by side</h2>"),
             table_html(header, rows, css_class="grid summary",
                        caption="median and equal-tailed 95% credible interval of each result")]
    fig = comparison_figure(results, labels)
    if fig is not None:
        parts.append(_figure_html(Figure(
            "Lifetime, thermal photons and effective temperature of each result",
            "Point: median; thick bar: 68% interval; thin bar: 95% interval. Each result "
            "keeps its own marker and colour.", fig), counter.next()))
    parts.append(Markup("</section>"))
    return Markup("\n").join(parts)


def _extra(section: Any, counter: _Counter) -> Section:
    if isinstance(section, Section):
        return section
    from cavchar.report.tracking import section_for

    return section_for(section, figure_html=lambda fig: _figure_html(fig, counter.next()))


def result_summary_html(result: FitResult) -> Markup:
    """A compact, escaped HTML view of one result (for notebooks): status, summary table,
    one-line forms and the Planck check; no figures."""
    parts = [html("<div><p><b>cavchar fit result</b> · {}</p>", str(result.kind)),
             _status_line(result), summary_table_html(result, 1, None),
             oneliners_html(result), planck_html(result),
             Markup("</div>")]
    return Markup("\n").join(parts)


def render_report(
    results: Sequence[FitResult | str | os.PathLike],
    *,
    title: str | None = None,
    labels: Sequence[str] | None = None,
    truths: Sequence[Mapping[str, float] | None] | None = None,
    records: Sequence[Any] | None = None,
    extra_sections: Sequence[Any] = (),
    intro: str | None = None,
    figures: bool | Sequence[bool] = True,
    reread_inputs: bool = False,
) -> str:
    """The report of fit results as one self-contained HTML string.

    Parameters
    ----------
    results
        FitResult objects and/or paths of result JSON files.
    title
        Page title (default: "Cavity fit report").
    labels
        One short name per result (default: kind and input file name).
    truths
        Per result, known true values in SI units by column name (simulated
        data): shown in the summary table and the corner plot.
    records
        Per result, the fitted record, for data figures beyond what the result's
        own excerpts allow (default: none; figures are drawn from the result).
    extra_sections
        Further sections: :class:`Section` objects, or the objects returned by
        :func:`cavchar.tracking.cooldown_trend`, :func:`cavchar.tracking.qualify`
        and :func:`cavchar.tracking.thermal_budget`.
    intro
        A paragraph of plain text under the title.
    figures
        Draw the figures of every result (True), of none, or per result.
    reread_inputs
        Read each result's input file again for its data figures (default: never).
        Only a file whose SHA-256 matches the one recorded in the provenance is
        read; a result without a recorded hash is not.

    Returns
    -------
    str
        The page (see :func:`write_report` to write it to a file).
    """
    from cavchar import __version__

    loaded, sources = load_results(results)
    n = len(loaded)
    labels = [str(x) for x in labels] if labels is not None else [
        result_label(r, s) for r, s in zip(loaded, sources, strict=True)]
    truths = list(truths) if truths is not None else [None] * n
    records = list(records) if records is not None else [None] * n
    draw = [bool(figures)] * n if isinstance(figures, bool) else [bool(f) for f in figures]
    if not (len(labels) == len(truths) == len(records) == len(draw) == n):
        raise InputError("labels, truths, records and figures need one entry per result")
    counter = _Counter()
    contents: list[tuple[str, str]] = []
    body: list[Markup] = []
    if n > 1:
        body.append(_comparison_section(loaded, labels, counter))
        contents.append(("comparison", "Results side by side"))
    for i, (result, label) in enumerate(zip(loaded, labels, strict=True), start=1):
        anchor, text = _result_section(i, result, label, truths=truths[i - 1],
                                       record=records[i - 1], counter=counter,
                                       figures=draw[i - 1], reread_input=reread_inputs)
        body.append(text)
        contents.append((anchor, label))
    used: set[str] = {"comparison", "cautions", *(f"fit-{i}" for i in range(1, n + 1))}
    for j, raw in enumerate(extra_sections, start=1):
        section = _extra(raw, counter)
        anchor = str(section.anchor or f"extra-{j}")
        if anchor in used:
            anchor = f"{anchor}-{j}"
        used.add(anchor)
        # a Section's body is HTML made by cavchar's own code (values escaped there)
        body.append(html('<section class="extra" id="{}"><h2>{}</h2>{}</section>', anchor,
                         section.title, Markup(section.html)))
        contents.append((anchor, str(section.title)))
    contents.append(("cautions", "Cautions"))
    now = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    kinds = sorted({str(r.kind) for r in loaded})
    byline = (f"{n} fit result{'s' if n > 1 else ''} ({', '.join(kinds)}) · written {now} · "
              f"cavchar {__version__}")
    return _page_template().render(
        title=title or ("Cavity fit report" if n == 1 else f"Cavity fit report: {n} results"),
        version=__version__, byline=byline, generated=now, intro=intro or "",
        csp=CONTENT_SECURITY_POLICY, css=Markup(_template("report.css")), contents=contents,
        body=body, cautions=CAUTIONS_HTML,
    )


def write_report(
    results: Sequence[FitResult | str | os.PathLike] | FitResult | str | os.PathLike,
    out_path: str | os.PathLike,
    *,
    force: bool = False,
    **options: Any,
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
    **options
        ``title``, ``labels``, ``truths``, ``records``, ``extra_sections``,
        ``intro``, ``figures``, ``reread_inputs``: as for :func:`render_report`.

    Returns
    -------
    Path
        The file written.
    """
    from cavchar.io.atomic import check_can_write, write_text_atomic

    target = check_can_write(out_path, force)
    text = render_report(results, **options)
    return write_text_atomic(target, text, force=force)
