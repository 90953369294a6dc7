"""What the web thread shows: its own copies of what the engine thread publishes.

The engine thread hands every batch of effects to :meth:`LiveView.observe` after executing
them; the web thread only ever reads this object (under its lock), never the engine. A
conditions payload is built fresh for every publication, so it is kept as it is; advisory
and event payloads share lists (history) with the engine's advisories and are copied.

:class:`SiteDirectory` holds the site's spaces (with their building, floor or area), rules and
their shelving limits, taken from the configuration before the threads start and built again
after every reload (the web thread then reads the new one: a new space has a page at once,
a removed one is gone from the lists).
"""

from __future__ import annotations

import copy
import threading
from collections import deque
from dataclasses import dataclass, field
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
    building: str | None = None
    floor: str | None = None
    area: str | None = None
    group: str = ""
    """The building and floor (or area) as shown: ``North Building · First floor``; empty
    for a space in no building or area."""
    search: str = ""
    """What a search matches: name, id and group, lower case."""

    @property
    def level(self) -> str | None:
        """The floor or area."""
        return self.floor if self.floor is not None else self.area


@dataclass(frozen=True)
class Level:
    """One row of the roll-up: a building, or a floor or area of one (or a site area)."""

    building: str | None
    level: str | None
    label: str
    spaces: tuple[int, ...]
    """Indices into :attr:`SiteDirectory.spaces`."""


@dataclass(frozen=True)
class SiteDirectory:
    site_id: str
    site_name: str
    timezone: str
    prefix: str
    spaces: tuple[SpaceInfo, ...]
    max_shelve_s: dict[str, float]
    """rule key (pack.rule) -> the longest shelving the rule allows."""
    by_id: dict[str, SpaceInfo] = field(default_factory=dict)
    levels: tuple[Level, ...] = ()
    """Buildings, each followed by its floors and areas, then the site's areas, in the
    order the site lists them; spaces in none are not in any row."""
    followed: frozenset[str] = frozenset()
    """Rule keys (pack.rule) whose rule says how the sensors show its advice carried out
    (``acted_on``): only for these can a page say it was not acted on yet."""

    @classmethod
    def build(cls, config: SiteConfig, max_shelve_s: dict[str, float],
              followed: frozenset[str] = frozenset()) -> SiteDirectory:
        infos = []
        for i, s in enumerate(config.spaces):
            b_name = config.level_name("building", None, s.building)
            level = "floor" if s.floor is not None else "area"
            l_name = config.level_name(level, s.building, s.floor or s.area)
            group = " · ".join(n for n in (b_name, l_name) if n)
            name = s.name or s.id
            infos.append(SpaceInfo(s.id, name, s.kind, bool(s.hot_work), s.ventilation, i,
                                   bool(config.people(s).acclimatised),
                                   s.building, s.floor, s.area, group,
                                   f"{name}\n{s.id}\n{group}".lower()))
        spaces = tuple(infos)
        return cls(config.site.id, config.site.name or config.site.id, config.site.timezone,
                   config.output.prefix, spaces, dict(max_shelve_s),
                   {s.id: s for s in spaces}, _levels(config, spaces), followed)

    def space(self, space_id: str) -> SpaceInfo | None:
        return self.by_id.get(space_id)

    def follows(self, rule: str) -> bool:
        """Whether the sensors can show the advice of ``rule`` (pack.rule) carried out."""
        return rule in self.followed


def _levels(config: SiteConfig, spaces: tuple[SpaceInfo, ...]) -> tuple[Level, ...]:
    """The roll-up's rows: each building, then its floors and areas (declared ones first,
    then any the spaces name), then the areas of the site."""
    members: dict[tuple[str | None, str | None], list[int]] = {}
    for s in spaces:
        if s.building is not None:
            members.setdefault((s.building, None), []).append(s.index)
            if s.level is not None:
                members.setdefault((s.building, s.level), []).append(s.index)
        elif s.area is not None:
            members.setdefault((None, s.area), []).append(s.index)
    order: list[tuple[str | None, str | None]] = []

    def add(key: tuple[str | None, str | None]) -> None:
        if key in order:
            return
        if key[0] is not None and key[1] is not None:
            add((key[0], None))  # a floor goes after the rows of its building
            last = max(i for i, k in enumerate(order) if k[0] == key[0])
            order.insert(last + 1, key)
        else:
            order.append(key)

    floors = {(b.id, f.id) for b in config.buildings for f in b.floors}
    for bld in config.buildings:
        add((bld.id, None))
        for f in (*bld.floors, *bld.areas):
            add((bld.id, f.id))
    for a in config.areas:
        add((None, a.id))
    for key in members:  # levels named only by spaces (a CSV without declared buildings)
        add(key)
    rows = []
    for b, lv in order:
        if lv is None:
            label = config.level_name("building", None, b) or str(b)
        elif b is not None:
            is_floor = (b, lv) in floors or any(spaces[i].floor == lv
                                                for i in members.get((b, lv), ()))
            label = config.level_name("floor" if is_floor else "area", b, lv) or lv
        else:
            label = config.level_name("area", None, lv) or lv
        rows.append(Level(b, lv, label, tuple(members.get((b, lv), ()))))
    return tuple(rows)


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

    def keep_only(self, space_ids: set[str]) -> None:
        """Forget the conditions and advisories of spaces a reload removed."""
        with self.lock:
            for sid in [k for k in self.conditions if k not in space_ids]:
                del self.conditions[sid]
            gone = [aid for aid, a in self.advisories.items()
                    if a["space"]["id"] not in space_ids]
            for aid in gone:
                del self.advisories[aid]
            for topic in [t for t, aid in self.topic_ids.items() if aid in gone]:
                del self.topic_ids[topic]
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
