"""Fixtures for the real-browser tests: Debian's chromium, one Jupyter server per app, a page.

Test modules here mark themselves ``browser``. Without chromium they skip locally; in CI
(CURVEWRIGHT_REQUIRE_BROWSER=1, see tests/conftest.py) a skip is turned into a failure.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import pytest

import harness  # tests/browser is on sys.path (pytest's rootdir-less conftest import)

ARTIFACTS = harness.REPO / "test-artifacts"


@pytest.fixture(scope="session")
def browser() -> Iterator[Any]:
    if harness.chromium_path() is None:
        pytest.skip("chromium is not installed (apt-get install -y chromium)")
    playwright = pytest.importorskip("playwright.sync_api")
    if not harness.BUNDLE.exists():
        pytest.fail(f"the front-end bundle {harness.BUNDLE} is missing: run `npm run build`")
    with playwright.sync_playwright() as p:
        b = harness.launch_chromium(p)
        yield b
        b.close()


@pytest.fixture(scope="module", params=["lab", "notebook"])
def server(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> Iterator[
    harness.Server
]:
    srv = harness.Server(tmp_path_factory.mktemp(f"jp-{request.param}"), app=request.param)
    srv.root.mkdir(parents=True, exist_ok=True)
    srv.start()
    yield srv
    srv.stop()


@pytest.fixture
def page(request: pytest.FixtureRequest, browser: Any, server: harness.Server) -> Iterator[Any]:
    ctx = browser.new_context(viewport={"width": 1280, "height": 1000})
    pg = ctx.new_page()
    pg.set_default_timeout(30_000)
    errors: list[str] = []
    pg.on("pageerror", lambda e: errors.append(str(e)))  # exceptions thrown in the _esm code
    pg.cw_errors = errors
    yield pg
    rep = getattr(request.node, "rep_call", None)
    if rep is not None and rep.failed:
        ARTIFACTS.mkdir(exist_ok=True)
        pg.screenshot(path=str(ARTIFACTS / f"fail-{request.node.name}.png"), full_page=True)
    ctx.close()


@pytest.hookimpl(wrapper=True)
def pytest_runtest_makereport(item: pytest.Item, call: pytest.CallInfo[None]) -> Any:
    # Keep each phase's report on the item so the page fixture can screenshot failures.
    report = yield
    setattr(item, f"rep_{report.when}", report)
    return report
