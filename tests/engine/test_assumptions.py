"""Zones with only a thermostat (air temperature and humidity): declared assumptions for
what they do not measure let the comfort rules run, and are shown beside the numbers."""

from __future__ import annotations

import textwrap

import pytest

from tests.engine.conftest import validate_effects
from thermowarden.config import ConfigError, load_site
from thermowarden.effects import Publish
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

ZONES = [f"desk-{k:03d}" for k in range(300)]


def _engine(tmp_path, assume: str) -> Engine:
    text = ("site: {id: floor3, timezone: UTC}\noutput: {prefix: tw/floor3}\n"
            "defaults:\n  occupancy: {always: true}\n  rule_packs: [comfort]\n"
            "  people: {met: 1.2, clo: 0.5}\n" + assume +
            "templates:\n"
            "  - {topic: 'floor3/{space}/t', quantity: air_temperature, interval_s: 60}\n"
            "  - {topic: 'floor3/{space}/rh', quantity: relative_humidity, interval_s: 60}\n"
            "spaces:\n" + "".join(f"  - id: {z}\n" for z in ZONES))
    site = tmp_path / "site.yaml"
    site.write_text(text)
    config = load_site(site, {})
    return Engine(config, build_site_model(config), load_rule_packs(["comfort"]),
                  conditions_every_s=0, start=0.0)


def _day(engine: Engine) -> list:
    """Comfortable for 20 minutes, then the whole floor rises past 28 °C together."""
    effects = []
    for t in range(0, 60 * 60, 60):
        ta = b"25.5" if t < 20 * 60 else b"28.6"
        for z in ZONES:
            engine.message(f"floor3/{z}/t", ta, float(t))
            engine.message(f"floor3/{z}/rh", b"50", float(t))
        effects += engine.tick(float(t) + 1.0)
    return effects


def test_a_floor_of_thermostat_zones_raises_comfort_advice_as_a_flood(tmp_path):
    engine = _engine(tmp_path, "  assume: {air_speed: 0.1, mean_radiant_temperature: air}\n")
    effects = _day(engine)
    validate_effects(effects)
    sent = [e.payload for e in effects if isinstance(e, Publish) and "/events/" in e.topic]
    raised = [p for p in sent if p["event"] == "raised"]
    summaries = [p for p in sent if p["event"] == "summary"]
    # ISO 7730 PMV at 28.6 °C, still air, mean radiant = air, 50 %, 1.2 met, 0.5 clo is
    # about +1.2 (Table D.1 gives +0.77 at 27 °C, 60 %): over the 0.5 limit everywhere.
    assert len(raised) == 10  # the flood limit: the rest is summarised
    assert sum(s["count"] for s in summaries) == len(ZONES) - 10
    assert {s["audience"] for s in summaries} == {"facilities"}
    adv = raised[0]["advisory"]
    assert adv["rule"] == "comfort.too_warm"
    assert adv["numbers"]["air_speed"]["value"] == pytest.approx(0.1)
    assert adv["numbers"]["air_speed"]["assumed"] == "assumed: still air, 0.1 m/s"
    assert "assumed: air speed still air, 0.1 m/s; mean radiant temperature equal to the " \
           "air temperature" in adv["rationale"]
    # operative temperature equals the air temperature when the radiant one is assumed so
    assert adv["numbers"]["operative_temperature"]["value"] == pytest.approx(28.6, abs=0.01)
    # nothing was raised in the comfortable first 20 minutes (on-delay 10 minutes)
    assert min(p["at"] for p in raised) >= "1970-01-01T00:30"
    cond = engine.conditions_payload(0)
    # no reading: the value shown is the assumption, and it says so
    assert cond["inputs"]["air_speed"] == {"fresh": False, "value": 0.1, "unit": "m/s",
                                           "age_s": None,
                                           "assumed": "assumed: still air, 0.1 m/s"}
    assert cond["inputs"]["mean_radiant_temperature"]["assumed"] == \
        "assumed: equal to the air temperature"


def test_without_assumptions_the_comfort_rules_cannot_run(tmp_path):
    engine = _engine(tmp_path, "")
    sent = [e.payload for e in _day(engine)
            if isinstance(e, Publish) and "/events/" in e.topic]
    assert not [p for p in sent if p["event"] == "raised"]


def test_a_measured_air_speed_wins_over_the_assumption(tmp_path):
    engine = _engine(tmp_path, "  assume: {air_speed: 0.1, mean_radiant_temperature: air+2}\n")
    engine.message("floor3/desk-000/t", b"24", 0.0)
    engine.message("floor3/desk-000/rh", b"50", 0.0)
    engine.message("floor3/desk-001/t", b"24", 0.0)
    engine.tick(1.0)
    snap = engine.last_snapshot
    assert snap.inputs.mean_radiant_temperature[0] == pytest.approx(26.0)
    assert bool(snap.assumed["air_speed"][0])
    assert snap.inputs.air_speed[0] == pytest.approx(0.1)


def test_a_bad_assumption_is_refused_with_its_position(tmp_path):
    with pytest.raises(ConfigError, match=r"site.yaml:7:\d+: .*mean_radiant_temperature.*"
                                          r"expected 'air' or 'air\+K'"):
        _engine(tmp_path, "  assume: {air_speed: 0.1, mean_radiant_temperature: warm}\n")


TEMPERATURE_ONLY = """\
site: {id: school, timezone: UTC}
output: {prefix: tw/school}
defaults:
  occupancy: {always: true}
  people: {met: 1.2, clo: 0.5}
  assume: {air_speed: 0.1, mean_radiant_temperature: air}
spaces:
  - id: class-4b
    rule_packs: [comfort, humidity, heat_stress]
    assume: {relative_humidity: 50}
    points:
      - {topic: school/4b/t, quantity: air_temperature, interval_s: 60}
  - id: class-4c
    rule_packs: [comfort]
    points:
      - {topic: school/4c/t, quantity: air_temperature, interval_s: 60}
"""


def test_a_temperature_only_room_with_an_assumed_humidity_gets_comfort_advice(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text(TEMPERATURE_ONLY)
    config = load_site(site, {})
    engine = Engine(config, build_site_model(config),
                    load_rule_packs(["comfort", "humidity", "heat_stress"]),
                    conditions_every_s=0, start=0.0)
    effects = []
    for t in range(0, 40 * 60, 60):
        engine.message("school/4b/t", b"28.6", float(t))
        engine.message("school/4c/t", b"28.6", float(t))
        effects += engine.tick(float(t) + 1.0)
    validate_effects(effects)
    raised = [e.payload["advisory"] for e in effects if isinstance(e, Publish)
              and "/events/" in e.topic and e.payload and e.payload["event"] == "raised"]
    # ISO 7730 PMV at 28.6 °C, 0.1 m/s, mean radiant = air, 50 %, 1.2 met, 0.5 clo is about
    # +1.2 (above the 0.5 limit); without a humidity (4c) the comfort rules cannot run
    assert [(a["space"]["id"], a["rule"]) for a in raised] == [("class-4b", "comfort.too_warm")]
    adv = raised[0]
    assert "relative humidity 50 %" in adv["rationale"]
    assert "Not measured here, assumed:" in adv["rationale"]
    cond = engine.conditions_payload(0)
    assert cond["inputs"]["relative_humidity"]["assumed"] == "assumed: 50 %"
    assert cond["inputs"]["relative_humidity"]["value"] == 50.0
    assert cond["indices"]["relative_humidity"]["method"] == "assumed: 50 % (not measured)"
    assert cond["indices"]["pmv_iso"]["value"] == pytest.approx(1.2, abs=0.15)
    # the humidity rules never rest on the assumption
    assert not [a for a in raised if a["rule"].startswith("humidity.")]


def test_a_measured_humidity_wins_and_a_stale_one_leaves_humidity_rules_unknown(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text(TEMPERATURE_ONLY.replace(
        "      - {topic: school/4b/t, quantity: air_temperature, interval_s: 60}\n",
        "      - {topic: school/4b/t, quantity: air_temperature, interval_s: 60}\n"
        "      - {topic: school/4b/rh, quantity: relative_humidity, interval_s: 60}\n"))
    config = load_site(site, {})
    engine = Engine(config, build_site_model(config), load_rule_packs(["comfort", "humidity"]),
                    conditions_every_s=0, start=0.0)
    effects = []
    for t in range(0, 180 * 60, 60):
        engine.message("school/4b/t", b"22", float(t))
        if t < 60 * 60:  # humid for an hour, then the sensor stops reporting
            engine.message("school/4b/rh", b"72", float(t))
        effects += engine.tick(float(t) + 1.0)
        if t == 50 * 60:
            cond = engine.conditions_payload(0)
            assert cond["inputs"]["relative_humidity"]["value"] == 72.0
            assert "assumed" not in cond["inputs"]["relative_humidity"]
    events = [(e.payload["event"], e.payload["advisory"]["rule"]) for e in effects
              if isinstance(e, Publish) and "/events/" in e.topic and e.payload
              and e.payload.get("advisory")]
    assert ("raised", "humidity.too_humid") in events
    # the assumed 50 % stands in for the comfort indices, but never clears the humidity
    # advisory (it would be the assumption clearing itself)
    assert ("cleared", "humidity.too_humid") not in events
    cond = engine.conditions_payload(0)
    assert cond["inputs"]["relative_humidity"]["assumed"] == "assumed: 50 %"


def test_check_names_the_line_to_add_and_a_pack_that_never_applies(tmp_path):
    from thermowarden.site_check import check_site

    site = tmp_path / "site.yaml"
    site.write_text(TEMPERATURE_ONLY)
    report = check_site(str(site))
    assert report.ok, report.issues
    text = "\n".join(report.warnings)
    # 4c lacks a humidity: the warning says what to add
    assert ("space class-4c: rule comfort.too_warm needs relative_humidity, which no point "
            "provides, so it never runs there: add `assume: {relative_humidity: 50}` to "
            "the space (or to defaults), or a relative_humidity point") in text
    # 4b's humidity is only assumed: the humidity rules need a point
    assert ("space class-4b: rule humidity.too_humid needs relative_humidity, which no "
            "point provides, so it never runs there: add a relative_humidity point to the "
            "space (this rule is about the relative_humidity itself: an assumption does "
            "not count)") in text
    # heat_stress on a room that is not hot work can never apply
    assert ("space class-4b: rule pack heat_stress can never apply here: its rules are for "
            "hot work; this space is indoor, not hot work, mechanical ventilation") in text
    assert not any("comfort.too_warm" in w and "class-4b" in w for w in report.warnings)


def test_an_assumed_humidity_out_of_range_is_refused(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text(TEMPERATURE_ONLY.replace("relative_humidity: 50", "relative_humidity: 150"))
    with pytest.raises(ConfigError, match=r"site.yaml:10:\d+: .*relative_humidity"):
        load_site(site, {})


def test_check_does_not_warn_about_the_draught_rule_with_a_turbulence_point(tmp_path):
    """A turbulence-intensity point (per cent, the canonical unit; a fraction is converted)
    lets the draught rule raise: check must not say it never can."""
    from thermowarden.site_check import check_site

    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent("""\
        site: {id: s, timezone: UTC}
        defaults: {occupancy: {always: true}, people: {met: 1.2, clo: 0.6}}
        spaces:
          - id: desk
            rule_packs: [draught]
            points:
              - {topic: d/ta, quantity: air_temperature}
              - {topic: d/v, quantity: air_speed}
              - {topic: d/tu, quantity: turbulence_intensity, unit: fraction}
        """))
    report = check_site(str(site))
    assert report.ok, report.issues
    assert not [w for w in report.warnings if "draught" in w], report.warnings
