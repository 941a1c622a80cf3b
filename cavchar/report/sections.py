"""HTML pieces of one result's part of the report: summary table, one-liners, Planck
check, model checks, convergence diagnostics, priors and provenance."""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from cavchar.report.text import (
    esc,
    format_interval_row,
    format_quantity_text,
    planck_sentences,
    prior_text,
    probability_text,
    table_html,
)

__all__ = ["Section", "CAUTIONS_HTML", "SUMMARY_ORDER", "summary_names", "summary_table_html",
           "oneliners_html", "planck_html", "checks_html", "diagnostics_html", "priors_html",
           "provenance_html"]


@dataclass(frozen=True)
class Section:
    """A section of the report: a title and its HTML body (already escaped / trusted)."""

    title: str
    html: str
    anchor: str | None = None


CAUTIONS_HTML = (
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
SUMMARY_ORDER: dict[str, str] = {
    "lifetime": "energy lifetime T_c",
    "quality_factor": "quality factor Q = 2π ν T_c",
    "linewidth": "linewidth (FWHM) 1/(2π T_c)",
    "n_thermal": "thermal photon number n_th",
    "effective_temperature": "effective temperature T_eff",
    "amplitude_decay_time": "amplitude decay time 2 T_c",
    "excess_photons": "excess photons n_th − n(ν, T_stage)",
}
_SKIP = ("stage_occupation", "log_posterior", "log_likelihood")


def summary_names(result: Any) -> list[str]:
    """Rows of the summary table: the main quantities, then the other fitted parameters."""
    table = result.summary()
    names = [n for n in SUMMARY_ORDER if n in table.index]
    names += [n for n in result.parameter_names if n not in names and n in table.index]
    return [n for n in names if n not in _SKIP]


def _upper_limit(result: Any, name: str) -> bool:
    planck = (result.checks or {}).get("planck") or {}
    return bool(planck.get("piles_up_at_zero")) and name in ("n_thermal",
                                                               "effective_temperature")


def summary_table_html(result: Any, index: int, truths: Mapping[str, float] | None) -> str:
    """The summary table of one result (``id="summary-<index>"``)."""
    table = result.summary()
    header = ["quantity", "median", "68% interval", "95% interval", "unit"]
    if truths:
        header.append("true value")
    rows, flagged = [], False
    for name in summary_names(result):
        unit, dimension, label = result.column_info(name)
        text = format_interval_row(table.loc[name], dimension)
        what = SUMMARY_ORDER.get(name, f"{label} ({name})")
        if _upper_limit(result, name):
            what += " †"
            flagged = True
        row = [what, text["median"], text["interval68"], text["interval95"], text["unit"]]
        if truths:
            true = truths.get(name)
            row.append("–" if true is None else format_quantity_text(float(true), dimension, 4))
        rows.append(row)
    out = [f'<div id="summary-{index}">' + table_html(
        header, rows, css_class="grid summary",
        caption="posterior median and equal-tailed credible intervals "
                "(68%: 15.9th–84.1st percentile; 95%: 2.5th–97.5th)") + "</div>"]
    if flagged:
        out.append('<p class="note">† n_th piles up against zero (its 95% interval spans more '
                   "than two decades): quote the one-sided 95% upper limit given below, not "
                   "the interval.</p>")
    return "\n".join(out)


def oneliners_html(result: Any) -> str:
    """The one-line form of each summarised quantity (for papers and log books)."""
    items = []
    for name in summary_names(result):
        try:
            line = result.one_line(name)
        except (KeyError, ValueError):
            continue
        items.append(f"<li><code>{esc(line)}</code></li>")
    return '<ul class="oneliners">' + "".join(items) + "</ul>"


def planck_html(check: Mapping[str, Any] | None, result: Any) -> str:
    """The Planck check in words, or why there is none."""
    if not check:
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
        return f'<p class="note">No Planck check: {esc(why)}.</p>'
    sentences = planck_sentences(check)
    first = f'<p class="statement">{esc(sentences[0])}</p>'
    rest = "".join(f"<p>{esc(s)}</p>" for s in sentences[1:])
    verdict = str(check.get("verdict", ""))
    badge = ""
    if verdict:
        klass = "fail" if "hotter" in verdict else "pass" if "colder" in verdict else "undecided"
        badge = f'<p><span class="badge {klass}">{esc(verdict.upper())}</span> at ' \
                f"{esc(check.get('decision_probability', 0.95))} posterior probability</p>"
    return first + rest + badge


def _cell(value: Any) -> str:
    if value is None:
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:.4g}" if math.isfinite(value) else "–"
    if isinstance(value, (dict, list)):
        return json.dumps(value, sort_keys=True)
    return str(value)


def _generic_check(value: Any) -> str:
    if not isinstance(value, Mapping):
        return f"<p>{esc(_cell(value))}</p>"
    scalars = [(k, v) for k, v in value.items()
               if not (isinstance(v, list) and v and isinstance(v[0], Mapping))]
    tables = [(k, v) for k, v in value.items() if (k, v) not in scalars]
    parts = []
    if scalars:
        parts.append(table_html(["item", "value"], [(k.replace("_", " "), _cell(v))
                                                    for k, v in scalars],
                                css_class="grid keyvalue", numeric_from=9))
    for key, rows in tables:
        columns = list(dict.fromkeys(c for row in rows for c in row))
        parts.append(table_html([c.replace("_", " ") for c in columns],
                                [[_cell(row.get(c)) for c in columns] for row in rows],
                                css_class="grid", caption=key.replace("_", " ")))
    return "".join(parts)


def _dwell_check(check: Mapping[str, Any]) -> str:
    misfit = check.get("misfit")
    badge = ('<span class="badge fail">MISFIT</span>' if misfit
             else '<span class="badge pass">NO MISFIT</span>')
    p = check.get("smallest_p_value")
    words = (f"{badge} Smallest posterior predictive p-value "
             f"{'–' if p is None else f'{p:.3g}'} against a threshold of "
             f"{check.get('threshold', float('nan')):.3g} ({esc(check.get('method', ''))}).")
    rows = []
    for row in check.get("per_photon_number", []):
        mean, expected = row.get("mean_dwell_s"), row.get("expected_mean_dwell_s")
        rows.append([row.get("photon_number"), row.get("complete_dwells"),
                     format_quantity_text(mean, "time") if mean is not None else "–",
                     format_quantity_text(expected, "time") if expected is not None else "–",
                     _cell(row.get("ks_distance")), _cell(row.get("p_value"))])
    table = table_html(["photon number", "complete dwells", "mean dwell", "expected (fit)",
                        "KS distance", "p-value"], rows, css_class="grid")
    return f"<p>{words}</p>{table}"


def checks_html(result: Any) -> str:
    """Every check of the result other than the Planck check."""
    checks = {k: v for k, v in (result.checks or {}).items() if k != "planck"}
    if not checks:
        return '<p class="note">This fit stored no posterior predictive or residual check.</p>'
    parts = []
    for name, value in checks.items():
        title = name.replace("_", " ")
        parts.append(f"<p><b>{esc(title)}</b></p>")
        if name == "dwell_times" and isinstance(value, Mapping):
            parts.append(_dwell_check(value))
        else:
            parts.append(_generic_check(value))
    return "".join(parts)


def diagnostics_html(result: Any) -> str:
    """Convergence diagnostics: the run as a whole and per parameter."""
    d = result.diagnostics or {}
    if not d:
        return '<p class="note">No sampler diagnostics were stored.</p>'
    acc = d.get("acceptance_fraction") or {}
    overall = [
        ("converged", _cell(d.get("converged", result.converged))),
        ("walkers × steps", f"{d.get('n_walkers', '?')} × {d.get('n_steps', '?')}"),
        ("burn-in (steps)", _cell(d.get("burn_in"))),
        ("thinning (steps)", _cell(d.get("thin"))),
        ("draws kept", _cell(d.get("n_draws", len(result.samples)))),
        ("moves", _cell(d.get("moves"))),
        ("acceptance fraction", (f"{acc['mean']:.3f} (walkers {acc['min']:.3f}–"
                                 f"{acc['max']:.3f})") if "mean" in acc else "–"),
        ("sampling time", format_quantity_text(d["elapsed_s"], "time")
         if d.get("elapsed_s") is not None else "–"),
    ]
    parts = [table_html(["run", "value"], overall, css_class="grid keyvalue", numeric_from=9)]
    names = list((d.get("tau") or {}).keys())
    if names:
        def get(key: str, name: str, fmt: str) -> str:
            value = (d.get(key) or {}).get(name)
            return "–" if value is None else format(value, fmt)

        rows = [[name, get("tau", name, ".1f"), get("chain_length_in_tau", name, ".0f"),
                 get("tau_relative_change", name, ".1%"), get("rhat", name, ".4f"),
                 get("ess_bulk", name, ".0f"), get("ess_tail", name, ".0f")] for name in names]
        parts.append(table_html(
            ["parameter", "autocorrelation time τ (steps)", "chain after burn-in (τ)",
             "last change of τ", "split R-hat", "bulk ESS", "tail ESS"], rows,
            css_class="grid", caption="convergence per parameter (rank-normalized split R-hat "
                                      "and ESS after Vehtari et al. 2021)"))
    failed = d.get("failed_checks") or []
    if failed:
        parts.append('<p><span class="badge fail">FAILED CHECKS</span></p><ul>'
                     + "".join(f"<li>{esc(f)}</li>" for f in failed) + "</ul>")
    else:
        parts.append("<p>Every convergence check passed.</p>")
    return "".join(parts)


def priors_html(result: Any) -> str:
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


def provenance_html(result: Any) -> str:
    """Where the result came from: input, hash, command, seed, versions, date."""
    prov = result.provenance or {}

    def joined(value: Any) -> str:
        if isinstance(value, list):
            return "; ".join(str(v) for v in value)
        return "–" if value is None else str(value)

    command = prov.get("command") or " ".join(prov.get("command_line") or []) or "–"
    versions = prov.get("versions") or {}
    rows = [
        ("input file", joined(prov.get("input_path"))),
        ("input SHA-256", joined(prov.get("input_sha256"))),
        ("command", command),
        ("seed", joined(prov.get("seed", result.seed))),
        ("fitted at", joined(prov.get("created_at"))),
        ("versions", ", ".join(f"{k} {v}" for k, v in versions.items()) or "–"),
        ("platform", joined(prov.get("platform"))),
    ]
    if "n_thermal" in result.samples.columns and (result.checks or {}).get("planck"):
        n = result.checks["planck"].get("n_draws")
        rows.append(("draws behind the probabilities", joined(n)))
    return table_html(["item", "value"], rows, css_class="grid keyvalue", numeric_from=9)


def probability_cell(p: float | None, n: int | None = None) -> str:
    """A probability for a table cell."""
    return "–" if p is None else probability_text(p, n)
