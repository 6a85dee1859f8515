"""The figure of one fit: data, curve, band, excluded points, residual panel.

:func:`plot_fit` is :meth:`FitResult.plot`; :func:`draw_fit` draws into given axes (the
groups' figures and the widget's figure use it); :func:`plot_curve` draws a curve with no fit
behind it (the widget's start curve).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from numpy.typing import NDArray

from ..data import Dataset
from ..errors import FigureError
from . import marks
from .options import Bands, check_axes, check_bands, check_level_of, check_options
from .scales import XAxis, apply_x_axis, choose_log_x, x_axis
from .style import (
    COLUMN_WIDTH,
    DATA_GREY,
    color_at,
    legend_style,
    new_figure,
    style_axes,
    text_style,
)

if TYPE_CHECKING:
    from ..result import FitResult

__all__ = ["OPTIONS", "Panels", "draw_fit", "panels", "plot_curve", "plot_fit"]

FloatArray = NDArray[np.float64]

#: The keyword options of :func:`plot_fit` (beyond its named arguments).
OPTIONS = ("xlabel", "ylabel", "title", "color", "width", "height", "label", "data", "log_y")

BAND_NAMES = {"confidence": "confidence band", "prediction": "prediction band"}


@dataclass(frozen=True)
class Panels:
    """The axes of a figure: the main one and the residual panel under it (or None)."""

    figure: Figure
    main: Axes
    residuals: Axes | None


def panels(
    ax: Axes | None, residuals: bool, width: float = COLUMN_WIDTH, height: float | None = None
) -> Panels:
    """New figure (main axes over a residual panel) or, with ``ax``, that axes' figure."""
    if ax is not None:
        fig = ax.get_figure()
        assert isinstance(fig, Figure)
        res = None
        if residuals:  # asked for under a given axes: an inset below it, sharing x
            res = ax.inset_axes((0.0, -0.48, 1.0, 0.28), sharex=ax)
            style_axes(res)
        return Panels(fig, ax, res)
    h = (0.95 * width if residuals else 0.78 * width) if height is None else height
    fig = new_figure(width, h)
    if residuals:
        main, res_ax = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": (3, 1)})
        style_axes(res_ax)
        main.tick_params(labelbottom=False)
        style_axes(main)
        return Panels(fig, main, res_ax)
    main = fig.add_subplot()
    style_axes(main)
    return Panels(fig, main, None)


def draw_fit(
    p: Panels,
    data: Dataset,
    predict: Callable[[FloatArray], FloatArray],
    axis: XAxis,
    *,
    result: FitResult | None = None,
    bands: Bands = None,
    level: float = 0.95,
    color: str = color_at(0),
    point_color: str = DATA_GREY,
    label: str | None = "fit",
    linestyle: str = "-",
) -> None:
    """Draw one dataset and its curve into the panels (bands need ``result``)."""
    ax = p.main
    grid = axis.grid
    kinds = () if bands is None else (bands,) if isinstance(bands, str) else bands
    if kinds and result is None:
        raise FigureError("bands need a fit result; draw the curve with bands=None.")
    # the wider prediction band first, so the confidence band shows on top of it
    for kind in sorted(kinds, key=lambda k: k != "prediction"):
        assert result is not None
        fn = result.confidence_band if kind == "confidence" else result.prediction_band
        b = fn(grid, level)
        marks.band(
            ax,
            grid,
            b["lower"].to_numpy(dtype=float),
            b["upper"].to_numpy(dtype=float),
            color,
            f"{level:.0%} {BAND_NAMES[kind]}",
        )
    marks.curve(ax, grid, predict(grid), color, label=label, linestyle=linestyle)
    inc = np.asarray(data.include, dtype=bool)
    x_in, y_in = data.x[inc], data.y[inc]
    marks.points(ax, axis.place(x_in), y_in, point_color)
    marks.replicate_means(ax, axis.place(x_in), y_in, point_color)
    if np.any(~inc):
        marks.excluded_points(ax, axis.place(data.x[~inc]), data.y[~inc], point_color)
    if p.residuals is not None:
        r = y_in - predict(x_in)
        p.residuals.axhline(0.0, color="#9a9a9a", lw=0.7, zorder=1)
        p.residuals.scatter(
            axis.place(x_in),
            r,
            s=marks.POINT_SIZE * 0.8,
            color=point_color,
            linewidths=0,
            zorder=3,
            gid="cw-residuals",
        )


def finish(p: Panels, axis: XAxis, data: Dataset, opts: dict[str, Any], *, legend: bool) -> None:
    """Scales, labels, title and legend of a figure drawn by :func:`draw_fit`."""
    for a in (p.main, p.residuals):
        if a is not None:
            apply_x_axis(a, axis)
    if opts.get("log_y"):
        p.main.set_yscale("log")
    bottom = p.residuals if p.residuals is not None else p.main
    bottom.set_xlabel(opts.get("xlabel", data.x_label), **text_style())
    p.main.set_ylabel(opts.get("ylabel", data.y_label), **text_style())
    if p.residuals is not None:
        p.residuals.set_ylabel("residual", **text_style())
    if "title" in opts:
        p.main.set_title(str(opts["title"]), **text_style())
    if legend:
        p.main.legend(**legend_style())


def plot_fit(
    result: FitResult,
    ax: Axes | None = None,
    *,
    bands: Bands = "confidence",
    level: float = 0.95,
    residuals: bool | None = None,
    log_x: bool | None = None,
    **opts: Any,
) -> Figure:
    """Draw a fit: data, fitted curve, band, excluded points and residual panel.

    Parameters
    ----------
    result : FitResult
    ax : matplotlib Axes, optional
        Draw into these axes (then no residual panel unless ``residuals=True``).
    bands : {"confidence", "prediction", None} or tuple of both
        The pointwise band(s) drawn around the curve (:meth:`FitResult.confidence_band`,
        :meth:`FitResult.prediction_band`).
    level : float
        The band's pointwise coverage, in (0, 1).
    residuals : bool, optional
        A panel of ``y - predict(x)`` under the main axes; by default on for a new figure and
        off when ``ax`` is given.
    log_x : bool, optional
        Logarithmic x; by default when the positive x span more than two decades. Zero x
        are drawn at a stand-in labelled 0 left of the smallest positive x, with an axis break.
    **opts
        ``xlabel``, ``ylabel`` (default: the dataset's column names), ``title``, ``color`` (the
        curve's), ``width``, ``height`` (inches), ``label`` (the curve's legend entry),
        ``log_y``, ``data`` (a Dataset to draw instead of the fitted one, e.g. with other
        exclusions).

    Returns
    -------
    matplotlib.figure.Figure
        Save it with :func:`curvewright.figures.save_figure` (deterministic SVG) or
        ``fig.savefig(path, dpi=...)``.

    Raises
    ------
    FigureError
        An unknown option, band kind or a non-Axes ``ax``.
    DataError
        ``log_x=True`` for x without positive values.
    """
    o = check_options(opts, OPTIONS, "FitResult.plot")
    ax = check_axes(ax)
    kind = check_bands(bands)
    lvl = check_level_of(level)
    data = result.dataset if o.get("data") is None else o["data"]
    if not isinstance(data, Dataset):
        raise FigureError(f"data must be a Dataset, got {type(data).__name__}.")
    show_res = (ax is None) if residuals is None else bool(residuals)
    axis = x_axis(data.x, choose_log_x(data.x, log_x))
    p = panels(ax, show_res, float(o.get("width", COLUMN_WIDTH)), o.get("height"))
    draw_fit(
        p,
        data,
        result.predict,
        axis,
        result=result,
        bands=kind,
        level=lvl,
        color=str(o.get("color", color_at(0))),
        label=str(o.get("label", "fit")),
    )
    finish(p, axis, data, o, legend=True)
    return p.figure


def plot_curve(
    data: Dataset,
    curve: Callable[[FloatArray], FloatArray],
    ax: Axes | None = None,
    *,
    log_x: bool | None = None,
    label: str = "start",
    **opts: Any,
) -> Figure:
    """Data with a curve that is not a fit (dashed): e.g. the widget's starting curve."""
    o = check_options(opts, tuple(k for k in OPTIONS if k not in ("data", "label")), "plot_curve")
    axis = x_axis(data.x, choose_log_x(data.x, log_x))
    p = panels(check_axes(ax), False, float(o.get("width", COLUMN_WIDTH)), o.get("height"))
    draw_fit(
        p, data, curve, axis, color=str(o.get("color", color_at(0))), label=label, linestyle="--"
    )
    finish(p, axis, data, o, legend=True)
    return p.figure
