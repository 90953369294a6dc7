"""The slow fault cases run only when asked for: ``-m slow`` (or ``-m faults`` with
THERMOWARDEN_SLOW=1); the quick ones run in the default suite."""

from __future__ import annotations

import os

import pytest


def pytest_collection_modifyitems(config, items):
    wanted = config.getoption("-m") or ""
    if "slow" in wanted or os.environ.get("THERMOWARDEN_SLOW") == "1":
        return
    skip = pytest.mark.skip(reason="a slow fault case: run with -m slow (README, fault suite)")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)
