"""The widget's judging tools in a real JupyterLab 4 / Notebook 7 page: band and residual
toggles, and the polynomial degree table with picking a degree from it.

What the page draws is checked against what the kernel computed: the band's outline against
``widget.bands_json`` projected through the plot's own axes (read from its ticks, see cwpage),
the degree table's numbers against ``curvewright.select_degree`` run in the kernel. The data
are generated in the notebook from known parameters (invented, for the test only). Waits are on
conditions only; timings are never asserted.
"""

from __future__ import annotations

import itertools
import math
import re
from collections.abc import Callable
from typing import Any

import cwpage
import harness
import pytest

pytestmark = pytest.mark.browser

# Inhibition dose-response (curvewright's inhibition_4pl), 8 concentrations over 5 decades x 3
# replicates, normal noise SD 3: the widget opens with a log x axis.
BANDS_SETUP = """
import json
import numpy as np
import pandas as pd
import curvewright as cw

rng = np.random.default_rng(20261202)
conc = np.repeat(10.0 ** np.arange(-9.0, -3.9, 0.7), 3)
resp = 5 + 90 / (1 + (conc / 10 ** -6.6) ** 1.2) + rng.normal(0, 3.0, conc.size)
w = cw.CurveBench(pd.DataFrame({"conc": conc, "response": resp}), x="conc", y="response",
                   model="inhibition_4pl")
w
"""
BANDS_STATE = """
b = w.bands_json
print("STATE", json.dumps({
    "model": w.model_name,
    "x_scale": w.x_scale,
    "show": [w.show_confidence_band, w.show_prediction_band, w.show_residuals],
    "fitted": w.result is not None and bool(w.result.success),
    "bands": b,
}))
"""
BANDS_SET = """
w.show_prediction_band = True
w.show_residuals = False
"""

# A quadratic trend, y = 1 + 0.5 x - 0.08 x^2 + noise (SD 0.2), opened as a straight line.
DEGREE_SETUP = """
import json
import numpy as np
import curvewright as cw

rng = np.random.default_rng(20261203)
x = np.linspace(0.0, 10.0, 30)
y = 1 + 0.5 * x - 0.08 * x**2 + rng.normal(0, 0.2, x.size)
w = cw.CurveBench(x, y, model="straight_line")
w
"""
DEGREE_STATE = """
ref = cw.select_degree(x, y, max_degree=4)
print("STATE", json.dumps({
    "model": w.model_name,
    "suggested": ref.suggested,
    "F": {int(d): float(f) for d, f in ref.table["F"].items()},
    "p": {int(d): float(p) for d, p in ref.table["p"].items()},
}))
"""


def _band_vertices(root: Any, kind: str) -> list[tuple[float, float]]:
    """Vertices of a band's first filled run (upper bound in grid order, then lower back)."""
    d = str(root.locator(f"path.cw-band-{kind}").first.get_attribute("d") or "")
    first = d.split("Z")[0]
    return [(float(a), float(b)) for a, b in re.findall(r"[ML](-?[\d.]+),(-?[\d.]+)", first)]


def test_band_toggles_draw_the_kernels_bands_and_python_can_set_them(
    page: Any, server: harness.Server, notebook: Callable[..., str], widget_bundle: Any
) -> None:
    name = notebook(cells=[BANDS_SETUP, BANDS_STATE, BANDS_SET])
    harness.open_notebook(page, server, name)
    harness.run_cell(page, 0)
    root = cwpage.wait_rendered(page)

    confidence = root.get_by_role("checkbox", name="Confidence band", exact=True)
    prediction = root.get_by_role("checkbox", name="Prediction band", exact=True)
    residuals = root.get_by_role("checkbox", name="Residuals", exact=True)
    assert not confidence.is_checked() and not prediction.is_checked()
    assert residuals.is_checked()

    root.get_by_role("button", name=re.compile("Fit")).click()
    cwpage.wait_root_attr(page, root, "data-cw-status", "done", timeout=120_000)
    assert root.locator(".cw-resid").first.is_visible()

    # --- the page's checkbox turns the confidence band on: Python computes it, the page draws it.
    confidence.check()
    cwpage.wait_root_attr(page, root, "data-cw-bands", "confidence")
    harness.flush(root)
    s = cwpage.kernel_json(page, 1, "STATE")
    assert s["show"] == [True, False, True] and s["fitted"] is True
    assert s["x_scale"] == "log"
    band = s["bands"]
    assert band["model_name"] == "inhibition_4pl" and band["prediction"] is None
    xs = band["x"]
    # On the log x axis the grid is evenly spaced in decades.
    steps = [math.log10(b) - math.log10(a) for a, b in itertools.pairwise(xs)]
    assert max(steps) - min(steps) < 1e-9 * max(abs(v) for v in steps)

    # The drawn outline is the kernel's band: vertex i of the upper edge sits at
    # (x_i, upper_i) on the plot's own axes, to within a pixel.
    cwpage.show_plot(root)
    ax = cwpage.axes(root)
    assert ax.x.log
    verts = _band_vertices(root, "confidence")
    upper, lower = band["confidence"]["upper"], band["confidence"]["lower"]
    assert len(verts) == 2 * len(xs), "the band is not one unbroken area over the grid"
    checked = 0
    for i in range(0, len(xs), 37):
        px, py = verts[i]
        assert px == pytest.approx(ax.x(xs[i]), abs=1.0)
        assert py == pytest.approx(ax.y(upper[i]), abs=1.0)
        lx, ly = verts[2 * len(xs) - 1 - i]
        assert lx == pytest.approx(ax.x(xs[i]), abs=1.0)
        assert ly == pytest.approx(ax.y(lower[i]), abs=1.0)
        checked += 1
    assert checked >= 10

    # --- set from Python: the prediction band appears, the residual strip goes.
    harness.run_cell(page, 2)
    cwpage.wait_root_attr(page, root, "data-cw-bands", "confidence prediction")
    assert prediction.is_checked() and not residuals.is_checked()
    page.wait_for_function(
        "(el) => el.querySelector('.cw-resid').hidden === true", arg=root.element_handle()
    )
    assert len(_band_vertices(root, "prediction")) == 2 * len(xs)
    harness.ARTIFACTS.mkdir(exist_ok=True)
    root.screenshot(path=str(harness.ARTIFACTS / f"bands-{server.app}.png"))

    # --- switched off on the page: gone from the page at once, and off in Python.
    confidence.uncheck()
    cwpage.wait_root_attr(page, root, "data-cw-bands", "prediction")
    assert root.locator("path.cw-band-confidence").first.get_attribute("d") == ""
    harness.flush(root)
    s2 = cwpage.kernel_json(page, 1, "STATE")
    assert s2["show"] == [False, True, False]
    assert harness.real_page_errors(page.cw_errors) == []


def test_degree_table_shows_select_degree_and_a_pick_switches_the_model(
    page: Any, server: harness.Server, notebook: Callable[..., str], widget_bundle: Any
) -> None:
    name = notebook(cells=[DEGREE_SETUP, DEGREE_STATE])
    harness.open_notebook(page, server, name)
    harness.run_cell(page, 0)
    root = cwpage.wait_rendered(page)
    ref = cwpage.kernel_json(page, 1, "STATE")
    assert ref["model"] == "straight_line"

    table = root.locator("table.cw-degree-table")
    rows = table.locator("tbody tr")
    assert rows.count() == 4
    assert root.get_attribute("data-cw-degree-suggested") == str(ref["suggested"]) == "2"
    assert table.locator('tr[data-degree="1"]').get_attribute("aria-current") == "true"
    assert "cw-suggested" in (table.locator('tr[data-degree="2"]').get_attribute("class") or "")
    # The F and p shown are select_degree's, to the digits shown.
    for d in (1, 2, 3, 4):
        cells = table.locator(f'tr[data-degree="{d}"] td').all_inner_texts()
        assert float(cells[0]) == pytest.approx(ref["F"][str(d)], rel=1e-3)
        assert float(cells[2]) == pytest.approx(ref["p"][str(d)], rel=1e-2)

    # --- pick degree 2 with the mouse: the model switches, in the page and in Python.
    root.get_by_role("button", name="Use degree 2", exact=True).click()
    cwpage.wait_root_attr(page, root, "data-cw-model", "polynomial_2")
    page.wait_for_function(
        "(el) => el.querySelector('tr[data-degree=\"2\"]')"
        "?.getAttribute('aria-current') === 'true'",
        arg=root.element_handle(),
    )
    assert cwpage.kernel_json(page, 1, "STATE")["model"] == "polynomial_2"

    # --- and degree 3 from the keyboard.
    use3 = root.get_by_role("button", name="Use degree 3", exact=True)
    use3.focus()
    page.keyboard.press("Enter")
    cwpage.wait_root_attr(page, root, "data-cw-model", "polynomial_3")
    assert root.get_by_role("combobox", name="Model").input_value() == "polynomial_3"
    # The table was rebuilt under the keyboard user: focus stays in it, on a "Use degree" button.
    page.wait_for_function(
        "(el) => el.querySelector('.cw-degrees').contains(document.activeElement)"
        " && /^Use degree/.test(document.activeElement.textContent)",
        arg=root.element_handle(),
    )
    harness.ARTIFACTS.mkdir(exist_ok=True)
    root.screenshot(path=str(harness.ARTIFACTS / f"degree-table-{server.app}.png"))
    assert harness.real_page_errors(page.cw_errors) == []
