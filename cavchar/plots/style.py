"""cavchar's own look for figures, applied locally (never to the global rc state).

The style is meant to read in greyscale print as well as on screen: every
series differs in line style and marker as well as in colour, and the colours
step in lightness (dark to light) so that two of them never print as the same
grey.  Figures are drawn off screen with the Agg canvas.

Use it as a context manager around the drawing code::

    from cavchar.plots.style import apply_style, new_figure, series

    with apply_style():
        fig = new_figure((6, 3))
        ax = fig.subplots()
        ax.plot(t, y, **series(0))

matplotlib is imported inside the functions only, so importing this module is
cheap.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from typing import Any

__all__ = [
    "PALETTE",
    "PALETTE_NAMES",
    "LINESTYLES",
    "MARKERS",
    "BAND_68",
    "BAND_95",
    "INK",
    "series",
    "style_params",
    "apply_style",
    "new_figure",
    "literal",
    "literal_figure",
]

#: series colours, darkest first (greyscale lightness rises monotonically along the list)
PALETTE: tuple[str, ...] = ("#16263f", "#8a3517", "#4c7d45", "#9a6aad", "#c29a3a", "#8fbad0")
#: plain names of the palette, for captions ("dark blue line", ...)
PALETTE_NAMES: tuple[str, ...] = ("ink blue", "brick", "fern", "heather", "ochre", "sky")
#: line style of each series (solid, dashed, dash-dot, dotted, long dash, dash-dot-dot)
LINESTYLES: tuple[Any, ...] = ("-", "--", "-.", ":", (0, (7, 2)), (0, (4, 1.5, 1, 1.5, 1, 1.5)))
#: marker of each series (hollow and filled shapes alternate)
MARKERS: tuple[str, ...] = ("o", "s", "^", "D", "v", "P")
#: fill colours of credible bands: 68 % darker, 95 % lighter (neutral greys with a warm cast)
BAND_68 = "#b9b2a6"
BAND_95 = "#e3ded5"
#: colour of data points and text-like marks
INK = "#1a1a1a"


def series(index: int, *, line: bool = True, marker: bool = True) -> dict[str, Any]:
    """Keyword arguments that give series ``index`` its colour, line style and marker.

    Parameters
    ----------
    index
        Series number (wraps around after ``len(PALETTE)``).
    line, marker
        Include the line style / the marker.

    Returns
    -------
    dict
        For ``Axes.plot`` / ``Axes.errorbar``: ``color``, ``linestyle``,
        ``marker``, ``markerfacecolor`` (odd series hollow).
    """
    i = int(index) % len(PALETTE)
    out: dict[str, Any] = {"color": PALETTE[i]}
    if line:
        out["linestyle"] = LINESTYLES[i % len(LINESTYLES)]
    if marker:
        out["marker"] = MARKERS[i % len(MARKERS)]
        out["markerfacecolor"] = "white" if i % 2 else PALETTE[i]
        out["markeredgecolor"] = PALETTE[i]
    return out


def style_params() -> dict[str, Any]:
    """The rc parameters of the cavchar look (a fresh dict each call)."""
    from cycler import cycler

    return {
        "figure.facecolor": "white",
        "figure.dpi": 100,
        "savefig.dpi": 144,
        "savefig.facecolor": "white",
        "font.size": 9.0,
        "axes.titlesize": 9.5,
        "axes.titleweight": "bold",
        "axes.titlelocation": "left",
        "axes.titlepad": 5.0,
        "axes.labelsize": 9.0,
        "axes.labelcolor": "#2b2b2b",
        "axes.facecolor": "#fcfbf8",
        "axes.edgecolor": "#4a4a4a",
        "axes.linewidth": 0.7,
        "axes.spines.top": False,
        "axes.spines.right": False,
        "axes.grid": True,
        "axes.grid.which": "major",
        "axes.axisbelow": True,
        "grid.color": "#dcd8d0",
        "grid.linestyle": (0, (1, 2)),
        "grid.linewidth": 0.6,
        "axes.prop_cycle": cycler(color=list(PALETTE)) + cycler(linestyle=list(LINESTYLES)),
        "lines.linewidth": 1.3,
        "lines.markersize": 4.0,
        "lines.markeredgewidth": 0.9,
        "patch.edgecolor": "#3a3a3a",
        "hatch.color": "#3a3a3a",
        "xtick.direction": "out",
        "ytick.direction": "out",
        "xtick.major.size": 3.0,
        "ytick.major.size": 3.0,
        "xtick.color": "#3a3a3a",
        "ytick.color": "#3a3a3a",
        "xtick.labelsize": 8.0,
        "ytick.labelsize": 8.0,
        "legend.frameon": False,
        "legend.fontsize": 7.5,
        "legend.handlelength": 2.6,
        "errorbar.capsize": 2.5,
        "image.cmap": "cividis",
        "svg.fonttype": "none",
        "pdf.fonttype": 42,
    }


@contextmanager
def apply_style(extra: Mapping[str, Any] | None = None) -> Iterator[None]:
    """Context manager: draw with the cavchar look, restoring the caller's rc state after.

    Parameters
    ----------
    extra
        rc parameters that override the cavchar ones inside the block.
    """
    import matplotlib

    params = style_params()
    params.update(extra or {})
    with matplotlib.rc_context(params):
        yield


def new_figure(figsize: tuple[float, float] = (6.4, 3.6), **kwargs: Any):
    """A figure on the off-screen Agg canvas (no pyplot, no GUI, nothing global).

    Such a figure is freed by the garbage collector like any object; it never
    needs ``pyplot.close``.  Keyword arguments go to
    :class:`matplotlib.figure.Figure`.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=figsize, **kwargs)
    FigureCanvasAgg(fig)
    return fig


def literal(text: object) -> str:
    """User text (labels, cavity and file names) made literal for matplotlib.

    matplotlib reads text between two unescaped ``$`` as mathtext, so a label
    such as ``"cavity $A$"`` is typeset and ``"cost $5 and $"`` fails to
    parse.  Every ``$`` is escaped as ``\\$``, which matplotlib draws as a
    plain dollar sign; the rest of the text is drawn as given.  Our own labels
    never use mathtext, so every piece of text from a user or a file goes
    through this function on its way into a figure.
    """
    return str(text).replace("$", r"\$")


def literal_figure(fig):
    """Safety net before a figure is rendered: any text of ``fig`` that matplotlib would
    parse as mathtext but cannot is drawn as plain text instead of failing the rendering.

    Numeric tick labels (``$\\mathdefault{10^{-2}}$``) parse and stay typeset.
    Returns the figure.
    """
    from matplotlib import cbook
    from matplotlib.text import Text

    for item in fig.findobj(Text):
        text = item.get_text()
        if not text or not cbook.is_math_text(text):
            continue
        if not _parses(text, item.get_fontproperties()):
            item.set_parse_math(False)
    return fig


#: (text, hash of the font properties) -> whether mathtext parses it
_PARSES: dict[tuple[str, int], bool] = {}


def _parses(text: str, prop) -> bool:
    """Whether matplotlib's mathtext parser accepts ``text`` with the font ``prop``;
    remembered, since the same tick labels recur in every figure and format (the
    parse was a tenth of the time of writing a fit's figures)."""
    key = (text, hash(prop))
    if key not in _PARSES:
        from matplotlib.mathtext import MathTextParser

        try:
            MathTextParser("path").parse(text, dpi=72, prop=prop)
            _PARSES[key] = True
        except (ValueError, RuntimeError):
            _PARSES[key] = False
        if len(_PARSES) > 4096:
            _PARSES.clear()
    return _PARSES[key]
