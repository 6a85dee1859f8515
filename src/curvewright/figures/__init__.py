"""Figures of fits (the view layer, matplotlib): one fit, a global fit, a batch, a forest plot.

Every figure is a plain :class:`matplotlib.figure.Figure` built directly (no pyplot, no global
state), so it works on any backend and the user can restyle it. Importing this package
registers the drawing functions behind :meth:`FitResult.plot`, :meth:`GlobalResult.plot`,
:meth:`BatchResult.plot` and :meth:`BatchResult.forest` (the result records sit below this
layer and cannot import it).
"""

from __future__ import annotations

from typing import Any

from matplotlib.figure import Figure

from ..batch_result import BatchResult
from ..errors import FigureError
from ..global_result import GlobalResult
from ..result import FitResult, register_figures
from .groups import forest, plot_batch, plot_global
from .save import DEFAULT_DPI, figure_svg, save_figure
from .single import plot_curve, plot_fit
from .style import COLUMN_WIDTH, PALETTE

__all__ = [
    "COLUMN_WIDTH",
    "DEFAULT_DPI",
    "PALETTE",
    "figure_for",
    "figure_svg",
    "forest",
    "plot_batch",
    "plot_curve",
    "plot_fit",
    "plot_global",
    "save_figure",
]


def figure_for(obj: object, **opts: Any) -> Figure:
    """The standard figure of a result: :func:`plot_fit`, :func:`plot_global` or :func:`plot_batch`.

    Parameters
    ----------
    obj : FitResult, GlobalResult or BatchResult
    **opts
        Passed on (``bands=``, ``level=``, ``log_x=``, ...; see those functions).

    Raises
    ------
    FigureError
        ``obj`` is not one of those results.
    """
    if isinstance(obj, FitResult):  # GroupFit too: a group's own view
        return plot_fit(obj, **opts)
    if isinstance(obj, GlobalResult):
        return plot_global(obj, **opts)
    if isinstance(obj, BatchResult):
        return plot_batch(obj, **opts)
    raise FigureError(
        f"figure_for draws a FitResult, GlobalResult or BatchResult, got {type(obj).__name__}."
    )


register_figures(fit=plot_fit, global_fit=plot_global, batch=plot_batch, forest=forest)
