"""Figures of a jump-record fit: the record with its fitted occupation, and the dwell check.

Functions take arrays (or a Figure/Axes to draw into) and return the Figure;
they never save or show.  matplotlib is imported inside the functions.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from cavchar.result import FitResult


def plot_record_and_occupation(
    times: np.ndarray,
    photons: np.ndarray,
    end_time: float,
    n_thermal_draws: np.ndarray,
    occupation_time: np.ndarray,
    fig=None,
):
    """Left: the photon-number staircase (first segment, at most 2,000 steps shown).
    Right: fraction of time spent in each photon number against the fitted
    Bose–Einstein law (median and 95% band over the posterior draws of n_th).

    Parameters
    ----------
    times, photons : (m,) arrays
        Change points (s) and photon numbers of the record (one segment).
    end_time : float
        End of that segment, s.
    n_thermal_draws : (s,) array
        Posterior draws of n_th.
    occupation_time : (N,) array
        Observed time fraction in each photon number 0..N-1 (all segments).
    """
    from cavchar.plots.style import apply_style, new_figure

    with apply_style():
        if fig is None:
            fig = new_figure((9.0, 3.4))
        ax_t, ax_p = fig.subplots(1, 2, gridspec_kw={"width_ratios": [2.2, 1]})
        shown = slice(0, min(times.size, 2000))
        t = np.r_[times[shown], end_time if times.size <= 2000 else times[2000]]
        n = np.r_[photons[shown], photons[shown][-1]]
        ax_t.step(t * 1e3, n, where="post", lw=1.0, color="0.15")
        ax_t.set_xlabel("time (ms)")
        ax_t.set_ylabel("photon number")
        ax_t.set_title("jump record")
        levels = np.arange(occupation_time.size)
        nth = np.asarray(n_thermal_draws)[:, None]
        law = nth**levels / (1 + nth) ** (levels + 1)
        lo, mid, hi = np.quantile(law, [0.025, 0.5, 0.975], axis=0)
        ax_p.bar(levels, occupation_time, width=0.6, color="0.75", edgecolor="0.2",
                 hatch="//", label="observed")
        ax_p.errorbar(levels, mid, yerr=[mid - lo, hi - mid], fmt="o", ms=4, color="0.0",
                      capsize=3, label="Bose–Einstein (fit, 95%)")
        ax_p.set_yscale("log")
        ax_p.set_xlabel("photon number")
        ax_p.set_ylabel("fraction of time")
        ax_p.legend(fontsize=7)
        fig.set_layout_engine("constrained")  # laid out in the one drawing pass of savefig
    return fig


def plot_dwell_check(
    durations: np.ndarray,
    states: np.ndarray,
    complete: np.ndarray,
    lifetime_draws: np.ndarray,
    n_thermal_draws: np.ndarray,
    max_panels: int = 4,
    fig=None,
):
    """Empirical survival of complete dwells per photon number against the fitted
    exponential ``exp(-r_n d)`` with ``r_n = kappa (n_th (n+1) + (1+n_th) n)``
    (median and 95% band over the posterior draws)."""
    from cavchar.plots.style import apply_style, new_figure

    numbers = [int(n) for n in np.unique(states) if np.sum((states == n) & complete) >= 3]
    numbers = numbers[:max_panels]
    with apply_style():
        if fig is None:
            fig = new_figure((3.0 * max(len(numbers), 1), 3.0))
        axes = np.atleast_1d(fig.subplots(1, max(len(numbers), 1)))
        kappa = 1.0 / np.asarray(lifetime_draws)
        nth = np.asarray(n_thermal_draws)
        for ax, n in zip(axes, numbers):
            d = np.sort(durations[(states == n) & complete])
            # empirical survival: 1 before the first dwell, 1 - (i+1)/m after the i-th
            survival = 1.0 - np.arange(d.size) / d.size
            ax.step(np.r_[0.0, d[:-1]] * 1e3, survival, where="post", color="0.1", lw=1.2,
                    label="observed")
            grid = np.linspace(0, d.max(), 100)
            rate = kappa * (nth * (n + 1) + (1 + nth) * n)
            curves = np.exp(-np.outer(rate, grid))
            lo, mid, hi = np.quantile(curves, [0.025, 0.5, 0.975], axis=0)
            ax.fill_between(grid * 1e3, lo, hi, color="0.8", label="fit, 95%")
            ax.plot(grid * 1e3, mid, ls="--", color="0.35", label="fit, median")
            ax.set_yscale("log")
            ax.set_ylim(max(0.5 / d.size, 1e-4), 1.05)
            ax.set_title(f"dwells in n = {n} ({d.size})")
            ax.set_xlabel("dwell (ms)")
        axes[0].set_ylabel("fraction longer than")
        axes[0].legend(fontsize=7)
        fig.set_layout_engine("constrained")  # laid out in the one drawing pass of savefig
    return fig


def figures(result: FitResult) -> dict:
    """Model-specific figures of a jump-record fit, from the result alone (its extras)."""
    extras = result.extras
    samples = result.samples
    out = {}
    excerpt = extras.get("record_excerpt")
    if excerpt and "occupation_fraction" in extras:
        out["record"] = plot_record_and_occupation(
            np.asarray(excerpt["time"]), np.asarray(excerpt["photons"]), excerpt["end_time"],
            samples["n_thermal"].to_numpy(), np.asarray(extras["occupation_fraction"]))
    dwells = extras.get("dwell_excerpt")
    if dwells:
        durations = np.concatenate([np.asarray(v, float) for v in dwells.values()])
        states = np.concatenate([np.full(len(v), int(k)) for k, v in dwells.items()])
        out["dwell_check"] = plot_dwell_check(
            durations, states, np.ones(durations.size, bool),
            samples["lifetime"].to_numpy(), samples["n_thermal"].to_numpy())
    return out
