"""Zones with only a thermostat (air temperature and humidity): declared assumptions for
what they do not measure let the comfort rules run, and are shown beside the numbers."""

from __future__ import annotations

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
    # the flood limit: nine on their own, the tenth place for the summary of the rest
    assert len(raised) == 9
    assert sum(s["count"] for s in summaries) == len(ZONES) - 9
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
