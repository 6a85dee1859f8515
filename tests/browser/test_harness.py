"""The browser-test machinery itself, on notebooks that need nothing of ours.

If these fail, the widget tests' failures say nothing about the widget: the server, the kernel,
chromium or anywidget's front end is at fault. The tiny widget here is defined in the cell.
"""

from __future__ import annotations

import json
import re
from collections.abc import Callable
from typing import Any

import harness
import pytest

pytestmark = pytest.mark.browser

# A minimal anywidget with the same ping/pong flush traits our widget uses (harness.FLUSH_JS),
# and the same test hook (root._cwModel); it counts clicks and echoes ping into pong in Python.
PROBE_CELL = r'''
import anywidget, traitlets
class Probe(anywidget.AnyWidget):
    _esm = """
    export default { render({ model, el }) {
      const root = document.createElement('div'); root.className = 'cw-root';
      root._cwModel = model;
      const b = document.createElement('button'); b.textContent = 'add';
      const out = document.createElement('span'); out.className = 'probe-count';
      const show = () => { out.textContent = String(model.get('count')); };
      b.addEventListener('click', () => {
        model.set('count', model.get('count') + 1); model.save_changes();
      });
      model.on('change:count', show); show();
      root.append(b, out); el.appendChild(root);
      return () => model.off('change:count', show);
    } };
    """
    count = traitlets.Int(0).tag(sync=True)
    sync_ping = traitlets.Int(0).tag(sync=True)
    sync_pong = traitlets.Int(0).tag(sync=True)
    @traitlets.observe("sync_ping")
    def _echo(self, change):
        self.sync_pong = change["new"]
probe = Probe()
probe
'''


def test_kernel_runs_cells_and_output_is_read(
    page: Any, server: harness.Server, notebook: Callable[..., str]
) -> None:
    name = notebook(cells=["value = 6 * 7", "print('PROOF', value)"])
    harness.open_notebook(page, server, name)
    harness.run_all(page)
    # The kernel computed it (the number is nowhere in the notebook's source).
    assert re.search(r"PROOF 42\b", harness.cell_output(page, 1))
    # Running one cell again gives it a new execution count and the same output.
    before = harness.prompt_text(page, 1)
    harness.run_cell(page, 1)
    assert harness.prompt_text(page, 1) != before
    assert "PROOF 42" in harness.cell_output(page, 1)
    assert harness.real_page_errors(page.cw_errors) == []


def test_anywidget_renders_syncs_and_flushes(
    page: Any, server: harness.Server, notebook: Callable[..., str]
) -> None:
    state_cell = "import json; print('STATE', json.dumps({'count': probe.count}))"
    name = notebook(cells=[PROBE_CELL, state_cell])
    harness.open_notebook(page, server, name)
    harness.run_cell(page, 0)
    root = harness.widget_roots(page).first
    root.wait_for(timeout=60_000)
    for _ in range(3):
        root.locator("button").click()
    page.wait_for_function(
        "(sel) => document.querySelector(sel + ' .cw-root .probe-count')?.textContent === '3'",
        arg=harness.NOTEBOOK,
    )
    harness.flush(root)  # every click's update has reached Python after this round trip
    harness.run_cell(page, 1)
    out = harness.cell_output(page, 1)
    m = re.search(r"STATE (\{.*\})", out)
    assert m, out
    assert json.loads(m.group(1)) == {"count": 3}
    assert harness.real_page_errors(page.cw_errors) == []
