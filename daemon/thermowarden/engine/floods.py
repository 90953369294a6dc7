"""Notification floods and the daily digest, per audience.

No audience gets more than ``flood_limit`` notifications in any ``flood_window_s``: beyond
the limit a notification is held back (urgent ones always go out at once), and what was held
back goes out as one summary per flood, updated at most every ``flood_summary_interval_s``.
The daily digest counts what was raised and cleared since the last one.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Sequence
from typing import Any

from thermowarden.config.rule_packs import AUDIENCES
from thermowarden.config.site import SiteConfig
from thermowarden.core.json_values import iso
from thermowarden.effects import Effect
from thermowarden.engine.advisory import Advisory
from thermowarden.engine.publication import EVENT_SCHEMA, Publication


class Floods:
    """Per audience: the notification times in the flood window, what is held back, the
    flood in progress, and the counts for the digest."""

    def __init__(self, config: SiteConfig, publication: Publication) -> None:
        self.site_id = config.site.id
        self.pub = publication
        self.flood_limit = config.evaluation.flood_limit
        self.flood_window_s = config.evaluation.flood_window_s
        self.flood: dict[str, deque[float]] = {a: deque() for a in AUDIENCES}
        self.suppressed: dict[str, list[dict[str, Any]]] = {a: [] for a in AUDIENCES}
        self.last_summary: dict[str, float] = dict.fromkeys(AUDIENCES, -math.inf)
        self.summary_interval_s = config.evaluation.flood_summary_interval_s
        self.episode: dict[str, dict[str, Any] | None] = dict.fromkeys(AUDIENCES)
        """Per audience, the flood in progress: its id, since when, the summary updates
        sent and the notifications held back in it (None: no flood)."""
        self.raised_count: dict[str, int] = dict.fromkeys(AUDIENCES, 0)
        self.cleared_count: dict[str, int] = dict.fromkeys(AUDIENCES, 0)

    def count(self, event: str, audience: str) -> None:
        """An event of an advisory of ``audience``, for the digest."""
        if event == "raised":
            self.raised_count[audience] += 1
        elif event == "cleared":
            self.cleared_count[audience] += 1

    def admit(self, audience: str, priority: str, now: float, payload: dict[str, Any]) -> bool:
        """Whether the notification ``payload`` goes out now (counted in the window), or is
        held back for the flood's summary (False)."""
        window = self.window(audience, now)
        # the last place in the window is kept for the flood's summary, so that with it no
        # audience gets more than flood_limit notifications in any flood_window_s (urgent
        # ones always go out at once)
        if len(window) >= self.flood_limit - 1 and priority != "urgent":
            self.suppressed[audience].append(payload)
            return False
        window.append(now)
        return True

    def window(self, audience: str, now: float) -> deque[float]:
        """The audience's notification times within the last ``flood_window_s``."""
        window = self.flood[audience]
        while window and window[0] < now - self.flood_window_s:
            window.popleft()
        return window

    def flush_summaries(self, now: float, effects: list[Effect]) -> None:
        """Notifications held back by the flood limit go out as one summary per audience
        and flood, updated (with what was held back since) at most every
        ``flood_summary_interval_s`` and only where the flood window has room for it; a
        flood ends when an interval has passed after its last update with nothing held."""
        for audience, held in self.suppressed.items():
            episode = self.episode[audience]
            if not held:
                if episode is not None and \
                        now - self.last_summary[audience] >= self.summary_interval_s:
                    self.episode[audience] = None  # the flood is over
                continue
            if now - self.last_summary[audience] < self.summary_interval_s:
                continue
            window = self.window(audience, now)
            if len(window) >= self.flood_limit:
                continue
            if episode is None:
                episode = {"id": f"{self.site_id}.flood.{audience}.{int(now)}",
                           "since": held[0]["at"], "update": 0, "held_total": 0}
                self.episode[audience] = episode
            episode["update"] += 1
            episode["held_total"] += len(held)
            self.last_summary[audience] = now
            window.append(now)
            items = [{"event": p["event"], "advisory_id": p["advisory"]["id"],
                      "space": p["advisory"]["space"]["id"], "rule": p["advisory"]["rule"],
                      "priority": p["advisory"]["priority"], "title": p["advisory"]["title"],
                      "at": p["at"]} for p in held]
            every = self.summary_interval_s / 60
            payload = {"schema": EVENT_SCHEMA, "event": "summary", "at": iso(now),
                       "audience": audience, "count": len(items), "items": items,
                       "flood": {"episode": episode["id"], "since": episode["since"],
                                 "update": episode["update"],
                                 "held_total": episode["held_total"],
                                 "next_update_after": iso(now + self.summary_interval_s)},
                       "note": f"a flood of notifications to {audience} (more than "
                               f"{self.flood_limit - 1} in {self.flood_window_s / 60:g} "
                               f"minutes): {len(items)} held back since the last update, "
                               f"{episode['held_total']} since {episode['since']}; this "
                               f"summary is update {episode['update']} of one per flood, "
                               f"updated at most every {every:g} minutes while it lasts; "
                               "urgent notifications always go out at once"}
            self.suppressed[audience] = []
            payload["event_id"] = f"{self.site_id}.summary.{audience}.{now:.3f}"
            effects.extend(self.pub.site_event(audience, payload,
                                               f"summary.{audience}.{int(now)}"))

    def digest(self, now: float, since: float, live: list[Advisory],
               space_ids: Sequence[str]) -> list[Effect]:
        """One daily summary event per audience: what was raised and cleared since
        ``since``, and what is still ``live``."""
        effects: list[Effect] = []
        for audience in self.flood:
            mine = [a for a in live if a.audience == audience]
            items = [{"event": "live", "advisory_id": a.id,
                      "space": space_ids[a.space], "rule": a.rule,
                      "priority": a.priority, "title": a.title, "at": iso(a.updated_at)}
                     for a in mine]
            payload = {"schema": EVENT_SCHEMA, "event": "summary", "at": iso(now),
                       "audience": audience, "count": max(len(items), 1),
                       "items": items, "digest": {
                           "since": iso(since), "live": len(mine),
                           "raised": self.raised_count[audience],
                           "cleared": self.cleared_count[audience]},
                       "note": "daily digest"}
            self.raised_count[audience] = 0
            self.cleared_count[audience] = 0
            payload["event_id"] = f"{self.site_id}.digest.{audience}.{now:.3f}"
            effects.extend(self.pub.site_event(audience, payload,
                                               f"digest.{audience}.{int(now)}"))
        return effects

    def shift(self, step_s: float) -> None:
        """Move the flood windows and the summary schedule by a step of the wall clock."""
        for audience, window in self.flood.items():
            self.flood[audience] = deque((t + step_s for t in window), window.maxlen)
        for audience, last in self.last_summary.items():
            self.last_summary[audience] = last + step_s

    def carry(self, old: Floods) -> None:
        """Take over the floods and counts of ``old`` (a reload)."""
        self.flood = {a: deque(v) for a, v in old.flood.items()}
        self.suppressed = {a: list(v) for a, v in old.suppressed.items()}
        self.last_summary = dict(old.last_summary)
        self.episode = {a: (dict(v) if v is not None else None) for a, v in old.episode.items()}
        self.raised_count = dict(old.raised_count)
        self.cleared_count = dict(old.cleared_count)
