"""A flood of notifications (ISA-18.2 / IEC 62682 and EEMUA 191 practice: more than 10
notifications in 10 minutes to one person is a flood): 300 desks crossing a threshold
within a quarter of an hour. Through the engine and through `thermowarden replay
--summary`, the user's path: no audience gets more than 10 notifications in any 10 minutes,
the held-back ones go out in one summary per audience and flood, updated at most every 10
minutes, and the summary of the replay still counts every advisory raised."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from tests.conftest import COMMAND_LIMIT_S
from tests.engine.conftest import PACK, validate_effects
from thermowarden.config import load_site
from thermowarden.effects import Persist, Publish
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

DESKS = [f"d{k:03d}" for k in range(300)]


def site(tmp_path):
    (tmp_path / "packs").mkdir()
    (tmp_path / "packs" / "testpack.yaml").write_text(PACK)
    text = ("site: {id: desks, timezone: UTC}\noutput: {prefix: tw/desks}\n"
            "rule_dirs: [packs]\n"
            "defaults: {occupancy: {always: true}, rule_packs: [testpack]}\n"
            "templates:\n  - {topic: 'desks/{space}/ta', quantity: air_temperature, "
            "interval_s: 60}\n"
            "spaces:\n" + "".join(f"  - id: {d}\n" for d in DESKS))
    path = tmp_path / "site.yaml"
    path.write_text(text)
    return path


def reading(k, t):
    """Desk k warms past 30 °C at 3 k seconds (all 300 within 15 minutes) and stays there
    for an hour, then cools."""
    return 31.0 if 3 * k <= t < 3 * k + 3600 else 27.0


def busiest(times, span=600.0):
    times = sorted(times)
    return max((sum(1 for u in times if t <= u < t + span) for t in times), default=0)


@pytest.mark.long
def test_a_300_space_flood_stays_within_10_notifications_in_any_10_minutes(tmp_path):
    path = site(tmp_path)
    config = load_site(path, {})
    assert config.evaluation.flood_summary_interval_s == 600.0  # the default
    engine = Engine(config, build_site_model(config),
                    load_rule_packs(["testpack"], config.rule_dirs, base=path),
                    conditions_every_s=0, start=0.0)
    effects = []
    for t in range(0, 2 * 3600, 30):
        for k, d in enumerate(DESKS):
            if t % 60 == 0:
                engine.message(f"desks/{d}/ta", str(reading(k, t)).encode(), t)
        effects += engine.tick(t)
    validate_effects(effects)
    sent = [(x.payload, x.topic) for x in effects
            if isinstance(x, Publish) and "/events/" in x.topic]
    stored = [x.record for x in effects if isinstance(x, Persist) and x.kind == "event"
              and "advisory" in x.record]  # (the summaries are stored too)
    assert sum(1 for p in stored if p["event"] == "raised") == 300
    by_audience: dict[str, list[float]] = {}
    for p, _ in sent:
        by_audience.setdefault(p.get("audience") or p["advisory"]["audience"], []).append(
            epoch(p["at"]))
    assert set(by_audience) == {"facilities"}
    assert busiest(by_audience["facilities"]) <= 10
    summaries = [p for p, topic in sent if p["event"] == "summary"]
    assert all(topic == "tw/desks/events/facilities/_site" for p, topic in sent
               if p["event"] == "summary")
    # one summary per flood: every update names the same flood, at least 10 minutes apart
    assert len({s["flood"]["episode"] for s in summaries}) == 1
    assert [s["flood"]["update"] for s in summaries] == list(range(1, len(summaries) + 1))
    gaps = [epoch(b["at"]) - epoch(a["at"]) for a, b in zip(summaries, summaries[1:], strict=False)]
    assert all(g >= 600 for g in gaps), gaps
    assert "summarised in one message" not in summaries[0]["note"]
    # nothing is lost: every event the engine made was sent, listed in a summary, or is
    # held for the next update
    individual = [p for p, _ in sent if p["event"] != "summary"]
    listed = sum(s["count"] for s in summaries)
    pending = len(engine.advisories.floods.suppressed["facilities"])
    assert len(individual) + listed + pending == len(stored)
    assert summaries[-1]["flood"]["held_total"] == listed
    # the flood is told at once (a place in the window is kept for it), then updated
    first = summaries[0]
    assert epoch(first["at"]) - epoch(first["flood"]["since"]) <= 60
    assert len(summaries) >= 2 and summaries[1]["count"] > 200


def epoch(text):
    import datetime as dt

    return dt.datetime.fromisoformat(text.replace("Z", "+00:00")).timestamp()


def test_replay_summary_counts_every_advisory_raised_in_a_flood(tmp_path):
    path = site(tmp_path)
    feed = tmp_path / "feed.jsonl"
    with feed.open("w") as fh:
        for t in range(0, 2 * 3600, 60):
            for k, d in enumerate(DESKS):
                fh.write(json.dumps({"t": 1_784_000_000 + t, "topic": f"desks/{d}/ta",
                                     "payload": str(reading(k, t))}) + "\n")
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "replay", "--config", str(path),
                        str(feed), "--summary", "--json"], capture_output=True, text=True,
                       timeout=COMMAND_LIMIT_S)
    assert r.returncode == 0, r.stderr
    summary = json.loads(r.stdout)
    hot = next(x for x in summary["rules"] if x["rule"] == "testpack.hot")
    assert hot["raised"] == 300 and hot["cleared"] == 300
    facilities = summary["audiences"]["facilities"]
    assert facilities["busiest_10_min"] <= 10
    assert facilities["events_raised_by_engine"] >= 600
    assert facilities["flood_summaries"] >= 1
