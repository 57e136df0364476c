"""Test configuration: slow simulations run in CI (CI=true) or with --runslow."""

import os

import pytest


def pytest_addoption(parser):
    parser.addoption("--runslow", action="store_true", default=False,
                     help="also run the tests marked slow (CI runs them always)")


def _run_slow(config):
    return config.getoption("--runslow") or os.environ.get("CI", "").lower() in ("1", "true")


def pytest_collection_modifyitems(config, items):
    if _run_slow(config):
        return
    skip = pytest.mark.skip(reason="slow simulation: runs in CI, or locally with --runslow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)
