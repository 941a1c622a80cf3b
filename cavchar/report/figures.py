"""The figures of a report: data with the posterior fit, model checks, corner and traces
of each result, and the comparison of several results.

Data figures of one fit kind come from its plotting module
``cavchar.plots.<family>`` (``jumps``, ``probes``, ``ringdown``; the family is
``result.kind.family``): its ``figures(result) -> dict[name,
Figure]`` (the hook the fit commands use; titles and captions from the module's
``FIGURE_CAPTIONS = {name: (title, caption)}`` when it has one, else from
:data:`KNOWN_CAPTIONS`); for a jump result without data excerpts the adapter below
draws from a record the caller gives.

Figures are drawn from what the result holds (its draws and its ``extras``
excerpts).  The input file named in a result's provenance is never opened by
default: :func:`load_input_record` reads it only when a caller asks (the
report's ``reread_inputs=True``), and only when its SHA-256 matches the hash
the result recorded (a result without a hash is not re-read), so a crafted
result cannot make a report embed a local file.  All text a figure takes from
a result or a user is drawn literally (:func:`cavchar.plots.style.literal`).
"""

from __future__ import annotations

import importlib
import re
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from cavchar.errors import CavcharError, CavcharWarning
from cavchar.quantities import QUANTILES_68

if TYPE_CHECKING:
    from cavchar.result import FitResult

__all__ = ["Figure", "load_input_record", "data_figures", "sampler_figures",
           "comparison_figure"]


@dataclass
class Figure:
    """A figure of the report: title, caption and the matplotlib figure."""

    title: str
    caption: str
    figure: Any


#: fit families that have a plotting module
FAMILIES = ("jumps", "probes", "ringdown")

#: problems a plotting function meets in a result's excerpts of the wrong shape or type
_DRAW_ERRORS = (CavcharError, TypeError, ValueError, KeyError, IndexError, AttributeError)


def _provenance_input(result: FitResult) -> tuple[str | None, str | None]:
    single = result.provenance.single_input
    if single is None or not single.path:
        return None, None
    sha = single.sha256
    sha = sha if isinstance(sha, str) and re.fullmatch(r"[0-9a-f]{64}", sha) else None
    return single.path, sha


def load_input_record(result: FitResult) -> tuple[Any | None, str]:
    """The fitted record, re-read from the input file of the provenance, on request only.

    The file is read only when the result records its SHA-256 and the file's
    bytes hash to exactly that value; otherwise nothing is read.

    Returns
    -------
    (record or None, note)
        ``note`` says why there is no record (no hash, file gone, changed, unreadable).
    """
    from cavchar.provenance import sha256_of_file

    path, sha = _provenance_input(result)
    if not path:
        return None, "the result names no single input file"
    if not sha:
        return None, "the result records no SHA-256 of its input file to check it against"
    if result.kind.family not in FAMILIES:
        return None, "no reader is known for this fit kind"
    file = Path(path)
    if not file.is_file():
        return None, "the input file named in the result is not there any more"
    try:
        if sha256_of_file(file) != sha:
            return None, "the input file has changed since the fit (its SHA-256 differs)"
        return _read_record(result, file), ""
    except CavcharError as exc:
        return None, f"the input file could not be read again ({exc})"


def _read_record(result: FitResult, file: Path) -> Any:
    from cavchar.io import readers

    kind = result.kind
    fit = (result.settings or {}).get("fit", {})
    family = kind.family
    if family == "jumps":
        if kind.variant == "sampled":
            return readers.read_sampled_record(file)
        return readers.read_jump_record(file, end_time=fit.get("end_time"))
    if family == "probes":
        return readers.read_probe_record(file)
    if family == "ringdown":
        return readers.read_ringdown(file, signal=fit.get("signal"))
    raise CavcharError(f"no reader known for fit kind {str(kind)!r}")


def _plotting_module(family: str):
    """The plotting module of a fit family, or None for a family cavchar does not know."""
    if family not in FAMILIES:
        return None
    return importlib.import_module(f"cavchar.plots.{family}")


#: titles and captions of figures that plotting modules return from ``figures(result)``
KNOWN_CAPTIONS: dict[str, tuple[str, str]] = {
    "record": ("The record and the fitted photon-number law",
               "Left: photon number against time (an excerpt of the record). Right: fraction "
               "of the time spent in each photon number, with the Bose–Einstein law of the "
               "fitted n_th (median and 95% band)."),
    "dwell_check": ("Dwell-time check",
                    "Fraction of complete dwells in each photon number longer than a given "
                    "time, against the exponential law of the fit (dashed: median; band: 95%). "
                    "The damped-mode model predicts a straight line on this log scale."),
    "ringdown_fit": ("The ring-down with the posterior fit",
                     "The measured trace against time with the model's median and its 68% and "
                     "95% bands; below, the residuals in units of the noise level. Residuals "
                     "without structure are what a good fit leaves."),
    "trajectory": ("The probe record and the reconstructed photon number",
                   "An excerpt of the raw probe outcomes with the photon number reconstructed "
                   "from them by the hidden Markov model (posterior mean with its spread, and "
                   "the most probable path)."),
}


def _column(result: FitResult, name: str) -> np.ndarray | None:
    samples = getattr(result, "samples", None)
    if samples is None or name not in samples.columns:
        return None
    return np.asarray(samples[name], dtype=float)


def _jump_figures(module, result: FitResult, record: Any) -> list[Figure]:
    from cavchar.models.jumps import dwell_times
    from cavchar.records import JumpRecord

    out: list[Figure] = []
    life, nth = _column(result, "lifetime"), _column(result, "n_thermal")
    if not isinstance(record, JumpRecord) or life is None or nth is None:
        return out
    durations, states, complete = dwell_times(record.time, record.photons, record.end_time,
                                              record.segment)
    occupation = np.bincount(states, weights=durations) / durations.sum()
    segment = record.segments()[0]
    pick = np.linspace(0, nth.size - 1, min(nth.size, 2000)).astype(int)
    if hasattr(module, "plot_record_and_occupation"):
        fig = module.plot_record_and_occupation(segment.time, segment.photons, segment.end_time,
                                                nth[pick], occupation)
        out.append(Figure("The record and the fitted photon-number law",
                          "Left: photon number against time (first segment, at most 2,000 "
                          "jumps). Right: fraction of the time spent in each photon number, "
                          "with the Bose–Einstein law of the fitted n_th (median and 95% band).",
                          fig))
    if hasattr(module, "plot_dwell_check"):
        fig = module.plot_dwell_check(durations, states, complete, life[pick], nth[pick])
        out.append(Figure("Dwell-time check",
                          "Fraction of complete dwells in each photon number longer than a "
                          "given time, against the exponential law of the fit (dashed: median; "
                          "band: 95%). A straight line on this log scale is what the "
                          "damped-mode model predicts.", fig))
    return out


def data_figures(result: FitResult, record: Any | None = None) -> tuple[list[Figure], list[str]]:
    """Figures of the data with the posterior fit and of the model checks.

    Returns
    -------
    (figures, notes)
        ``notes`` say in words what could not be drawn and why.
    """
    family = result.kind.family
    notes: list[str] = []
    module = _plotting_module(family)
    if module is None:
        return [], [f"No data figure: cavchar draws none for fits of kind {result.kind}."]
    try:
        figures: list[Figure] = []
        captions = {**KNOWN_CAPTIONS, **getattr(module, "FIGURE_CAPTIONS", {})}
        for name, fig in module.figures(result).items():
            title, caption = captions.get(name, (name.replace("_", " ").capitalize(), ""))
            figures.append(Figure(title, caption, fig))
        if not figures and family == "jumps" and record is not None:
            figures = _jump_figures(module, result, record)
    except _DRAW_ERRORS as exc:
        why = str(exc)[:200] if isinstance(exc, CavcharError) else \
            "the result's data excerpts do not have the expected form"
        warnings.warn(f"report: the data figures of a {result.kind} fit were left out ({why})",
                      CavcharWarning, stacklevel=2)
        return [], [f"The data figures could not be drawn: {why}."]
    if not figures and not notes:
        notes.append("The result holds no data excerpt to draw (the data figures are drawn "
                     "from the result alone).")
    return figures, notes


def sampler_figures(result: FitResult, truths: dict[str, float] | None = None,
                    notes: list[str] | None = None) -> list[Figure]:
    """Corner plot and chain traces of one result.

    A figure that cannot be drawn (draws without spread, a stored chain of the
    wrong shape) is left out, and why is appended to ``notes`` when given.
    """
    from cavchar.plots.posterior import corner_plot, result_trace, trace_plot

    out = []
    try:
        out.append(Figure("Posterior draws (corner plot)",
                          "Marginal posterior of each fitted parameter (diagonal; dashed lines "
                          "at the 16th, 50th and 84th percentiles) and of each pair (contours "
                          "holding about 39% and 86% of the draws)."
                          + (" Solid brick-coloured lines: the true values of the simulation."
                             if truths else ""),
                          corner_plot(result, truths=truths)))
    except _DRAW_ERRORS as exc:
        if notes is not None:
            notes.append(f"The corner plot is left out: {str(exc)[:200]}.")
    try:
        stored = result_trace(result) is not None
        out.append(Figure("Chain traces",
                          "Position of the sampler's walkers step by step (grey), their median "
                          "(dashed) and the discarded burn-in (shaded)." if stored else
                          "The result file keeps no walker chain, so the kept draws are shown "
                          "in their stored order; a steady band without drifts is what to look "
                          "for.", trace_plot(result)))
    except _DRAW_ERRORS as exc:
        if notes is not None:
            notes.append(f"The chain traces are left out: {str(exc)[:200]}.")
    return out


_COMPARE = (("lifetime", "lifetime T_c", "time"),
            ("n_thermal", "thermal photons n_th", "dimensionless"),
            ("effective_temperature", "effective temperature", "temperature"))


def comparison_figure(results: Sequence[FitResult], labels: Sequence[str]):
    """Lifetime, n_th and effective temperature of several results side by side.

    Each result is one column: point at the median, thick bar the 68 % and thin
    bar the 95 % interval; each result keeps its own marker so the figure reads
    in greyscale.
    """
    from cavchar.plots.posterior import display_unit
    from cavchar.plots.style import apply_style, literal, new_figure, series

    panels = [(name, title, dim) for name, title, dim in _COMPARE
              if any(_column(r, name) is not None for r in results)]
    if not panels:
        return None
    with apply_style():
        fig = new_figure((max(4.5, 1.1 * len(results) + 2.5), 2.1 * len(panels) + 0.7))
        axes = np.atleast_1d(fig.subplots(len(panels), 1, sharex=True))
        for ax, (name, title, dim) in zip(axes, panels, strict=True):
            columns = [_column(r, name) for r in results]
            pooled = np.concatenate([c for c in columns if c is not None])
            factor, unit = display_unit(pooled, dim)
            for i, values in enumerate(columns):
                if values is None:
                    continue
                lo95, lo68, med, hi68, hi95 = np.quantile(
                    values * factor, [0.025, QUANTILES_68[0], 0.5, QUANTILES_68[1], 0.975])
                style = series(i, line=False)
                ax.plot([i, i], [lo95, hi95], color=style["color"], lw=1.0, linestyle="-",
                        solid_capstyle="butt")
                ax.plot([i, i], [lo68, hi68], color=style["color"], lw=4.0, linestyle="-",
                        solid_capstyle="butt")
                ax.plot([i], [med], linestyle="none", ms=6, **style)
            if name == "n_thermal" and pooled.min() > 0 and pooled.max() / pooled.min() > 30:
                ax.set_yscale("log")
            ax.set_ylabel(f"{title} [{unit}]" if unit else title, fontsize=8)
        axes[-1].set_xticks(np.arange(len(results)), [literal(x) for x in labels], rotation=20,
                            ha="right")
        axes[-1].set_xlim(-0.6, len(results) - 0.4)
        axes[0].set_title("results side by side (thick bar 68%, thin bar 95%)")
        fig.align_ylabels(axes)
        fig.set_layout_engine("constrained")  # laid out in the one drawing pass of savefig
    return fig
