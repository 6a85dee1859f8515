"""Where x values go on the drawn axis: log or linear, and zero doses on a log axis.

The choice of log x is the data layer's rule (:func:`curvewright.data.auto_x_scale`: positive
x spanning more than two decades). On a log axis x = 0 (an untreated control) has no place, so
those points are drawn at a stand-in position left of the smallest positive x, labelled
``0``, with a break mark on the axis between them: honest about the gap, and the controls stay
in view.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from matplotlib.axes import Axes
from matplotlib.lines import Line2D
from matplotlib.ticker import FixedFormatter, FixedLocator, NullFormatter
from matplotlib.transforms import blended_transform_factory
from numpy.typing import NDArray

from ..data import auto_x_scale, sample_x
from ..errors import DataError

__all__ = ["XAxis", "choose_log_x", "draw_zero_break", "x_axis"]

FloatArray = NDArray[np.float64]

#: The zero stand-in sits this many decades (at least) left of the smallest positive x; the
#: curve's grid starts 5% of the span left of it (data.sample_x), so the gap stays visible.
ZERO_GAP_DECADES = 0.6
ZERO_GAP_FRACTION = 0.2


def choose_log_x(x: FloatArray, log_x: bool | None) -> bool:
    """``log_x`` when given, else the data layer's rule; a log axis needs a positive x.

    Raises
    ------
    DataError
        ``log_x`` not True, False or None, or a log axis asked for x that has no positive
        value or has negative values.
    """
    if log_x is None:
        return auto_x_scale(x) == "log"
    if not isinstance(log_x, (bool, np.bool_)):
        raise DataError(f"log_x must be True, False or None (choose), got {log_x!r}.")
    if log_x:
        finite = x[np.isfinite(x)]
        if finite.size and (np.any(finite < 0) or not np.any(finite > 0)):
            raise DataError(
                "log_x=True needs positive x (zero is drawn at a marked stand-in), but these x "
                f"range over [{float(finite.min()):.6g}, {float(finite.max()):.6g}]; use "
                "log_x=False."
            )
    return bool(log_x)


@dataclass(frozen=True)
class XAxis:
    """How x is drawn: the scale, the zero stand-in (log axis with x = 0) and the curve grid.

    Attributes
    ----------
    log : bool
        Logarithmic x axis.
    zero_at : float or None
        Where x = 0 is drawn on a log axis (None when no x is 0 or the axis is linear).
    grid : ndarray
        The x values a curve is sampled on, evenly spaced on the axis.
    """

    log: bool
    zero_at: float | None
    grid: FloatArray

    def place(self, x: FloatArray) -> FloatArray:
        """Drawn positions of ``x``: zeros at the stand-in on a log axis, others as they are."""
        out = np.array(x, dtype=float)
        if self.zero_at is not None:
            out[out == 0.0] = self.zero_at
        return out


def x_axis(x: FloatArray, log: bool, n: int = 400) -> XAxis:
    """The drawn x axis for data ``x`` (all points, excluded ones too)."""
    grid = sample_x(np.asarray(x, dtype=float), "log" if log else "linear", n)
    zero_at = None
    if log and np.any(x == 0.0):
        pos = x[np.isfinite(x) & (x > 0)]
        lo, hi = math.log10(float(pos.min())), math.log10(float(pos.max()))
        gap = max(ZERO_GAP_DECADES, ZERO_GAP_FRACTION * (hi - lo))
        zero_at = 10.0 ** (lo - gap)
    return XAxis(log=log, zero_at=zero_at, grid=grid)


def apply_x_axis(ax: Axes, axis: XAxis) -> None:
    """Set the scale on ``ax``; with a zero stand-in, label it and mark the break."""
    if axis.log:
        ax.set_xscale("log")
    if axis.zero_at is not None:
        draw_zero_break(ax, axis)


def draw_zero_break(ax: Axes, axis: XAxis) -> Line2D:
    """A ``0`` tick at the stand-in and a break mark (two short slashes) on the x axis."""
    assert axis.zero_at is not None
    z = axis.zero_at
    # the break sits halfway (in decades) between the stand-in and the curve's first x
    mid = 10.0 ** (0.5 * (math.log10(z) + math.log10(float(axis.grid[0]))))
    left, right = math.log10(z) - 0.4 * math.log10(mid / z), math.log10(float(axis.grid[-1]))
    ax.set_xlim(10.0**left, 10.0 ** (right + 0.02 * (right - left)))
    # Ticks only where x is real (none in the gap), plus the stand-in labelled 0.
    lo, hi = float(axis.grid[0]), float(axis.grid[-1])
    decades = [10.0**k for k in range(math.ceil(math.log10(lo)), math.floor(math.log10(hi)) + 1)]
    if not decades:
        decades = [lo, hi]
    labels = [_tick_label(v) for v in decades]
    ax.xaxis.set_major_locator(FixedLocator([z, *decades]))
    ax.xaxis.set_major_formatter(FixedFormatter(["0", *labels]))
    minor = [
        m * 10.0**k
        for k in range(math.floor(math.log10(lo)), math.ceil(math.log10(hi)) + 1)
        for m in range(2, 10)
        if lo <= m * 10.0**k <= hi
    ]
    ax.xaxis.set_minor_locator(FixedLocator(minor))
    ax.xaxis.set_minor_formatter(NullFormatter())
    trans = blended_transform_factory(ax.transData, ax.transAxes)
    k = 10.0 ** (0.06 * math.log10(mid / z))  # slash half-width, in decades of the gap
    xs, ys = [], []
    for shift in (1.0 / k, k):
        c = mid * shift
        xs += [c / k, c * k, math.nan]
        ys += [-0.03, 0.03, math.nan]
    mark = Line2D(
        xs, ys, transform=trans, color="black", lw=0.8, clip_on=False, gid="cw-zero-break"
    )
    ax.add_line(mark)
    return mark


def _tick_label(v: float) -> str:
    k = math.log10(v)
    if abs(k - round(k)) < 1e-9:
        return f"$10^{{{round(k)}}}$"
    return f"{v:.3g}"
