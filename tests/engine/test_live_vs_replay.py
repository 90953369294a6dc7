"""Live ticking and batched replay share one code path and give the same events on the
recorded day of the example site."""

from __future__ import annotations

import re

import pytest

from tests.conftest import REPO
from tests.recorded_day import recorded_day
from tests.recorded_day import records as recorded_day_records
from thermowarden.config import load_site
from thermowarden.effects import Publish
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

pytestmark = pytest.mark.long  # out of the fast set (DEVELOPERS.md)

SITE = REPO / "deploy" / "example-site.yaml"
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"
TICK_S = 60.0


@pytest.fixture(scope="module")
def records():
    return recorded_day_records()


def live_style(records):
    """What the service does: each message as it comes, one evaluation per tick."""
    config = load_site(SITE, {})
    model = build_site_model(config)
    names = {n for s in config.spaces for n in config.rule_packs(s)}
    engine = Engine(config, model, load_rule_packs(names, config.rule_dirs, base=str(SITE)),
                    conditions_every_s=0, sample_every_s=0)
    events = []
    next_tick = None
    for rec in records:
        if next_tick is None:
            next_tick = (rec.t // TICK_S) * TICK_S + TICK_S
        while rec.t >= next_tick:
            events += [e.payload for e in engine.tick(next_tick)
                       if isinstance(e, Publish) and "/events/" in e.topic and e.payload]
            next_tick += TICK_S
        engine.message(rec.topic, rec.payload, rec.t)
    events += [e.payload for e in engine.tick(max(next_tick, records[-1].t))
               if isinstance(e, Publish) and "/events/" in e.topic and e.payload]
    return events, engine


def test_live_and_replay_give_the_same_events(records):
    batched = recorded_day(TICK_S)
    live, _ = live_style(records)
    assert len(batched.events) >= 40  # (the recorded day: 50 with the easing heat stress)
    assert [(e["event"], e["at"]) for e in live] == [(e["event"], e["at"]) for e in batched.events]
    # ``seq`` counts the retained records published of an advisory (core/record_order.py):
    # live, a record is republished whenever its numbers change between events; a batched
    # replay publishes none between events. It differs, and only has to keep the order.
    for run in (live, batched.events):
        last: dict[str, int] = {}
        for e in (e for e in run if "advisory" in e):
            a = e["advisory"]
            assert e["seq"] == a["seq"] > last.get(a["id"], -1), (e["event"], a["id"])
            last[a["id"]] = a["seq"]
    assert [_without_seq(e) for e in live] == [_without_seq(e) for e in batched.events]


def _without_seq(event: dict) -> dict:
    """An event without its record order (``seq``, also in its advisory)."""
    out = {k: v for k, v in event.items() if k != "seq"}
    if "advisory" in event:
        out["advisory"] = {k: v for k, v in event["advisory"].items() if k != "seq"}
    return out


def test_no_event_of_the_day_says_numbers_its_condition_contradicts(records):
    """On the shipped day every event but a clearing is rendered with the numbers of its
    moment; a clearing keeps the texts and numbers of the last event at which its condition
    held (before it), so a number with a threshold that a condition without "or" reads is
    on the side it was raised on, and records the values it cleared at, which may be on the
    other side."""
    config = load_site(SITE, {})
    events = recorded_day(None).events
    cleared = [e for e in events if e["event"] == "cleared"]
    assert len(cleared) >= 10
    easing = {"heat_stress.wbgt", "outdoor_heat.outdoor_heat"}
    for e in events:
        adv = e["advisory"]
        if e["event"] != "cleared":
            assert adv["numbers_at"] == e["at"], (e["event"], adv["rule"])
            continue
        values = adv["history"][-1]["values"]
        assert set(values) == set(adv["numbers"])
        if adv["rule"] in easing:
            # a rule with easing texts says that it cleared, with the values it cleared at
            assert adv["numbers_at"] == e["at"] and " cleared in " in adv["title"]
            assert {n: i["value"] for n, i in adv["numbers"].items()} == values
            continue
        assert adv["numbers_at"] < e["at"]
    cleared = [e for e in cleared if e["advisory"]["rule"] not in easing]
    raised = {e["advisory"]["id"]: e["advisory"] for e in events if e["event"] == "raised"}
    names = {n for s in config.spaces for n in config.rule_packs(s)}
    packs = load_rule_packs(names, config.rule_dirs, base=str(SITE))
    # the names each rule's condition reads where every part of it must hold (no "or")
    read = {}
    for rule in (r for pack in packs.values() for r in pack.rules):
        text = " ".join([rule.config.condition or ""] + [lv.when for lv in rule.config.levels])
        words = set(re.findall(r"[a-z_][a-z0-9_]*", text))
        read[rule.key] = set() if "or" in words else words
    crossed = 0
    for e in cleared:
        adv = e["advisory"]
        for name, item in adv["numbers"].items():
            if name not in read[adv["rule"]]:
                continue  # shown for context, not part of the condition
            th, then = item.get("threshold"), item["value"]
            first = raised[adv["id"]]["numbers"][name]["value"]
            now = adv["history"][-1]["values"][name]
            if th is None or then is None or first is None or now is None:
                continue
            assert (then - th) * (first - th) >= 0, (adv["rule"], name)  # the raise's side
            crossed += (now - th) * (first - th) < 0
    assert crossed >= 3  # ... where the values at clearing are on the other side
