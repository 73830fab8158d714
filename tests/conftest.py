"""Shared pytest configuration: the ``--runslow`` option, seeded randomness, and the
rule that a skip is only allowed for a missing optional system component."""

from __future__ import annotations

import os
from collections.abc import Generator

import numpy as np
import pytest


def pytest_addoption(parser: pytest.Parser) -> None:
    parser.addoption("--runslow", action="store_true", default=False, help="run tests marked slow")


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    if config.getoption("--runslow"):
        return
    skip_slow = pytest.mark.skip(reason="slow: run with --runslow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip_slow)


#: The only reasons a test may be skipped (prefixes of the skip reason): an optional
#: system component that is missing (SoapySDR's Python module, a headless browser, named
#: pipes on the platform), privileges that defeat the test (root reads a mode-000 file), or
#: the long tests left out of the default run. Any other skip is a failure when the
#: environment variable CI is set (``.ci/run`` sets it) or IQSCOPE_STRICT_SKIPS=1, so a broken
#: import or a missing demo recording can never pass as a skip.
ALLOWED_SKIP_REASONS: tuple[str, ...] = (
    "slow: run with --runslow",
    "SoapySDR's Python module is not importable here",
    "no headless Chromium found",
    "no named pipes on this platform",
    "running with privileges that read a file without read permission",
)


def _strict_skips() -> bool:
    return bool(os.environ.get("CI")) or os.environ.get("IQSCOPE_STRICT_SKIPS") == "1"


def _skip_reason(report: pytest.TestReport) -> str:
    longrepr = report.longrepr
    if isinstance(longrepr, tuple) and len(longrepr) == 3:
        return str(longrepr[2]).removeprefix("Skipped: ")
    return str(longrepr)


@pytest.hookimpl(hookwrapper=True)
def pytest_runtest_makereport(item: pytest.Item, call: pytest.CallInfo[None]) -> Generator[None, None, None]:
    outcome = yield
    report: pytest.TestReport = outcome.get_result()
    if not report.skipped or not _strict_skips() or hasattr(report, "wasxfail"):
        return
    reason = _skip_reason(report)
    if not reason.startswith(ALLOWED_SKIP_REASONS):
        report.outcome = "failed"
        report.longrepr = (f"skipped for a reason that is not a missing optional system component "
                           f"(tests/conftest.py ALLOWED_SKIP_REASONS): {reason}")


@pytest.fixture
def rng() -> np.random.Generator:
    """A seeded generator so every test is repeatable."""
    return np.random.default_rng(20261201)


# -- hypothesis profiles (issue 6, fuzzing; see docs/robustness.md) --------------------
# "ci" (default) keeps every property test without its own max_examples short and
# repeatable (derandomized); "long" (random, 5000 examples)
# is the developers' fuzz run: pytest ... --hypothesis-profile=long. The pytest plugin
# of hypothesis loads the profile named by --hypothesis-profile after this file.
from hypothesis import settings as _hyp_settings  # noqa: E402

_hyp_settings.register_profile("ci", max_examples=100, deadline=None, derandomize=True, print_blob=True)
_hyp_settings.register_profile("long", max_examples=5000, deadline=None, print_blob=True)
_hyp_settings.load_profile("ci")
