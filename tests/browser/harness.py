"""Drive a real JupyterLab 4 / Notebook 7 page: an isolated server, Debian's chromium, cell helpers.

Follows the recipe in ../shared/browser-testing.md (server isolation, readiness, kernel-idle wait,
run-all via the menu command, ping/pong flush). Used by the browser tests and the benchmark.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from collections.abc import Sequence
from pathlib import Path
from typing import Any, Literal

REPO = Path(__file__).resolve().parents[2]
SRC = REPO / "src"
BUNDLE = SRC / "curvewright" / "static" / "widget.js"
# Screenshots and other evidence from the browser tests (gitignored).
ARTIFACTS = REPO / "test-artifacts"
VENV_BIN = Path(sys.executable).parent
TOKEN = "cw-test-token"

App = Literal["lab", "notebook"]

CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]

# Notebook 7.6's shortcut settings plugin raises this on every page load, with or without
# widgets (see browser-testing.md); it is the only page error we tolerate.
ALLOWED_PAGE_ERRORS = ("reading 'schema'",)

_SERVER_CONFIG = """\
c.LabApp.news_url = None
c.LabApp.check_for_updates_class = "jupyterlab.handlers.announcements.NeverCheckForUpdate"
c.LabApp.extension_manager = "readonly"
c.LabApp.expose_app_in_browser = True
c.JupyterNotebookApp.expose_app_in_browser = True
"""

# Turns Nagle off on the kernel websocket (browser-testing.md: ~50 ms -> ~17 ms per round trip).
# Only the benchmark uses it, to report both figures; the tests run the server as users do.
_NODELAY_PATCH = """
from jupyter_server.services.kernels.websocket import KernelWebsocketHandler as _K
_orig_open = _K.open
async def _open(self, *a, **kw):
    self.set_nodelay(True)
    return await _orig_open(self, *a, **kw)
_K.open = _open
"""


def chromium_path() -> str | None:
    """Debian's chromium binary, or None when it is not installed."""
    return shutil.which("chromium")


def launch_chromium(p: Any) -> Any:
    """Launch Debian's chromium through Playwright (never `playwright install`)."""
    exe = chromium_path()
    if exe is None:
        raise RuntimeError("chromium is not installed: apt-get install -y chromium")
    return p.chromium.launch(executable_path=exe, headless=True, args=CHROMIUM_ARGS)


def free_port() -> int:
    """A port that was free a moment ago (bound to port 0, read, closed)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class Server:
    """A Jupyter server in its own base directory, on a random port, with a known token."""

    def __init__(self, base: Path, app: App = "lab", *, nodelay: bool = False) -> None:
        self.base = base
        self.app = app
        self.root = base / "root"
        self.port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.token = TOKEN
        self.nodelay = nodelay
        self.log = base / "server.log"
        self.proc: subprocess.Popen[bytes] | None = None

    def _env(self) -> dict[str, str]:
        env = dict(os.environ)
        dirs = {
            "JUPYTER_CONFIG_DIR": "config",
            "JUPYTER_DATA_DIR": "data",
            "JUPYTER_RUNTIME_DIR": "runtime",
            "JUPYTERLAB_SETTINGS_DIR": "settings",
            "JUPYTERLAB_WORKSPACES_DIR": "workspaces",
        }
        for var, sub in dirs.items():
            env[var] = str(self.base / sub)
        # The kernel imports curvewright from the checkout (no install needed) and the
        # notebook's own helpers from the root.
        env["PYTHONPATH"] = os.pathsep.join([str(SRC), str(self.root)])
        env.pop("ANYWIDGET_HMR", None)
        return env

    def _write_config(self) -> None:
        for sub in ("root", "config", "data", "runtime", "settings", "workspaces"):
            (self.base / sub).mkdir(parents=True, exist_ok=True)
        cfg = _SERVER_CONFIG + (_NODELAY_PATCH if self.nodelay else "")
        (self.base / "config" / "jupyter_server_config.py").write_text(cfg)
        settings = self.base / "settings"
        note = settings / "@jupyterlab" / "apputils-extension"
        note.mkdir(parents=True, exist_ok=True)
        (note / "notification.jupyterlab-settings").write_text(
            json.dumps({"fetchNews": "false", "checkForUpdates": False})
        )
        ext = settings / "@jupyterlab" / "extensionmanager-extension"
        ext.mkdir(parents=True, exist_ok=True)
        (ext / "plugin.jupyterlab-settings").write_text(json.dumps({"enabled": False}))

    def start(self, timeout: float = 60.0) -> None:
        """Start the server and wait until /api/status answers."""
        self._write_config()
        exe = VENV_BIN / ("jupyter-lab" if self.app == "lab" else "jupyter-notebook")
        cmd = [
            str(exe),
            "--no-browser",
            "--ip=127.0.0.1",
            f"--port={self.port}",
            "--port-retries=0",
            "--allow-root",
            f"--ServerApp.root_dir={self.root}",
            f"--IdentityProvider.token={self.token}",
        ]
        with self.log.open("wb") as log:
            self.proc = subprocess.Popen(
                cmd, cwd=self.root, stdout=log, stderr=subprocess.STDOUT, env=self._env()
            )
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"jupyter server exited early:\n{self.log.read_text()[-3000:]}")
            try:
                with urllib.request.urlopen(self._api("status"), timeout=2) as r:
                    if r.status == 200:
                        return
            except (urllib.error.URLError, ConnectionError, TimeoutError):
                pass
            time.sleep(0.2)
        self.stop()
        raise RuntimeError(f"jupyter server did not start in {timeout} s:\n{self.log.read_text()}")

    def _api(self, path: str) -> str:
        return f"{self.url}/api/{path}?token={self.token}"

    def shutdown_kernels(self) -> None:
        """Shut every running kernel down (between tests, so kernels do not pile up)."""
        if self.proc is None:
            return
        try:
            with urllib.request.urlopen(self._api("kernels"), timeout=5) as r:
                kernels = json.loads(r.read())
            for k in kernels:
                req = urllib.request.Request(self._api(f"kernels/{k['id']}"), method="DELETE")
                urllib.request.urlopen(req, timeout=10).close()
        except (urllib.error.URLError, ConnectionError, TimeoutError, ValueError):
            pass

    def stop(self) -> None:
        """Shut the kernels down, then the server (terminate, then kill if it lingers)."""
        if self.proc is None:
            return
        self.shutdown_kernels()
        self.proc.terminate()
        try:
            self.proc.wait(15)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait(5)
        self.proc = None

    def notebook_url(self, name: str) -> str:
        """The page that opens notebook ``name`` (relative to the root) in this app."""
        if self.app == "lab":
            # `reset`: open only this notebook, not the tabs the workspace remembers from
            # earlier tests (their hidden cells would match the cell selectors too).
            return f"{self.url}/lab/tree/{name}?reset&token={self.token}"
        return f"{self.url}/notebooks/{name}?token={self.token}"


# ------------------------------------------------------------------------- notebooks
def write_notebook(path: Path, cells: Sequence[str]) -> None:
    """Write a notebook of code cells with the python3 kernelspec."""
    import nbformat

    nb = nbformat.v4.new_notebook()
    nb.metadata["kernelspec"] = {
        "name": "python3",
        "display_name": "Python 3",
        "language": "python",
    }
    nb.cells = [nbformat.v4.new_code_cell(src) for src in cells]
    nbformat.write(nb, str(path))


# -------------------------------------------------------------------------- the page
# The code cells of the notebook on show (hidden dock panels carry lm-mod-hidden).
NOTEBOOK = ".jp-NotebookPanel:not(.lm-mod-hidden) .jp-Notebook"
CODE_CELLS = f"{NOTEBOOK} .jp-Cell.jp-CodeCell"
KERNEL_IDLE_JS = """() => {
  const k = window.jupyterapp?.shell.currentWidget?.sessionContext?.session?.kernel;
  return !!k && k.status === 'idle' && k.connectionStatus === 'connected';
}"""


def open_notebook(page: Any, server: Server, name: str) -> None:
    """Open a notebook and wait until its kernel is really idle (not just the indicator)."""
    page.goto(server.notebook_url(name))
    page.wait_for_selector(f"{NOTEBOOK} .jp-Cell", timeout=60_000)
    page.wait_for_function(KERNEL_IDLE_JS, timeout=60_000)


def run_all(page: Any) -> None:
    """Run all cells from the Run menu, then wait for every prompt to get a number."""
    page.locator(".lm-MenuBar-itemLabel", has_text=re.compile(r"^Run$")).click()
    page.locator('.lm-Menu-item[data-command="runmenu:run-all"]').click()
    wait_all_done(page)


def wait_all_done(page: Any, timeout: float = 120_000) -> None:
    """Every code cell's prompt shows a number and the kernel is idle."""
    page.wait_for_function(
        """(sel) => {
          const ps = [...document.querySelectorAll(sel + ' .jp-InputPrompt')];
          return ps.length > 0 && ps.every(p => /\\[\\d+\\]/.test(p.textContent));
        }""",
        arg=CODE_CELLS,
        timeout=timeout,
    )
    page.wait_for_function(KERNEL_IDLE_JS, timeout=timeout)


def prompt_text(page: Any, i: int) -> str:
    """The input prompt text of code cell ``i`` (e.g. ``[3]:``)."""
    return str(page.locator(CODE_CELLS).nth(i).locator(".jp-InputPrompt").inner_text())


def run_cell(page: Any, i: int, timeout: float = 60_000) -> None:
    """Run code cell ``i`` (click its prompt, Control+Enter) and wait for a new prompt number."""
    cell = page.locator(CODE_CELLS).nth(i)
    before = prompt_text(page, i)
    cell.locator(".jp-InputPrompt").click()
    page.keyboard.press("Control+Enter")
    page.wait_for_function(
        """([i, before, sel]) => {
          const c = document.querySelectorAll(sel)[i];
          const t = c?.querySelector('.jp-InputPrompt')?.textContent ?? '';
          return /\\[\\d+\\]/.test(t) && t !== before;
        }""",
        arg=[i, before, CODE_CELLS],
        timeout=timeout,
    )
    page.wait_for_function(KERNEL_IDLE_JS, timeout=timeout)


def cell_output(page: Any, i: int) -> str:
    """All output text of code cell ``i``."""
    cell = page.locator(CODE_CELLS).nth(i)
    return "\n".join(cell.locator(".jp-OutputArea-output").all_inner_texts())


FLUSH_JS = """async (el) => {
  const m = el._cwModel;
  const want = (m.get('sync_ping') || 0) + 1;
  await new Promise((res) => {
    const h = () => { if (m.get('sync_pong') === want) { m.off('change:sync_pong', h); res(); } };
    m.on('change:sync_pong', h);
    m.set('sync_ping', want);
    m.save_changes();
  });
  return want;
}"""


def flush(root: Any) -> None:
    """One ping/pong round trip: every earlier front-end update has reached Python after it.

    Uses the widget's test hook (``root._cwModel``) and its ``sync_ping``/``sync_pong`` traits
    (the contract at the top of js/widget.ts).
    """
    root.evaluate(FLUSH_JS)


def real_page_errors(errors: Sequence[str]) -> list[str]:
    """Page errors other than the allow-listed Notebook 7 one."""
    return [e for e in errors if not any(a in e for a in ALLOWED_PAGE_ERRORS)]


def widget_roots(page: Any) -> Any:
    """Locator of every widget root (``.cw-root``) in the notebook on show."""
    return page.locator(f"{NOTEBOOK} .jp-OutputArea-output .cw-root")
