"""Shared test fixtures and the published check values."""

from __future__ import annotations

import pathlib
from typing import Any

import pytest
import yaml

DATA = pathlib.Path(__file__).parent / "data"

COMMAND_LIMIT_S = 900.0
"""Upper limit for one ``thermowarden`` command run by a test. Generous on purpose: a fresh
clone compiles the comfort models on its first command (minutes on a loaded machine); the
limit only stops a command that hangs, a test never waits for it to pass."""
REPO = pathlib.Path(__file__).parent.parent


def load_published() -> dict[str, Any]:
    with open(DATA / "published_values.yaml", encoding="utf-8") as fh:
        data: dict[str, Any] = yaml.safe_load(fh)
    return data


PUBLISHED = load_published()


def table(name: str) -> list[dict[str, Any]]:
    """Rows of one published table as dicts keyed by its columns."""
    group = PUBLISHED[name]
    return [dict(zip(group["columns"], row, strict=True)) for row in group["rows"]]


@pytest.fixture
def published() -> dict[str, Any]:
    return PUBLISHED


def pytest_configure(config: pytest.Config) -> None:
    """The recorded day's replays are kept in the pytest cache between sessions (see
    tests/recorded_day.py); without the cache plugin, within the session only."""
    from tests import recorded_day

    cache = getattr(config, "cache", None)
    if cache is not None:
        recorded_day.CACHE_DIR = pathlib.Path(cache.mkdir("recorded-day"))

