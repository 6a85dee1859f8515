"""A notebook saved with its widget state shows the last plot again without running the kernel.

With ipywidgets' "Save Widget State Automatically" on (JupyterLab and Notebook 7: Settings >
Save Widget State Automatically; here the setting ``saveState`` of
``@jupyter-widgets/jupyterlab-manager`` is written into the server's user settings), saving the
notebook writes every widget model's state, anywidget's front-end module included, into the
notebook's metadata. The test fits in a real page, saves, shuts the kernel down, checks the
file, then opens the notebook again in a new browser context with the kernel shut down and
runs nothing: the plot must be drawn from the saved state alone, the same as before (data
points, the fitted curve's path, the parameter values). The data are generated in the notebook
from known parameters (invented, for the test only). Waits are on conditions only.
"""

from __future__ import annotations

import json
import time
import urllib.request
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import cwpage
import harness
import pytest

pytestmark = pytest.mark.browser

SETUP = """
import numpy as np
import curvewright as cw

rng = np.random.default_rng(20261204)
s = np.repeat([0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0], 2)
v = 180 * s / (0.12 + s) + rng.normal(0, 4.0, s.size)
w = cw.CurveBench(s, v, model="michaelis_menten")
w.fit()
w
"""
_KERNEL_JS = (
    "() => window.jupyterapp?.shell.currentWidget?.sessionContext?.session?.kernel?.id ?? null"
)
WIDGET_STATE = "application/vnd.jupyter.widget-state+json"
SETTING = Path("@jupyter-widgets") / "jupyterlab-manager" / "plugin.jupyterlab-settings"


@pytest.fixture
def save_state_on(server: harness.Server) -> Iterator[None]:
    """Turn "Save Widget State Automatically" on for this test only (a user setting)."""
    path = server.base / "settings" / SETTING
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps({"saveState": True}), encoding="utf-8")
    yield
    path.unlink(missing_ok=True)


def _delete_sessions(server: harness.Server) -> None:
    # Kernels and the sessions that hold them: the reopened page must start from the file.
    server.shutdown_kernels()
    with urllib.request.urlopen(f"{server.url}/api/sessions?token={server.token}") as r:
        sessions = json.loads(r.read())
    for s in sessions:
        req = urllib.request.Request(
            f"{server.url}/api/sessions/{s['id']}?token={server.token}", method="DELETE"
        )
        urllib.request.urlopen(req, timeout=10).close()


def _saved_models(path: Path) -> dict[str, Any]:
    nb = json.loads(path.read_text(encoding="utf-8"))
    state = nb.get("metadata", {}).get("widgets", {}).get(WIDGET_STATE, {}).get("state", {})
    return {k: v for k, v in state.items() if v.get("state", {}).get("model_name")}


def _shown(root: Any) -> dict[str, Any]:
    return {
        "fit": cwpage.fit_d(root),
        "points": root.evaluate("(el) => el._cwModel.get('data')?.x?.length ?? 0"),
        "values": [
            root.get_by_role("textbox", name=n, exact=True).first.input_value()
            for n in ("Vmax", "Km")
        ],
    }


def test_saved_notebook_redraws_without_a_kernel(
    save_state_on: None,
    browser: Any,
    server: harness.Server,
    notebook: Callable[..., str],
    widget_bundle: Path,
) -> None:
    name = notebook(cells=[SETUP])
    path = server.root / name

    ctx = browser.new_context(viewport={"width": 1280, "height": 1000})
    page = ctx.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.cw_errors = errors
    try:
        harness.open_notebook(page, server, name)
        harness.run_all(page)
        root = cwpage.wait_rendered(page)
        cwpage.wait_fit_drawn(page, root)
        before = _shown(root)
        old_kernel = page.evaluate(_KERNEL_JS)
        assert old_kernel
        page.evaluate("() => window.jupyterapp.commands.execute('docmanager:save')")
        deadline = time.monotonic() + 30
        while not _saved_models(path) and time.monotonic() < deadline:
            time.sleep(0.2)
    finally:
        ctx.close()
    _delete_sessions(server)

    models = _saved_models(path)
    assert models, "the saved notebook holds no widget state (saveState not applied?)"
    (saved,) = [
        m["state"] for m in models.values() if m["state"].get("model_name") == "michaelis_menten"
    ]
    assert saved["_esm"] and saved["fitted"] is not None  # the module and the fit travel

    # Reopen: a new browser context, the kernel that made the widget shut down, and no cell is
    # run. (The page starts a fresh kernel, as Jupyter always does; ipywidgets' manager needs a
    # session to restore saved widgets at all, so "no session" cannot be tested.)
    ctx = browser.new_context(viewport={"width": 1280, "height": 1000})
    page = ctx.new_page()
    errors2: list[str] = []
    page.on("pageerror", lambda e: errors2.append(str(e)))
    page.cw_errors = errors2
    try:
        page.goto(server.notebook_url(name))
        page.wait_for_selector(f"{harness.NOTEBOOK} .jp-Cell", timeout=60_000)
        root = cwpage.wait_rendered(page)
        cwpage.wait_fit_drawn(page, root)
        after = _shown(root)
        assert harness.prompt_text(page, 0).strip() == "[1]:"  # the saved output, not a rerun
        assert after == before
        assert after["points"] == 14
        assert page.evaluate(_KERNEL_JS) != old_kernel  # not the kernel that made the widget
        assert not harness.real_page_errors(errors2)
    finally:
        ctx.close()
