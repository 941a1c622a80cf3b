"""Figures of a ring-down fit: the data with the posterior band of the model, and residuals.

Functions take plain arrays/dicts (the ``curves`` stored in a ring-down
result's extras by :func:`cavchar.fits.ringdown_checks.posterior_curves`) and
an optional Figure, and return the Figure; they never save or show.
matplotlib is imported inside the functions.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from cavchar.result import FitResult

__all__ = ["plot_trace_fit", "plot_populations_fit", "figures"]

_VALUE_LABEL = {"power": "power", "power2": "power", "db": "power (dB)",
                "amplitude": "field magnitude", "iq": "IQ", "mean-n": "mean photon number"}


def _band(ax, x, entry, suffix, label, index):
    from cavchar.plots.style import BAND_68, BAND_95, series

    ax.fill_between(x, entry["q025" + suffix], entry["q975" + suffix], color=BAND_95, lw=0,
                    label="model, 95% band")
    ax.fill_between(x, entry["q160" + suffix], entry["q840" + suffix], color=BAND_68, lw=0,
                    label="model, 68% band")
    ax.plot(x, entry["q500" + suffix], lw=1.2, label=f"model median{label}",
            **series(index, marker=False))


def plot_trace_fit(curves: dict, signal: str, fig=None):
    """Top: data points (with error bars when sigma is known) and the model's posterior
    68%/95% bands; bottom: standardized residuals at the posterior median.  One column
    per trace (IQ: real and imaginary parts).

    Parameters
    ----------
    curves
        ``{"traces": [...]}`` as stored by the fit (times in s).
    signal
        Signal kind (axis labels).
    """
    from cavchar.plots.posterior import display_unit
    from cavchar.plots.style import INK, apply_style, new_figure

    traces = curves["traces"][:4]
    parts = [(t, "") for t in traces]
    if signal == "iq":
        parts = [(t, s) for t in traces for s in ("", "_imag")]
    with apply_style():
        if fig is None:
            fig = new_figure(figsize=(4.2 * len(parts) + 0.6, 4.6))
        axes = fig.subplots(2, len(parts), squeeze=False, sharex="col",
                            gridspec_kw={"height_ratios": [3, 1.2]})
        all_t = np.concatenate([np.asarray(t["time"]) for t in traces])
        factor, unit = display_unit(all_t - np.min(all_t) + 1e-300, "time")
        for col, (entry, suffix) in enumerate(parts):
            x = np.asarray(entry["time"]) * factor
            y = np.asarray(entry["imag" if suffix else "value"])
            top, bottom = axes[0, col], axes[1, col]
            _band(top, x, entry, suffix, "", col)
            sigma = entry.get("sigma")
            if sigma is not None and len(x) <= 200:
                top.errorbar(x, y, yerr=sigma, fmt="o", ms=2.5, color=INK, lw=0.6,
                             label="data")
            else:
                top.plot(x, y, "o", ms=1.8, color=INK, alpha=0.6, label="data")
            part = {"": " (real part)", "_imag": " (imaginary part)"}[suffix] \
                if signal == "iq" else ""
            top.set_ylabel(_VALUE_LABEL.get(signal, "value") + part)
            top.set_title(entry.get("label", "trace"))
            if (signal in ("power", "power2") and np.all(np.asarray(entry["q025"]) > 0)
                    and np.all(y > 0)):
                top.set_yscale("log")
            res = np.asarray(entry["residual_imag" if suffix else "residual"])
            bottom.axhline(0.0, color="0.4", lw=0.7)
            bottom.plot(x, res, ".", ms=2.0, color=INK)
            bottom.set_ylabel("residual / sd")
            bottom.set_xlabel(f"time ({unit})")
        axes[0, 0].legend(loc="upper right")
        fig.set_layout_engine("constrained")  # laid out in the one drawing pass of savefig
    return fig


def plot_populations_fit(curves: dict, max_levels: int = 6, fig=None):
    """Observed photon-number fractions against delay with the model's posterior bands."""
    from cavchar.plots.posterior import display_unit
    from cavchar.plots.style import apply_style, new_figure, series

    pops = curves["populations"]
    delay = np.asarray(pops["delay"])
    frac = np.asarray(pops["fraction"])
    factor, unit = display_unit(delay + 1e-300, "time")
    with apply_style():
        if fig is None:
            fig = new_figure(figsize=(6.4, 4.0))
        ax = fig.subplots()
        for n in range(min(frac.shape[1], max_levels)):
            style = series(n)
            ax.fill_between(delay * factor, np.asarray(pops["q025"])[:, n],
                            np.asarray(pops["q975"])[:, n], color=style["color"], alpha=0.18,
                            lw=0)
            ax.plot(delay * factor, np.asarray(pops["q500"])[:, n], color=style["color"],
                    linestyle=style["linestyle"], lw=1.0)
            ax.plot(delay * factor, frac[:, n], linestyle="none", marker=style["marker"],
                    color=style["color"], markerfacecolor=style["markerfacecolor"],
                    label=f"n = {n}")
        ax.set_xlabel(f"delay ({unit})")
        ax.set_ylabel("fraction of shots")
        ax.set_title("photon-number populations (lines: model median, bands: 95%)")
        ax.legend(ncol=2)
        fig.set_layout_engine("constrained")  # laid out in the one drawing pass of savefig
    return fig


def figures(result: FitResult) -> dict:
    """Model-specific figures of a ring-down fit, from the result alone (its extras)."""
    curves = result.extras.get("curves") or {}
    signal = result.extras.get("signal", result.kind.variant)
    if "populations" in curves:
        return {"ringdown_fit": plot_populations_fit(curves)}
    if curves.get("traces"):
        return {"ringdown_fit": plot_trace_fit(curves, signal)}
    return {}
