"""Figure of a plan: expected relative precision versus amount of data.

:func:`plot_plan` takes a plan table (:func:`cavchar.plan.plan_jumps` and
friends) and optionally a Figure to draw into, and returns the Figure; it
never saves or shows.  matplotlib is imported inside the function.
"""

from __future__ import annotations

import numpy as np

__all__ = ["plot_plan"]

_LABELS = {"lifetime": "lifetime T_c", "n_thermal": "thermal photons n_th",
           "effective_temperature": "effective temperature", "quality_factor": "quality factor"}


def plot_plan(table, fig=None, amounts=None):
    """Expected relative sd of each quantity versus the amount of data (log-log).

    Lines: the Cramér–Rao forecast ``sd ∝ 1/sqrt(amount)``; dotted lines: the
    perfect-readout bound (probe records); horizontal marks: the targets; the
    vertical line: the planned amount; points with bars: the simulated spread
    of the study (with its Monte Carlo standard error), when it was run.  The
    quality factor shares the lifetime's relative sd and is not drawn again.

    Parameters
    ----------
    table : DataFrame
        A plan table.
    fig : matplotlib.figure.Figure, optional
        Figure to draw into (cleared first).
    amounts : array, optional
        Amounts for the curves (default: 1/30 to 30 times the planned amount).

    Returns
    -------
    matplotlib.figure.Figure
    """
    from cavchar.plan.forecast import precision_curve
    from cavchar.plots.style import apply_style, new_figure, series

    curve = precision_curve(table, amounts)
    planned = float(table.attrs["planned_amount"])
    unit = table.attrs.get("amount_unit", "")
    name = table.attrs.get("amount_name", "amount")
    with apply_style():
        if fig is None:
            fig = new_figure((6.0, 3.8))
        else:
            fig.clear()
        ax = fig.subplots()
        rows = table[table["quantity"] != "quality_factor"].reset_index(drop=True)
        for i, row in rows.iterrows():
            part = curve[curve["quantity"] == row["quantity"]]
            style = series(i, marker=False)
            ax.plot(part["amount"], 100 * part["expected_relative_sd"],
                    label=_LABELS.get(row["quantity"], row["quantity"]), **style)
            bound = row["perfect_readout_relative_sd"]
            if np.isfinite(bound):
                a = part["amount"].to_numpy()
                ax.plot(a, 100 * bound * np.sqrt(planned / a), color=style["color"],
                        linestyle=":", linewidth=0.9)
            target = row["target_relative_sd"]
            if np.isfinite(target):
                ax.axhline(100 * target, color=style["color"], linestyle=(0, (1, 3)),
                           linewidth=0.8)
            if np.isfinite(row["simulated_sd"]):
                ax.errorbar([planned], [100 * row["simulated_sd"] / row["assumed"]],
                            yerr=[100 * row["simulated_sd_error"] / row["assumed"]],
                            linestyle="none", **series(i, line=False))
        ax.axvline(planned, color="#4a4a4a", linewidth=0.8, linestyle="--")
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel(f"{name} [{unit}]" if unit == "s" else name)
        ax.set_ylabel("expected relative sd [%]")
        ax.set_title(f"precision forecast ({table.attrs.get('kind', '')})")
        ax.legend(loc="upper right")
        fig.set_layout_engine("constrained")  # laid out in the one drawing pass of savefig
    return fig
