"""HTML pieces of one result's part of the report: summary table, one-liners, Planck
check, model checks, convergence diagnostics, priors and provenance.

Every piece is :class:`markupsafe.Markup` built with :func:`cavchar.report.text.html`
or :func:`~cavchar.report.text.table_html`, so each value from a result is escaped on
its way in.  A check or diagnostics block whose fields do not have the types its
typed view expects is shown by the generic key-value view instead (as escaped text).
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from cavchar.quantities import DESCRIPTIONS
from cavchar.report.text import (
    Markup,
    format_interval_row,
    format_quantity_text,
    html,
    number_text,
    planck_sentences,
    prior_text,
    probability_text,
    table_html,
)

if TYPE_CHECKING:
    from cavchar.result import FitResult
    from cavchar.result_types import PlanckCheck, SamplerDiagnostics

__all__ = ["Section", "CAUTIONS_HTML", "SUMMARY_ORDER", "summary_names", "summary_table_html",
           "oneliners_html", "planck_html", "checks_html", "diagnostics_html", "priors_html",
           "provenance_html"]


@dataclass(frozen=True)
class Section:
    """A section of the report: a title (plain text, escaped) and its HTML body (trusted:
    built by cavchar's own code, with every value escaped on its way in)."""

    title: str
    html: str
    anchor: str | None = None


CAUTIONS_HTML = Markup(
    "<p>cavchar analyses data and controls nothing: no instrument, cryostat or source is "
    "driven by it, and nothing in this report is an instruction to operate one.</p>"
    "<p>The experiments behind such data involve hazards. Cryogens (liquid helium and "
    "nitrogen) can displace the air in a room, cause cold burns and build up pressure in "
    "closed volumes; high-power microwave sources can cause RF burns and interference. "
    "Follow your laboratory's safety rules and the local codes and regulations; nothing in "
    "this tool or its reports replaces them.</p>"
    "<p>The intervals above are Bayesian credible intervals under the stated model and "
    "priors. Where a model check flags a misfit, or the sampler did not converge, treat "
    "the numbers with care.</p>"
)

#: quantity -> description in the summary table (in this order, those present)
SUMMARY_ORDER: dict[str, str] = dict(DESCRIPTIONS)
_SKIP = ("stage_occupation", "log_posterior", "log_likelihood")


def summary_names(result: FitResult) -> list[str]:
    """Rows of the summary table: the main quantities, then the other fitted parameters."""
    table = result.summary()
    names = [n for n in SUMMARY_ORDER if n in table.index]
    names += [n for n in result.parameter_names if n not in names and n in table.index]
    return [n for n in names if n not in _SKIP]


def _upper_limit(result: FitResult, name: str) -> bool:
    return (result.planck is not None and result.planck.piles_up_at_zero
            and name in ("n_thermal", "effective_temperature"))


def summary_table_html(result: FitResult, index: int, truths: Mapping[str, float] | None) -> str:
    """The summary table of one result (``id="summary-<index>"``)."""
    table = result.summary()
    header = ["quantity", "median", "68% interval", "95% interval", "unit"]
    if truths:
        header.append("true value")
    rows, flagged, at_bound = [], False, False
    for name in summary_names(result):
        unit, dimension, label = result.column_info(name)
        text = format_interval_row(table.loc[name], dimension)
        if unit and dimension == "dimensionless":  # a data unit (a.u., V, mW) or dB
            text["unit"] = f"{text['unit']} {unit}".strip()
        what = SUMMARY_ORDER.get(name, f"{label} ({name})")
        limit = result.prior_limit(name)
        if limit is not None:  # not a measurement: the one-sided limit only
            at_bound = True
            sign = {"lower": ">", "upper": "<"}.get(limit["kind"])
            value = (f"{sign} {format_quantity_text(limit['limit'], dimension, 3)}" if sign
                     else "not constrained")
            row = [what + " ‡", value, "one-sided 95% limit", "posterior at a prior bound",
                   unit if dimension == "dimensionless" else ""]
            if truths:
                true = truths.get(name)
                row.append("–" if true is None else format_quantity_text(float(true),
                                                                         dimension, 4))
            rows.append(row)
            continue
        if _upper_limit(result, name):
            what += " †"
            flagged = True
        row = [what, text["median"], text["interval68"], text["interval95"], text["unit"]]
        if truths:
            true = truths.get(name)
            row.append("–" if true is None else format_quantity_text(float(true), dimension, 4))
        rows.append(row)
    out = [html('<div id="summary-{}">{}</div>', index, table_html(
        header, rows, css_class="grid summary",
        caption="posterior median and equal-tailed credible intervals "
                "(68%: 15.9th–84.1st percentile; 95%: 2.5th–97.5th)"))]
    if at_bound:
        flags = (result.checks.get("prior_bounds") or {}).get("flags") or []
        out.append(html('<p class="note">‡ The posterior reaches a bound of its prior: the '
                        "data do not constrain the quantity beyond the limit given; it is a "
                        "one-sided limit, not a measurement. {}</p>", " ".join(
                            f"{m[0].upper()}{m[1:]}." for m in flags)))
    if flagged:
        out.append(Markup('<p class="note">† n_th piles up against zero (its 95% interval '
                          "spans more than two decades): quote the one-sided 95% upper limit "
                          "given below, not the interval.</p>"))
    return Markup("\n").join(out)


def oneliners_html(result: FitResult) -> str:
    """The one-line form of each summarised quantity (for papers and log books)."""
    items = []
    for name in summary_names(result):
        try:
            line = result.one_line(name)
        except (KeyError, ValueError):
            continue
        items.append(html("<li><code>{}</code></li>", line))
    return html('<ul class="oneliners">{}</ul>', Markup("").join(items))


def planck_html(result: FitResult) -> Markup:
    """The Planck check in words, or why there is none."""
    check = result.planck
    if check is not None:
        try:
            return _planck_words(check)
        except (TypeError, ValueError, KeyError, AttributeError):
            return _generic_check(check.to_dict())
    else:
        fit = (result.settings or {}).get("fit", {})
        missing = [w for w, k in (("the mode frequency", "freq_hz"),
                                  ("the stage temperature", "stage_temp_k"))
                   if fit.get(k) is None]
        if "n_thermal" not in result.samples.columns:
            why = "this fit does not measure the thermal photon number"
        elif missing:
            why = "it needs " + " and ".join(missing) + " (--freq, --stage-temp)"
        else:
            why = "the fit stored none"
        return html('<p class="note">No Planck check: {}.</p>', why)
    return Markup("")


def _planck_words(check: PlanckCheck) -> Markup:
    sentences = planck_sentences(check)
    first = html('<p class="statement">{}</p>', sentences[0])
    rest = Markup("").join(html("<p>{}</p>", s) for s in sentences[1:])
    verdict = check.verdict or ""
    badge = Markup("")
    if verdict:
        klass = "fail" if "hotter" in verdict else "pass" if "colder" in verdict else "undecided"
        badge = html('<p><span class="badge {}">{}</span> at {} posterior probability</p>',
                     klass, verdict.upper(),
                     number_text(0.95 if check.decision_probability is None
                                 else check.decision_probability, "g"))
    return first + rest + badge


def _cell(value: Any, key: str = "") -> str:
    """Plain text of a value for a table cell (escaped by the table)."""
    if value is None:
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float | int) and _is_probability_key(key) and 0 <= value <= 1:
        return probability_text(value)
    if isinstance(value, float):
        return f"{value:.4g}" if math.isfinite(value) else "–"
    if isinstance(value, dict | list):
        return json.dumps(value, sort_keys=True, default=str)
    return str(value)


def _is_probability_key(key: str) -> bool:
    key = str(key).lower()
    return key.startswith(("p_value", "prob")) or key.endswith(("p_value", "probability"))


def _generic_check(value: Any) -> Markup:
    """Any JSON value as escaped key-value tables (the fallback view of every block)."""
    if not isinstance(value, Mapping):
        return html("<p>{}</p>", _cell(value))
    scalars = [(k, v) for k, v in value.items()
               if not (isinstance(v, list) and v and all(isinstance(r, Mapping) for r in v))]
    tables = [(k, v) for k, v in value.items() if (k, v) not in scalars]
    parts = []
    if scalars:
        parts.append(table_html(["item", "value"], [(str(k).replace("_", " "), _cell(v, k))
                                                    for k, v in scalars],
                                css_class="grid keyvalue", numeric_from=9))
    for key, rows in tables:
        columns = list(dict.fromkeys(c for row in rows for c in row))
        parts.append(table_html([str(c).replace("_", " ") for c in columns],
                                [[_cell(row.get(c), c) for c in columns] for row in rows],
                                css_class="grid", caption=str(key).replace("_", " ")))
    return Markup("").join(parts)


def _dwell_check(check: Mapping[str, Any]) -> Markup:
    misfit = check.get("misfit")
    badge = (Markup('<span class="badge fail">MISFIT</span>') if misfit
             else Markup('<span class="badge pass">NO MISFIT</span>'))
    words = html("{} Smallest posterior predictive p-value {} against a threshold of {} ({}).",
                 badge, number_text(check.get("smallest_p_value"), ".3g"),
                 number_text(check.get("threshold"), ".3g"), check.get("method", ""))
    rows = []
    for row in check.get("per_photon_number", []):
        mean, expected = row.get("mean_dwell_s"), row.get("expected_mean_dwell_s")
        rows.append([row.get("photon_number"), row.get("complete_dwells"),
                     format_quantity_text(mean, "time") if mean is not None else "–",
                     format_quantity_text(expected, "time") if expected is not None else "–",
                     _cell(row.get("ks_distance")), _cell(row.get("p_value"), "p_value")])
    table = table_html(["photon number", "complete dwells", "mean dwell", "expected (fit)",
                        "KS distance", "p-value"], rows, css_class="grid")
    return html("<p>{}</p>{}", words, table)


def checks_html(result: FitResult) -> Markup:
    """Every check of the result other than the Planck check."""
    checks = result.checks
    if not checks:
        return Markup('<p class="note">This fit stored no posterior predictive or residual '
                      "check.</p>")
    parts = []
    for name, value in checks.items():
        parts.append(html("<p><b>{}</b></p>", str(name).replace("_", " ")))
        if name == "dwell_times" and isinstance(value, Mapping):
            try:
                parts.append(_dwell_check(value))
                continue
            except (TypeError, ValueError, KeyError, AttributeError):
                pass
        if isinstance(value, Mapping) and isinstance(value.get("misfit"), bool):
            parts.append(Markup('<p><span class="badge fail">MISFIT</span></p>')
                         if value["misfit"] else
                         Markup('<p><span class="badge pass">NO MISFIT</span></p>'))
        parts.append(_generic_check(value))
    return Markup("").join(parts)


def diagnostics_html(result: FitResult) -> Markup:
    """Convergence diagnostics: the run as a whole and per parameter."""
    d = result.diagnostics
    if not d.to_dict():
        return Markup('<p class="note">No sampler diagnostics were stored.</p>')
    try:
        return _diagnostics_tables(result, d)
    except (TypeError, ValueError, KeyError, AttributeError):
        return _generic_check(d.to_dict())


def _diagnostics_tables(result: FitResult, d: SamplerDiagnostics) -> Markup:
    acc = d.acceptance_fraction or {}
    overall = [
        ("converged", _cell(result.converged)),
        ("walkers × steps", f"{_cell(d.n_walkers if d.n_walkers is not None else '?')} × "
                            f"{_cell(d.n_steps if d.n_steps is not None else '?')}"),
        ("burn-in (steps)", _cell(d.burn_in)),
        ("thinning (steps)", _cell(d.thin)),
        ("draws kept", _cell(d.n_draws if d.n_draws is not None else result.n_draws)),
        ("moves", _cell(d.moves)),
        ("acceptance fraction", (f"{acc['mean']:.3f} (walkers {acc['min']:.3f}–"
                                 f"{acc['max']:.3f})") if "mean" in acc else "–"),
        ("sampling time", format_quantity_text(d.elapsed_s, "time")),
    ]
    parts = [table_html(["run", "value"], overall, css_class="grid keyvalue", numeric_from=9)]
    names = list((d.tau or {}).keys())
    if names:
        def get(key: str, name: str, fmt: str) -> str:
            value = (getattr(d, key) or {}).get(name)
            return "–" if value is None else format(value, fmt)

        rows = [[name, get("tau", name, ".1f"), get("chain_length_in_tau", name, ".0f"),
                 get("tau_relative_change", name, ".1%"), get("rhat", name, ".4f"),
                 get("ess_bulk", name, ".0f"), get("ess_tail", name, ".0f")] for name in names]
        parts.append(table_html(
            ["parameter", "autocorrelation time τ (steps)", "chain after burn-in (τ)",
             "last change of τ", "split R-hat", "bulk ESS", "tail ESS"], rows,
            css_class="grid", caption="convergence per parameter (rank-normalized split R-hat "
                                      "and ESS after Vehtari et al. 2021)"))
    failed = d.failed_checks
    if failed:
        parts.append(html('<p><span class="badge fail">FAILED CHECKS</span></p><ul>{}</ul>',
                          Markup("").join(html("<li>{}</li>", f) for f in failed)))
    else:
        parts.append(Markup("<p>Every convergence check passed.</p>"))
    return Markup("").join(parts)


def priors_html(result: FitResult) -> Markup:
    """The fitted parameters with their priors and MAP values."""
    rows = []
    for spec in result.specs:
        prior = spec.prior.to_dict() if hasattr(spec.prior, "to_dict") else None
        map_value = (result.map_values or {}).get(spec.name, math.nan)
        rows.append([spec.name, spec.label, spec.unit or "–",
                     prior_text(prior, spec.dimension),
                     "ln" if spec.log_scale else "linear",
                     format_quantity_text(map_value, spec.dimension, 4)])
    return table_html(["parameter", "label", "unit", "prior", "sampled in", "MAP"], rows,
                      css_class="grid", numeric_from=5)


def provenance_html(result: FitResult) -> Markup:
    """Where the result came from: input, hash, command, seed, versions, date."""
    prov = result.provenance

    def joined(values: Any) -> str:
        values = [v for v in values if v is not None and v != ""]
        return "; ".join(str(v) for v in values) if values else "–"

    rows = [
        ("input file", joined(f.path for f in prov.inputs)),
        ("input SHA-256", joined(f.sha256 for f in prov.inputs)),
        ("command", prov.command or "– (not recorded: the fit was called from Python)"),
        ("seed", joined([result.seed])),
        ("fitted at", joined([prov.created_at])),
        ("versions", ", ".join(f"{k} {v}" for k, v in prov.versions.items()) or "–"),
        ("platform", joined([prov.platform])),
    ]
    if "n_thermal" in result.parameter_names and result.planck is not None:
        rows.append(("draws behind the probabilities", joined([result.planck.n_draws])))
    return table_html(["item", "value"], rows, css_class="grid keyvalue", numeric_from=9)

