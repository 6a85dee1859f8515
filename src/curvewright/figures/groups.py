"""Figures of many curves: a global fit on one axes, a batch as small multiples, a forest plot."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
from matplotlib.artist import Artist
from matplotlib.axes import Axes
from matplotlib.container import Container
from matplotlib.figure import Figure

from ..data import Dataset
from ..errors import CurvewrightError, FigureError
from .options import Bands, check_axes, check_bands, check_level_of, check_options
from .scales import choose_log_x, x_axis
from .single import Panels, draw_fit, finish, panels
from .style import (
    COLUMN_WIDTH,
    DATA_GREY,
    FONT,
    SMALL_FONT_SIZE,
    color_at,
    new_figure,
    style_axes,
    text_style,
)

if TYPE_CHECKING:
    from ..batch_result import BatchResult
    from ..global_result import GlobalResult

__all__ = ["forest", "plot_batch", "plot_global"]

GLOBAL_OPTIONS = ("xlabel", "ylabel", "title", "width", "height", "log_y")
BATCH_OPTIONS = ("xlabel", "ylabel", "title", "width", "panel_height", "log_y")
FOREST_OPTIONS = ("xlabel", "title", "width", "height", "log_x")


def _all_x(datasets: Sequence[Dataset | None]) -> np.ndarray[Any, np.dtype[np.float64]]:
    xs = [d.x for d in datasets if d is not None]
    return np.concatenate(xs) if xs else np.zeros(0)


def plot_global(
    result: GlobalResult,
    ax: Axes | None = None,
    *,
    bands: Bands = None,
    level: float = 0.95,
    residuals: bool = False,
    log_x: bool | None = None,
    groups: Sequence[str] | None = None,
    **opts: Any,
) -> Figure:
    """Every group of a global fit on one axes, one colour each, with a legend.

    Parameters
    ----------
    result : GlobalResult
    ax : matplotlib Axes, optional
        Draw into these axes.
    bands : {"confidence", "prediction", None}
        A band per group (from the group's view on the joint covariance).
    level : float
        The bands' pointwise coverage.
    residuals : bool
        A residual panel under the main axes (all groups, their colours).
    log_x : bool, optional
        As in :meth:`FitResult.plot`; chosen from the drawn groups' x together.
    groups : sequence of str, optional
        Draw only these groups (labels as in ``result.labels``); each keeps the colour it has
        when all are drawn. Default: all.
    **opts
        ``xlabel``, ``ylabel``, ``title``, ``width``, ``height``, ``log_y``.

    Returns
    -------
    matplotlib.figure.Figure
    """
    o = check_options(opts, GLOBAL_OPTIONS, "GlobalResult.plot")
    kind, lvl = check_bands(bands), check_level_of(level)
    drawn = _drawn_groups(result, groups)
    datasets = [result.groups[i].dataset for i in drawn]
    x = _all_x(datasets)
    axis = x_axis(x, choose_log_x(x, log_x))
    p = panels(
        check_axes(ax), bool(residuals), float(o.get("width", COLUMN_WIDTH)), o.get("height")
    )
    for i in drawn:
        g, lab = result.groups[i], result.labels[i]
        c = color_at(i)
        draw_fit(
            p,
            g.dataset,
            g.predict,
            axis,
            result=g,
            bands=kind,
            level=lvl,
            color=c,
            point_color=c,
            label=lab,
        )
    _one_legend_entry_each(p)
    finish(p, axis, datasets[0], o, legend=False)
    handles, labels = p.main.get_legend_handles_labels()
    p.main.legend(
        handles,
        labels,
        title=", ".join(result.by),
        prop={"family": FONT, "size": SMALL_FONT_SIZE},
        title_fontproperties={"family": FONT, "size": SMALL_FONT_SIZE},
        frameon=False,
    )
    return p.figure


def _drawn_groups(result: GlobalResult, groups: Sequence[str] | None) -> list[int]:
    # Indices into result.groups, so a group's colour does not depend on which others are shown.
    labels = list(result.labels)
    if groups is None:
        return list(range(len(labels)))
    if isinstance(groups, str):
        groups = [groups]
    chosen = [str(g) for g in groups]
    unknown = [g for g in chosen if g not in labels]
    if unknown:
        raise FigureError(
            f"GlobalResult.plot: no group {unknown[0]!r} in this fit; its groups are "
            f"{', '.join(map(repr, labels))}."
        )
    if not chosen:
        raise FigureError("GlobalResult.plot: groups=[] leaves nothing to draw; name a group.")
    return [i for i, lab in enumerate(labels) if lab in chosen]


def _one_legend_entry_each(p: Panels) -> None:
    # Means and excluded marks repeat per group: keep only the first of each in the legend.
    seen: set[str] = set()
    artists: list[Artist | Container] = [*p.main.lines, *p.main.collections, *p.main.containers]
    for artist in artists:
        lab = str(artist.get_label())
        if lab in ("mean ± SD", "excluded") or lab.endswith("band"):
            if lab in seen:
                artist.set_label("_" + lab)
            seen.add(lab)


def plot_batch(
    batch: BatchResult,
    groups: Sequence[object] | None = None,
    ncols: int = 4,
    *,
    bands: Bands = None,
    level: float = 0.95,
    log_x: bool | None = None,
    **opts: Any,
) -> Figure:
    """Small multiples: one panel per group (its data and fit), failed groups marked.

    Parameters
    ----------
    batch : BatchResult
    groups : sequence, optional
        Groups to draw (keys or labels), in this order; by default all of them.
    ncols : int
        Panels per row.
    bands, level, log_x
        As in :meth:`FitResult.plot` (one x scale for all panels).
    **opts
        ``xlabel``, ``ylabel``, ``title``, ``width`` (default two columns, 7 in, for more than
        two panels a row), ``panel_height`` (inches), ``log_y``.

    Returns
    -------
    matplotlib.figure.Figure
        A panel whose group has no fit says so (``no fit``, its reason) in place of a curve.
    """
    o = check_options(opts, BATCH_OPTIONS, "BatchResult.plot")
    kind, lvl = check_bands(bands), check_level_of(level)
    if isinstance(ncols, bool) or not isinstance(ncols, int) or ncols < 1:
        raise FigureError(f"ncols must be a positive whole number, got {ncols!r}.")
    idx = list(range(len(batch))) if groups is None else [batch.index_of(g) for g in groups]
    if not idx:
        raise FigureError("groups names no group; give at least one (or None for all).")
    ncols = min(ncols, len(idx))
    nrows = math.ceil(len(idx) / ncols)
    width = float(o.get("width", 2 * COLUMN_WIDTH if ncols > 2 else COLUMN_WIDTH))
    ph = float(o.get("panel_height", 0.8 * width / ncols))
    fig = new_figure(width, ph * nrows + 0.5)
    datasets = [batch.datasets[i] for i in idx]
    x = _all_x(datasets)
    axis = x_axis(x, choose_log_x(x, log_x))
    axes = fig.subplots(nrows, ncols, squeeze=False)
    first = next((d for d in datasets if d is not None), None)
    for k, ax in enumerate(axes.flat):
        if k >= len(idx):
            ax.set_axis_off()
            continue
        i = idx[k]
        style_axes(ax)
        ax.set_title(batch.labels[i], **text_style())
        p = Panels(fig, ax, None)
        ds = batch.datasets[i]
        fit = None
        if batch.statuses[i] != "failed" and ds is not None:
            try:
                fit = batch.fit_of(batch.keys[i])
            except CurvewrightError:
                fit = None
        if fit is not None and ds is not None:
            draw_fit(p, ds, fit.predict, axis, result=fit, bands=kind, level=lvl, label=None)
        else:
            if ds is not None:
                ax.scatter(ds.x, ds.y, s=8, color=DATA_GREY, linewidths=0, gid="cw-data")
            ax.text(
                0.5,
                0.5,
                "no fit\n" + _short(batch.reasons[i]),
                transform=ax.transAxes,
                ha="center",
                va="center",
                gid="cw-missing",
                **text_style(SMALL_FONT_SIZE),
            )
        if ds is not None:
            finish(p, axis, ds, {"xlabel": "", "ylabel": "", "log_y": o.get("log_y")}, legend=False)
    if first is not None:
        fig.supxlabel(o.get("xlabel", first.x_label), **text_style())
        fig.supylabel(o.get("ylabel", first.y_label), **text_style())
    if "title" in o:
        fig.suptitle(str(o["title"]), **text_style())
    return fig


def _short(text: str, n: int = 40) -> str:
    return text if len(text) <= n else text[: n - 1] + "…"


def forest(
    batch: BatchResult, name: str, level: float | None = None, ax: Axes | None = None, **opts: Any
) -> Figure:
    """One parameter (or derived quantity) with its interval, one row per group.

    Parameters
    ----------
    batch : BatchResult
    name : str
        A model parameter (e.g. ``log_ic50``) or a derived quantity (e.g. ``ic50``).
    level : float, optional
        The intervals' coverage; must be the batch's own (``batch.level``), the level its
        intervals were computed at (refit with ``fit_groups(level=...)`` for another).
    ax : matplotlib Axes, optional
    **opts
        ``xlabel`` (default the name), ``title``, ``width``, ``height``, ``log_x``.

    Returns
    -------
    matplotlib.figure.Figure
        Groups without an estimate are listed on their row as ``no estimate`` with their
        status.

    Raises
    ------
    FigureError
        An unknown name, a level other than the batch's, an unknown option.
    """
    o = check_options(opts, FOREST_OPTIONS, "BatchResult.forest")
    if level is not None and abs(check_level_of(level) - batch.level) > 1e-12:
        raise FigureError(
            f"the batch's intervals are at level {batch.level}, not {level}; use level=None or "
            f"refit with fit_groups(..., level={level})."
        )
    params, derived = list(batch.model.param_names), list(batch.derived_names)
    if name in params:
        j = params.index(name)
        v, lo, hi = batch.value_array[:, j], batch.lower_array[:, j], batch.upper_array[:, j]
    elif name in derived:
        k = derived.index(name)
        v, lo, hi = (batch.derived_array[:, k, s] for s in (0, 2, 3))
    else:
        raise FigureError(
            f"{name!r} is neither a parameter {params} nor a derived quantity {derived} of "
            f"model {batch.model.name!r}."
        )
    n = len(batch)
    if ax is None:
        fig = new_figure(float(o.get("width", COLUMN_WIDTH)), o.get("height", 0.6 + 0.18 * n))
        ax = fig.add_subplot()
    else:
        ax = check_axes(ax)
        assert ax is not None
        got = ax.get_figure()
        assert isinstance(got, Figure)
        fig = got
    style_axes(ax)
    rows = np.arange(n)[::-1].astype(float)  # first group at the top
    ok = np.isfinite(v)
    ax.hlines(rows[ok], lo[ok], hi[ok], color=color_at(0), lw=1.2, gid="cw-forest-intervals")
    ax.scatter(v[ok], rows[ok], s=14, color=color_at(0), zorder=3, gid="cw-forest-points")
    for r, i in zip(rows[~ok], np.flatnonzero(~ok), strict=True):
        ax.text(
            0.02,
            float(r),
            f"no estimate ({batch.statuses[i]})",
            transform=ax.get_yaxis_transform(),
            va="center",
            color=color_at(1),
            gid="cw-missing",
            **text_style(SMALL_FONT_SIZE),
        )
    ax.set_yticks(rows, labels=list(batch.labels))
    ax.set_ylim(-0.7, n - 0.3)
    if o.get("log_x"):
        ax.set_xscale("log")
    ax.set_xlabel(str(o.get("xlabel", f"{name} ({batch.level:.0%} interval)")), **text_style())
    if "title" in o:
        ax.set_title(str(o["title"]), **text_style())
    return fig
