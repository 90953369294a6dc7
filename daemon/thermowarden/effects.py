"""What the engine asks the shell to do. The engine never does I/O; it returns these."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class Publish:
    """Publish ``payload`` (JSON-ready, or None for an empty retained message) to ``topic``."""

    topic: str
    payload: dict[str, Any] | None
    retain: bool = False
    qos: int = 0
    expiry_s: int | None = None


@dataclass(frozen=True)
class Persist:
    """Store a record: ``kind`` is "advisory" (record None deletes it), "event" or
    "daily_mean"."""

    kind: str
    key: str
    record: dict[str, Any] | None


Effect = Publish | Persist
