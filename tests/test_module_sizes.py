"""Modules of the engine and the shell stay small enough to hold one concept: at most
``MAX_LINES`` lines each (issue 27). A module that grows past it has most likely taken on a
second reason to change; split it along the data's path (DEVELOPERS.md, Architecture)
rather than raise the limit."""

from __future__ import annotations

import pathlib

import pytest

PACKAGE = pathlib.Path(__file__).resolve().parents[1] / "daemon" / "thermowarden"
MAX_LINES = 450
LAYERS = ("engine", "shell")


@pytest.mark.parametrize("layer", LAYERS)
def test_no_module_is_over_the_limit(layer: str) -> None:
    over = {str(p.relative_to(PACKAGE)): n for p in sorted((PACKAGE / layer).rglob("*.py"))
            if (n := len(p.read_text(encoding="utf-8").splitlines())) > MAX_LINES}
    assert not over, f"modules over {MAX_LINES} lines: {over}"

