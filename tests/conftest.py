"""Shared test configuration: the ``--runslow`` option and a headless matplotlib for every test."""

from __future__ import annotations

import os
import sys

import pytest

os.environ.setdefault("MPLBACKEND", "Agg")


def pytest_addoption(parser: pytest.Parser) -> None:
    parser.addoption("--runslow", action="store_true", default=False, help="run tests marked slow")


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    if config.getoption("--runslow"):
        return
    skip_slow = pytest.mark.skip(reason="slow; run with --runslow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip_slow)


@pytest.fixture(autouse=True)
def _matplotlib_agg():
    """Draw off-screen and close every figure a test leaves open."""
    import matplotlib

    matplotlib.use("Agg")
    yield
    if "matplotlib.pyplot" in sys.modules:
        sys.modules["matplotlib.pyplot"].close("all")
