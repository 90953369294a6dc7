"""Measured, not promised: the ahead-of-time advisories on the shipped day replayed
(simulated_feeds/recorded/larkfield-day.jsonl.gz with deploy/example-site.yaml), through
``replay`` and its ``--summary``."""

from __future__ import annotations

import datetime as dt
from collections import Counter

import pytest

from tests.conftest import REPO
from tests.recorded_day import cli_replay_json, recorded_day, records
from thermowarden.config import SiteConfig, load_site
from thermowarden.replay import ReplayResult, replay, summarise

SITE = REPO / "deploy" / "example-site.yaml"
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"


def run(config: SiteConfig) -> ReplayResult:
    return replay(config, records(), base=str(SITE), full_events=True)


def without_ahead(config: SiteConfig) -> SiteConfig:
    spaces = [s.model_copy(update={"rule_packs": [p for p in s.rule_packs if p != "ahead"]})
              if s.rule_packs is not None else s for s in config.spaces]
    return config.model_copy(update={"spaces": spaces})


@pytest.fixture(scope="module")
def days() -> tuple[ReplayResult, ReplayResult]:
    return recorded_day(None), run(without_ahead(load_site(SITE, {})))


def ts(at: str) -> float:
    return dt.datetime.fromisoformat(at).timestamp()


def by_rule(result: ReplayResult, rule: str, space: str) -> list[dict]:
    return [e for e in result.events if e["event"] != "summary"
            and e["advisory"]["rule"] == rule and e["advisory"]["space"]["id"] == space]


def test_the_bakerys_crossing_is_foreseen_at_least_15_minutes_ahead(days) -> None:
    day, _ = days
    ahead = by_rule(day, "ahead.wbgt_action", "bakery-floor")
    alert = [e for e in by_rule(day, "heat_stress.wbgt", "bakery-floor")
             if e["advisory"]["priority"] == "high" and e["event"] in ("raised", "escalated")]
    assert ahead and ahead[0]["event"] == "raised" and alert
    lead_min = (ts(alert[0]["at"]) - ts(ahead[0]["at"])) / 60
    assert lead_min >= 15, lead_min
    summary = {r["rule"]: r for r in summarise(day)["ahead_of_time"]}
    action = summary["ahead.wbgt_action"]
    assert action["foresees"] == "heat_stress.wbgt at high"
    assert action["crossings"] == action["foreseen"] >= 2  # the bakery and the yard
    assert action["lead_min"]["min"] >= 15
    assert summary["ahead.wbgt_limit"]["unwarned"] == 0


def test_the_west_offices_shading_is_foreseen_at_least_20_minutes_ahead(days) -> None:
    day, _ = days
    ahead = by_rule(day, "ahead.sun_on_windows", "office-west")
    shading = [e for e in by_rule(day, "shading.lower_shading", "office-west")
               if e["event"] == "raised"]
    assert ahead and shading
    assert (ts(shading[0]["at"]) - ts(ahead[0]["at"])) / 60 >= 20
    assert "west windows" in ahead[0]["advisory"]["title"]
    sun = {r["rule"]: r for r in summarise(day)["ahead_of_time"]}["ahead.sun_on_windows"]
    assert sun["foreseen"] == sun["crossings"] == 1 and sun["lead_min"]["min"] >= 20


def test_no_ahead_advisory_is_left_standing(days) -> None:
    day, _ = days
    summary = summarise(day)
    for r in summary["ahead_of_time"]:
        assert r["live_at_end"] == 0, r
        assert r["ahead_advisories"] == r["foreseen"] + r["withdrawn"] + r["acted_on"], r
    ends = Counter()
    for e in day.raised_events:
        if e["event"] != "summary" and e["advisory"]["rule"].startswith("ahead."):
            ends[e["event"]] += 1
    assert ends["raised"] == ends["cleared"] > 0


def test_notifications_rise_by_the_ahead_messages_alone(days) -> None:
    day, before = days
    with_ahead = summarise(day)["notifications_by_audience"]
    without = summarise(before)["notifications_by_audience"]
    ahead_sent = Counter(e["advisory"]["audience"] for e in day.events
                         if e["event"] != "summary" and e["advisory"]["rule"].startswith("ahead."))
    for audience in with_ahead.keys() | without.keys():
        assert with_ahead.get(audience, 0) - without.get(audience, 0) == ahead_sent[audience], (
            audience, with_ahead, without, ahead_sent)
    # every other event is the same, at the same time
    def others(r: ReplayResult) -> list[tuple[str, str, str, str]]:
        return [(e["at"], e["event"], e["advisory"]["id"], e["advisory"]["priority"])
                for e in r.events if e["event"] != "summary"
                and not e["advisory"]["rule"].startswith("ahead.")]
    assert others(day) == others(before)


@pytest.mark.long
def test_replay_summary_prints_the_ahead_of_time_figures(tmp_path) -> None:
    figures = cli_replay_json("--summary")["ahead_of_time"]
    assert {r["rule"] for r in figures} == {"ahead.wbgt_action", "ahead.wbgt_limit",
                                            "ahead.sun_on_windows"}
    for r in figures:
        assert r["unwarned"] == 0 and r["lead_min"]["min"] >= 15
