"""Replaying the recorded day of the example site: people acting on advice clears it, and
the same feed gives the same output (which rules fire on it: test_replay_coverage.py)."""

from __future__ import annotations

import gzip
import itertools
import subprocess
import sys

import pytest

from tests.conftest import COMMAND_LIMIT_S, REPO
from tests.engine.conftest import validator
from tests.recorded_day import recorded_day
from thermowarden.config import load_site
from thermowarden.replay import replay, summarise

SITE = REPO / "deploy" / "example-site.yaml"
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"


@pytest.fixture(scope="module")
def day():
    return recorded_day(60.0)


def test_all_events_match_the_schema(day):
    v = validator("event.v1.json")
    for e in day.events:
        v.validate(e)


def test_advice_followed_clears_with_a_record(day):
    for rule in ("shading.lower_shading", "fans.switch_on_fans"):
        cleared = [e for e in day.events if e["event"] == "cleared"
                   and e["advisory"]["rule"] == rule]
        assert cleared, rule
        acted = cleared[0]["advisory"]["acted_on"]
        assert acted is not None and acted["cleared_after"] is True, rule


def test_heat_stress_escalates_one_advisory(day):
    bakery = [e for e in day.events if e["event"] != "summary"
              and e["advisory"]["rule"] == "heat_stress.wbgt"
              and e["advisory"]["space"]["id"] == "bakery-floor"]
    ids = {e["advisory"]["id"] for e in bakery}
    assert len(ids) == 1
    kinds = [e["event"] for e in bakery]
    assert kinds[0] == "raised" and "escalated" in kinds
    prios = {e["advisory"]["priority"] for e in bakery}
    assert {"medium", "high", "urgent"} <= prios
    raised = bakery[0]["advisory"]
    assert len(raised["cautions"]) >= 5
    assert raised["numbers"]["wbgt_reference_unacclimatised"]["method"].startswith("ISO 7243")
    # the rejected nonsense readings were counted, not used
    assert day.rejected == {"implausible": 5}


def test_summary_counts(day):
    s = summarise(day)
    by_rule = {r["rule"]: r for r in s["rules"]}
    assert by_rule["shading.lower_shading"]["raised"] == 1
    assert s["notifications_by_audience"]["safety"] > 0
    assert s["messages"] == day.messages > 20_000


@pytest.mark.long
def test_cli_replay_is_deterministic(tmp_path):
    # a two-hour slice keeps the subprocess quick
    part = tmp_path / "slice.jsonl"
    with gzip.open(FEED, "rt", encoding="utf-8") as fh:
        part.write_text("".join(itertools.islice(fh, 5000)))
    cmd = [sys.executable, "-m", "thermowarden.cli", "replay", "--config", str(SITE),
           str(part), "--tick", "30"]
    a = subprocess.run(cmd, capture_output=True, text=True, timeout=COMMAND_LIMIT_S)
    b = subprocess.run(cmd, capture_output=True, text=True, timeout=COMMAND_LIMIT_S)
    assert a.returncode == 0, a.stderr
    assert a.stdout == b.stdout and a.stdout.strip()
    import json

    for line in a.stdout.splitlines():
        rec = json.loads(line)
        assert {"at", "event", "space", "rule", "audience", "priority"} <= set(rec)


def test_cli_replay_rejects_a_bad_feed(tmp_path):
    bad = tmp_path / "bad.jsonl"
    bad.write_text('{"t": 1, "topic": "x", "payload": 1}\n{"t": "yesterday", "topic": "x", '
                   '"payload": 1}\n')
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "replay", "--config",
                        str(SITE), str(bad)], capture_output=True, text=True,
                       timeout=COMMAND_LIMIT_S)
    assert r.returncode == 2 and f"{bad}:2: t:" in r.stderr


def test_events_stream_as_they_happen_in_the_sites_time_zone(tmp_path):
    """With ``on_event`` each event is handed over when its tick runs (nothing is kept for
    the end), and one-line events carry the site's local time (London in July: +01:00)."""
    from tests.engine.conftest import PACK
    from thermowarden.replay import FeedRecord

    (tmp_path / "packs").mkdir()
    (tmp_path / "packs" / "testpack.yaml").write_text(PACK)
    site = tmp_path / "site.yaml"
    site.write_text("site: {id: tz, timezone: Europe/London}\nrule_dirs: [packs]\n"
                    "defaults: {occupancy: {always: true}, rule_packs: [testpack]}\n"
                    "spaces:\n  - id: room\n    points:\n"
                    "      - {topic: tz/room/ta, quantity: air_temperature, interval_s: 60}\n")
    config = load_site(site, {})
    t0 = 1_784_106_000.0  # 2026-07-15 09:00 UTC
    seen: list[tuple[float, dict]] = []
    clock = {"t": t0}

    def records():
        for k in range(30):
            clock["t"] = t0 + 60 * k
            yield FeedRecord(clock["t"], "tz/room/ta", b"31.5")

    result = replay(config, records(), base=str(site),
                    on_event=lambda e: seen.append((clock["t"], e)))
    assert result.events == []
    raised = [(t, e) for t, e in seen if e["event"] == "raised"]
    assert raised, seen
    fed_until, event = raised[0]
    # first tick 10 s after the first reading (tick_s 10), raised after the 60 s on-delay
    assert event["at"] == "2026-07-15T10:01:10+01:00"
    assert fed_until < t0 + 29 * 60  # handed over long before the feed ended
