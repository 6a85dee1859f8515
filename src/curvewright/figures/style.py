"""The figures' look: palette, sizes and fonts, set on each figure (never global state).

Colours are a colour-blind-safe subset of the Okabe-Ito palette (Okabe and Ito, "Color
Universal Design", 2002), a published general-purpose palette; the order is our own. Sizes are
for a single journal column (3.5 in wide) with 8-pt text.
"""

from __future__ import annotations

from typing import Any

from matplotlib.axes import Axes
from matplotlib.figure import Figure

__all__ = [
    "BAND_ALPHA",
    "COLUMN_WIDTH",
    "DATA_GREY",
    "FONT",
    "FONT_SIZE",
    "PALETTE",
    "SMALL_FONT_SIZE",
    "color_at",
    "new_figure",
    "style_axes",
]

#: Single-column figure width in inches (common practice for journals: 3.3-3.5 in).
COLUMN_WIDTH = 3.5
#: Main text size (axis labels) and the smaller size (ticks, legend), in points.
FONT_SIZE = 8.0
SMALL_FONT_SIZE = 7.0
#: DejaVu Sans ships with matplotlib, so a figure looks the same on every machine.
FONT = "DejaVu Sans"

#: Okabe-Ito colours, our order: blue, vermillion, bluish green, orange, reddish purple, sky
#: blue, yellow (each separable under the common colour-vision deficiencies).
PALETTE: tuple[str, ...] = (
    "#0072B2",
    "#D55E00",
    "#009E73",
    "#E69F00",
    "#CC79A7",
    "#56B4E9",
    "#F0E442",
)
#: Data points of a single fit are dark grey, so the curve's colour stands out.
DATA_GREY = "#3a3a3a"
#: Opacity of a band's fill.
BAND_ALPHA = 0.22


def color_at(i: int) -> str:
    """The ``i``-th colour of :data:`PALETTE` (cycling)."""
    return PALETTE[i % len(PALETTE)]


def new_figure(width: float = COLUMN_WIDTH, height: float | None = None) -> Figure:
    """A bare figure at publication size with constrained layout (no pyplot involved)."""
    h = 0.8 * width if height is None else height
    fig = Figure(figsize=(width, h), layout="constrained")
    fig.set_facecolor("white")
    return fig


def style_axes(ax: Axes) -> None:
    """Our axes look: left and bottom spines only, outward ticks, fonts set on the axes.

    Tick labels are made lazily at draw time, so their font goes in the tick parameters
    rather than in a temporary rc context.
    """
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_linewidth(0.8)
    ax.tick_params(
        which="both",
        direction="out",
        labelsize=SMALL_FONT_SIZE,
        labelfontfamily=FONT,
        width=0.8,
    )
    ax.tick_params(which="major", length=3.5)
    ax.tick_params(which="minor", length=2.0)


def text_style(size: float = FONT_SIZE) -> dict[str, Any]:
    """Keyword arguments of our text (axis labels, titles, notes)."""
    return {"fontsize": size, "fontfamily": FONT}


def legend_style() -> dict[str, Any]:
    """Keyword arguments of our legends."""
    return {"prop": {"family": FONT, "size": SMALL_FONT_SIZE}, "frameon": False}
