"""Figures of the cooldown log: trend across cooldowns, and n_th versus stage temperature.

Functions take the result objects of :mod:`cavchar.tracking` (and optionally
a Figure to draw into) and return the Figure; they never save or show.
matplotlib is imported inside the functions (``import cavchar`` stays light).
"""

from __future__ import annotations

import numpy as np

__all__ = ["plot_trend", "plot_budget"]

_PANELS = (("lifetime", "lifetime T_c [ms]", 1e3),
           ("n_thermal", "thermal photons n_th", 1.0),
           ("effective_temperature", "effective temperature [mK]", 1e3))


def _new_figure(fig, size):
    if fig is not None:
        fig.clear()
        return fig
    from matplotlib.figure import Figure

    return Figure(figsize=size, layout="constrained")


def plot_trend(trend, fig=None):
    """Lifetime, n_th and effective temperature per cooldown (median, 68 % and 95 %).

    Thick bars are 68 % intervals, thin bars 95 %; the reference cooldown is
    drawn as an open marker, and each lifetime point is labelled with the
    probability that the lifetime fell by more than the chosen fraction.

    Parameters
    ----------
    trend : cavchar.tracking.trend.Trend
    fig : matplotlib.figure.Figure, optional
    """
    import matplotlib as mpl

    with mpl.rc_context({"font.size": 9}):
        fig = _new_figure(fig, (6.4, 6.8))
        axes = fig.subplots(len(_PANELS), 1, sharex=True)
        x = np.arange(len(trend.rows))
        labels = [r.cooldown if trend.selection != "each fit" else f"{r.cooldown}\n#{r.fit_id}"
                  for r in trend.rows]
        for ax, (name, label, scale) in zip(axes, _PANELS, strict=True):
            for i, row in enumerate(trend.rows):
                s = row.stats.get(name)
                if s is None:
                    continue
                ref = row.fit_id == trend.reference_fit
                ax.plot([i, i], [s.low_95 * scale, s.high_95 * scale], color="C0", lw=1)
                ax.plot([i, i], [s.low_68 * scale, s.high_68 * scale], color="C0", lw=3.5)
                ax.plot(i, s.median * scale, "o", color="C0",
                        mfc="white" if ref else "C0", ms=6)
                if name == "lifetime" and row.drop_probability is not None:
                    ax.annotate(f"{100 * row.drop_probability:.0f}%",
                                (i, s.high_95 * scale), textcoords="offset points",
                                xytext=(0, 3), ha="center", fontsize=7)
            ax.set_ylabel(label)
            if name == "n_thermal":
                ax.set_yscale("log")
            ax.grid(alpha=0.3)
        axes[-1].set_xticks(x, labels, rotation=30, ha="right")
        axes[-1].set_xlabel("cooldown")
        title = f"cavity {trend.cavity}"
        if trend.reference is not None:
            title += (f": labels = P(lifetime fell by > {100 * trend.fraction:g}% vs "
                      f"{trend.reference})")
        axes[0].set_title(title)
    return fig


def plot_budget(budget, fig=None):
    """n_th versus stage temperature: measurements, Planck occupation of the stage and
    the stated budget model (median and 95 % band).

    Parameters
    ----------
    budget : cavchar.tracking.budget.Budget
    fig : matplotlib.figure.Figure, optional
    """
    import matplotlib as mpl

    from cavchar.thermal import planck_occupation

    temps = np.array([p["stage_temp_k"] for p in budget.points])
    with mpl.rc_context({"font.size": 9}):
        fig = _new_figure(fig, (6.0, 4.2))
        ax = fig.subplots()
        grid = np.geomspace(temps.min() / 1.5, temps.max() * 1.5, 200)
        band = budget.predicted(grid)
        ax.fill_between(grid * 1e3, band["low_95"], band["high_95"], color="C1", alpha=0.25,
                        lw=0, label="model 95%")
        ax.plot(grid * 1e3, band["median"], color="C1", label=f"{budget.model} (median)")
        ax.plot(grid * 1e3, planck_occupation(budget.freq_hz, grid), "k--", lw=1,
                label="Planck occupation of the stage")
        for p in budget.points:
            t = p["stage_temp_k"] * 1e3
            ax.plot([t, t], [p["n_thermal_low_95"], p["n_thermal_high_95"]], color="C0", lw=1)
            ax.plot([t, t], [p["n_thermal_low_68"], p["n_thermal_high_68"]], color="C0", lw=3.5)
            ax.plot(t, p["n_thermal_median"], "o", color="C0", ms=5)
        ax.set_xscale("log")
        ax.set_yscale("log")
        low = min(p["n_thermal_low_95"] for p in budget.points)
        ax.set_ylim(bottom=max(low / 10, 1e-7))
        ax.set_xlabel("stage temperature [mK]")
        ax.set_ylabel("thermal photons n_th")
        ax.set_title(f"thermal budget at {budget.freq_hz / 1e9:.4g} GHz")
        ax.grid(alpha=0.3, which="both")
        ax.legend(fontsize=7)
    return fig
