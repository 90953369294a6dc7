"""What the web thread shows: its own copies of what the engine thread publishes.

The engine thread hands every batch of effects to :meth:`LiveView.observe` after executing
them; the web thread only ever reads this object (under its lock), never the engine. A
conditions payload is built fresh for every publication, so it is kept as it is; advisory
and event payloads share lists (history) with the engine's advisories and are copied.

:class:`SiteDirectory` holds what never changes while the service runs (spaces, rules and
their shelving limits), taken from the configuration before the threads start.
"""

from __future__ import annotations

import copy
import threading
from collections import deque
from dataclasses import dataclass
from typing import Any

from thermowarden.config import SiteConfig
from thermowarden.effects import Effect, Publish

EVENTS_KEPT = 500


@dataclass(frozen=True)
class SpaceInfo:
    id: str
    name: str
    kind: str
    hot_work: bool
    ventilation: str
    index: int
    acclimatised: bool = False
    """Its workers are configured as acclimatised (the WBGT reference shown is theirs)."""


@dataclass(frozen=True)
class SiteDirectory:
    site_id: str
    site_name: str
    timezone: str
    prefix: str
    spaces: tuple[SpaceInfo, ...]
    max_shelve_s: dict[str, float]
    """rule key (pack.rule) -> the longest shelving the rule allows."""

    @classmethod
    def build(cls, config: SiteConfig, max_shelve_s: dict[str, float]) -> SiteDirectory:
        spaces = tuple(SpaceInfo(s.id, s.name or s.id, s.kind, bool(s.hot_work), s.ventilation,
                                 i, bool(config.people(s).acclimatised))
                       for i, s in enumerate(config.spaces))
        return cls(config.site.id, config.site.name or config.site.id, config.site.timezone,
                   config.output.prefix, spaces, dict(max_shelve_s))

    def space(self, space_id: str) -> SpaceInfo | None:
        for s in self.spaces:
            if s.id == space_id:
                return s
        return None


class LiveView:
    """Latest conditions per space, live advisories, recent events (thread-safe)."""

    def __init__(self, prefix: str) -> None:
        self.prefix = prefix
        self.lock = threading.Lock()
        self.conditions: dict[str, dict[str, Any]] = {}
        self.advisories: dict[str, dict[str, Any]] = {}
        """advisory id -> its latest payload, while it is live."""
        self.topic_ids: dict[str, str] = {}
        """retained advisory topic -> the id of the advisory it carries."""
        self.events: deque[dict[str, Any]] = deque(maxlen=EVENTS_KEPT)
        self.version = 0

    def observe(self, effects: list[Effect]) -> None:
        """Called by the engine thread with effects it has executed."""
        cond_mark = "/conditions"
        for e in effects:
            if not isinstance(e, Publish):
                continue
            topic = e.topic
            if topic.endswith(cond_mark) and "/spaces/" in topic and e.payload is not None:
                space = topic[len(self.prefix) + len("/spaces/"):-len(cond_mark)]
                with self.lock:
                    self.conditions[space] = e.payload
                    self.version += 1
            elif "/advisories/" in topic:
                if e.payload is None:
                    with self.lock:
                        old = self.topic_ids.pop(topic, None)
                        if old is not None:
                            self.advisories.pop(old, None)
                        self.version += 1
                else:
                    payload = copy.deepcopy(e.payload)
                    with self.lock:
                        old = self.topic_ids.get(topic)
                        if old is not None and old != payload["id"]:
                            self.advisories.pop(old, None)
                        self.topic_ids[topic] = payload["id"]
                        self.advisories[payload["id"]] = payload
                        self.version += 1
            elif "/events/" in topic and e.payload is not None:
                payload = copy.deepcopy(e.payload)
                with self.lock:
                    self.events.append(payload)
                    self.version += 1

    # ------------------------------------------------------------------ reads
    def conditions_of(self, space_id: str) -> dict[str, Any] | None:
        with self.lock:
            return self.conditions.get(space_id)

    def live(self, space_id: str | None = None, audience: str | None = None
             ) -> list[dict[str, Any]]:
        """Live advisories, most urgent first, then newest."""
        with self.lock:
            items = list(self.advisories.values())
        if space_id is not None:
            items = [a for a in items if a["space"]["id"] == space_id]
        if audience is not None:
            items = [a for a in items if a["audience"] == audience]
        return sorted(items, key=lambda a: (PRIORITY_RANK.get(a["priority"], 0),
                                            a["raised_at"]), reverse=True)

    def advisory(self, advisory_id: str) -> dict[str, Any] | None:
        with self.lock:
            return self.advisories.get(advisory_id)


PRIORITY_RANK = {"low": 0, "medium": 1, "high": 2, "urgent": 3}
