"""The marks a figure is made of: data points, replicate means with SD, curves and bands.

Every mark carries a ``gid`` (``cw-data``, ``cw-excluded``, ``cw-mean``, ``cw-curve``,
``cw-band``, ``cw-residuals``) so tests, and users restyling a figure, can find it.
Excluded points are hollow: they are shown, and clearly not part of the fit.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from matplotlib.axes import Axes
from matplotlib.collections import PathCollection, PolyCollection
from matplotlib.container import ErrorbarContainer
from matplotlib.lines import Line2D
from numpy.typing import NDArray

from .style import BAND_ALPHA, DATA_GREY, legend_style

__all__ = [
    "DATA_GREY",
    "band",
    "curve",
    "excluded_points",
    "points",
    "replicate_means",
    "legend_style",
]

FloatArray = NDArray[np.float64]

POINT_SIZE = 12.0  # marker area in points^2 (scatter's s)


def points(ax: Axes, x: FloatArray, y: FloatArray, color: str, **kw: Any) -> PathCollection:
    """The included observations, filled small circles."""
    out: PathCollection = ax.scatter(
        x, y, s=POINT_SIZE, color=color, linewidths=0, zorder=3, gid="cw-data", **kw
    )
    return out


def excluded_points(ax: Axes, x: FloatArray, y: FloatArray, color: str) -> PathCollection:
    """Points left out of the fit: hollow circles of the same colour."""
    out: PathCollection = ax.scatter(
        x,
        y,
        s=POINT_SIZE * 1.6,
        facecolors="none",
        edgecolors=color,
        linewidths=0.8,
        zorder=3,
        gid="cw-excluded",
        label="excluded",
    )
    return out


def replicate_means(
    ax: Axes, x: FloatArray, y: FloatArray, color: str
) -> tuple[FloatArray, FloatArray, FloatArray, ErrorbarContainer | None]:
    """Mean ± SD (sample SD, ddof 1) at every x measured more than once.

    Returns the x, means and SDs drawn (empty when no x repeats) and the error-bar container.
    """
    ux, counts = np.unique(x, return_counts=True)
    rep = ux[counts > 1]
    if rep.size == 0:
        empty = np.zeros(0)
        return empty, empty, empty, None
    means = np.array([float(np.mean(y[x == v])) for v in rep])
    sds = np.array([float(np.std(y[x == v], ddof=1)) for v in rep])
    eb = ax.errorbar(
        rep,
        means,
        yerr=sds,
        fmt="_",
        markersize=7,
        color=color,
        elinewidth=0.8,
        capsize=2.0,
        capthick=0.8,
        zorder=4,
        label="mean ± SD",
    )
    for artist in eb.get_children():
        artist.set_gid("cw-mean")
    return rep, means, sds, eb


def curve(ax: Axes, x: FloatArray, y: FloatArray, color: str, **kw: Any) -> Line2D:
    """A model curve sampled on a dense grid (dashed with ``linestyle="--"``, e.g. a start)."""
    kw.setdefault("gid", "cw-curve")
    (line,) = ax.plot(x, y, color=color, lw=1.3, zorder=2, **kw)
    return line


def band(
    ax: Axes, x: FloatArray, lower: FloatArray, upper: FloatArray, color: str, label: str
) -> PolyCollection:
    """A pointwise band as a filled region between ``lower`` and ``upper``."""
    poly = ax.fill_between(
        x, lower, upper, color=color, alpha=BAND_ALPHA, linewidth=0, zorder=1, label=label
    )
    poly.set_gid("cw-band")
    return poly
