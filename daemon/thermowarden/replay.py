"""Run the engine offline on a recorded feed, with time taken from the feed.

A feed is JSON lines of ``{"t": epoch seconds or ISO 8601, "topic": "...", "payload": ...}``;
a string payload is sent as its text, anything else as its JSON encoding. Ticks fall every
``evaluation.tick_s`` of feed time, before the first message at or after each tick time.
The same feed gives the same output.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import math
from collections.abc import Callable, Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from thermowarden.config import SiteConfig
from thermowarden.core.ahead_summary import ahead_summary
from thermowarden.core.event_lines import event_line
from thermowarden.core.payloads import DecodeError, parse_timestamp
from thermowarden.effects import Persist, Publish
from thermowarden.engine import Engine
from thermowarden.engine.state import Capture
from thermowarden.rules import CompiledPack, load_rule_packs
from thermowarden.site_model import build_site_model

MAX_BATCH_TICKS = 2160
"""Ticks evaluated together in replay (six hours at 10 s ticks)."""
BATCH_ROWS = 40_000
"""At most this many (space x tick) rows per batch."""
STREAM_BATCH_S = 600.0
"""When events are handed over as they happen, a batch spans at most this much feed time."""


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
        if not isinstance(rec, dict) or "t" not in rec or "topic" not in rec \
                or "payload" not in rec:
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
    """What the audiences received (published events, flood summaries included)."""
    raised_events: list[dict[str, Any]] = field(default_factory=list)
    """Every lifecycle event the engine raised, one line each, whether it was sent or held
    back under a flood summary (the engine's own count)."""
    samples: list[dict[str, Any]] = field(default_factory=list)
    """Report samples (every 5 minutes of feed time), when asked for."""
    rejected: dict[str, int] = field(default_factory=dict)
    foresees: dict[str, tuple[str, str | None]] = field(default_factory=dict)
    """Ahead-of-time rule -> (the rule it foresees, at which priority), for the summary."""
    titles: dict[str, str] = field(default_factory=dict)
    """Rule -> its title (the words the summary shows beside the rule's name)."""
    effect_quantities: dict[str, str] = field(default_factory=dict)
    """Rule -> the index whose change its effectiveness figures are in."""
    messages: int = 0
    start: float = math.nan
    end: float = math.nan


LIFECYCLE_SETTINGS = ("on_delay_s", "off_delay_s", "renotify_s")
"""Rule settings other than parameters that ``--set`` may change."""


class SettingError(ValueError):
    """A ``--set pack.rule.name=value`` that names no rule or parameter."""


def parse_setting(text: str) -> tuple[str, float]:
    """``pack.rule.name=value`` -> (``pack.rule.name``, value)."""
    name, sep, value = text.partition("=")
    if not sep or name.count(".") != 2:
        raise SettingError(f"{text!r}: expected pack.rule.parameter=value")
    try:
        return name.strip(), float(value)
    except ValueError:
        raise SettingError(f"{text!r}: the value must be a number") from None


def apply_settings(engine: Engine, settings: Mapping[str, float]) -> None:
    """Set rule parameters (for every space, over the site's own values) or lifecycle
    delays of the engine's rules; ``settings`` maps ``pack.rule.name`` to the value."""
    rules = {rt.rule.key: rt for rt in engine.rules}
    for name, value in settings.items():
        key, _, param = name.rpartition(".")
        rt = rules.get(key)
        if rt is None:
            raise SettingError(f"--set {name}: no rule {key!r} in this site's packs "
                               f"(known: {', '.join(sorted(rules))})")
        if param in rt.params:
            rt.params[param] = np.full_like(rt.params[param], value)
        elif param in LIFECYCLE_SETTINGS:
            cfg = rt.rule.config.model_copy(update={param: value})
            rt.rule = dataclasses.replace(rt.rule, config=cfg)
        else:
            known = sorted([*rt.params, *LIFECYCLE_SETTINGS])
            raise SettingError(f"--set {name}: rule {key} has no parameter {param!r} "
                               f"(known: {', '.join(known)})")


def replay(config: SiteConfig, records: Iterable[FeedRecord],
           packs: dict[str, CompiledPack] | None = None, base: str | None = None,
           full_events: bool = False, tick_s: float | None = None,
           samples: bool = False, *, settings: Mapping[str, float] | None = None,
           on_batch: Callable[[Engine, ReplayResult], None] | None = None,
           on_event: Callable[[dict[str, Any]], None] | None = None,
           on_tick: Callable[[float, int], None] | None = None) -> ReplayResult:
    """Replay a feed through a fresh engine; collect every published event.

    ``tick_s`` overrides the site's evaluation interval (a coarser tick replays faster;
    delays and windows are still measured in feed time). ``settings`` changes rule
    parameters (see :func:`apply_settings`). Ticks are evaluated in batches; ``on_batch``
    is called after each batch with the engine (``engine.last_batch`` holds the batch's
    snapshot and indices). One-line events carry their time in the site's time zone. With
    ``on_event`` each event is handed over as its batch runs (batches then span at most
    ``STREAM_BATCH_S`` of feed time) and not kept in the result (a failure later in the
    feed loses nothing already handed over); ``on_tick(feed time, messages so far)`` is
    called after every batch with its last evaluation's time.
    """
    model = build_site_model(config)
    if packs is None:
        names = {n for s in config.spaces for n in config.rule_packs(s)}
        packs = load_rule_packs(names, config.rule_dirs, base=base)
    # no broker to keep retained messages on: conditions and the periodic republication
    # of live advisories are left out (events do not depend on either)
    engine = Engine(config, model, packs, conditions_every_s=0, advisory_refresh_s=0,
                    sample_every_s=300.0 if samples else 0.0)
    if settings:
        apply_settings(engine, settings)
    tick_s = tick_s or config.evaluation.tick_s
    result = ReplayResult()
    result.foresees = {rt.rule.key: (f.rule, f.priority) for rt in engine.rules
                       if (f := rt.rule.config.foresees) is not None}
    result.titles = {rt.rule.key: rt.rule.config.title for rt in engine.rules}
    result.effect_quantities = {rt.rule.key: e.quantity for rt in engine.rules
                                if (e := rt.rule.config.effect) is not None}
    next_tick: float | None = None
    batch = max(1, min(MAX_BATCH_TICKS, BATCH_ROWS // max(model.n_spaces, 1)))
    captures: list[Capture] = []

    tz = engine.state.tz

    def run_ticks() -> None:
        for eff in engine.tick_many(captures):
            if isinstance(eff, Publish) and "/events/" in eff.topic and eff.payload:
                event = eff.payload if full_events else event_line(eff.payload, tz)
                if on_event is not None:
                    on_event(event)
                else:
                    result.events.append(event)
            elif isinstance(eff, Persist) and eff.kind == "sample" and eff.record:
                result.samples.append(eff.record)
            elif (isinstance(eff, Persist) and eff.kind == "event" and eff.record
                  and eff.record.get("event") != "summary"):
                result.raised_events.append(eff.record if full_events
                                            else event_line(eff.record, tz))
        last = captures[-1].now if captures else None
        captures.clear()
        if on_batch is not None:
            on_batch(engine, result)
        if on_tick is not None and last is not None:
            on_tick(last, result.messages)

    last_t = None
    # the messages between two ticks go in as one run, as the service takes what arrived
    # between its evaluations (Engine.messages: the same result as one by one)
    pending: list[tuple[str, bytes, float, bool]] = []
    add = pending.append
    for rec in records:
        t = rec.t
        if next_tick is None:
            next_tick = math.floor(t / tick_s) * tick_s + tick_s
            result.start = t
        if t >= next_tick:
            result.messages += len(pending)
            engine.messages(pending)
            pending.clear()
            while t >= next_tick:
                captures.append(engine.capture(next_tick))
                if len(captures) >= batch or (on_event is not None
                                              and next_tick - captures[0].now >= STREAM_BATCH_S):
                    run_ticks()
                next_tick += tick_s
        add((rec.topic, rec.payload, t, False))
        last_t = t
    result.messages += len(pending)
    engine.messages(pending)
    if last_t is not None and next_tick is not None:
        captures.append(engine.capture(max(next_tick, last_t)))
        run_ticks()
        result.end = last_t
    result.rejected = dict(engine.ingest.rejected_by_reason())
    return result


ORDER = ("low", "medium", "high", "urgent")


def _ts(s: str) -> float:

    return dt.datetime.fromisoformat(s.replace("Z", "+00:00")).timestamp()


def summarise(result: ReplayResult) -> dict[str, Any]:
    """What a replay means for the people receiving it.

    ``rules``: per rule and audience, advisories raised (by the engine, whether notified or
    held back in a flood summary), cleared, still live, time active. ``audiences``: per
    audience, the notifications sent (flood summaries count one each), per day, in the
    busiest 10 minutes, how many were reminders, and what was raised but held back.
    ``standing``: the advisories that stood longest. ``effectiveness``: per rule and space,
    advice given, followed (and how soon), helped (cleared within the rule's expected
    time), and the realised change of the target quantity against the predicted one.
    ``ahead_of_time``: per ahead-of-time rule, the crossings it foresaw and missed and its
    lead times (:mod:`thermowarden.core.ahead_summary`).
    """
    engine_events = [event_line(x) if "schema" in x else x
                     for x in result.raised_events] or [
        event_line(x) if "schema" in x else x for x in result.events
        if (x.get("event") if "schema" not in x else x["event"]) != "summary"]
    sent = [event_line(x) if "schema" in x else x for x in result.events]
    rules: dict[str, dict[str, Any]] = {}
    open_at: dict[str, tuple[float, dict[str, Any]]] = {}
    standing: list[dict[str, Any]] = []
    effect: dict[tuple[str, str], dict[str, Any]] = {}
    for e in engine_events:
        key = f"{e['rule']}|{e['audience']}"
        r = rules.setdefault(key, {"rule": e["rule"], "title": result.titles.get(e["rule"]),
                                   "audience": e["audience"], "raised": 0,
                                   "cleared": 0, "active_s": [], "max_priority": "low"})
        if ORDER.index(e["priority"]) > ORDER.index(r["max_priority"]):
            r["max_priority"] = e["priority"]
        if e["event"] == "raised":
            r["raised"] += 1
            open_at[e["advisory_id"]] = (_ts(e["at"]), e)
        elif e["event"] == "cleared":
            r["cleared"] += 1
            opened = open_at.pop(e["advisory_id"], None)
            if opened is not None:
                r["active_s"].append(_ts(e["at"]) - opened[0])
                standing.append({"advisory_id": e["advisory_id"], "space": e["space"],
                                 "rule": e["rule"], "raised": opened[1]["at"],
                                 "cleared": e["at"],
                                 "minutes": round((_ts(e["at"]) - opened[0]) / 60, 1)})
            acted = e.get("acted_on")
            eff = effect.setdefault((e["rule"], e["space"]), {
                "rule": e["rule"], "space": e["space"],
                "quantity": result.effect_quantities.get(e["rule"]), "given": 0, "followed": 0,
                "minutes_to_follow": [], "helped": 0, "predicted_change": [],
                "realised_change": []})
            eff["given"] += 1
            if acted:
                eff["followed"] += 1
                if acted.get("minutes_after_raised") is not None:
                    eff["minutes_to_follow"].append(acted["minutes_after_raised"])
                if acted.get("helped"):
                    eff["helped"] += 1
                change = acted.get("effect") or {}
                if change.get("predicted_change") is not None:
                    eff["predicted_change"].append(change["predicted_change"])
                if change.get("realised_change") is not None:
                    eff["realised_change"].append(change["realised_change"])
    end = result.end if math.isfinite(result.end) else None
    for adv_id, (t0, e) in open_at.items():
        standing.append({"advisory_id": adv_id, "space": e["space"], "rule": e["rule"],
                         "raised": e["at"], "cleared": None,
                         "minutes": round((end - t0) / 60, 1) if end is not None else None})
    out_rules = []
    for r in sorted(rules.values(), key=lambda x: (x["audience"], x["rule"])):
        d = r.pop("active_s")
        r["mean_active_min"] = round(sum(d) / len(d) / 60, 1) if d else None
        r["max_active_min"] = round(max(d) / 60, 1) if d else None
        r["still_active"] = r["raised"] - r["cleared"]
        out_rules.append(r)
    audiences: dict[str, dict[str, Any]] = {}
    for aud in sorted({e["audience"] for e in sent} | {e["audience"] for e in engine_events}):
        mine = [e for e in sent if e["audience"] == aud]
        times = sorted(_ts(e["at"]) for e in mine)
        busiest = 0
        j = 0
        for k, t in enumerate(times):
            while times[j] <= t - 600.0:
                j += 1
            busiest = max(busiest, k - j + 1)
        days = max(1.0, ((result.end - result.start) / 86400.0)
                   if math.isfinite(result.end) and math.isfinite(result.start) else 1.0)
        raised_here = [e for e in engine_events if e["audience"] == aud]
        sent_ids = {(e.get("advisory_id"), e["event"], e["at"]) for e in mine}
        unsent = [e for e in raised_here
                  if (e.get("advisory_id"), e["event"], e["at"]) not in sent_ids]
        # an ahead-of-time advisory that turned into the advisory it foresaw ends without a
        # message of its own (that advisory's message says it); not a flood's doing
        turned = sum(1 for e in unsent if e.get("turned_into"))
        audiences[aud] = {
            "notifications": len(mine),
            "notifications_per_day": round(len(mine) / days, 1),
            "busiest_10_min": busiest,
            "renotifications": sum(1 for e in mine if e["event"] == "renotified"),
            "flood_summaries": sum(1 for e in mine if e["event"] == "summary"),
            "events_raised_by_engine": len(raised_here),
            "held_back_in_summaries": len(unsent) - turned,
            "ended_by_turning_into_foreseen": turned,
        }
    effectiveness = []
    for eff in sorted(effect.values(), key=lambda x: (x["rule"], x["space"])):
        if eff["followed"] == 0 and not any(e["rule"] == eff["rule"] and e.get("acted_on")
                                            for e in engine_events):
            continue
        m, p, rz = eff.pop("minutes_to_follow"), eff.pop("predicted_change"), eff.pop(
            "realised_change")
        eff["mean_minutes_to_follow"] = round(sum(m) / len(m), 1) if m else None
        eff["mean_predicted_change"] = round(sum(p) / len(p), 2) if p else None
        eff["mean_realised_change"] = round(sum(rz) / len(rz), 2) if rz else None
        effectiveness.append(eff)
    standing.sort(key=lambda x: -(x["minutes"] or 0))
    hours = ((result.end - result.start) / 3600.0
             if math.isfinite(result.end) and math.isfinite(result.start) else None)
    return {"messages": result.messages,
            "feed_hours": round(hours, 2) if hours is not None else None,
            "rejected": result.rejected, "rules": out_rules,
            "notifications_by_audience": {a: v["notifications"] for a, v in audiences.items()},
            "audiences": audiences, "standing": standing[:5],
            "effectiveness": effectiveness,
            "ahead_of_time": ahead_summary(engine_events, result.foresees, None)}


RULE_FIGURES = ("raised", "cleared", "still_active", "max_active_min")
"""What ``--compare`` puts side by side per rule and audience: ``summarise``'s own figures."""
AUDIENCE_FIGURES = ("notifications", "renotifications", "busiest_10_min", "flood_summaries",
                    "held_back_in_summaries")
"""What ``--compare`` puts side by side per audience: ``summarise``'s own figures."""


def compare(a: ReplayResult, b: ReplayResult) -> dict[str, list[dict[str, Any]]]:
    """Side by side, replay ``a`` and replay ``b`` (the same feed, other settings), counted
    exactly as :func:`summarise` counts each: per rule and audience the advisories raised by
    the engine (sent or held back under a flood summary), cleared, active at the end and
    the longest time active; per audience the notifications sent, reminders, the busiest
    10 minutes, flood summaries and events held back in them. A rule or audience present in
    one replay only is shown with zeros (no figure) in the other."""
    sa, sb = summarise(a), summarise(b)

    def keyed(s: dict[str, Any]) -> dict[tuple[str, str], dict[str, Any]]:
        return {(r["rule"], r["audience"]): r for r in s["rules"]}

    ra, rb = keyed(sa), keyed(sb)
    rules = []
    for key in sorted(set(ra) | set(rb), key=lambda k: (k[1], k[0])):
        x, y = ra.get(key, {}), rb.get(key, {})
        pairs = {f: (x.get(f, 0 if f != "max_active_min" else None),
                     y.get(f, 0 if f != "max_active_min" else None)) for f in RULE_FIGURES}
        rules.append({"rule": key[0], "audience": key[1],
                      "title": x.get("title") or y.get("title"), **pairs,
                      "changed": any(p != q for p, q in pairs.values())})
    audiences = []
    for aud in sorted(set(sa["audiences"]) | set(sb["audiences"])):
        x, y = sa["audiences"].get(aud, {}), sb["audiences"].get(aud, {})
        pairs = {f: (x.get(f, 0), y.get(f, 0)) for f in AUDIENCE_FIGURES}
        audiences.append({"audience": aud, **pairs,
                          "changed": any(p != q for p, q in pairs.values())})
    return {"rules": rules, "audiences": audiences}


def replay_coverage(config: SiteConfig, records: Iterable[FeedRecord],
                    base: str | None = None, tick_s: float | None = None
                    ) -> tuple[ReplayResult, dict[str, Any]]:
    """Replay a feed and say, per rule, whether it raised an advisory, how often, what its
    audience received against its allowance, and for a rule that never raised one, why
    (:mod:`thermowarden.coverage`); per audience, the notifications against the sum of
    its rules' allowances and the busiest 10 minutes."""
    from thermowarden.coverage import Coverage, audience_figures

    cov = Coverage()
    result = replay(config, records, base=base, full_events=True, tick_s=tick_s,
                    on_batch=cov.on_batch)
    feed_s = (result.end - result.start) if math.isfinite(result.end) else 0.0
    rules = cov.finish(result.raised_events, result.events, feed_s)
    summary = summarise(result)
    return result, {"feed_hours": summary["feed_hours"],
                    "rules": [r.as_dict() for r in rules],
                    "audiences": audience_figures(rules, summary)}
