"""Figures every fit kind shares: corner plot, chain traces; and writing figures out.

* :func:`corner_plot` — one- and two-dimensional marginals of the posterior
  draws (via the ``corner`` package), in readable units (ms, mK, ...).
* :func:`trace_plot` — the sampler's walkers step by step, with the
  discarded burn-in shaded, from a result's stored chain (or, without one,
  the kept draws in order).
* :func:`save_figure` — PNG / PDF / SVG files written atomically, never
  overwriting without ``force``.
* :func:`figure_bytes`, :func:`figure_data_uri` — encoded figures for the
  self-contained HTML report.

Functions take a result (or a DataFrame / array) and an optional Figure and
return the Figure; they never show.  matplotlib and corner are imported inside
the functions.
"""

from __future__ import annotations

import base64
import io
import math
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from cavchar.errors import InputError
from cavchar.quantities import COLUMN_INFO, QUANTILES_68
from cavchar.units import display_prefix

if TYPE_CHECKING:
    import pandas as pd

    from cavchar.parameters import ParameterSpec
    from cavchar.result import FitResult

__all__ = [
    "QUANTITY_LABELS",
    "display_unit",
    "parameter_info",
    "result_specs",
    "result_trace",
    "corner_plot",
    "trace_plot",
    "figure_bytes",
    "figure_data_uri",
    "save_figure",
    "FIGURE_FORMATS",
]

#: column -> (short label, dimension of cavchar.units) of the quantities every result carries
QUANTITY_LABELS: dict[str, tuple[str, str]] = {
    name: (label, dimension) for name, (_unit, dimension, label) in COLUMN_INFO.items()
    if name != "stage_occupation"}

_UNIT = {"time": "s", "frequency": "Hz", "temperature": "K", "rate": "1/s", "power": "W",
         "phase": "rad", "dimensionless": ""}

#: resolution of raster figures (dots per inch)
DEFAULT_DPI = 144.0
#: formats :func:`save_figure` can write
FIGURE_FORMATS = ("png", "pdf", "svg")


def display_unit(values: Any, dimension: str) -> tuple[float, str]:
    """Scale factor and unit text that show ``values`` (SI) with a readable SI prefix.

    Parameters
    ----------
    values
        Array of values in SI units (their median picks the prefix).
    dimension
        Dimension name of :mod:`cavchar.units` (``"time"``, ``"temperature"``, ...).
        Dimensionless quantities and phases are never rescaled.

    Returns
    -------
    (factor, unit)
        Multiply SI values by ``factor`` to show them in ``unit`` (e.g. ``(1e3, "ms")``).
    """
    unit = _UNIT.get(dimension, "")
    if dimension in ("dimensionless", "phase", "rate") or not unit:
        return 1.0, unit
    arr = np.asarray(values, dtype=float)
    arr = arr[np.isfinite(arr)]
    if arr.size == 0:
        return 1.0, unit
    typical = float(np.median(np.abs(arr)))
    if typical == 0:
        return 1.0, unit
    prefix, size = display_prefix(typical)
    return 1.0 / size, prefix + unit


def result_specs(result: FitResult | pd.DataFrame) -> list[ParameterSpec]:
    """The parameter specs of a result (or of a sampler run), [] for a table of draws."""
    specs = getattr(result, "specs", None)
    return [] if specs is None else list(specs)


def parameter_info(result: FitResult | pd.DataFrame, name: str) -> tuple[str, str]:
    """(label, dimension) of a column: from the result's specs, else the known quantities."""
    for spec in result_specs(result):
        if spec.name == name:
            dim = getattr(spec, "dimension", "") or "dimensionless"
            return str(getattr(spec, "label", name) or name), dim
    return QUANTITY_LABELS.get(name, (name, "dimensionless"))


def result_trace(result: FitResult | pd.DataFrame
                 ) -> tuple[np.ndarray, list[str], int, int] | None:
    """The stored sampler chain of a result, if it keeps one.

    Returns
    -------
    (trace, names, step, burn_in) or None
        ``trace`` of shape (n_rows, n_walkers, ndim) in physical units, the
        parameter names of its last axis, the sampler steps between rows and
        the burn-in in sampler steps.
    """
    trace = getattr(result, "trace", None)
    extras = getattr(result, "extras", None) or {}
    if trace is None and isinstance(extras, Mapping):
        trace = extras.get("trace")
    if trace is None:
        return None
    diagnostics = getattr(result, "diagnostics", None)
    names = None
    if isinstance(trace, Mapping):  # {"values": ..., "names": ..., "step": ...}
        names = trace.get("names")
        step = trace.get("step")
        trace = trace.get("values", trace.get("chain"))
    else:
        step = None
    arr = np.asarray(trace, dtype=float)
    if arr.ndim != 3 or arr.size == 0:
        return None
    if names is None:
        names = [s.name for s in result_specs(result)]
    if len(names) != arr.shape[2]:
        names = [f"parameter {i}" for i in range(arr.shape[2])]
    if step is None:
        step = getattr(diagnostics, "thin", None) or 1
    burn = getattr(diagnostics, "burn_in", None) or 0
    return arr, list(names), int(step or 1), int(burn or 0)


def _samples_frame(samples: Any):
    import pandas as pd

    if isinstance(samples, pd.DataFrame):
        return samples
    got = getattr(samples, "samples", None)
    if isinstance(got, pd.DataFrame):
        return got
    raise InputError("nothing to plot: expected a fit result or a table of posterior draws")


def _default_columns(result: FitResult | pd.DataFrame, frame) -> list[str]:
    names = [s.name for s in result_specs(result) if s.name in frame.columns]
    if not names:
        names = [c for c in ("lifetime", "n_thermal") if c in frame.columns]
    if not names:
        names = [c for c in frame.columns if np.issubdtype(frame[c].dtype, np.number)][:6]
    return names


def _axis_label(label: str, unit: str) -> str:
    """Axis text ``label [unit]``; the label (from a result file) is made literal."""
    from cavchar.plots.style import literal

    return literal(f"{label} [{unit}]" if unit else label)


def corner_plot(
    result: FitResult | pd.DataFrame,
    columns: Sequence[str] | None = None,
    *,
    truths: Mapping[str, float] | None = None,
    max_draws: int = 20000,
    fig=None,
):
    """Corner plot of the posterior draws: marginals on the diagonal, pairs below.

    The diagonal titles give the median and the 68 % credible interval
    (16th-84th percentile); the 2-D contours enclose about 39 % and 86 % of
    the draws (the 1 and 2 sigma levels of a 2-D normal).

    Parameters
    ----------
    result
        A fit result (its ``samples`` DataFrame and parameter specs) or a DataFrame.
    columns
        Columns to show (default: the fitted parameters).
    truths
        Known true values in SI units, drawn as lines.
    max_draws
        At most this many draws are plotted (evenly thinned) to keep the figure light.
    fig
        Figure to draw into (default: a new Agg figure).

    Returns
    -------
    matplotlib.figure.Figure
    """
    import corner

    from cavchar.plots.style import BAND_68, INK, PALETTE, apply_style, literal, new_figure

    frame = _samples_frame(result)
    names = list(columns) if columns else _default_columns(result, frame)
    missing = [c for c in names if c not in frame.columns]
    if missing or not names:
        raise InputError(f"no posterior draws of {', '.join(missing) or 'any parameter'}",
                         hint="known columns: " + ", ".join(map(str, frame.columns)))
    rows = np.linspace(0, len(frame) - 1, min(len(frame), int(max_draws))).astype(int)
    spread = [n for n in names if np.ptp(np.asarray(frame[n], dtype=float)[rows]) > 0
              and np.all(np.isfinite(np.asarray(frame[n], dtype=float)[rows]))]
    if not spread:
        raise InputError("no corner plot: the draws of " + ", ".join(map(str, names))
                         + " have no spread or are not finite")
    names = spread  # a column whose draws are all equal has no marginal to draw
    data, labels, titles, scales = [], [], [], []
    for name in names:
        values = np.asarray(frame[name], dtype=float)[rows]
        label, dim = parameter_info(result, name)
        factor, unit = display_unit(values, dim)
        data.append(values * factor)
        labels.append(_axis_label(label, unit))
        titles.append(literal(label))
        scales.append(factor)
    data = np.column_stack(data)
    k = data.shape[1]
    truth_list = None
    if truths and k >= 2:  # corner 2.3.0 fails on one column with truths
        truth_list = [None if truths.get(n) is None else truths[n] * s
                      for n, s in zip(names, scales, strict=True)]
    with apply_style({"axes.grid": False, "axes.titlelocation": "center",
                      "axes.titleweight": "normal", "axes.spines.top": True,
                      "axes.spines.right": True, "font.size": 8.0}):
        if fig is None:
            side = max(2.8, 1.9 * k)
            fig = new_figure((side, side))
        corner.corner(
            data, labels=labels, fig=fig, color=PALETTE[0],
            quantiles=[QUANTILES_68[0], 0.5, QUANTILES_68[1]],
            show_titles=True, titles=titles, title_fmt=".3g", title_kwargs={"fontsize": 7.5},
            label_kwargs={"fontsize": 8.0}, levels=(1 - math.exp(-0.5), 1 - math.exp(-2.0)),
            plot_datapoints=True, data_kwargs={"alpha": 0.08, "ms": 1.2, "color": INK},
            fill_contours=True, contourf_kwargs={"colors": ["none", BAND_68, "#8d8477"]},
            contour_kwargs={"colors": INK, "linewidths": 0.8},
            hist_kwargs={"color": PALETTE[0], "histtype": "stepfilled", "facecolor": BAND_68,
                         "edgecolor": PALETTE[0], "linewidth": 1.0},
            truths=truth_list, truth_color=PALETTE[1], bins=30, smooth=1.0,
            max_n_ticks=4, use_math_text=True,
        )
        if truths and k == 1 and truths.get(names[0]) is not None:
            fig.axes[0].axvline(truths[names[0]] * scales[0], color=PALETTE[1])
    return fig


def trace_plot(
    result: FitResult | pd.DataFrame,
    columns: Sequence[str] | None = None,
    *,
    max_walkers: int = 16,
    fig=None,
):
    """Walkers' positions against sampler step, one panel per parameter.

    With a stored chain (``result.trace`` or ``result.extras["trace"]``, shape
    (rows, walkers, ndim)) up to ``max_walkers`` walkers are drawn and the
    burn-in is shaded; without one the kept draws are drawn in their stored
    order (a stationary, well-mixed band is what to look for).

    Returns
    -------
    matplotlib.figure.Figure
    """
    from cavchar.plots.style import BAND_95, INK, PALETTE, apply_style, new_figure

    stored = result_trace(result)
    frame = None
    if stored is None:
        frame = _samples_frame(result)
        names = list(columns) if columns else _default_columns(result, frame)
    else:
        trace, trace_names, step, burn = stored
        names = [c for c in (columns or trace_names) if c in trace_names]
    if not names:
        raise InputError("no chain or draws of the requested parameters to draw")
    with apply_style():
        if fig is None:
            fig = new_figure((7.2, 1.45 * len(names) + 0.6))
        axes = np.atleast_1d(fig.subplots(len(names), 1, sharex=True))
        for ax, name in zip(axes, names, strict=True):
            label, dim = parameter_info(result, name)
            if stored is not None:
                values = trace[:, :, trace_names.index(name)]
                factor, unit = display_unit(values[values.shape[0] // 2:], dim)
                steps = np.arange(values.shape[0]) * step
                pick = np.linspace(0, values.shape[1] - 1,
                                   min(values.shape[1], max_walkers)).astype(int)
                ax.plot(steps, values[:, pick] * factor, color=INK, lw=0.5, alpha=0.45,
                        linestyle="-")
                ax.plot(steps, np.median(values, axis=1) * factor, color=PALETTE[1], lw=1.1,
                        linestyle="--", label="median over walkers")
                if burn > 0:
                    ax.axvspan(0, burn, color=BAND_95, zorder=0, lw=0, hatch="///",
                               label="burn-in (discarded)")
            else:
                values = np.asarray(frame[name], dtype=float)
                factor, unit = display_unit(values, dim)
                ax.plot(np.arange(values.size), values * factor, color=INK, lw=0.4,
                        linestyle="-")
            ax.set_ylabel(_axis_label(label, unit), fontsize=8)
        axes[0].set_title("chain traces" if stored is not None else
                          "kept draws in stored order (no chain stored)")
        if stored is not None:
            axes[0].legend(loc="upper right", ncol=2)
        axes[-1].set_xlabel("sampler step" if stored is not None else "draw")
        fig.align_ylabels(axes)
        fig.set_layout_engine("constrained")  # laid out in the one drawing pass of savefig
    return fig


def figure_bytes(fig, fmt: str = "png", dpi: float | None = None, tight: bool = True) -> bytes:
    """The figure encoded as ``png``, ``pdf`` or ``svg`` bytes.

    ``tight`` crops the canvas to the drawn artists (costs a second rendering pass); a
    figure with a layout engine (constrained layout) is laid out while it is drawn and
    needs no crop, so it is drawn once.
    """
    fmt = fmt.lower().lstrip(".")
    if fmt not in FIGURE_FORMATS:
        raise InputError(f"unknown figure format {fmt!r}", hint="use png, pdf or svg")
    from cavchar.plots.style import literal_figure

    literal_figure(fig)  # text that cannot be typeset is drawn as it is, never a crash
    if tight and fig.get_layout_engine() is not None:
        tight = False
    buffer = io.BytesIO()
    metadata = {"Creator": "cavchar"} if fmt in ("pdf", "svg") else {"Software": "cavchar"}
    if fmt == "pdf":
        metadata["CreationDate"] = None  # reproducible bytes
    elif fmt == "svg":
        metadata["Date"] = None
    fig.savefig(buffer, format=fmt, dpi=DEFAULT_DPI if dpi is None else dpi,
                bbox_inches="tight" if tight else None, metadata=metadata, facecolor="white")
    return buffer.getvalue()


def figure_data_uri(fig, dpi: float | None = None, tight: bool = True) -> str:
    """``data:image/png;base64,...`` of the figure, for an ``<img src=...>``."""
    data = figure_bytes(fig, "png", dpi, tight)
    return "data:image/png;base64," + base64.b64encode(data).decode()


def save_figure(
    fig,
    path_stem: str | os.PathLike,
    formats: Sequence[str] = ("png", "pdf"),
    force: bool = False,
    dpi: float | None = None,
) -> list[Path]:
    """Write the figure as ``<path_stem>.<format>`` for each format, atomically.

    Every target is checked before anything is written, so a clash with an
    existing file (without ``force``) leaves no partial set behind.

    Parameters
    ----------
    fig
        A matplotlib Figure.
    path_stem
        Path without extension, e.g. ``out/lifetime_corner``.
    formats
        Any of ``png``, ``pdf``, ``svg``.
    force
        Replace existing files.
    dpi
        Resolution of raster output (default :data:`DEFAULT_DPI`).

    Returns
    -------
    list of Path
        The files written, in the order of ``formats``.
    """
    from cavchar.io.atomic import check_can_write, write_bytes_atomic

    stem = Path(path_stem)
    kinds = [f.lower().lstrip(".") for f in formats]
    if not kinds:
        raise InputError("no figure format given", hint="e.g. png and pdf")
    for fmt in kinds:
        if fmt not in FIGURE_FORMATS:
            raise InputError(f"unknown figure format {fmt!r}", hint="use png, pdf or svg")
    targets = [stem.with_name(f"{stem.name}.{fmt}") for fmt in kinds]
    for target in targets:
        check_can_write(target, force)
    return [write_bytes_atomic(target, figure_bytes(fig, fmt, dpi), force=force)
            for target, fmt in zip(targets, kinds, strict=True)]
