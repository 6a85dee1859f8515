"""The report's figure: a matplotlib Figure as inline SVG text, and the figure for a result.

The SVG is deterministic (a fixed hash salt for element ids, no date or creator metadata) and
carries no XML prolog or DOCTYPE, so it can sit inside an HTML page as it is.
"""

from __future__ import annotations

import re
from typing import Any

from curvewright.figures import figure_for
from curvewright.figures import figure_svg as _svg_text

__all__ = ["figure_svg", "figure_to_svg"]

_PROLOG = re.compile(r"<\?xml[^>]*\?>\s*|<!DOCTYPE[^>]*>\s*", re.S)
# matplotlib's metadata block names its RDF vocabularies by URL; a report keeps no links.
_METADATA = re.compile(r"<metadata>.*?</metadata>\s*", re.S)


def figure_to_svg(fig: Any) -> str:
    """A matplotlib Figure as SVG text for inline use in HTML.

    Parameters
    ----------
    fig : matplotlib.figure.Figure

    Returns
    -------
    str
        The ``<svg ...>...</svg>`` element, the same text for the same figure every time.
    """
    # The figures' own deterministic SVG writer; a report wants it bare (no prolog, no URLs).
    text = _METADATA.sub("", _PROLOG.sub("", _svg_text(fig)))
    return text.strip()


def figure_svg(obj: Any, *, level: float = 0.95) -> str:
    """The figure of a result (``curvewright.figures.figure_for``, confidence band) as SVG."""
    fig = figure_for(obj, level=level, bands="confidence")
    try:
        return figure_to_svg(fig)
    finally:
        if getattr(fig.canvas, "manager", None) is not None:
            # A pyplot figure stays open (and in memory) until closed.
            import matplotlib.pyplot as plt

            plt.close(fig)
