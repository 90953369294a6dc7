"""Values as they go into JSON payloads: times as ISO 8601 text, numbers never NaN."""

from __future__ import annotations

import datetime as dt
import math


def iso(t: float) -> str:
    """UTC ISO 8601 with seconds, for payloads (``t`` in epoch seconds)."""
    return dt.datetime.fromtimestamp(t, dt.UTC).isoformat(timespec="seconds").replace(
        "+00:00", "Z")


def num(v: float) -> float | None:
    """A JSON number, or null for NaN/inf (NaN never leaves the process)."""
    return round(v, 3) if math.isfinite(v) else None
