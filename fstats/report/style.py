"""The look of every fstats figure: palette, line styles, markers and figure setup.

The palette ("harbour") is our own.  Its colours are spaced in lightness as well
as in hue, and each series also gets its own line style and marker, so a figure
printed in grey scale still tells the series apart.  Nothing here touches
matplotlib's global state: figures are plain :class:`matplotlib.figure.Figure`
objects with an Agg canvas, and styling is applied to each axes explicitly.
"""

from __future__ import annotations

from dataclasses import dataclass

from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

__all__ = [
    "HARBOUR",
    "SeriesStyle",
    "series_style",
    "channel_style",
    "condition_fill",
    "new_figure",
    "style_axes",
    "relative_luminance",
    "DIVERGING_CMAP",
    "SEQUENTIAL_CMAP",
    "plain_label",
]

#: Series colours, dark to light in alternation so neighbours differ in grey value.
#: Hex sRGB; relative luminance (WCAG) is about 0.04, 0.38, 0.07, 0.47, 0.13, 0.69.
HARBOUR: tuple[str, ...] = (
    "#14365d",  # deep harbour blue
    "#e0962a",  # buoy amber
    "#7b2d4f",  # mooring plum
    "#8fc1a9",  # sea-glass green
    "#3f6e3a",  # kelp
    "#e9d7b8",  # sand
)

_LINESTYLES: tuple = ("-", "--", ":", "-.", (0, (5, 1, 1, 1)), (0, (1, 3)))
_MARKERS: tuple[str, ...] = ("o", "s", "^", "D", "v", "P")
#: Hatches for shaded task periods, one per condition (readable without colour).
_HATCHES: tuple[str, ...] = ("////", "....", "\\\\\\\\", "xxx", "++", "--")
_FILL_GREYS: tuple[str, ...] = ("#9a9a9a", "#c8c8c8", "#6e6e6e", "#b0b0b0", "#808080", "#dadada")

#: Colour maps: a diverging map for signed values (design matrix) and a sequential
#: one for magnitudes.  Both are matplotlib built-ins that stay ordered in grey scale.
DIVERGING_CMAP = "PuOr_r"
SEQUENTIAL_CMAP = "cividis"


@dataclass(frozen=True)
class SeriesStyle:
    """How one series is drawn.

    Parameters
    ----------
    color : str
        Hex colour.
    linestyle : str or tuple
        Matplotlib line style.
    marker : str
        Matplotlib marker.
    """

    color: str
    linestyle: object
    marker: str

    def line_kwargs(self) -> dict:
        """Keyword arguments for ``Axes.plot`` (no marker)."""
        return {"color": self.color, "linestyle": self.linestyle}


def series_style(index: int) -> SeriesStyle:
    """The style of the ``index``-th series (colour, line style and marker cycle together)."""
    i = int(index)
    return SeriesStyle(
        color=HARBOUR[i % len(HARBOUR)],
        linestyle=_LINESTYLES[i % len(_LINESTYLES)],
        marker=_MARKERS[i % len(_MARKERS)],
    )


def channel_style(index: int, is_short: bool) -> SeriesStyle:
    """Style of a channel: long channels solid and dark; short channels dashed and amber.

    Parameters
    ----------
    index : int
        Position of the channel among channels of the same kind (short or long).
    is_short : bool
        True for a short-separation channel.
    """
    if is_short:
        colors = ("#e0962a", "#b5651d", "#f0c27b")
        return SeriesStyle(colors[index % 3], "--", "s")
    # Luminance 0.04, 0.20, 0.46, 0.13: the first three differ clearly in grey.
    colors = ("#14365d", "#c2577f", "#9fb7d9", "#3f6e3a")
    styles = ("-", "-.", ":", (0, (5, 1, 1, 1)))
    markers = ("o", "^", "D", "v")
    return SeriesStyle(colors[index % 4], styles[index % 4], markers[index % 4])


def condition_fill(index: int) -> dict:
    """Keyword arguments for ``Axes.axvspan`` shading one condition's task periods."""
    i = int(index) % len(_HATCHES)
    return {
        "facecolor": _FILL_GREYS[i],
        "alpha": 0.35,
        "hatch": _HATCHES[i],
        "edgecolor": "#555555",
        "linewidth": 0.0,
    }


def new_figure(
    width_in: float,
    height_in: float,
    *,
    nrows: int = 1,
    ncols: int = 1,
    margins_in: tuple[float, float, float, float] | None = None,
    hspace_in: float = 0.45,
    **kw,
):
    """A new Figure with an Agg canvas and its axes.

    Parameters
    ----------
    width_in, height_in : float
        Figure size in inches.
    nrows, ncols : int
        Subplot grid.
    margins_in : (left, right, bottom, top), optional
        Fixed margins in inches.  Without them the constrained layout engine places
        the axes (better for rotated labels, slower to draw); stacked full-width
        time-series panels use fixed margins.
    hspace_in : float, default=0.45
        With fixed margins: vertical gap between rows, in inches.
    **kw
        Passed to ``Figure.subplots`` (``sharex``, ``sharey``, ``squeeze``, ...).

    Returns
    -------
    fig : Figure
    axes : Axes or ndarray of Axes
    """
    if margins_in is None:
        fig = Figure(figsize=(width_in, height_in), layout="constrained")
    else:
        left, right, bottom, top = margins_in
        fig = Figure(figsize=(width_in, height_in))
        panel_h = (height_in - bottom - top - hspace_in * (nrows - 1)) / nrows
        fig.subplots_adjust(
            left=left / width_in,
            right=1.0 - right / width_in,
            bottom=bottom / height_in,
            top=1.0 - top / height_in,
            hspace=hspace_in / max(panel_h, 0.1),
        )
    FigureCanvasAgg(fig)
    axes = fig.subplots(nrows, ncols, **kw)
    for ax in fig.axes:
        style_axes(ax)
    return fig, axes


def style_axes(ax) -> None:
    """Our axes look: light grid, no top/right spines, readable tick labels."""
    ax.grid(True, color="#dddddd", linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(labelsize=8)
    ax.xaxis.label.set_size(9)
    ax.yaxis.label.set_size(9)
    ax.title.set_size(10)


def relative_luminance(hex_color: str) -> float:
    """WCAG relative luminance of an sRGB hex colour, 0 (black) to 1 (white).

    Notes
    -----
    Channels are linearised as ``c/12.92`` for ``c <= 0.04045`` and
    ``((c + 0.055)/1.055)**2.4`` otherwise, then weighted 0.2126 R + 0.7152 G + 0.0722 B.
    """
    h = hex_color.lstrip("#")
    rgb = [int(h[i : i + 2], 16) / 255.0 for i in (0, 2, 4)]
    lin = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in rgb]
    return 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]


def plain_label(text: object) -> str:
    """A user-supplied name made safe as matplotlib text (no mathtext, no hidden legend entry).

    Dollar signs are escaped so ``"a$b$"`` is not parsed as mathtext, and a leading
    underscore (which matplotlib reads as "leave out of the legend") gets a space.
    """
    s = str(text).replace("$", r"\$")
    return " " + s if s.startswith("_") else s
