"""Session time budget for heavy tests.

Tests marked @pytest.mark.slow run after all the others, and each one is skipped (with the
reason shown) once the session has run longer than ZECKENUM_TEST_BUDGET seconds
(default 900).  The brute-force references and test helpers in tests/support/ are put on
`sys.path` here, so every test folder imports them by name.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent / "support"))

BUDGET_ENV = "ZECKENUM_TEST_BUDGET"
DEFAULT_BUDGET_SECONDS = 900.0
_START = pytest.StashKey[float]()
_BUDGET = pytest.StashKey[float]()


def _budget_seconds() -> float:
    raw = os.environ.get(BUDGET_ENV, "").strip()
    if not raw:
        return DEFAULT_BUDGET_SECONDS
    try:
        value = float(raw)
    except ValueError:
        raise pytest.UsageError(f"{BUDGET_ENV}={raw!r} is not a number of seconds") from None
    if value < 0:
        raise pytest.UsageError(f"{BUDGET_ENV}={raw!r} must be >= 0 seconds")
    return value


def pytest_configure(config: pytest.Config) -> None:
    config.stash[_START] = time.monotonic()
    config.stash[_BUDGET] = _budget_seconds()


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    """Stable reorder: every @slow item after every other item."""
    fast = [it for it in items if it.get_closest_marker("slow") is None]
    slow = [it for it in items if it.get_closest_marker("slow") is not None]
    items[:] = fast + slow


def pytest_runtest_setup(item: pytest.Item) -> None:
    if item.get_closest_marker("slow") is None:
        return
    elapsed = time.monotonic() - item.config.stash[_START]
    budget = item.config.stash[_BUDGET]
    if elapsed > budget:
        pytest.skip(
            f"session time budget spent: {elapsed:.0f} s > {BUDGET_ENV}={budget:g} s "
            "(raise it to run slow tests)"
        )
