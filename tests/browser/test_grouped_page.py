"""The grouped widget (by=) in a real JupyterLab 4 / Notebook 7 page: overlay, legend, share
switch, dragging one group, and Fit from the page against fit_global called directly.

Every check of what the page did is read back from the kernel (a cell prints the widget's
state as JSON) as well as from the page. The plate data are invented (three made-up compounds,
inhibition curves with known parameters and seeded noise); the fit from the page is compared
with :func:`curvewright.fit_global` run in the kernel on the same data and starting values,
which is checked against outside references in tests/test_global_fit.py. Waits are on
conditions only; timings are never asserted.
"""

from __future__ import annotations

import json
import re
from collections.abc import Callable
from typing import Any

import cwpage
import harness
import pytest

pytestmark = pytest.mark.browser

# Our palette, read from its one home (js/groups.ts), not from the page.
_GROUPS_TS = (harness.REPO / "js" / "groups.ts").read_text(encoding="utf-8")
PALETTE = re.findall(r'"(#[0-9a-f]{6})"', _GROUPS_TS.split("GROUP_COLOURS", 1)[1].split("];", 1)[0])

SETUP = """
import json
import numpy as np
import pandas as pd
import curvewright as cw

rng = np.random.default_rng(20261202)
rows = []
for name, log_ic50 in (("zeltarin", 0.0), ("mobrazine", 0.9), ("quillamide", -0.9)):
    for xv in np.repeat(np.logspace(-2, 2, 9), 2):
        u = (xv / 10**log_ic50) ** 1.2
        rows.append((name, xv, 10 + 90 / (1 + u) + rng.normal(0, 2.5)))
df = pd.DataFrame(rows, columns=["compound", "conc", "resp"])
w = cw.CurveBench(df, x="conc", y="resp", by="compound", model="inhibition_4pl")
w
"""
STATE = """
print("STATE", json.dumps({
    "groups": list(w.groups),
    "selected": w.selected_group,
    "hidden": list(w.hidden_groups),
    "excluded": list(w.excluded_groups),
    "scopes": {n: r.scope for n, r in w.parameters.items()},
    "values": {g: {k: float(v) for k, v in row.items()} for g, row in w.group_values.iterrows()},
    "data": {"x": [float(v) for v in df["conc"]], "y": [float(v) for v in df["resp"]],
             "group": list(df["compound"])},
}))
"""
# The records and every group's values the page shows, kept before Fit is pressed.
KEEP_START = """
P0 = w.parameters
S0 = w.group_values.copy()
print("KEPT", json.dumps({"n": len(S0)}))
"""
# fit_global called directly on the same table and starting values as the page's Fit.
COMPARE = """
shared = [n for n, r in P0.items() if r.scope == "shared" and not r.fixed]
per = [n for n in P0.free if P0[n].scope == "per_group"]
ref = cw.fit_global(
    "inhibition_4pl", data=df, x="conc", y="resp", by="compound",
    shared=shared, params=P0, start=S0[per],
)
got = w.result
print("COMPARE", json.dumps({
    "kind": type(got).__name__,
    "success": bool(got.success),
    "labels": list(got.labels),
    "shared": list(got.shared),
    "got": got.values.to_numpy().tolist(),
    "ref": ref.values.to_numpy().tolist(),
    "ref_labels": list(ref.labels),
    "columns": list(got.values.columns),
}))
"""
CELL_SETUP, CELL_STATE, CELL_KEEP, CELL_COMPARE = 0, 1, 2, 3

CURVES = "path[data-cw-group-curve]"


def _open(page: Any, server: harness.Server, notebook: Callable[..., str]) -> Any:
    name = notebook(cells=[SETUP, STATE, KEEP_START, COMPARE])
    harness.open_notebook(page, server, name)
    harness.run_cell(page, CELL_SETUP)
    root = cwpage.wait_rendered(page)
    _wait_curves(page, root, 3)
    return root


def _state(page: Any, root: Any) -> dict[str, Any]:
    harness.flush(root)
    state: dict[str, Any] = cwpage.kernel_json(page, CELL_STATE, "STATE")
    return state


def _wait_curves(page: Any, root: Any, n: int) -> None:
    """Wait until exactly ``n`` group curves are drawn (each with path data)."""
    page.wait_for_function(
        """([el, sel, n]) => {
          const p = [...el.querySelectorAll(sel)];
          return p.length === n && p.every((q) => (q.getAttribute('d') ?? '').length > 10);
        }""",
        arg=[root.element_handle(), CURVES, n],
    )


def _curves(root: Any) -> dict[str, dict[str, str]]:
    """Every drawn group curve: label -> its path data, class and computed stroke colour."""
    out: dict[str, dict[str, str]] = root.evaluate(
        """(el) => Object.fromEntries([...el.querySelectorAll('path[data-cw-group-curve]')].map(
             (p) => [p.getAttribute('data-cw-group-curve'), {
               d: p.getAttribute('d'), cls: p.getAttribute('class'),
               stroke: getComputedStyle(p).stroke }]))"""
    )
    return out


def _rgb(hex_colour: str) -> str:
    r, g, b = (int(hex_colour[i : i + 2], 16) for i in (1, 3, 5))
    return f"rgb({r}, {g}, {b})"


def _entry(root: Any, label: str) -> Any:
    return root.locator(f'.cw-group-entry[data-group="{label}"]')


def _pixel(root: Any, row: int) -> list[int] | None:
    """The canvas pixel (RGBA) under an input row's point centre, or None if not drawn."""
    px: list[int] | None = root.evaluate(
        """(el, row) => {
          const p = el._cwPointXY(row);
          if (!p) return null;
          const c = el.querySelector('canvas.cw-points');
          const r = c.getBoundingClientRect();
          const k = c.width / r.width;
          const d = c.getContext('2d').getImageData(
            Math.round((p.x - r.left) * k), Math.round((p.y - r.top) * k), 1, 1).data;
          return [...d];
        }""",
        row,
    )
    return px


def test_overlay_legend_hide_exclude_and_share_reach_python(
    page: Any, server: harness.Server, notebook: Callable[..., str], widget_bundle: Any
) -> None:
    root = _open(page, server, notebook)
    s0 = _state(page, root)
    labels = s0["groups"]
    assert labels == ["mobrazine", "quillamide", "zeltarin"]  # fit_global's sorted order
    assert s0["selected"] == "mobrazine"

    # --- one curve per group, each in its group's colour (palette order = group order); the
    # selected group's is the handles' curve.
    curves = _curves(root)
    assert set(curves) == set(labels)
    for i, lab in enumerate(labels):
        assert curves[lab]["stroke"] == _rgb(PALETTE[i]), (lab, curves[lab])
        assert _entry(root, lab).get_attribute("data-colour") == PALETTE[i]
    assert "cw-curve" in curves["mobrazine"]["cls"].split()
    assert len({c["d"] for c in curves.values()}) == 3, "two groups drew the same curve"
    # The legend: one entry per group, three buttons each, with distinct accessible names.
    assert root.locator(".cw-group-entry").count() == 3
    for lab in labels:
        assert root.get_by_role("button", name=f"Hide group {lab}", exact=True).count() == 1
        assert (
            root.get_by_role("button", name=f"Leave group {lab} out of the fit", exact=True).count()
            == 1
        )

    # --- the points carry their group's colour: the canvas pixel under a point's centre, for
    # a point of each group far (> 10 px) from every other group's point.
    cwpage.show_plot(root)
    ax = cwpage.axes(root)
    d = s0["data"]
    where = [ax.to_page(xv, yv) for xv, yv in zip(d["x"], d["y"], strict=True)]
    for i, lab in enumerate(labels):
        lone = [
            r
            for r, g in enumerate(d["group"])
            if g == lab
            and ax.inside(d["x"][r], d["y"][r])
            and all(
                (where[r][0] - where[q][0]) ** 2 + (where[r][1] - where[q][1]) ** 2 > 100
                for q, h in enumerate(d["group"])
                if h != lab
            )
        ]
        assert lone, f"no point of {lab} stands apart from the other groups"
        px = _pixel(root, lone[0])
        assert px is not None and px[3] > 0, f"point {lone[0]} of {lab} is not drawn"
        want = [int(PALETTE[i][k : k + 2], 16) for k in (1, 3, 5)]
        # Drawn at 90% opacity over the transparent canvas: the colour itself, alpha < 255.
        assert max(abs(a - b) for a, b in zip(px[:3], want, strict=True)) <= 8, (lab, px, want)

    # --- hide from the legend: its curve goes, Python's hidden_groups says so.
    _entry(root, "quillamide").get_by_role("button", name="Hide group quillamide").click()
    cwpage.wait_root_attr(page, root, "data-cw-groups-hidden", '["quillamide"]')
    _wait_curves(page, root, 2)
    assert set(_curves(root)) == {"mobrazine", "zeltarin"}
    s1 = _state(page, root)
    assert s1["hidden"] == ["quillamide"] and s1["excluded"] == []

    # --- exclude from the legend: still drawn, faded; Python leaves it out of the fit.
    _entry(root, "zeltarin").get_by_role("button", name=re.compile("out of the fit")).click()
    cwpage.wait_root_attr(page, root, "data-cw-groups-excluded", '["zeltarin"]')
    page.wait_for_function(
        "(el) => el.querySelector('path[data-cw-group-curve=\"zeltarin\"]')"
        "?.classList.contains('cw-group-excluded')",
        arg=root.element_handle(),
    )
    exclude_btn = _entry(root, "zeltarin").locator(".cw-group-exclude")
    assert exclude_btn.get_attribute("aria-pressed") == "true"
    s2 = _state(page, root)
    assert s2["excluded"] == ["zeltarin"] and s2["hidden"] == ["quillamide"]

    # --- select with the keyboard: focus an entry, arrow to the next, Enter.
    root.get_by_role("button", name=re.compile(r"^Group mobrazine")).focus()
    page.keyboard.press("ArrowRight")
    page.keyboard.press("Enter")
    cwpage.wait_root_attr(page, root, "data-cw-group-selected", "quillamide")
    s3 = _state(page, root)
    assert s3["selected"] == "quillamide"
    # A hidden group is not drawn even when selected: show it again, and its curve is the
    # handles' one.
    _entry(root, "quillamide").get_by_role("button", name="Hide group quillamide").click()
    cwpage.wait_root_attr(page, root, "data-cw-groups-hidden", "[]")
    _wait_curves(page, root, 3)
    assert "cw-curve" in _curves(root)["quillamide"]["cls"].split()
    # The table shows the selected group's value and every group's.
    lic = root.get_by_role("textbox", name="log_ic50", exact=True)
    assert float(lic.input_value()) == pytest.approx(
        s3["values"]["quillamide"]["log_ic50"], abs=5e-4
    )
    items = root.locator('tr[data-param="log_ic50"] ul.cw-group-list li')
    assert items.count() == 3
    for k in range(3):
        li = items.nth(k)
        lab = li.get_attribute("data-group")
        assert float(li.get_attribute("data-value")) == pytest.approx(s3["values"][lab]["log_ic50"])

    # --- the share switch: Python's scope changes; the row says one value for all groups.
    share = root.get_by_role("checkbox", name="Share n_h across groups", exact=True)
    assert not share.is_checked()
    share.click()
    page.wait_for_function(
        "(el) => el.querySelector('tr[data-param=\"n_h\"]')?.dataset.scope === 'shared'",
        arg=root.element_handle(),
    )
    assert share.is_checked()
    s4 = _state(page, root)
    assert s4["scopes"]["n_h"] == "shared"
    assert all(s4["scopes"][n] == "per_group" for n in ("zero_dose", "full_effect", "log_ic50"))
    # Going shared, the selected group's value becomes every group's (set_scope's rule).
    assert {v["n_h"] for v in s4["values"].values()} == {s3["values"]["quillamide"]["n_h"]}
    assert root.locator('tr[data-param="n_h"] ul.cw-group-list').count() == 0
    share.click()
    page.wait_for_function(
        "(el) => el.querySelector('tr[data-param=\"n_h\"]')?.dataset.scope === 'per_group'",
        arg=root.element_handle(),
    )
    assert _state(page, root)["scopes"]["n_h"] == "per_group"

    harness.ARTIFACTS.mkdir(exist_ok=True)
    root.screenshot(path=str(harness.ARTIFACTS / f"groups-legend-{server.app}.png"))
    assert harness.real_page_errors(page.cw_errors) == []


def test_drag_moves_only_the_selected_group_and_fit_equals_fit_global(
    page: Any, server: harness.Server, notebook: Callable[..., str], widget_bundle: Any
) -> None:
    root = _open(page, server, notebook)
    # Act on zeltarin (the third group), chosen from the legend.
    root.get_by_role("button", name=re.compile(r"^Group zeltarin")).click()
    cwpage.wait_root_attr(page, root, "data-cw-group-selected", "zeltarin")
    page.wait_for_function(
        "(el) => el.querySelector('path.cw-curve')?.getAttribute('data-cw-group-curve')"
        " === 'zeltarin'",
        arg=root.element_handle(),
    )
    s0 = _state(page, root)
    before = _curves(root)

    # --- drag the IC50 handle to the right: zeltarin's curve and log_ic50 move, nothing else.
    mid = cwpage.handle_named(root, r"^IC50:")
    v0 = mid.get_attribute("aria-valuenow")
    cwpage.drag(page, mid, 70, 0)
    cwpage.wait_attr_change(page, mid, "aria-valuenow", v0)
    cwpage.wait_root_attr(page, root, "data-cw-dragging", "")
    s1 = _state(page, root)
    after = _curves(root)
    assert after["zeltarin"]["d"] != before["zeltarin"]["d"]
    for lab in ("mobrazine", "quillamide"):
        assert after[lab]["d"] == before[lab]["d"], f"{lab}'s curve moved with zeltarin's handle"
        assert s1["values"][lab] == s0["values"][lab], f"{lab}'s values changed"
    moved = {n for n, v in s1["values"]["zeltarin"].items() if v != s0["values"]["zeltarin"][n]}
    assert moved == {"log_ic50"}  # the IC50 handle moves log_ic50 only (its declaration)
    # On the log x axis a drag to the right is a higher IC50.
    assert s1["values"]["zeltarin"]["log_ic50"] > s0["values"]["zeltarin"]["log_ic50"] + 0.05
    assert cwpage.value_now(mid) == pytest.approx(s1["values"]["zeltarin"]["log_ic50"], rel=1e-6)

    # --- share the Hill coefficient, keep the start, press Fit on the page.
    root.get_by_role("checkbox", name="Share n_h across groups", exact=True).click()
    page.wait_for_function(
        "(el) => el.querySelector('tr[data-param=\"n_h\"]')?.dataset.scope === 'shared'",
        arg=root.element_handle(),
    )
    harness.flush(root)
    cwpage.kernel_json(page, CELL_KEEP, "KEPT")
    root.get_by_role("button", name=re.compile("Fit")).click()
    cwpage.wait_root_attr(page, root, "data-cw-status", "done", timeout=120_000)
    cwpage.wait_fit_drawn(page, root)
    # After the fit every other group's curve is at its fitted values (drawn solid).
    page.wait_for_function(
        "(el) => [...el.querySelectorAll('path.cw-group-curve')].length === 2 &&"
        " [...el.querySelectorAll('path.cw-group-curve')].every("
        "(p) => p.classList.contains('cw-group-fitted'))",
        arg=root.element_handle(),
    )
    c = cwpage.kernel_json(page, CELL_COMPARE, "COMPARE")
    assert c["kind"] == "GlobalResult" and c["success"] is True
    assert c["labels"] == c["ref_labels"] and c["shared"] == ["n_h"]
    got, ref = c["got"], c["ref"]
    for rg, rr in zip(got, ref, strict=True):
        assert rg == pytest.approx(rr, rel=1e-6)
    # The page shows the selected group's fit Python holds.
    shown = json.loads(root.get_attribute("data-cw-fitted"))
    zi = c["labels"].index("zeltarin")
    assert shown["log_ic50"] == pytest.approx(got[zi][c["columns"].index("log_ic50")], rel=1e-9)

    harness.ARTIFACTS.mkdir(exist_ok=True)
    root.screenshot(path=str(harness.ARTIFACTS / f"groups-fitted-{server.app}.png"))
    assert harness.real_page_errors(page.cw_errors) == []


CALLABLE_SETUP = """
import json
import numpy as np
import pandas as pd
import curvewright as cw

rng = np.random.default_rng(5)
rows = []
for name, k in (("arvo", 0.5), ("belin", 1.5), ("corra", 4.0)):
    for xv in np.linspace(0.0, 10.0, 11):
        rows.append((name, xv, 80.0 * np.exp(-xv / k) + 5 + rng.normal(0, 1.0)))
df = pd.DataFrame(rows, columns=["group", "t", "signal"])


def decay(t, a=50.0, k=1.0, c=0.0):
    return a * np.exp(-t / k) + c


w = cw.CurveBench(df, x="t", y="signal", by="group", model=decay)
w
"""


def test_callable_model_draws_every_group_from_python_samples(
    page: Any, server: harness.Server, notebook: Callable[..., str], widget_bundle: Any
) -> None:
    # The page cannot evaluate a Python callable: the selected group's curve comes from
    # preview_curve, the others' from groups_json.curves (sampled in the kernel).
    name = notebook(cells=[CALLABLE_SETUP, "print('CURVES', json.dumps(w.groups_json['curves']))"])
    harness.open_notebook(page, server, name)
    harness.run_cell(page, 0)
    root = cwpage.wait_rendered(page, handles=False)
    _wait_curves(page, root, 3)
    curves = _curves(root)
    assert set(curves) == {"arvo", "belin", "corra"}
    for i, lab in enumerate(["arvo", "belin", "corra"]):
        assert curves[lab]["stroke"] == _rgb(PALETTE[i])
    sampled = cwpage.kernel_json(page, 1, "CURVES")
    assert set(sampled) == {"belin", "corra"}  # the selected group (arvo) is preview_curve
    # Each drawn curve is Python's samples put on the axes: one path vertex per sample, in
    # order (every sample of this decay is finite), checked at the middle and the last.
    cwpage.show_plot(root)
    ax = cwpage.axes(root)
    for lab in ("belin", "corra"):
        pts = re.findall(r"[ML]([-\d.eE]+),([-\d.eE]+)", curves[lab]["d"])
        xs, ys = sampled[lab]["x"], sampled[lab]["y"]
        assert len(pts) == len(xs)
        for k in (len(xs) // 2, len(xs) - 1):
            assert float(pts[k][0]) == pytest.approx(ax.x(xs[k]), abs=1.0)
            assert float(pts[k][1]) == pytest.approx(ax.y(ys[k]), abs=1.0)
    assert harness.real_page_errors(page.cw_errors) == []
