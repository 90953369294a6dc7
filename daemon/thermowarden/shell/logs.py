"""Logging: human-readable lines by default, one JSON object per line on request, and a
rate limiter so a misbehaving sensor cannot flood the log."""

from __future__ import annotations

import json
import logging
import sys
import time
from collections.abc import Callable


class JsonFormatter(logging.Formatter):
    """One JSON object per record: time, level, logger, message, and any extra fields."""

    RESERVED = set(vars(logging.LogRecord("", 0, "", 0, "", None, None))) | {"message"}

    def format(self, record: logging.LogRecord) -> str:
        out = {"time": self.formatTime(record, "%Y-%m-%dT%H:%M:%S"),
               "level": record.levelname.lower(), "logger": record.name,
               "message": record.getMessage()}
        for k, v in vars(record).items():
            if k not in self.RESERVED and not k.startswith("_"):
                out[k] = v
        if record.exc_info:
            out["exception"] = self.formatException(record.exc_info)
        return json.dumps(out, default=str, ensure_ascii=False)


def setup_logging(fmt: str = "text", level: str = "info") -> None:
    handler = logging.StreamHandler(sys.stderr)
    if fmt == "json":
        handler.setFormatter(JsonFormatter())
    else:
        handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)-7s %(name)s: "
                                               "%(message)s", "%Y-%m-%d %H:%M:%S"))
    root = logging.getLogger()
    root.handlers[:] = [handler]
    root.setLevel(level.upper())
    logging.getLogger("apscheduler").setLevel(max(logging.WARNING, root.level))


class RateLimiter:
    """At most ``burst`` lines per key, refilled at ``per_minute`` per minute; counts what
    it suppresses so the next line can say how many were dropped."""

    def __init__(self, per_minute: float = 6.0, burst: int = 3,
                 clock: Callable[[], float] = time.monotonic) -> None:
        self.rate = per_minute / 60.0
        self.burst = float(burst)
        self.clock = clock
        self.tokens: dict[str, tuple[float, float]] = {}
        self.suppressed: dict[str, int] = {}

    def allow(self, key: str) -> tuple[bool, int]:
        """(may log now, lines suppressed since the last allowed one)."""
        now = self.clock()
        tokens, last = self.tokens.get(key, (self.burst, now))
        tokens = min(self.burst, tokens + (now - last) * self.rate)
        if tokens >= 1.0:
            self.tokens[key] = (tokens - 1.0, now)
            return True, self.suppressed.pop(key, 0)
        self.tokens[key] = (tokens, now)
        self.suppressed[key] = self.suppressed.get(key, 0) + 1
        if len(self.tokens) > 10_000:  # bounded: forget the oldest keys
            for k in list(self.tokens)[:1000]:
                self.tokens.pop(k, None)
        return False, 0


class IntervalLog:
    """At most one line per key per ``interval_s``: the first occurrence is logged at once;
    later ones in its interval are only counted, and :meth:`due` hands back one summary
    per key (how many, and the last detail) once its interval is over. A key that stayed
    quiet for a whole interval starts afresh (its next occurrence is logged at once)."""

    def __init__(self, interval_s: float, clock: Callable[[], float] = time.monotonic,
                 max_keys: int = 10_000) -> None:
        self.interval_s = interval_s
        self.clock = clock
        self.max_keys = max_keys
        self.windows: dict[str, tuple[float, int, str]] = {}
        """key -> (interval start, occurrences counted since, last detail)"""
        self.next_due = float("inf")

    def first(self, key: str, detail: str = "") -> bool:
        """Note one occurrence; True when it is to be logged now."""
        window = self.windows.get(key)
        if window is None:
            now = self.clock()
            if len(self.windows) >= self.max_keys:  # bounded: forget the oldest keys
                for k in list(self.windows)[: self.max_keys // 10]:
                    del self.windows[k]
            self.windows[key] = (now, 0, detail)
            self.next_due = min(self.next_due, now + self.interval_s)
            return True
        start, count, _ = window
        self.windows[key] = (start, count + 1, detail)
        return False

    def due(self) -> list[tuple[str, int, str]]:
        """(key, occurrences not logged, last detail) for every key whose interval ended
        with some; those keys start a new interval now (so still at most one line per
        interval), keys that had none are forgotten."""
        now = self.clock()
        if now < self.next_due:
            return []
        out: list[tuple[str, int, str]] = []
        nxt = float("inf")
        for key, (start, count, detail) in list(self.windows.items()):
            if now - start < self.interval_s:
                nxt = min(nxt, start + self.interval_s)
            elif count:
                out.append((key, count, detail))
                self.windows[key] = (now, 0, detail)
                nxt = min(nxt, now + self.interval_s)
            else:
                del self.windows[key]
        self.next_due = nxt
        return out
