"""Fixtures for the real-browser tests: Debian's chromium, one Jupyter server per app, a page.

Test modules here mark themselves ``browser``. Without chromium they skip locally; in CI
(CURVEWRIGHT_REQUIRE_BROWSER=1, see tests/conftest.py) a skip is turned into a failure.

Each app's server (JupyterLab 4 or Notebook 7) is started once per session, on first use, in
its own temporary base directory; a test copies the notebook it needs into the server's root
under a name of its own (``notebook`` fixture), and every kernel is shut down after each test.
"""

from __future__ import annotations

import re
import shutil
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path
from typing import Any

import harness  # tests/browser is on sys.path (pytest prepends a rootdir-less conftest's dir)
import pytest

ARTIFACTS = harness.ARTIFACTS
NOTEBOOKS = Path(__file__).resolve().parent / "notebooks"


@pytest.fixture(scope="session")
def browser() -> Iterator[Any]:
    if harness.chromium_path() is None:
        pytest.skip("chromium is not installed (apt-get install -y chromium)")
    playwright = pytest.importorskip("playwright.sync_api")
    with playwright.sync_playwright() as p:
        b = harness.launch_chromium(p)
        yield b
        b.close()


@pytest.fixture(scope="session")
def widget_bundle() -> Path:
    """The built front end; tests of our widget need it, the harness tests do not."""
    if not harness.BUNDLE.exists():
        pytest.fail(f"the front-end bundle {harness.BUNDLE} is missing: run `npm run build`")
    return harness.BUNDLE


@pytest.fixture(scope="session")
def jupyter_servers(
    tmp_path_factory: pytest.TempPathFactory,
) -> Iterator[Callable[[harness.App], harness.Server]]:
    """Start each app's server on first request; stop them all at the end of the session."""
    started: dict[str, harness.Server] = {}

    def get(app: harness.App) -> harness.Server:
        if app not in started:
            srv = harness.Server(tmp_path_factory.mktemp(f"jp-{app}"), app=app)
            srv.start()
            started[app] = srv
        return started[app]

    yield get
    for srv in started.values():
        srv.stop()


@pytest.fixture(params=["lab", "notebook"])
def app(request: pytest.FixtureRequest) -> str:
    """The Jupyter front end under test (override with a module-level parametrize)."""
    return str(request.param)


@pytest.fixture
def server(
    app: harness.App, jupyter_servers: Callable[[harness.App], harness.Server]
) -> Iterator[harness.Server]:
    srv = jupyter_servers(app)
    yield srv
    srv.shutdown_kernels()


@pytest.fixture
def notebook(request: pytest.FixtureRequest, server: harness.Server) -> Callable[..., str]:
    """Put a notebook into the server's root under this test's own name; return that name.

    Call with ``source=Path`` (a notebook file to copy) or ``cells=[...]`` (code cells to write).
    """

    def make(*, source: Path | None = None, cells: Sequence[str] | None = None) -> str:
        name = re.sub(r"[^A-Za-z0-9_-]+", "_", request.node.name).strip("_") + ".ipynb"
        dest = server.root / name
        if source is not None:
            shutil.copy(source, dest)
        elif cells is not None:
            harness.write_notebook(dest, cells)
        else:
            raise TypeError("notebook(): give source= or cells=")
        return name

    return make


@pytest.fixture
def page(request: pytest.FixtureRequest, browser: Any, server: harness.Server) -> Iterator[Any]:
    ctx = browser.new_context(viewport={"width": 1280, "height": 1000})
    pg = ctx.new_page()
    pg.set_default_timeout(30_000)
    errors: list[str] = []
    pg.on("pageerror", lambda e: errors.append(str(e)))  # exceptions thrown in the _esm code
    pg.cw_errors = errors
    # A failure screenshot left by an earlier run of this test would tell a stale story.
    shot = ARTIFACTS / f"fail-{re.sub(r'[^A-Za-z0-9_-]+', '_', request.node.name)}.png"
    shot.unlink(missing_ok=True)
    yield pg
    rep = getattr(request.node, "rep_call", None)
    if rep is not None and rep.failed:
        ARTIFACTS.mkdir(exist_ok=True)
        pg.screenshot(path=str(shot), full_page=True)
    ctx.close()


@pytest.hookimpl(wrapper=True)
def pytest_runtest_makereport(item: pytest.Item, call: pytest.CallInfo[None]) -> Any:
    # Keep each phase's report on the item so the page fixture can screenshot failures.
    report = yield
    setattr(item, f"rep_{report.when}", report)
    return report
