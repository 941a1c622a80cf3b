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


def _literal(text: str) -> str:
    """User text shown as written (no mathtext between dollar signs)."""
    return str(text).replace("$", r"\$")


def _stage(value) -> str:
    from cavchar.units import format_quantity

    return "stage ?" if value is None else format_quantity(value, "temperature")


def plot_trend(trend, fig=None):
    """Lifetime, n_th and effective temperature per cooldown (median, 68 % and 95 %).

    Thick bars are 68 % intervals, thin bars 95 %; the reference cooldown is
    drawn as an open marker, each lifetime point is labelled with the
    probability that the lifetime fell by more than the chosen fraction, and
    each point's stage temperature and fit ids are written under its cooldown.
    Several cavities (a :class:`~cavchar.tracking.trend.CavityComparison`) share
    the axes, each with its own colour and marker, side by side per cooldown.

    Parameters
    ----------
    trend : cavchar.tracking.trend.Trend or CavityComparison
    fig : matplotlib.figure.Figure, optional
    """
    import matplotlib as mpl

    trends = list(getattr(trend, "trends", None) or [trend])
    single = len(trends) == 1
    if single:
        keys = [(r.cooldown, r.fit_id) for r in trends[0].rows]
        labels = [f"{r.cooldown}\nfit {','.join(str(i) for i in r.fit_ids)}\n"
                  f"{_stage(r.stage_temp_k)}" for r in trends[0].rows]
    else:
        dated = {}
        for t in trends:
            for r in t.rows:
                dated.setdefault(r.cooldown, r.start_date or "")
        keys = sorted(dated, key=lambda c: (dated[c], c))
        labels = list(keys)
    markers = ("o", "s", "^", "D", "v", "P")
    with mpl.rc_context({"font.size": 9}):
        fig = _new_figure(fig, (max(6.4, 1.0 + 0.9 * len(keys)), 7.2))
        axes = fig.subplots(len(_PANELS), 1, sharex=True)
        width = 0.0 if single else 0.5 / len(trends)
        for k, t in enumerate(trends):
            colour, marker = f"C{k % 10}", markers[k % len(markers)]
            offset = (k - (len(trends) - 1) / 2) * width
            for j, row in enumerate(t.rows):
                i = j if single else keys.index(row.cooldown)
                x = i + offset
                for ax, (name, _label, scale) in zip(axes, _PANELS, strict=True):
                    s = row.stats.get(name)
                    if s is None:
                        continue
                    ref = row.fit_id == t.reference_fit and name == "lifetime"
                    ax.plot([x, x], [s.lo95 * scale, s.hi95 * scale], color=colour, lw=1)
                    ax.plot([x, x], [s.lo68 * scale, s.hi68 * scale], color=colour,
                            lw=3.5)
                    ax.plot(x, s.median * scale, marker, color=colour,
                            mfc="white" if ref else colour, ms=6,
                            label=_literal(t.cavity) if (not single and j == 0
                                                         and name == "lifetime") else None)
                    if name == "lifetime" and row.drop_probability is not None:
                        ax.annotate(f"{100 * row.drop_probability:.0f}%",
                                    (x, s.hi95 * scale), textcoords="offset points",
                                    xytext=(0, 3), ha="center", fontsize=7)
                    if not single and name == _PANELS[-1][0]:
                        ax.annotate(_stage(row.stage_temp_k), (x, s.lo95 * scale),
                                    textcoords="offset points", xytext=(0, -9), ha="center",
                                    fontsize=6, color=colour)
        for ax, (name, label, _scale) in zip(axes, _PANELS, strict=True):
            ax.set_ylabel(label)
            if name == "n_thermal":
                ax.set_yscale("log")
            ax.grid(alpha=0.3)
        axes[-1].set_xticks(range(len(keys)), [_literal(x) for x in labels], rotation=0,
                            ha="center", fontsize=7)
        axes[-1].set_xlabel("cooldown (fit ids and stage temperature of each point)" if single
                            else "cooldown (stage temperature under each point)")
        if single:
            t = trends[0]
            title = f"cavity {_literal(t.cavity)}"
            if t.reference is not None:
                title += (f": labels = P(lifetime fell by > {100 * t.fraction:g}% vs "
                          f"{_literal(t.reference)})")
        else:
            title = "cavities " + ", ".join(_literal(t.cavity) for t in trends)
            axes[0].legend(fontsize=7)
        axes[0].set_title(title)
    return fig


def plot_budget(budget, fig=None):
    """n_th versus stage temperature: measurements, Planck occupation of the stage and
    the stated budget model (median and 95 % band).

    A :class:`~cavchar.tracking.budget.CooldownBudgets` draws each cooldown in its
    own colour with its own model, and the pooled model (if asked for) in grey.

    Parameters
    ----------
    budget : cavchar.fits.budget.Budget or cavchar.tracking.budget.CooldownBudgets
    fig : matplotlib.figure.Figure, optional
    """
    import matplotlib as mpl

    from cavchar.thermal import planck_occupation

    if hasattr(budget, "per_cooldown"):
        series = [(f"cooldown {c.cooldown}", c.budget) for c in budget.per_cooldown]
        if budget.pooled is not None:
            series.append(("pooled", budget.pooled))
        freq = budget.freq_hz
    else:
        series, freq = [("", budget)], budget.freq_hz
    temps = np.array([p["stage_temp_k"] for _, b in series for p in b.points])
    with mpl.rc_context({"font.size": 9}):
        fig = _new_figure(fig, (6.0, 4.2))
        ax = fig.subplots()
        grid = np.geomspace(temps.min() / 1.5, temps.max() * 1.5, 200)
        ax.plot(grid * 1e3, planck_occupation(freq, grid), "k--", lw=1,
                label="Planck occupation of the stage")
        for k, (name, b) in enumerate(series):
            colour = "0.5" if name == "pooled" else f"C{k % 10}"
            lead = f"{_literal(name)}: " if name else ""
            band = b.predicted(grid)
            ax.fill_between(grid * 1e3, band["lo95"], band["hi95"], color=colour,
                            alpha=0.2, lw=0, label=f"{lead}model 95%")
            ax.plot(grid * 1e3, band["median"], color=colour,
                    label=f"{lead}{b.model} (median)")
            if name == "pooled":
                continue
            for p in b.points:
                t = p["stage_temp_k"] * 1e3
                ax.plot([t, t], [p["n_thermal_lo95"], p["n_thermal_hi95"]], color=colour,
                        lw=1)
                ax.plot([t, t], [p["n_thermal_lo68"], p["n_thermal_hi68"]], color=colour,
                        lw=3.5)
                ax.plot(t, p["n_thermal_median"], "o", color=colour, ms=5)
        ax.set_xscale("log")
        ax.set_yscale("log")
        low = min(p["n_thermal_lo95"] for _, b in series for p in b.points)
        ax.set_ylim(bottom=max(low / 10, 1e-7))
        ax.set_xlabel("stage temperature [mK]")
        ax.set_ylabel("thermal photons n_th")
        ax.set_title(f"thermal budget at {freq / 1e9:.4g} GHz")
        ax.grid(alpha=0.3, which="both")
        ax.legend(fontsize=7)
    return fig
