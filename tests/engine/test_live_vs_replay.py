"""Live ticking and batched replay share one code path and give the same events on the
recorded day of the example site."""

from __future__ import annotations

import gzip

import pytest

from tests.conftest import REPO
from thermowarden.config import load_site
from thermowarden.effects import Publish
from thermowarden.engine import Engine
from thermowarden.replay import read_feed, replay
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

SITE = REPO / "deploy" / "example-site.yaml"
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"
TICK_S = 60.0


@pytest.fixture(scope="module")
def records():
    with gzip.open(FEED, "rt", encoding="utf-8") as fh:
        return list(read_feed(fh, str(FEED)))


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
    config = load_site(SITE, {})
    batched = replay(config, records, base=str(SITE), full_events=True, tick_s=TICK_S)
    live, _ = live_style(records)
    assert len(batched.events) > 50
    assert [(e["event"], e["at"]) for e in live] == [(e["event"], e["at"]) for e in batched.events]
    assert live == batched.events
