"""Fixtures of the backtest tests: every test gets its own task cache."""

from __future__ import annotations

import pytest


@pytest.fixture(autouse=True)
def own_cache(tmp_path, monkeypatch):
    """A task cache of this test only (``HARNESS_CACHE``), so counts of computed tasks are its own."""
    cache = tmp_path / "task-cache"
    monkeypatch.setenv("HARNESS_CACHE", str(cache))
    return cache
