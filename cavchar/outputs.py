"""Files and printed summary of a fit: result JSON, posterior draws, figures."""

from __future__ import annotations

import importlib
import os
import sys
from collections.abc import Sequence
from pathlib import Path

from cavchar.errors import InputError
from cavchar.io.atomic import check_can_write
from cavchar.result import FitResult
from cavchar.result_types import PlanckCheck, SamplerDiagnostics

__all__ = ["print_summary", "summary_text", "sampler_text", "planck_statement",
           "write_fit_outputs",
           "fit_figures"]

#: kind family -> module with ``figures(result) -> dict[name, Figure]``
FIGURE_MODULES = {
    "jumps": "cavchar.plots.jumps",
    "probes": "cavchar.plots.probes",
    "ringdown": "cavchar.plots.ringdown",
}

#: quantities printed, in order (those present in the result)
PRINTED = ("lifetime", "n_thermal", "effective_temperature", "quality_factor", "linewidth",
           "amplitude_decay_time", "excess_photons")


def summary_text(result: FitResult) -> str:
    """A table with units: median, 68% and 95% intervals of the main quantities."""
    from cavchar.result import interval_texts
    from cavchar.units import format_quantity

    table = result.summary_rows()
    lines = [f"{result.kind} fit ({'converged' if result.converged else 'NOT converged'}; "
             f"{len(result.samples)} draws, seed {result.seed})",
             "  sampler: " + sampler_text(result.diagnostics),
             f"  {'quantity':<34}{'median':>14}{'68% interval':>30}{'95% interval':>30}"]
    names = [n for n in PRINTED if n in table]
    names += [n for n in result.parameter_names if n not in names]
    for name in names:
        unit, dimension, label = result.column_info(name)
        row = table[name]
        limit = result.prior_limit(name)
        if limit is not None:  # against a prior bound: a one-sided limit, not a measurement
            sign = {"lower": ">", "upper": "<"}.get(limit["kind"])
            value = (f"{sign} {format_quantity(limit['limit'], dimension, 3)}" if sign
                     else "not constrained")
            if sign and unit and dimension == "dimensionless":
                value += f" {unit}"
            lines.append(f"  {label:<34}{value:>14}{'one-sided 95% limit':>30}"
                         f"{'posterior at a prior bound':>30}")
            continue
        # digits follow the interval: the unit and decimals of the one-line form
        t = interval_texts(*(float(row[k]) for k in ("median", "lo68", "hi68", "lo95",
                                                     "hi95")), dimension)
        if unit and dimension == "dimensionless":  # a data unit (a.u., V, mW) or dB
            t = {k: f"{v} {unit}" for k, v in t.items()}
        lines.append(f"  {label:<34}{t['median']:>14}"
                     f"{'[' + t['lo68'] + ', ' + t['hi68'] + ']':>30}"
                     f"{'[' + t['lo95'] + ', ' + t['hi95'] + ']':>30}")
    if result.planck is not None:
        lines.append("  " + planck_statement(result.planck))
    for name in ("lifetime", "n_thermal"):
        if name in table:
            lines.append("  " + result.one_line(name))
    for message in result.checks.get("prior_bounds", {}).get("flags", []):
        lines.append("  prior bound: " + message)
    return "\n".join(lines)


def sampler_text(diagnostics: SamplerDiagnostics) -> str:
    """Which sampler made the draws, in words, with its own check: k-hat and effective
    sample size for importance sampling, walkers and steps for the ensemble."""
    importance = diagnostics.importance or {}
    if diagnostics.sampler == "importance" and importance:
        k_hat = importance.get("k_hat")  # None: no spread in the weights' tail
        k_text = "-" if k_hat is None else f"{k_hat:.2f}"
        return (f"importance sampling from the Laplace approximation (Pareto k-hat "
                f"{k_text} < {importance['k_hat_limit']:.2f}; effective "
                f"sample size {importance['ess_weights']:,.0f} of "
                f"{importance['n_proposal_draws']:,} proposal draws)")
    walkers, steps = diagnostics.n_walkers, diagnostics.n_steps
    text = "ensemble (emcee)"
    if walkers and steps:
        text += f", {walkers} walkers x {steps:,} steps"
    if importance and not importance.get("used", True):
        text += (" because importance sampling was not accurate enough: "
                 f"{importance.get('reason', 'its checks failed')}")
    return text


def planck_statement(planck: PlanckCheck) -> str:
    """The Planck check in one sentence, worded as in the report
    (:func:`cavchar.report.text.planck_sentences`), e.g. "The mode is hotter than its
    20 mK stage with probability 0.998; effective temperature 61 (+4/-3) mK"."""
    from cavchar.report.text import planck_sentences

    if not planck.complete:
        return "Planck check: incomplete in this result (fit again with --stage-temp)"
    return planck_sentences(planck)[0]


def print_summary(result: FitResult) -> None:
    """Print the plain-text summary of ``result`` (:func:`summary_text`) to stdout."""
    print(summary_text(result))


def fit_figures(result: FitResult) -> dict:
    """Every figure of a fit: model-specific ones, the corner plot and the chain traces."""
    from cavchar.plots.posterior import corner_plot, trace_plot

    figures = {}
    module_name = FIGURE_MODULES.get(result.kind.family)
    if module_name is not None:
        figures.update(importlib.import_module(module_name).figures(result))
    figures["corner"] = corner_plot(result)
    figures["traces"] = trace_plot(result)
    return figures


#: file in an output folder while a set is being moved into place; lists the set's files
INCOMPLETE_MARKER = ".cavchar-incomplete"


def unfinished_set(out: Path) -> set[str]:
    """Files of an output set whose writing was cut short (a kill, a full disk): a rerun
    may replace them without ``--force``.  Empty when the folder holds no such set."""
    try:
        text = (out / INCOMPLETE_MARKER).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        return set()
    return {line.strip() for line in text.splitlines()
            if line.strip() and "/" not in line and line.strip() not in (".", "..")}


def write_fit_outputs(result: FitResult, out_dir: str | os.PathLike, *, force: bool = False,
                      figures: bool = True, figure_formats: Sequence[str] = ("png",),
                      progress: bool = False) -> list[Path]:
    """Write ``result.json``, ``draws.csv`` (Parquet when pyarrow is there) and the figures
    into ``out_dir``, as a set.

    Every target is checked first, so an existing file without ``force`` stops the
    whole set before anything is written.  The files are made in a hidden temporary
    folder inside ``out_dir``, then moved into place one by one with ``result.json``
    last, while a marker file (:data:`INCOMPLETE_MARKER`) lists the set: a
    ``result.json`` therefore always comes with its draws and figures, and after a
    kill or a full disk a rerun replaces the unfinished set without ``--force``.
    Temporaries of earlier crashed runs are removed
    (:func:`cavchar.io.atomic.clean_stale_temporaries`).

    ``figures=False`` writes the result and the draws only (matplotlib is then not
    imported); ``figure_formats`` is any of ``"png"``, ``"pdf"``, ``"svg"`` (PNG by
    default: a fifth of the time of PNG and PDF); ``progress`` prints one line on
    stderr while the figures are drawn and written, finished with the time taken.
    """
    import shutil
    import time

    from cavchar.io.atomic import clean_stale_temporaries, temporary_name, write_text_atomic
    from cavchar.result import default_draws_name

    out = Path(out_dir)
    formats = tuple(figure_formats)
    if figures:
        from cavchar.plots.posterior import FIGURE_FORMATS

        unknown = [f for f in formats if f not in FIGURE_FORMATS]
        if unknown or not formats:
            raise InputError(f"unknown figure format {(unknown or [''])[0]!r}",
                             hint="use png, pdf or svg")
    check_can_write(out / "result.json", force)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the output folder: {exc.strerror or exc}",
                         path=out) from None
    clean_stale_temporaries(out)
    unfinished = unfinished_set(out)
    draws_name = default_draws_name()
    start = time.perf_counter()
    made: dict = {}
    if figures:
        if progress:
            print(f"writing figures ({'+'.join(formats)}) to {out} ...", end="",
                  file=sys.stderr, flush=True)
        made = fit_figures(result)
    names = [draws_name] + [f"{n}.{fmt}" for n in made for fmt in formats] + ["result.json"]
    staging = out / temporary_name("outputs")
    try:
        for name in names:
            check_can_write(out / name, force or name in unfinished)
        staging.mkdir()
        result.write_draws(staging / draws_name)
        if made:
            from cavchar.plots.posterior import save_figure

            for name, fig in made.items():
                save_figure(fig, staging / name, formats=formats)
        result.to_json(staging / "result.json")
        write_text_atomic(out / INCOMPLETE_MARKER, "\n".join(names) + "\n", force=True)
        written = []
        for name in names:  # result.json last: its presence means the set is complete
            os.replace(staging / name, out / name)
            written.append(out / name)
        (out / INCOMPLETE_MARKER).unlink()
    except OSError as exc:
        raise InputError(f"cannot write the outputs: {exc.strerror or exc}", path=out,
                         hint="check the free space and permissions; a rerun finishes the "
                         "set") from None
    finally:
        if made:
            import matplotlib.pyplot as plt

            for fig in made.values():
                plt.close(fig)
        shutil.rmtree(staging, ignore_errors=True)
        if progress and figures:
            print(f" {len(made)} figures in {time.perf_counter() - start:.1f} s",
                  file=sys.stderr, flush=True)
    return written
