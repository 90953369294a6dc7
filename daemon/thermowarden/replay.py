"""Run the engine offline on a recorded feed, with time taken from the feed.

A feed is JSON lines of ``{"t": epoch seconds or ISO 8601, "topic": "...", "payload": ...}``;
a string payload is sent as its text, anything else as its JSON encoding. Ticks fall every
``evaluation.tick_s`` of feed time, before the first message at or after each tick time.
The same feed gives the same output.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from typing import Any

from thermowarden.config import SiteConfig
from thermowarden.core.payloads import DecodeError, parse_timestamp
from thermowarden.effects import Persist, Publish
from thermowarden.engine import Engine
from thermowarden.rules import CompiledPack, load_rule_packs
from thermowarden.site_model import build_site_model


class FeedError(ValueError):
    """A feed line that cannot be read; names the line."""


@dataclass(frozen=True)
class FeedRecord:
    t: float
    topic: str
    payload: bytes


def read_feed(lines: Iterable[str], name: str = "feed") -> Iterator[FeedRecord]:
    """Parse feed lines; blank lines and lines starting with # are skipped."""
    for no, line in enumerate(lines, start=1):
        text = line.strip()
        if not text or text.startswith("#"):
            continue
        try:
            rec = json.loads(text)
        except ValueError:
            raise FeedError(f"{name}:{no}: not a JSON object") from None
        if not isinstance(rec, dict) or not {"t", "topic", "payload"} <= set(rec):
            raise FeedError(f"{name}:{no}: expected an object with t, topic and payload")
        try:
            t = parse_timestamp(rec["t"])
        except DecodeError as exc:
            raise FeedError(f"{name}:{no}: t: {exc.detail}") from None
        if not isinstance(rec["topic"], str) or not rec["topic"]:
            raise FeedError(f"{name}:{no}: topic must be a non-empty string")
        p = rec["payload"]
        payload = p.encode("utf-8") if isinstance(p, str) else json.dumps(p).encode("utf-8")
        yield FeedRecord(t, rec["topic"], payload)


@dataclass
class ReplayResult:
    events: list[dict[str, Any]] = field(default_factory=list)
    samples: list[dict[str, Any]] = field(default_factory=list)
    """Report samples (every 5 minutes of feed time), when asked for."""
    rejected: dict[str, int] = field(default_factory=dict)
    messages: int = 0
    start: float = math.nan
    end: float = math.nan


def event_line(payload: dict[str, Any]) -> dict[str, Any]:
    """The one-line form of an event: when, what, where, which rule, who, how urgent."""
    if payload["event"] == "summary":
        return {"at": payload["at"], "event": "summary", "space": None, "rule": None,
                "audience": payload["audience"], "priority": None, "count": payload["count"]}
    adv = payload["advisory"]
    return {"at": payload["at"], "event": payload["event"], "space": adv["space"]["id"],
            "rule": adv["rule"], "audience": adv["audience"], "priority": adv["priority"],
            "advisory_id": adv["id"], "title": adv["title"]}


def replay(config: SiteConfig, records: Iterable[FeedRecord],
           packs: dict[str, CompiledPack] | None = None, base: str | None = None,
           full_events: bool = False, tick_s: float | None = None,
           samples: bool = False) -> ReplayResult:
    """Replay a feed through a fresh engine; collect every published event.

    ``tick_s`` overrides the site's evaluation interval (a coarser tick replays faster;
    delays and windows are still measured in feed time).
    """
    model = build_site_model(config)
    if packs is None:
        names = {n for s in config.spaces for n in config.rule_packs(s)}
        packs = load_rule_packs(names, config.rule_dirs, base=base)
    engine = Engine(config, model, packs, conditions_every_s=0,
                    sample_every_s=300.0 if samples else 0.0)
    tick_s = tick_s or config.evaluation.tick_s
    result = ReplayResult()
    next_tick: float | None = None

    def run_tick(t: float) -> None:
        for eff in engine.tick(t):
            if isinstance(eff, Publish) and "/events/" in eff.topic and eff.payload:
                result.events.append(eff.payload if full_events else event_line(eff.payload))
            elif isinstance(eff, Persist) and eff.kind == "sample" and eff.record:
                result.samples.append(eff.record)

    last_t = None
    for rec in records:
        if next_tick is None:
            next_tick = math.floor(rec.t / tick_s) * tick_s + tick_s
            result.start = rec.t
        while rec.t >= next_tick:
            run_tick(next_tick)
            next_tick += tick_s
        engine.message(rec.topic, rec.payload, rec.t)
        result.messages += 1
        last_t = rec.t
    if last_t is not None and next_tick is not None:
        run_tick(max(next_tick, last_t))
        result.end = last_t
    result.rejected = dict(engine.ingest.rejected_by_reason())
    return result


def summarise(result: ReplayResult) -> dict[str, Any]:
    """Per rule and audience: advisories raised, how long they stayed active, and how many
    notifications each audience would have received."""
    import datetime as dt

    def ts(s: str) -> float:
        return dt.datetime.fromisoformat(s.replace("Z", "+00:00")).timestamp()

    rules: dict[str, dict[str, Any]] = {}
    open_at: dict[str, float] = {}
    notifications: dict[str, int] = {}
    for e in (event_line(x) if "schema" in x else x for x in result.events):
        notifications[e["audience"]] = notifications.get(e["audience"], 0) + 1
        if e["event"] == "summary":
            continue
        key = f"{e['rule']}|{e['audience']}"
        r = rules.setdefault(key, {"rule": e["rule"], "audience": e["audience"], "raised": 0,
                                   "cleared": 0, "active_s": [], "max_priority": "low"})
        order = ("low", "medium", "high", "urgent")
        if order.index(e["priority"]) > order.index(r["max_priority"]):
            r["max_priority"] = e["priority"]
        if e["event"] == "raised":
            r["raised"] += 1
            open_at[e["advisory_id"]] = ts(e["at"])
        elif e["event"] == "cleared":
            r["cleared"] += 1
            start = open_at.pop(e["advisory_id"], None)
            if start is not None:
                r["active_s"].append(ts(e["at"]) - start)
    out_rules = []
    for r in sorted(rules.values(), key=lambda x: (x["audience"], x["rule"])):
        d = r.pop("active_s")
        r["mean_active_min"] = round(sum(d) / len(d) / 60, 1) if d else None
        r["max_active_min"] = round(max(d) / 60, 1) if d else None
        r["still_active"] = r["raised"] - r["cleared"]
        out_rules.append(r)
    return {"messages": result.messages, "rejected": result.rejected, "rules": out_rules,
            "notifications_by_audience": dict(sorted(notifications.items()))}
