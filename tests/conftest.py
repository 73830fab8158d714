"""Shared pytest configuration: the ``--runslow`` option and seeded randomness."""

from __future__ import annotations

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
