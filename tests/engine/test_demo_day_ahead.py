"""The demo's day (simulated_feeds/larkfield.py ``demo_day``: the recorded day, then a night
bake in the bakery to 23:00) replayed on the example site as the demo runs it (the site's own
10 s tick): it shows each outcome of the advice ahead of time (issue 29: "the demo shows
one of each") and keeps the issue's promises (none left standing, no other event changed).
The demo itself, through a broker, is run by tests/test_demo_simulate.py."""

from __future__ import annotations

import datetime as dt
import gzip
import io
import json
import zoneinfo
from collections import Counter
from typing import Any

import pytest
from thermowarden.simulated_feeds.larkfield import DAY, demo_day, night_bake

from tests.conftest import REPO
from thermowarden.config import SiteConfig, load_site
from thermowarden.core.ahead_summary import in_words
from thermowarden.replay import ReplayResult, read_feed, replay, summarise

SITE = REPO / "deploy" / "example-site.yaml"
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"
TZ = zoneinfo.ZoneInfo("Europe/London")


def local(hh: int, mm: int) -> float:
    return dt.datetime.combine(DAY, dt.time(hh, mm), TZ).timestamp()


def ts(at: str) -> float:
    return dt.datetime.fromisoformat(at.replace("Z", "+00:00")).timestamp()


def without_ahead(config: SiteConfig) -> SiteConfig:
    spaces = [s.model_copy(update={"rule_packs": [p for p in s.rule_packs if p != "ahead"]})
              if s.rule_packs is not None else s for s in config.spaces]
    return config.model_copy(update={"spaces": spaces})


@pytest.fixture(scope="module")
def day_records() -> list[dict[str, Any]]:
    return list(demo_day())


@pytest.fixture(scope="module")
def days(day_records: list[dict[str, Any]]) -> tuple[ReplayResult, ReplayResult]:
    text = "".join(json.dumps(r) + "\n" for r in day_records)
    feed = list(read_feed(io.StringIO(text), "demo day"))
    config = load_site(SITE, {})
    with_ahead = replay(config, feed, base=str(SITE), full_events=True)
    plain = replay(without_ahead(config), feed, base=str(SITE), full_events=True)
    return with_ahead, plain


def by_rule(events: list[dict[str, Any]], rule: str, space: str) -> list[dict[str, Any]]:
    return [e for e in events if e["event"] != "summary"
            and e["advisory"]["rule"] == rule and e["advisory"]["space"]["id"] == space]


def test_the_demo_day_is_the_recorded_day_until_it_ends(day_records) -> None:
    """Every test of the recorded day holds for the demo's day up to 20:00: the night bake
    only adds readings after the recorded feed's last."""
    with gzip.open(FEED, "rt", encoding="utf-8") as fh:
        recorded = [json.loads(line) for line in fh]
    assert day_records[:len(recorded)] == recorded
    night = day_records[len(recorded):]
    assert night and min(r["t"] for r in night) > recorded[-1]["t"]
    assert max(r["t"] for r in night) < local(23, 0)


def test_the_demo_day_shows_one_of_each(days) -> None:
    day, _ = days
    events = day.raised_events  # every lifecycle event, sent or held back
    ahead = by_rule(events, "ahead.wbgt_action", "bakery-floor")
    alert = by_rule(events, "heat_stress.wbgt", "bakery-floor")
    night = local(20, 0)
    ahead_night = [e for e in ahead if ts(e["at"]) >= night]
    alert_night = [e for e in alert if ts(e["at"]) >= night]

    # withdrawn: the rise of the oven heating up foreseen, then the advisory ended by its own
    # condition (sent to safety), with no crossing of the action value while it stood
    raised = [e for e in ahead_night if e["event"] == "raised"]
    assert raised and raised[0]["advisory"]["audience"] == "safety"
    first = raised[0]["advisory"]["id"]
    ends = [e for e in ahead_night if e["event"] == "cleared"
            and e["advisory"]["id"] == first]
    assert len(ends) == 1
    assert not (ends[0]["advisory"].get("history") or [{}])[-1].get("turned_into")
    assert ts(ends[0]["at"]) < local(21, 0)
    assert any(e["event"] == "cleared" and e["advisory"]["id"] == first for e in day.events)
    assert not [e for e in alert_night if e["advisory"]["priority"] in ("high", "urgent")
                and ts(e["at"]) <= ts(ends[0]["at"])]

    # no warning: the steam vent sticks open at 21:30 and the 60-minute WBGT is over the
    # action value within two minutes; no ahead-of-time advisory for the action value stood
    # in the hour before
    crossing = [e for e in alert_night if e["event"] in ("raised", "escalated")
                and e["advisory"]["priority"] == "high"]
    assert crossing
    t = ts(crossing[0]["at"])
    assert local(21, 30) <= t <= local(21, 32)
    assert night_bake(21.5)["tnw"] - night_bake(21.45)["tnw"] > 10  # a step, not a trend
    assert not [e for e in ahead if e["event"] == "raised" and t - 3600 <= ts(e["at"]) <= t]

    # foreseen: the day's crossings before the night bake (as on the recorded day)
    summary = {r["rule"]: r for r in summarise(day)["ahead_of_time"]}
    action = summary["ahead.wbgt_action"]
    assert action["foreseen"] >= 2 and action["lead_min"]["min"] >= 15
    assert action["withdrawn"] >= 1 and action["unwarned"] == 1
    assert action["unwarned_crossings"][0]["space"] == "bakery-floor"
    assert action["crossings"] == action["foreseen"] + action["unwarned"]
    for r in summary.values():
        assert r["live_at_end"] == 0, r
        assert r["ahead_advisories"] == r["foreseen"] + r["withdrawn"] + r["acted_on"], r

    # and the demo's summary says so in words
    words = " ".join(in_words(list(summary.values()), day.titles, TZ))
    assert "Heat stress expected (ahead.wbgt_action): 3 crossings of Heat stress at high " \
           "priority: 2 foreseen at least" in words
    assert "1 with no warning (bakery-floor at 21:30)" in words
    assert "withdrawn when the forecast no longer held, with no crossing after it" in words


def test_on_the_demo_day_the_ahead_messages_change_nothing_else(days) -> None:
    day, plain = days
    with_ahead = summarise(day)["notifications_by_audience"]
    without = summarise(plain)["notifications_by_audience"]
    ahead_sent = Counter(e["advisory"]["audience"] for e in day.events
                         if e["event"] != "summary"
                         and e["advisory"]["rule"].startswith("ahead."))
    for audience in with_ahead.keys() | without.keys():
        assert with_ahead.get(audience, 0) - without.get(audience, 0) == ahead_sent[audience]

    def others(r: ReplayResult) -> list[tuple[str, str, str, str]]:
        return [(e["at"], e["event"], e["advisory"]["id"], e["advisory"]["priority"])
                for e in r.events if e["event"] != "summary"
                and not e["advisory"]["rule"].startswith("ahead.")]

    assert others(day) == others(plain)
    # the night's heat-stress alert eases and clears before the day ends
    night = [e for e in by_rule(day.events, "heat_stress.wbgt", "bakery-floor")
             if ts(e["at"]) >= local(20, 0)]
    assert night and night[-1]["event"] == "cleared"


def test_in_words_names_each_outcome() -> None:
    figures = [{"rule": "ahead.x", "foresees": "pack.y at high", "ahead_advisories": 4,
                "crossings": 3, "foreseen": 2, "lead_min": {"min": 17.4, "median": 30.6},
                "withdrawn": 1, "acted_on": 1, "live_at_end": 0, "not_followed_by_crossing": 2,
                "unwarned": 1, "unwarned_crossings": [
                    {"space": "floor", "at": "2026-07-14T20:30:50+00:00", "advisory_id": "a"}]},
               {"rule": "ahead.z", "foresees": "pack.w", "ahead_advisories": 0,
                "crossings": 0, "foreseen": 0, "lead_min": None, "withdrawn": 0,
                "acted_on": 0, "live_at_end": 0, "not_followed_by_crossing": 0,
                "unwarned": 0, "unwarned_crossings": []}]
    assert in_words(figures, {"ahead.x": "X expected", "pack.y": "Y"}, TZ) == [
        "X expected (ahead.x): 3 crossings of Y at high priority: 2 foreseen at least 17 "
        "minutes ahead (median 31), 1 with no warning (floor at 21:30); 4 advisories ahead "
        "of time: 1 withdrawn when the forecast no longer held, with no crossing after it, "
        "1 acted on before a crossing."]
