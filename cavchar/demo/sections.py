"""The demo's own report sections (the scenario) and its use of the cooldown log."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from cavchar.demo.scenario import Scenario, scenario_table
from cavchar.report.sections import Section
from cavchar.report.text import esc, format_quantity_text, table_html

__all__ = ["intro_text", "scenario_section", "tracking_sections"]


def intro_text(scenario: Scenario, quick: bool) -> str:
    """The paragraph under the report's title."""
    return (f"Everything on this page comes from an invented scenario: the {scenario.lab}, "
            f"its cavity {scenario.cavity} (one mode at "
            f"{format_quantity_text(scenario.freq_hz, 'frequency', 5)}) and mirror set "
            f"{scenario.mirror_set} do not exist. The records were simulated with "
            "cavchar.simulate at fixed seeds and then analysed exactly as measured records "
            "would be: fits by MCMC, a cooldown log, the trend across cooldowns, a "
            "qualification against an example spec and the thermal budget."
            + (" This is the quick version of the demo (shorter probe record, fewer "
               "temperatures, fewer figures)." if quick else ""))


def scenario_section(scenario: Scenario, jobs: list, quick: bool, notes: list[str]) -> Section:
    """What was simulated: the true values of each cooldown and each record."""
    rows = [[r["cooldown"], r["start_date"], format_quantity_text(r["stage_temp_k"],
                                                                  "temperature"),
             format_quantity_text(r["lifetime_s"], "time"),
             format_quantity_text(r["n_thermal"], "dimensionless", 3),
             format_quantity_text(r["effective_temperature_k"], "temperature", 3),
             r["note"]] for r in scenario_table(scenario)]
    records = [[j.label, j.kind, format_quantity_text(j.stage_temp_k, "temperature"),
                format_quantity_text(j.truths["lifetime"], "time"),
                format_quantity_text(j.truths["n_thermal"], "dimensionless", 3)
                if "n_thermal" in j.truths else "–",
                "–" if j.realized_n is None else format_quantity_text(j.realized_n,
                                                                      "dimensionless", 3),
                str(j.seed), Path(j.data_path).name if j.data_path else "–",
                "fitted"] for j in jobs]
    html = [
        f"<p>The {esc(scenario.lab)} is an invention of the cavchar demo, as are its cavity "
        f"<b>{esc(scenario.cavity)}</b> and mirror set <b>{esc(scenario.mirror_set)}</b>. "
        "The true values below are what the simulator was given; each fit above found them "
        "again from the simulated records alone (the summary tables show them beside the "
        "posterior). The mode's thermal photon number at a stage temperature T is the stage's "
        "Planck occupation plus an excess that the lines let in; better filtering in "
        "cooldown 2031-C lowers that excess. The lifetime is taken not to depend on the "
        "stage temperature.</p>",
        table_html(["cooldown", "date", "stage", "true T_c", "true n_th", "true T_eff", "what "
                    "changed"], rows, css_class="grid summary"),
        table_html(["record", "kind", "stage", "true T_c", "true n_th", "n of the simulated path",
                    "seed", "data file", "status"], records, css_class="grid",
                   caption="the simulated path's time-averaged photon number scatters around "
                           "the true n_th: a record is a finite sample, and the posterior "
                           "follows the record"),
    ]
    html += [f'<p class="note">{esc(n)}</p>' for n in notes]
    return Section("The invented scenario", "".join(html), "scenario")


def _qualification(spec, evidence, label: str) -> Section:
    from cavchar.report.tracking import qualification_section
    from cavchar.tracking.qualify import qualify

    verdicts = qualify(spec, evidence)
    section = qualification_section(verdicts, figure_html=lambda fig: "")
    return Section(f"Qualification after cooldown {label}: {verdicts.status}", section.html,
                   f"qualification-{label}")


def tracking_sections(log_path: Path, spec_path: Path, scenario: Scenario, jobs: list,
                      seed: int) -> tuple[list[Any], list[str]]:
    """Log every fit, then the trend, the qualifications and the thermal budget.

    Returns the report sections (Trend / Budget objects and Sections) and notes.
    """
    from cavchar.fits.budget import BudgetPoint, thermal_budget
    from cavchar.tracking import cooldown_trend, open_log, read_spec
    from cavchar.tracking.budget import n_thermal_prior
    from cavchar.tracking.entries import entry_from_result
    from cavchar.tracking.qualify import evidence_from_log

    notes: list[str] = []
    sections: list[Any] = []
    first, _, third = scenario.cooldowns
    with open_log(log_path) as log:
        log.add_cavity(scenario.cavity, freq_hz=scenario.freq_hz,
                       notes=f"mirror set {scenario.mirror_set}; invented demo cavity")
        for plan in scenario.cooldowns:
            log.add_cooldown(plan.label, start_date=plan.start_date,
                             stage_temp_k=plan.stage_temp_k, notes=plan.note)
        for job in jobs:
            entry = entry_from_result(job.result, source=str(job.result_path))
            job.fit_id = log.add_fit(entry, scenario.cavity, job.plan.label,
                                     stage_temp_k=job.stage_temp_k)
        base = {j.plan.label: j for j in jobs
                if j.kind == "jumps" and j.stage_temp_k == j.plan.stage_temp_k}
        if base:
            kind = str(next(iter(base.values())).result.kind)
            sections.append(cooldown_trend(log, scenario.cavity, reference=first.label,
                                           fraction=0.1, kind=kind))
        else:
            notes.append("No jump record was fitted, so there is no trend across cooldowns.")
        spec = read_spec(spec_path)
        for plan in (first, third):
            job = base.get(plan.label)
            if job is None:
                continue
            evidence = evidence_from_log(log, scenario.cavity, fit_id=job.fit_id)
            sections.append(_qualification(spec, evidence, plan.label))
    sweep = [j for j in jobs if j.plan.label == third.label and j.kind == "jumps"]
    if len(sweep) >= 2:
        points = [BudgetPoint(j.label, j.stage_temp_k, j.result.samples["n_thermal"].to_numpy(),
                              *n_thermal_prior([s.to_dict() for s in j.result.specs]))
                  for j in sorted(sweep, key=lambda j: j.stage_temp_k)]
        sections.append(thermal_budget(points, scenario.freq_hz, seed=seed))
    else:
        notes.append("Fewer than two stage temperatures were fitted: no thermal budget.")
    return sections, notes
