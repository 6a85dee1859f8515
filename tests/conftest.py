"""Suite-wide strictness: hypothesis profiles and the rule that browser tests may not skip in CI.

The rest of the strict settings (strict markers and config, strict xfail, our warnings as errors)
live in pyproject.toml under [tool.pytest.ini_options].
"""

from __future__ import annotations

import os
from collections.abc import Generator

import pytest
from hypothesis import HealthCheck, settings

# Hypothesis' per-example deadline is a wall-clock assertion, and a loaded CI machine would
# trip it; tests never assert wall-clock time (DEVELOPERS.md, "Rules for tests"), so no profile
# has one.
settings.register_profile("default", deadline=None)
# CI: the same search, plus the failing example's blob printed for `@reproduce_failure`.
settings.register_profile(
    "ci",
    deadline=None,
    print_blob=True,
    suppress_health_check=[HealthCheck.too_slow],
)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "default"))

# Set by .ci/run: a browser test that skips there (chromium missing, a server that would not
# start) is a failure, because issue 4 requires the browser tests to actually run in CI.
_REQUIRE_BROWSER = os.environ.get("CURVEWRIGHT_REQUIRE_BROWSER") == "1"


@pytest.hookimpl(wrapper=True)
def pytest_runtest_makereport(
    item: pytest.Item, call: pytest.CallInfo[None]
) -> Generator[None, pytest.TestReport, pytest.TestReport]:
    report = yield
    if (
        _REQUIRE_BROWSER
        and report.skipped
        and not hasattr(report, "wasxfail")
        and item.get_closest_marker("browser") is not None
    ):
        reason = report.longrepr[2] if isinstance(report.longrepr, tuple) else report.longrepr
        report.outcome = "failed"
        report.longrepr = (
            f"browser test skipped ({reason}), but CURVEWRIGHT_REQUIRE_BROWSER=1 requires it to "
            "run: install chromium (sudo apt-get install -y chromium) or unset the variable."
        )
    return report
