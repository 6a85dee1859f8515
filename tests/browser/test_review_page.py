"""Review of a batch in a real JupyterLab 4 / Notebook 7 page: the overview, the filter, opening
a group from the overview and from the table, fixing a failed group by dragging its IC50 handle
and typing a start, Fit, Accept, and the batch read back from the kernel.

The plate is invented (seeded 4PL curves of made-up wells; one well started far from its data so
that the batch fails it, one with a constant response, one with an unreadable reading). What the
accepted refit must hold is checked in the kernel against fit_groups run on that well alone from
the refit's start (the batch's own rule, itself checked against curve_fit in
tests/fitting/test_fit_groups.py). Waits are on conditions only; timings are never asserted.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from typing import Any

import cwpage
import harness
import pytest

pytestmark = pytest.mark.browser

# The failed status colour, read from its one home (js/review.ts), not from the page.
_REVIEW_TS = (harness.REPO / "js" / "review.ts").read_text(encoding="utf-8")
FAILED_COLOUR = re.search(r'failed: \{ colour: "(#[0-9a-f]{6})"', _REVIEW_TS).group(1)  # type: ignore[union-attr]

SETUP = """
import json
import numpy as np
import pandas as pd
import curvewright as cw

conc = np.repeat(np.logspace(-9, -4, 8), 3)
def logistic4(x, zero, full, log_ic50, h):
    return full + (zero - full) / (1 + (x / 10**log_ic50) ** h)
rows = []
for k in range(6):
    rng = np.random.default_rng(k)
    mid = -3.5 if k == 5 else -6.5 + 0.1 * k  # W5 never reaches its bottom plateau
    y = logistic4(conc, 100, 5, mid, 1.2) + rng.normal(0, 2, conc.size)
    rows += [{"well": f"W{k}", "conc": c, "resp": v} for c, v in zip(conc, y)]
rows += [{"well": "W6", "conc": c, "resp": 50.0} for c in conc]
bad = [{"well": "W7", "conc": c, "resp": 40.0 + i} for i, c in enumerate(conc)]
bad[3]["resp"] = "overflow"
df = pd.DataFrame(rows + bad)
labels = sorted(df["well"].unique())
start = pd.DataFrame({"zero_dose": 100.0,
                      "full_effect": [70.0 if g == "W5" else 5.0 for g in labels],
                      "log_ic50": [-8.8 if g == "W5" else -6.5 for g in labels],
                      "n_h": [40.0 if g == "W5" else 1.2 for g in labels]}, index=labels)
batch = cw.fit_groups("inhibition_4pl", data=df, x="conc", y="resp", by="well", start=start,
                      progress=False)
w = batch.review()
w
"""
STATE = """
i = batch.index_of("W5")
r = batch["W5"]
held = {n: r.values[n] for n in r.fixed}
alone = cw.fit_groups("inhibition_4pl", data=df[df["well"] == "W5"], x="conc", y="resp",
                      by="well", fixed=held or None, progress=False,
                      start=pd.DataFrame([{n: v for n, v in r.start.items() if n not in held}],
                                         index=["W5"]))
print("STATE", json.dumps({
    "status": dict(batch.status), "edited": list(batch.edited), "notes": list(batch.notes),
    "review": w.review_state, "open": w.review_group, "filter_shown": list(w.review_shown),
    "order": list(w.review_order),
    "values": w.values,
    "alone": {"status": alone.statuses[0], "values": alone.value_array[0].tolist()},
    "row": batch.value_array[i].tolist(),
    "json_edits": cw.BatchResult.from_json(batch.to_json()).notes[i],
}))
"""
CELL_SETUP, CELL_STATE = 0, 1

REVIEW = ".cw-review"


def _state(page: Any, root: Any) -> dict[str, Any]:
    harness.flush(root)
    state: dict[str, Any] = cwpage.kernel_json(page, CELL_STATE, "STATE")
    return state


def _wait_review(page: Any, root: Any, attr: str, value: str) -> None:
    page.wait_for_function(
        "([el, attr, value]) => el.querySelector('.cw-review')?.getAttribute(attr) === value",
        arg=[root.element_handle(), attr, value],
        timeout=30_000,
    )


def _has_colour(root: Any, hex_colour: str) -> bool:
    """Whether any pixel of the overview canvas has this colour (within rounding)."""
    want = [int(hex_colour[k : k + 2], 16) for k in (1, 3, 5)]
    found: bool = root.evaluate(
        """(el, want) => {
          const c = el.querySelector('canvas.cw-review-overview');
          const d = c.getContext('2d').getImageData(0, 0, c.width, c.height).data;
          for (let i = 0; i < d.length; i += 4) {
            if (d[i + 3] > 200 && Math.abs(d[i] - want[0]) < 6 && Math.abs(d[i + 1] - want[1]) < 6
                && Math.abs(d[i + 2] - want[2]) < 6) return true;
          }
          return false;
        }""",
        want,
    )
    return found


def test_filter_open_drag_refit_accept_reach_the_batch(
    page: Any, server: harness.Server, notebook: Callable[..., str], widget_bundle: Any
) -> None:
    name = notebook(cells=[SETUP, STATE])
    harness.open_notebook(page, server, name)
    harness.run_cell(page, CELL_SETUP)
    root = cwpage.wait_rendered(page)
    panel = root.locator(REVIEW)
    assert panel.is_visible()
    s0 = _state(page, root)
    assert s0["status"]["W5"] == "failed" and s0["open"] == "W5"
    assert not any(s0["edited"])

    # --- every group in the table and the overview; the filter buttons carry the counts.
    rows = panel.locator("tr[data-group]")
    assert rows.count() == 8
    assert panel.get_by_role("button", name="All (8)").get_attribute("aria-pressed") == "true"
    failed_btn = panel.get_by_role("button", name="Failed (3)")
    assert _has_colour(root, FAILED_COLOUR), "no failed group drawn in its status colour"

    # --- filter to the failed groups: the page asks Python, both agree.
    failed_btn.click()
    _wait_review(page, root, "data-cw-review-filter", "failed")
    assert failed_btn.get_attribute("aria-pressed") == "true"
    assert rows.count() == 3
    assert sorted(rows.evaluate_all("(rs) => rs.map((r) => r.dataset.group)")) == ["W5", "W6", "W7"]
    assert panel.get_attribute("data-cw-review-shown") == "3"
    s1 = _state(page, root)
    assert s1["filter_shown"] == ["W5", "W6", "W7"]

    # --- sort the table by status, twice: the page asks Python (review_sort), which flips the
    # direction on the second click; the rows follow Python's order.
    by_status = panel.get_by_role("button", name="Sort by Status")
    for want in ("ascending", "descending"):
        by_status.click()
        page.wait_for_function(
            "([el, want]) => el.querySelector('button[data-sort=\"status\"]')"
            "?.closest('th')?.getAttribute('aria-sort') === want",
            arg=[root.element_handle(), want],
            timeout=30_000,
        )
        st = _state(page, root)
        assert st["review"]["sort"] == {"key": "status", "ascending": want == "ascending"}
        shown = rows.evaluate_all("(rs) => rs.map((r) => r.dataset.group)")
        assert shown == st["order"]

    # --- open W6 by clicking its small plot, then W5 from the table with the keyboard.
    panel.locator("canvas.cw-review-overview").scroll_into_view_if_needed()
    xy = root.evaluate("(el) => el._cwReview.cellCentre('W6')")
    assert xy is not None
    page.mouse.click(xy["x"], xy["y"])
    _wait_review(page, root, "data-cw-review-open", "W6")
    assert panel.locator('tr[data-group="W6"]').get_attribute("aria-current") == "true"
    assert _state(page, root)["open"] == "W6"
    row5 = panel.locator('tr[data-group="W5"]')
    row5.focus()
    page.keyboard.press("Enter")
    _wait_review(page, root, "data-cw-review-open", "W5")
    cwpage.wait_root_attr(page, root, "data-cw-review-open", "W5")
    s2 = _state(page, root)
    assert s2["open"] == "W5" and s2["values"]["log_ic50"] == -8.8
    accept = panel.get_by_role("button", name="Accept the refit of group W5 into the batch")
    assert accept.is_disabled()

    # --- fix it: its doses stop before the bottom plateau, so no start helps; drag the IC50
    # handle towards the top doses, type a gentler slope, and hold the bottom plateau at the
    # assay's known level (5) with its Fix box.
    cwpage.show_plot(root)
    ax = cwpage.axes(root)
    mid = cwpage.handle_named(root, r"^IC50")
    v0 = mid.get_attribute("aria-valuenow")
    dx = ax.x(10**-4.5) - ax.x(10**-8.8)
    cwpage.drag(page, mid, dx, 0, steps=20)
    cwpage.wait_attr_change(page, mid, "aria-valuenow", v0)
    cwpage.wait_root_attr(page, root, "data-cw-dragging", "")
    n_h = root.get_by_role("textbox", name="n_h", exact=True)
    n_h.fill("1")
    n_h.press("Enter")
    full = root.get_by_role("textbox", name="full_effect", exact=True)
    full.fill("5")
    full.press("Enter")
    root.get_by_role("checkbox", name="Fix full_effect").check()
    s3 = _state(page, root)
    assert -5.5 < s3["values"]["log_ic50"] < -3.5, s3["values"]  # the drag moved it
    assert s3["values"]["n_h"] == 1.0 and s3["values"]["full_effect"] == 5.0

    # --- refit, accept; the batch in the kernel holds the new fit.
    root.get_by_role("button", name=re.compile("Fit")).click()
    cwpage.wait_root_attr(page, root, "data-cw-status", "done", timeout=120_000)
    page.wait_for_function("(b) => !b.disabled", arg=accept.element_handle(), timeout=30_000)
    accept.click()
    # W5 is no longer failed: it leaves the failed filter (its count drops to 2).
    panel.get_by_role("button", name="Failed (2)").wait_for(timeout=30_000)
    assert accept.is_disabled()
    assert row5.count() == 0
    s4 = _state(page, root)
    assert s4["status"]["W5"] != "failed"
    assert s4["status"]["W5"] == s4["alone"]["status"]  # the batch's own rule
    assert s4["row"] == pytest.approx(s4["alone"]["values"], rel=1e-6)
    assert s4["edited"] == [lab == "W5" for lab in sorted(s4["status"])]
    assert s4["notes"][sorted(s4["status"]).index("W5")] == "refitted in review; fixed full_effect"
    assert s4["json_edits"] == "refitted in review; fixed full_effect"
    assert s4["review"]["accepted"] is True
    # Shown again with all groups, its row says it was edited.
    panel.get_by_role("button", name="All (8)").click()
    _wait_review(page, root, "data-cw-review-filter", "all")
    assert row5.get_attribute("data-edited") == "true"
    assert "edited: refitted in review" in row5.inner_text()
    harness.ARTIFACTS.mkdir(exist_ok=True)
    root.screenshot(path=str(harness.ARTIFACTS / f"review-{server.app}.png"))
