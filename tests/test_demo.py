"""`make demo` starts JupyterLab cleanly: no yarn error page, no traceback (issue 7, item 2).

The server is started by tools/demo_server.py, the script the Makefile's demo target runs, with
only ``--no-browser --port=0`` added, so the test runs the demo's own command and configuration.
"""

from __future__ import annotations

import json
import os
import queue
import re
import shutil
import signal
import subprocess
import sys
import threading
import time
import urllib.error
import urllib.request
from pathlib import Path
from typing import IO, Any

import pytest

ROOT = Path(__file__).resolve().parent.parent
SCRIPT = ROOT / "tools" / "demo_server.py"

# Generous: a cold start on a loaded CI machine imports a lot. Only a limit, never a measurement.
START_TIMEOUT_S = 120.0
STOP_TIMEOUT_S = 30.0
URL = re.compile(r"http://127\.0\.0\.1:\d+/lab\?token=[0-9a-f]+")
ERROR_WORD = re.compile(r"\bError\b")
CONFIG_DATA = re.compile(
    r'<script id="jupyter-config-data" type="application/json">(.*?)</script>', re.S
)


def _pump(stream: IO[bytes], lines: list[str], seen: queue.Queue[str | None]) -> None:
    """Copy the server's output line by line (a thread, so the wait below can time out)."""
    for raw in stream:
        line = raw.decode("utf-8", "replace")
        lines.append(line)
        seen.put(line)
    seen.put(None)


def _wait_for_url(
    proc: subprocess.Popen[bytes], seen: queue.Queue[str | None], log: list[str]
) -> str:
    deadline = time.monotonic() + START_TIMEOUT_S
    while (left := deadline - time.monotonic()) > 0:
        try:
            line = seen.get(timeout=left)
        except queue.Empty:
            break
        if line is None:
            proc.wait(STOP_TIMEOUT_S)
            pytest.fail(
                f"the demo server exited (code {proc.returncode}) before printing its URL:\n"
                + "".join(log)
            )
        if match := URL.search(line):
            return match.group(0)
    pytest.fail(
        f"the demo server printed no http://127.0.0.1:.../lab?token=... URL within "
        f"{START_TIMEOUT_S:.0f} s; its output so far:\n" + "".join(log)
    )


def _wait_until_listening(url: str, proc: subprocess.Popen[bytes]) -> None:
    """Poll /api/status: the server prints its URL just before its event loop opens the port."""
    base, token = url.split("/lab?token=")
    deadline = time.monotonic() + START_TIMEOUT_S
    while time.monotonic() < deadline and proc.poll() is None:
        try:
            with urllib.request.urlopen(f"{base}/api/status?token={token}", timeout=10) as r:
                if r.status == 200:
                    return
        except (urllib.error.URLError, ConnectionError, TimeoutError):
            pass
        time.sleep(0.2)
    pytest.fail(f"the demo server printed {url} but did not answer there")


def _page_config(url: str) -> dict[str, Any]:
    """The page config JupyterLab embeds in the notebook's page (what the front end reads)."""
    base, token = url.split("/lab?token=")
    with urllib.request.urlopen(f"{base}/lab/tree/quickstart.ipynb?token={token}", timeout=30) as r:
        assert r.status == 200
        html = r.read().decode("utf-8")
    match = CONFIG_DATA.search(html)
    assert match, "the lab page carries no jupyter-config-data"
    data: dict[str, Any] = json.loads(match.group(1))
    return data


@pytest.mark.slow
def test_demo_server_starts_without_errors(tmp_path: Path) -> None:
    env = dict(os.environ)
    # Only where the server keeps its pid file and cookie secret; not configuration.
    env["JUPYTER_RUNTIME_DIR"] = str(tmp_path / "runtime")
    env.pop("ANYWIDGET_HMR", None)
    proc = subprocess.Popen(
        [sys.executable, str(SCRIPT), "--no-browser", "--port=0"],
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        env=env,
        start_new_session=True,  # its own process group, so a failure can kill all of it
    )
    assert proc.stdout is not None
    lines: list[str] = []
    seen: queue.Queue[str | None] = queue.Queue()
    reader = threading.Thread(target=_pump, args=(proc.stdout, lines, seen), daemon=True)
    reader.start()
    try:
        url = _wait_for_url(proc, seen, lines)
        _wait_until_listening(url, proc)
        config = _page_config(url)
        proc.send_signal(signal.SIGTERM)  # the server itself: the script exec'd into it
        try:
            proc.wait(STOP_TIMEOUT_S)
        except subprocess.TimeoutExpired:
            pytest.fail(f"the demo server did not stop within {STOP_TIMEOUT_S:.0f} s of SIGTERM")
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
        reader.join(10)
    log = "".join(lines)
    before_url = log[: log.index(url)]

    assert not ERROR_WORD.search(before_url), f"'Error' before the server's URL:\n{before_url}"
    assert not ERROR_WORD.search(log), f"'Error' in the demo server's log:\n{log}"
    assert "Traceback" not in log, f"a traceback in the demo server's log:\n{log}"
    assert not re.search(r"^\[E ", log, re.M), f"an error-level line in the log:\n{log}"
    assert proc.returncode == 0, f"the server stopped with code {proc.returncode}:\n{log}"

    # The demo's configuration reached the page: no build check, no build button, the
    # read-only extension manager, and the widget's front-end extensions are served.
    assert config["buildCheck"] is False
    assert config["buildAvailable"] is False
    assert config["extensionManager"]["name"] == "read-only"
    served = {ext["name"] for ext in config["federated_extensions"]}
    assert {"anywidget", "@jupyter-widgets/jupyterlab-manager"} <= served


def _node() -> str:
    node = shutil.which("node")
    if node is None:
        pytest.skip("node is not installed (the project assumes Node 20)")
    return node


def test_node_runs_the_yarn_jupyterlab_bundles() -> None:
    # JupyterLab runs this file with node at every start. Node reads it as an ES module when
    # the nearest package.json above it (ours, for a venv in the checkout) says type=module,
    # and yarn then fails on its first require() with a page of minified JavaScript.
    from jupyterlab.commands import YARN_PATH  # type: ignore[import-untyped]  # no py.typed

    package = json.loads((ROOT / "package.json").read_text(encoding="utf-8"))
    assert package.get("type", "commonjs") == "commonjs", (
        "package.json must not declare type=module: Node would load the venv's yarn.js as an "
        "ES module; name ES-module files .mjs/.mts instead"
    )
    done = subprocess.run(
        [_node(), YARN_PATH, "--version"], cwd=ROOT, capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr
    assert re.fullmatch(r"\d+\.\d+\.\d+\S*", done.stdout.strip()), done.stdout
