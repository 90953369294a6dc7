"""Advice people can trust, on the shipped day and on a site-wide flood: texts that never
say "unknown", no reminder asking for what was already done, advisories that clear once
their inputs return to normal, summary counts equal to the engine's own, effectiveness of
acted-on advice, sensor-health advice that names the sensor."""

from __future__ import annotations

import json
import re
import textwrap

import numpy as np
import pytest

from tests.conftest import REPO
from tests.engine.conftest import validator
from tests.recorded_day import recorded_day
from thermowarden.config import load_site
from thermowarden.core import comfort
from thermowarden.effects import Persist, Publish
from thermowarden.engine import Engine
from thermowarden.replay import summarise
from thermowarden.rules import RulePackError, _template, load_rule_packs, name_table
from thermowarden.site_check import check_site
from thermowarden.site_model import build_site_model, filter_covers, minimal_filters

SITE = REPO / "deploy" / "example-site.yaml"
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"
BAD_WORDS = re.compile(r"\b(unknown|None|nan|NaN|inf)\b")


@pytest.fixture(scope="module")
def day():
    return recorded_day(None)


def _texts(adv: dict) -> list[str]:
    return [adv["title"], adv["advice"], adv["rationale"]]


# ----------------------------------------------------------------------------- shipped day

def test_no_text_a_person_reads_says_unknown(day):
    assert day.events
    for e in day.events:
        if e["event"] == "summary":
            continue
        for text in _texts(e["advisory"]):
            assert text.strip(), (e["event"], e["advisory"]["rule"])
            assert not BAD_WORDS.search(text), (e["advisory"]["rule"], text)


def test_no_reminder_asks_for_what_was_already_done(day):
    """Once the blinds are down or the fans on (acted_on), the advisory is not renotified
    with the same request; if it does not clear, a different message says so."""
    acted_at: dict[str, str] = {}
    for e in day.events:
        if e["event"] == "summary":
            continue
        adv = e["advisory"]
        if adv.get("acted_on"):
            acted_at.setdefault(adv["id"], adv["acted_on"]["at"])
        if e["event"] == "renotified":
            assert adv["id"] not in acted_at, (adv["rule"], e["at"])
    no_effect = [e for e in day.events if e["event"] == "no_effect"]
    for e in no_effect:
        adv = e["advisory"]
        assert adv["acted_on"]["helped"] is False
        assert "lowered" in adv["advice"] or "on for" in adv["advice"], adv["advice"]
        assert re.search(r"\d+ min ago|\d+ min,", adv["advice"]), adv["advice"]


def test_heat_stress_levels_have_their_own_advice(day):
    by_priority: dict[str, set[str]] = {}
    for e in day.events:
        if e["event"] != "summary" and e["advisory"]["rule"] == "heat_stress.wbgt":
            adv = e["advisory"]
            if adv["title"].startswith(("Heat stress easing", "Heat stress cleared")):
                continue  # (the easing and cleared texts are the same at every level)
            by_priority.setdefault(adv["priority"], set()).add(adv["advice"].split(":")[0])
    assert {"medium", "high", "urgent"} <= set(by_priority), by_priority
    firsts = [next(iter(v)) for v in by_priority.values()]
    assert len(set(firsts)) == len(firsts), by_priority
    medium = next(e for e in day.events if e["event"] != "summary"
                  and e["advisory"]["rule"] == "heat_stress.wbgt"
                  and e["advisory"]["priority"] == "medium")
    assert "now" not in medium["advisory"]["advice"].split(".")[0]
    # "approaching" rests on the 60-minute mean; it says what the WBGT rests on
    assert "60-minute" in medium["advisory"]["rationale"]
    assert medium["advisory"]["numbers"]["wbgt_time_weighted"]["value"] is not None


def test_summary_counts_equal_the_engines_own(day):
    s = summarise(day)
    raised_by_engine = sum(1 for e in day.raised_events if e["event"] == "raised")
    assert sum(r["raised"] for r in s["rules"]) == raised_by_engine
    sent = sum(1 for e in day.events)
    assert sum(s["notifications_by_audience"].values()) == sent
    assert s["standing"], "the longest-standing advisories are listed"


def test_effectiveness_of_acted_on_advice(day):
    s = summarise(day)
    eff = {e["rule"]: e for e in s["effectiveness"]}
    for rule in ("shading.lower_shading", "fans.switch_on_fans"):
        assert rule in eff, s["effectiveness"]
        e = eff[rule]
        assert e["followed"] >= 1 and e["mean_minutes_to_follow"] is not None
        assert e["mean_predicted_change"] is not None and e["mean_realised_change"] is not None
    cleared = [e for e in day.events if e["event"] == "cleared"
               and e["advisory"]["rule"] == "shading.lower_shading"]
    record = cleared[0]["advisory"]["acted_on"]
    assert record["effect"]["quantity"] == "radiant_asymmetry_horizontal"
    assert record["effect"]["checks"], record
    assert record["cleared_after_min"] is not None and record["helped"] in (True, False)


def test_sensor_health_names_the_sensor(day):
    seen = set()
    for e in day.events:
        if e["event"] != "raised" or not e["advisory"]["rule"].startswith("sensor_health."):
            continue
        adv = e["advisory"]
        seen.add(adv["rule"])
        if adv["rule"] in ("sensor_health.stale_point", "sensor_health.stuck_value",
                           "sensor_health.implausible_values",
                           "sensor_health.sensors_disagree"):
            assert "larkfield/" in adv["advice"], adv["advice"]  # the topic
        if adv["rule"] == "sensor_health.sensors_disagree":
            assert adv["advice"].count("larkfield/") == 2 and " K" in adv["advice"]
    assert "sensor_health.stale_point" in seen


def test_replay_full_prints_each_event_as_it_was(day):
    """An event's history ends with that event: later events do not leak into it."""
    for e in day.events:
        if e["event"] in ("summary",):
            continue
        hist = e["advisory"]["history"]
        assert hist[-1]["event"] == e["event"], (e["event"], hist[-1])
        assert hist[-1]["at"] == e["at"]


def test_events_match_their_schema(day):
    v = validator("event.v1.json")
    for e in day.events:
        v.validate(e)


# ----------------------------------------------------------------------------- a flood

FLOOD_SITE = """\
site: {id: flood, timezone: UTC}
output: {prefix: tw/flood}
evaluation: {tick_s: 60}
templates:
  - {topic: "flood/{space}/ta", quantity: air_temperature, interval_s: 60}
  - {topic: "flood/{space}/rh", quantity: relative_humidity, interval_s: 60}
  - {topic: "flood/{space}/globe", quantity: globe_temperature, interval_s: 60}
  - {topic: "flood/{space}/v", quantity: air_speed, interval_s: 60}
defaults:
  people: {met: 1.1, clo: 0.6}
  occupancy: {always: true}
  rule_packs: [comfort, sensor_health]
spaces:
"""


@pytest.mark.long
def test_a_site_wide_flood_is_counted_and_clears(tmp_path):
    n = 300
    site = tmp_path / "site.yaml"
    site.write_text(FLOOD_SITE + "".join(f"  - {{id: desk-{k:03d}}}\n" for k in range(n)))
    config = load_site(site, {})
    packs = load_rule_packs(["comfort", "sensor_health"])
    engine = Engine(config, build_site_model(config), packs, conditions_every_s=0,
                    start=0.0)
    t0 = 1_780_000_000.0
    stored, sent = [], []

    def tick(t):
        for eff in engine.tick(t):
            if isinstance(eff, Publish) and "/events/" in eff.topic and eff.payload:
                sent.append(eff.payload)
            if (isinstance(eff, Persist) and eff.kind == "event" and eff.record
                    and eff.record["event"] != "summary"):
                stored.append(eff.record)

    # three hours: comfortable, then every desk too warm, then comfortable again
    for minute in range(180):
        t = t0 + 60 * minute
        hot = 60 <= minute < 120
        for k in range(n):
            ta = (28.0 if hot else 23.5) + 0.005 * k  # inside ISO 7730's 10-30 °C
            wobble = 0.02 * (minute % 3)  # live sensors are never perfectly steady
            for q, v in (("ta", ta), ("rh", 50.0 + wobble), ("globe", ta + 0.5),
                         ("v", 0.1 + wobble)):
                engine.message(f"flood/desk-{k:03d}/{q}", f"{v:.2f}".encode(), t)
        tick(t + 30)
    for extra in (90, 150):  # let the last flood summary go out
        tick(t + extra)
    raised = [e for e in stored if e["event"] == "raised"]
    cleared = [e for e in stored if e["event"] == "cleared"]
    assert len({e["advisory"]["space"]["id"] for e in raised}) == n
    assert {e["advisory"]["id"] for e in raised} == {e["advisory"]["id"] for e in cleared}
    assert not engine.live_advisories()
    summaries = [e for e in sent if e["event"] == "summary"]
    assert summaries, "the flood is summarised"
    held = sum(e["count"] for e in summaries)
    sent_lifecycle = [e for e in sent if e["event"] != "summary"]
    assert len(sent_lifecycle) + held == len(stored)
    for e in stored:
        for text in _texts(e["advisory"]):
            assert text and not BAD_WORDS.search(text), text


# ----------------------------------------------------------------------------- check

WINDOW_ROOM_SITE = """\
site: {id: sunny, timezone: UTC}
output: {prefix: tw/sunny}
rule_dirs: [packs]
defaults: {occupancy: {always: true}}
spaces:
  - id: perimeter
    rule_packs: [%s]
    points:
      - {topic: s/p/ta, quantity: air_temperature}
      - {topic: s/p/rh, quantity: relative_humidity}
      - {topic: s/p/window, quantity: plane_radiant_temperature, side: window}
      - {topic: s/p/room, quantity: plane_radiant_temperature, side: room}
"""

STRICT_SHADING = """\
pack: strict_shading
description: a shading rule whose clear condition needs a globe
rules:
  - id: blinds
    title: Blinds
    audience: facilities
    condition: >
      radiant_asymmetry_horizontal > 8
      or globe_temperature - air_temperature > 3
    clear: >
      radiant_asymmetry_horizontal < 6
      and globe_temperature - air_temperature < 2
    messages: {title: Blinds, advice: Lower them., rationale: Sun.}
"""


def test_check_warns_about_a_rule_that_could_never_clear(tmp_path):
    (tmp_path / "packs").mkdir()
    (tmp_path / "packs" / "strict_shading.yaml").write_text(STRICT_SHADING)
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent(WINDOW_ROOM_SITE % "strict_shading, shading"))
    report = check_site(str(site))
    assert report.ok, report.issues
    never = [w for w in report.warnings if "never clear" in w]
    assert len(never) == 1, report.warnings
    assert "strict_shading.blinds" in never[0] and "globe_temperature" in never[0]
    assert "add a globe_temperature point to the space" in never[0]
    # the default shading pack can finish with the same inputs
    assert not any("shading.lower_shading" in w for w in report.warnings), report.warnings


def _health_pack_named(tmp_path, name: str, health: bool = True) -> None:
    """The built-in sensor_health pack under another name, in the site's packs folder."""
    text = (REPO / "rules" / "sensor_health.yaml").read_text()
    assert text.startswith("pack: sensor_health\n") and "\nhealth: true\n" in text
    text = text.replace("pack: sensor_health", f"pack: {name}", 1)
    if not health:
        text = text.replace("\nhealth: true\n", "\n", 1)
    (tmp_path / "packs" / f"{name}.yaml").write_text(text)


@pytest.mark.parametrize("health_pack", ["sensor_health", "site_watch"])
def test_engine_raises_sensor_health_when_a_clear_condition_stays_unknown(tmp_path,
                                                                           health_pack):
    """A live advisory whose clear condition cannot be evaluated (here: no globe) is
    reported to the integrator with the rule and the name. What makes a pack watch the
    other rules is its ``health: true``, not its name (``site_watch`` is a copy)."""
    (tmp_path / "packs").mkdir()
    (tmp_path / "packs" / "strict_shading.yaml").write_text(STRICT_SHADING)
    if health_pack != "sensor_health":
        _health_pack_named(tmp_path, health_pack)
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent(WINDOW_ROOM_SITE % f"strict_shading, {health_pack}"))
    config = load_site(site, {})
    packs = load_rule_packs(["strict_shading", health_pack], config.rule_dirs, base=site)
    engine = Engine(config, build_site_model(config), packs, conditions_every_s=0,
                    start=0.0)
    t0 = 1_780_000_000.0
    events = []
    for minute in range(120):
        t = t0 + 60 * minute
        window = 36.0 if minute < 30 else 25.0  # sun, then cloud: clear is now unknown
        for topic, v in (("s/p/ta", 24.0), ("s/p/rh", 45.0), ("s/p/window", window),
                         ("s/p/room", 24.0)):
            engine.message(topic, f"{v}".encode(), t)
        events += [e.payload for e in engine.tick(t + 1) if isinstance(e, Publish)
                   and "/events/" in e.topic and e.payload]
    raised = {e["advisory"]["rule"]: e["advisory"] for e in events if e["event"] == "raised"}
    assert "strict_shading.blinds" in raised
    health = raised.get(f"{health_pack}.rules_without_inputs")
    assert health is not None, sorted(raised)
    # in words: the rule's title and the input it lacks
    assert "Blinds (Globe temperature)" in health["advice"], health["advice"]


def test_only_a_health_pack_may_read_rules_unknown_long(tmp_path):
    """Other rules are evaluated before the count is known: reading it is refused, with the
    file, line and rule, rather than leaving a rule that could never be evaluated."""
    (tmp_path / "packs").mkdir()
    _health_pack_named(tmp_path, "site_watch", health=False)
    with pytest.raises(RulePackError) as caught:
        load_rule_packs(["site_watch"], [str(tmp_path / "packs")])
    text = str(caught.value)
    assert "site_watch.yaml" in text and "rules_without_inputs" in text, text
    assert "rules_unknown_long is known only to the rules of a pack with 'health: true'" \
        in text, text
    assert re.search(r"site_watch\.yaml:\d+", text), text


# ----------------------------------------------------------------------------- pieces

def test_message_templates_leave_out_what_is_not_known():
    names = name_table(["limit"])
    allowed = set(names) | {"space_name"}
    t = _template("Air {air_temperature:.1f} °C[[, globe {globe_temperature:.1f} °C]]. "
                  "PMV {pmv_iso:.2f}. Done[[when air_temperature > limit: ; above "
                  "{limit:.0f} °C]].", allowed, names)
    text = t.render({"air_temperature": 31.0, "globe_temperature": float("nan"),
                     "pmv_iso": None, "limit": 30.0}, lambda e: True)
    assert text == "Air 31.0 °C. Done; above 30 °C."
    text = t.render({"air_temperature": 25.0, "globe_temperature": 26.0, "pmv_iso": 0.2,
                     "limit": 30.0}, lambda e: False)
    assert text == "Air 25.0 °C, globe 26.0 °C. PMV 0.20. Done."


def test_air_speed_solver_finds_a_speed_wherever_one_exists():
    """Wherever some speed up to 2 m/s brings the ASHRAE 55 PMV to the target (found by
    a dense scan), the solver returns one, and the PMV there equals the target."""
    rng = np.random.default_rng(7)
    n = 300
    ta = rng.uniform(24, 33, n)
    tr = ta + rng.uniform(-1, 4, n)
    rh, met, clo = rng.uniform(30, 70, n), rng.uniform(1.0, 1.6, n), rng.uniform(0.4, 0.8, n)
    target = np.full(n, 0.5)
    v = comfort.air_speed_for_pmv(ta, tr, np.full(n, 0.1), rh, met, clo, target)
    speeds = np.exp(np.linspace(np.log(0.1), np.log(2.0), 80))
    pmv = np.stack([comfort.pmv_ashrae(ta, tr, np.full(n, s), rh, met, clo) for s in speeds])
    warm = comfort.pmv_fanger(ta, tr, np.full(n, 0.1), rh, met, clo) > 0.5
    solvable = warm & (pmv <= 0.5).any(axis=0)
    assert solvable.sum() > 50
    assert np.isfinite(v[solvable]).all()
    found = np.isfinite(v)
    at = comfort.pmv_ashrae(ta[found], tr[found], v[found], rh[found], met[found], clo[found])
    assert np.max(np.abs(at - 0.5)) < 0.02


def test_overlapping_subscriptions_become_one():
    assert filter_covers("site/+/ta", "site/room-1/ta")
    assert filter_covers("site/#", "site")
    assert not filter_covers("site/room-1/ta", "site/+/ta")
    assert minimal_filters({"site/+/ta", "site/room-1/ta", "site/room-1/rh"}) == [
        "site/+/ta", "site/room-1/rh"]


def test_minimal_filters_equal_every_pair_compared():
    """Comparing each filter with the kept wildcard filters only keeps what comparing it
    with every kept filter keeps (a filter without wildcards covers only itself)."""
    import random

    def every_pair(filters: set[str]) -> list[str]:
        kept = sorted(filters, key=lambda f: (f.count("#"), f.count("+")), reverse=True)
        out: list[str] = []
        for f in kept:
            if not any(filter_covers(g, f) for g in out):
                out.append(f)
        return sorted(out)

    rng = random.Random(24)
    parts = ["site", "a", "b", "+", "#", "ta", "rh"]
    for _ in range(500):
        filters = set()
        for _ in range(rng.randint(1, 12)):
            levels = [rng.choice(parts) for _ in range(rng.randint(1, 4))]
            if "#" in levels:
                levels = levels[:levels.index("#") + 1]  # '#' only last (MQTT 4.7.1.2)
            filters.add("/".join(levels))
        assert minimal_filters(filters) == every_pair(filters), filters


def test_report_counts_occupied_hours_and_fits_outdoor_spaces(day, tmp_path):
    from thermowarden.shell.report import build_report, render_html

    config = load_site(SITE, {})
    result = recorded_day(60.0)
    spaces = build_report(config, result.samples, result.raised_events, result.start,
                          result.end + 1)
    office = spaces["office-west"]
    assert 0 < office.hours_occupied < 24
    assert sum(office.hours_iso.values()) == pytest.approx(office.hours_occupied, abs=0.2)
    yard = spaces["loading-yard"]
    assert sum(yard.hours_iso.values()) == 0
    html = render_html(config, spaces, result.start, result.end + 1)
    assert "Heat index (NWS)" in html and "UTCI" in html
    assert json.dumps(result.samples[0])  # samples stay plain JSON
