"""Start the demo: JupyterLab on examples/quickstart.ipynb, configured to start cleanly.

``make demo`` runs ``.venv/bin/python tools/demo_server.py``; ``tests/test_demo.py`` runs the
same script with ``--no-browser --port=0`` added, so the test starts the server the demo starts.
Any arguments are passed on to ``jupyter lab``.

Importing ``jupyterlab.labapp`` asks the yarn bundled with JupyterLab for its configuration
(``node <yarn.js> config --json``) before any configuration is read. Node decides whether a
``.js`` file is CommonJS or an ES module from the nearest ``package.json`` above it, which for a
venv inside this checkout is our own; it therefore must not say ``"type": "module"`` (it once did,
and yarn failed with a page of minified JavaScript; ``tests/test_demo.py`` guards this).
``tools/demo_server_config.py`` also turns off the page's build check, which would ask yarn again
on every page load, and the PyPI extension manager, which the demo does not need. On a machine
with no web browser the server is started with ``--no-browser`` (Jupyter would otherwise print
an error that no browser can be found) and the URL to open is printed instead.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Sequence
from pathlib import Path

TOOLS = Path(__file__).resolve().parent
REPO = TOOLS.parent
NOTEBOOK = REPO / "examples" / "quickstart.ipynb"
CONFIG = TOOLS / "demo_server_config.py"


def _have_browser() -> bool:
    """Whether Python's webbrowser module can open a page here (what Jupyter uses)."""
    import webbrowser

    try:
        webbrowser.get()
    except webbrowser.Error:
        return False
    return True


def command(extra: Sequence[str] = ()) -> list[str]:
    """The ``jupyter lab`` command line of the demo, with ``extra`` options before the notebook."""
    cmd = [str(Path(sys.executable).parent / "jupyter-lab"), f"--config={CONFIG}"]
    # Jupyter refuses to run as root without this (containers, CI).
    if os.geteuid() == 0:
        cmd.append("--allow-root")
    return [*cmd, *extra, str(NOTEBOOK)]


def main(argv: Sequence[str]) -> int:
    """Replace this process with the demo's ``jupyter lab``."""
    if not NOTEBOOK.is_file():
        print(f"error: {NOTEBOOK.relative_to(REPO)} does not exist yet", file=sys.stderr)
        return 1
    if "--no-browser" not in argv and not _have_browser():
        print(
            "No web browser on this machine: open the http://127.0.0.1:... address the server "
            "prints below in a browser that can reach this machine.",
            flush=True,
        )
        argv = ["--no-browser", *argv]
    cmd = command(argv)
    # exec, not a child: Ctrl-C and the test's SIGTERM reach the server directly.
    sys.stdout.flush()
    sys.stderr.flush()
    os.execv(cmd[0], cmd)
    return 0  # not reached: execv returns only by raising


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
