"""Helpers of the group tests: a sensor feeder, the group's retained records as a test
client sees them."""

from __future__ import annotations

import json
import threading
import time
from collections.abc import Callable

from tests.shell.conftest import Collector


class Feeder:
    """Publishes every space's readings every ``every_s`` from ``values()`` (topic ->
    payload), on its own thread, until stopped. A sensor network does the same."""

    def __init__(self, client: Collector, values: Callable[[], dict[str, str]],
                 every_s: float = 0.5) -> None:
        self.client = client
        self.values = values
        self.every_s = every_s
        self.stopped = threading.Event()
        self.thread = threading.Thread(target=self._run, daemon=True)

    def start(self) -> Feeder:
        self.thread.start()
        return self

    def _run(self) -> None:
        while not self.stopped.is_set():
            for topic, payload in self.values().items():
                self.client.client.publish(topic, payload, qos=0)
            self.stopped.wait(self.every_s)

    def stop(self) -> None:
        self.stopped.set()
        self.thread.join(10)


class GroupWatch:
    """What the group says about itself on the broker: the latest owners record and status
    record per instance, and when every space was last covered by the owners records."""

    def __init__(self, collector: Collector, prefix: str, group: str,
                 spaces: list[str]) -> None:
        self.c = collector
        self.prefix = prefix
        self.group = group
        self.spaces = set(spaces)

    def _latest(self, base: str) -> dict[str, dict]:
        out: dict[str, dict] = {}
        with self.c.lock:
            msgs = list(self.c.messages)
        for topic, payload, _ in msgs:
            if topic.startswith(base) and "/" not in topic[len(base):]:
                name = topic[len(base):]
                if payload and not payload.startswith(b"sync-"):
                    out[name] = json.loads(payload)
                else:
                    out.pop(name, None)
        return out

    def owners(self) -> dict[str, set[str]]:
        """Instance -> the spaces its latest owners record lists (online instances only)."""
        status = self._latest(f"{self.prefix}/status/")
        return {name: set(rec["spaces"])
                for name, rec in self._latest(f"{self.prefix}/group/{self.group}/owners/").items()
                if status.get(name, {}).get("state") == "online"}

    def covered_by(self, names: set[str]) -> bool:
        """Every space owned by exactly one of ``names``, and by no other instance."""
        owners = self.owners()
        if set(owners) != names:
            return False
        seen: list[str] = [s for spaces in owners.values() for s in spaces]
        return len(seen) == len(set(seen)) and set(seen) == self.spaces

    def owner_of(self, space: str) -> str | None:
        return next((n for n, s in self.owners().items() if space in s), None)


def wait_until(predicate: Callable[[], bool], timeout: float) -> float | None:
    """Monotonic time at which ``predicate`` first held (polled every 20 ms), or None."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return time.monotonic()
        time.sleep(0.02)
    return None
