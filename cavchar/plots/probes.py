"""Figures of a probe-record fit: the reconstructed photon-number trajectory over the raw outcomes.

Functions take arrays (or a Figure to draw into) and return the Figure; they
never save or show.  matplotlib is imported inside the functions.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from cavchar.result import FitResult

__all__ = ["plot_trajectory", "figures"]


def plot_trajectory(
    time: np.ndarray,
    outcome: np.ndarray,
    mean: np.ndarray,
    path: np.ndarray,
    sd: np.ndarray | None = None,
    fig=None,
    max_probes: int = 4000,
):
    """Raw outcomes (top strip) and the reconstructed photon number (bottom).

    Parameters
    ----------
    time : (T,) array
        Probe times in s.
    outcome : (T,) array
        0/1 outcomes, NaN for lost probes (drawn as gaps).
    mean : (T,) array
        Posterior mean photon number (forward-backward).
    path : (T,) int array
        Most likely path (Viterbi), drawn as a staircase.
    sd : (T,) array, optional
        Posterior sd of the photon number (a band mean +- sd).
    fig : Figure, optional
        Draw into this figure.
    max_probes : int
        Only the first ``max_probes`` probes are drawn.
    """

    from cavchar.plots.posterior import display_unit
    from cavchar.plots.style import BAND_68, INK, apply_style, new_figure, series

    n = min(int(max_probes), len(time))
    t = np.asarray(time, dtype=float)[:n]
    factor, unit = display_unit(t - t[0] if n > 1 and t[-1] > t[0] else t, "time")
    x = (t - t[0]) * factor
    y = np.asarray(outcome, dtype=float)[:n]
    m = np.asarray(mean, dtype=float)[:n]
    p = np.asarray(path)[:n]
    with apply_style():
        if fig is None:
            fig = new_figure((9.0, 4.2))
        ax_o, ax_n = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [1, 3]})
        seen = ~np.isnan(y)
        ax_o.vlines(x[seen & (y == 1)], 0.55, 1.0, color=INK, lw=0.5)
        ax_o.vlines(x[seen & (y == 0)], 0.0, 0.45, color="0.55", lw=0.5)
        ax_o.set_yticks([0.2, 0.8], ["0", "1"])
        ax_o.set_ylim(-0.1, 1.1)
        ax_o.grid(False)
        ax_o.set_title(f"raw outcomes ({int((~seen).sum())} of {n} probes lost)")
        if sd is not None:
            s = np.asarray(sd, dtype=float)[:n]
            ax_n.fill_between(x, np.maximum(m - s, 0), m + s, color=BAND_68, lw=0,
                              label="posterior mean +- sd")
        ax_n.plot(x, m, lw=1.0, **series(0, marker=False), label="posterior mean")
        ax_n.step(x, p, where="mid", lw=1.0, **series(1, marker=False),
                  label="most likely path (Viterbi)")
        ax_n.set_ylabel("photon number")
        ax_n.set_xlabel(f"time since first probe ({unit})")
        ax_n.set_ylim(bottom=-0.2)
        ax_n.legend(loc="upper right")
        fig.set_layout_engine("constrained")  # laid out in the one drawing pass of savefig
    return fig


def figures(result: FitResult) -> dict:
    """Model-specific figures of a probe-record fit, from the result's extras."""
    excerpt = result.extras.get("trajectory_excerpt")
    if not excerpt:
        return {}
    outcome = np.array([np.nan if v is None else v for v in excerpt["outcome"]], dtype=float)
    return {"trajectory": plot_trajectory(
        np.asarray(excerpt["time"]), outcome, np.asarray(excerpt["mean_photons"]),
        np.asarray(excerpt["viterbi_photons"]), np.asarray(excerpt["sd_photons"]))}
