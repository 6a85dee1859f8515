"""Reading and driving the curvewright widget on a page, through its DOM contract only.

The contract (issue 4): the root has class ``cw-root``; each handle is a focusable
``role="slider"`` with an ``aria-label`` and ``aria-valuenow``; the fit control is a button whose
accessible name contains "Fit"; a parameter's value input is labelled with its name and its fixed
toggle is a checkbox labelled with it. js/widget.ts adds to it (its header comment): data-cw-*
attributes on the root to wait on, and test hooks (``root._cwModel`` for the flush,
``root._cwPointXY(row)``). Data points are drawn on a canvas, so a point's place on screen is
worked out independently from the d3 axes' ticks (each tick element carries its value as d3's
bound datum and its pixel offset in its transform) and checked against the hook.
"""

from __future__ import annotations

import json
import math
import re
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import harness

# The main plot's SVG (the residual strip has its own, later in the DOM).
MAIN_SVG = "svg.cw-svg"
CURVE = "path.cw-curve"
FIT_CURVE = "path.cw-curve-fit"


def root_of(page: Any, i: int = 0) -> Any:
    """The ``i``-th widget root in the notebook on show."""
    return harness.widget_roots(page).nth(i)


RENDERED_JS = """([sel, i, handles]) => {
  const root = document.querySelectorAll(sel)[i];
  if (!root) return false;
  if (handles && !root.querySelector('[role="slider"]')) return false;
  return (root.querySelector('path.cw-curve')?.getAttribute('d') ?? '').length > 10;
}"""


def wait_rendered(page: Any, i: int = 0, timeout: float = 60_000, *, handles: bool = True) -> Any:
    """Wait until widget ``i`` shows a drawn curve (and handles, unless ``handles=False``:
    a Python-callable model has none); return its root.

    An exception thrown in the page meanwhile (collected by the ``page`` fixture) fails at once
    with its message, instead of a bare timeout.
    """
    from playwright.sync_api import TimeoutError as PlaywrightTimeout

    sel = f"{harness.NOTEBOOK} .jp-OutputArea-output .cw-root"
    deadline = time.monotonic() + timeout / 1000
    while True:
        errors = harness.real_page_errors(getattr(page, "cw_errors", []))
        if errors:
            raise AssertionError(f"the page threw while the widget rendered: {errors}")
        try:
            page.wait_for_function(RENDERED_JS, arg=[sel, i, handles], timeout=1_000)
            return root_of(page, i)
        except PlaywrightTimeout:
            if time.monotonic() > deadline:
                raise


def curve_d(root: Any) -> str:
    """The current curve's SVG path data."""
    return str(root.locator(CURVE).first.get_attribute("d") or "")


def fit_d(root: Any) -> str:
    """The fitted curve's SVG path data ('' before a fit)."""
    return str(root.locator(FIT_CURVE).first.get_attribute("d") or "")


def wait_fit_drawn(page: Any, root: Any, timeout: float = 10_000) -> str:
    """Wait until the fitted curve is drawn and return its path data.

    The plot draws on the next animation frame, so ``data-cw-status="done"`` (the fit's state)
    can be seen a frame before the curve's path is written.
    """
    page.wait_for_function(
        "([el, sel]) => (el.querySelector(sel)?.getAttribute('d') ?? '').length > 10",
        arg=[root.element_handle(), FIT_CURVE],
        timeout=timeout,
    )
    return fit_d(root)


def handles(root: Any) -> Any:
    """Locator of every handle (role=slider)."""
    return root.locator('[role="slider"]')


def handle_named(root: Any, pattern: str) -> Any:
    """The handle whose accessible name matches ``pattern`` (a regular expression)."""
    return root.get_by_role("slider", name=re.compile(pattern))


def value_now(handle: Any) -> float:
    return float(handle.get_attribute("aria-valuenow"))


def wait_attr_change(
    page: Any, locator: Any, attr: str, before: str | None, timeout: float = 30_000
) -> None:
    """Wait until ``locator``'s attribute ``attr`` differs from ``before``."""
    page.wait_for_function(
        "([el, attr, before]) => el.getAttribute(attr) !== before",
        arg=[locator.element_handle(), attr, before],
        timeout=timeout,
    )


def centre(locator: Any) -> tuple[float, float]:
    box = locator.bounding_box()
    assert box is not None, "element is not visible"
    return box["x"] + box["width"] / 2, box["y"] + box["height"] / 2


def show_plot(root: Any) -> None:
    """Scroll the main plot into view: mouse coordinates are the viewport's, and running a
    cell below the widget scrolls the notebook away from it."""
    root.locator(MAIN_SVG).first.scroll_into_view_if_needed()


def drag(page: Any, handle: Any, dx: float, dy: float, steps: int = 12) -> None:
    """Drag ``handle`` by (dx, dy) pixels with the mouse."""
    handle.scroll_into_view_if_needed()
    x, y = centre(handle)
    page.mouse.move(x, y)
    page.mouse.down()
    page.mouse.move(x + dx, y + dy, steps=steps)
    page.mouse.up()


# ------------------------------------------------------------------------------ axes
_TICKS_JS = """(root) => {
  const svg = root.querySelector('svg.cw-svg');
  const surf = svg.querySelector('.cw-surface').getBoundingClientRect();
  const read = (sel, k) => [...svg.querySelectorAll(sel + ' .tick')].map((t) => {
    const tr = t.getAttribute('transform') || '';
    const m = /translate\\(\\s*([-+\\d.eE]+)[ ,]+([-+\\d.eE]+)\\s*\\)/.exec(tr);
    return m ? [Number(t.__data__), Number(m[k])] : null;
  }).filter((p) => p !== null && Number.isFinite(p[0]) && Number.isFinite(p[1]));
  return { left: surf.left, top: surf.top, width: surf.width, height: surf.height,
           x: read('.cw-axis-x', 1), y: read('.cw-axis-y', 2) };
}"""


@dataclass(frozen=True)
class Axis:
    """value -> pixel along one axis: ``offset + slope * t(value)``, t = log10 on a log axis."""

    log: bool
    slope: float
    offset: float
    residual: float

    def __call__(self, v: float) -> float:
        return self.offset + self.slope * (math.log10(v) if self.log else v)


def _fit_axis(pairs: list[list[float]]) -> Axis:
    """Fit the tick pixels as a linear function of value, and of log10(value); keep the better."""
    best: Axis | None = None
    for log in (False, True):
        pts = [(math.log10(v) if log else v, p) for v, p in pairs if not log or v > 0]
        if len(pts) < 2:
            continue
        n = len(pts)
        mt = sum(t for t, _ in pts) / n
        mp = sum(p for _, p in pts) / n
        stt = sum((t - mt) ** 2 for t, _ in pts)
        if stt == 0:
            continue
        slope = sum((t - mt) * (p - mp) for t, p in pts) / stt
        offset = mp - slope * mt
        res = max(abs(offset + slope * t - p) for t, p in pts)
        if best is None or res < best.residual - 1e-6:
            best = Axis(log, slope, offset, res)
    if best is None or best.residual > 1.0:
        raise AssertionError(f"axis ticks fit neither a linear nor a log scale: {pairs}")
    return best


@dataclass(frozen=True)
class Axes:
    """Where data coordinates land on the page, read from the main plot's axes."""

    x: Axis
    y: Axis
    left: float
    top: float
    width: float
    height: float

    def to_page(self, xv: float, yv: float) -> tuple[float, float]:
        return self.left + self.x(xv), self.top + self.y(yv)

    def inside(self, xv: float, yv: float, margin: float = 4.0) -> bool:
        px, py = self.x(xv), self.y(yv)
        return margin <= px <= self.width - margin and margin <= py <= self.height - margin


def axes(root: Any) -> Axes:
    t = root.evaluate(_TICKS_JS)
    return Axes(_fit_axis(t["x"]), _fit_axis(t["y"]), t["left"], t["top"], t["width"], t["height"])


# ------------------------------------------------------------------------------ kernel
def kernel_json(page: Any, cell: int, tag: str) -> Any:
    """Run code cell ``cell`` and parse the JSON it printed after ``tag``."""
    harness.run_cell(page, cell)
    out = harness.cell_output(page, cell)
    m = re.search(re.escape(tag) + r" (\{.*\}|\[.*\])", out)
    assert m, f"cell {cell} printed no {tag} line:\n{out}"
    return json.loads(m.group(1))


def wait_until(condition: Callable[[], bool], message: str, timeout: float = 30.0) -> None:
    """Poll a page condition that needs Python to judge (e.g. an axis fit) until it holds."""
    deadline = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"{message} (waited {timeout:g} s)")
        time.sleep(0.1)


def wait_root_attr(page: Any, root: Any, attr: str, value: str, timeout: float = 30_000) -> None:
    """Wait until the root's ``attr`` (a data-cw-* attribute of the contract) is ``value``."""
    page.wait_for_function(
        "([el, attr, value]) => el.getAttribute(attr) === value",
        arg=[root.element_handle(), attr, value],
        timeout=timeout,
    )
