"""Shared test setup: isolated cache/data/config folders, and the `heavy` marker gate."""

from __future__ import annotations

import os

import pytest


def pytest_collection_modifyitems(config, items):
    if os.environ.get("REVIEWER_HEAVY") == "1":
        return
    skip = pytest.mark.skip(reason="heavy test: set REVIEWER_HEAVY=1 to run")
    for item in items:
        if "heavy" in item.keywords:
            item.add_marker(skip)


@pytest.fixture(autouse=True)
def _isolated_folders(tmp_path_factory, monkeypatch):
    """Keep every test's caches, sessions and settings out of the user's home."""
    root = tmp_path_factory.mktemp("xdg")
    for var, sub in (("REVIEWER_CACHE_DIR", "cache"), ("REVIEWER_DATA_DIR", "data"),
                     ("REVIEWER_CONFIG_DIR", "config")):
        monkeypatch.setenv(var, str(root / sub))
    monkeypatch.setenv("TEXTUAL_ANIMATIONS", "none")
