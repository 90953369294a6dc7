"""Advice that knows the equipment state both ways: a space made cool by fans that are on
is told to turn them down, and one kept cool by lowered blinds on a sunny day to raise them
(through the engine)."""

from __future__ import annotations

import textwrap

from tests.engine.conftest import validate_effects
from thermowarden.config import load_site
from thermowarden.effects import Publish
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

SITE = """\
site:
  id: works
  timezone: UTC
  outdoor_points:
    - {topic: w/out/ghi, quantity: solar_irradiance}
output: {prefix: tw/works}
defaults:
  occupancy: {always: true}
  people: {met: 1.2, clo: 0.5}
  assume: {mean_radiant_temperature: air}
spaces:
  - id: office
    rule_packs: [comfort, fans, shading]
    points:
      - {topic: w/office/ta, quantity: air_temperature}
      - {topic: w/office/rh, quantity: relative_humidity}
      - {topic: w/office/v, quantity: air_speed, interval_s: 10}
      - {topic: w/office/fans, quantity: fan_state, format: state}
      - topic: w/office/blinds
        quantity: shading_position
        format: {type: state, states: {down: 100, up: 0}}
"""


def _engine(tmp_path) -> Engine:
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent(SITE))
    config = load_site(site, {})
    return Engine(config, build_site_model(config),
                  load_rule_packs(["comfort", "fans", "shading"]), conditions_every_s=0,
                  start=0.0)


def _run(engine: Engine, minutes: range, readings: dict[str, bytes]) -> list[dict]:
    effects = []
    for minute in minutes:
        for second in range(0, 60, 10):
            t = 60.0 * minute + second
            engine.message("w/office/v", readings["v"], t)
            if second == 0:
                for key in ("ta", "rh", "fans", "blinds"):
                    engine.message(f"w/office/{key}", readings[key], t)
                engine.message("w/out/ghi", readings["ghi"], t)
            effects += engine.tick(t + 1.0)
    validate_effects(effects)
    return [e.payload for e in effects if isinstance(e, Publish) and "/events/" in e.topic
            and e.payload and e.payload.get("advisory")]


def test_too_cool_with_the_fans_on_says_to_turn_them_down(tmp_path):
    engine = _engine(tmp_path)
    # 23.5 °C with the fans giving 0.8 m/s, 1.2 met, 0.5 clo: PMV below -0.5 by both
    # ASHRAE 55 (the cooling effect of the air speed) and ISO 7730 (asserted below)
    on = {"ta": b"23.5", "rh": b"50", "v": b"0.8", "fans": b"on", "blinds": b"up",
          "ghi": b"100"}
    events = _run(engine, range(0, 40), on)
    raised = {e["advisory"]["rule"]: e["advisory"] for e in events if e["event"] == "raised"}
    fans = raised["fans.turn_down_fans"]
    assert fans["advice"].startswith("The fans in office are on but the space is now cool")
    assert "turn them down or off" in fans["advice"]
    assert fans["numbers"]["pmv_ashrae"]["value"] < -0.5
    # the comfort advice knows the fans are on: turning them down comes before the heating
    cool = raised["comfort.too_cool"]
    assert cool["advice"].startswith("The fans in office are on: turn them down or off first.")
    # the fans go off as advised: the advice is acted on and clears as the space warms up
    off = {**on, "v": b"0.05", "fans": b"off"}
    later = _run(engine, range(40, 80), off)
    assert any(e["event"] == "cleared" and e["advisory"]["rule"] == "fans.turn_down_fans"
               for e in later)
    acted = [e for e in later if e["advisory"]["rule"] == "fans.turn_down_fans"]
    assert acted[-1]["advisory"]["acted_on"] is not None


def test_blinds_lowered_on_a_cool_sunny_day_says_to_raise_them(tmp_path):
    engine = _engine(tmp_path)
    down = {"ta": b"20.5", "rh": b"45", "v": b"0.05", "fans": b"off", "blinds": b"down",
            "ghi": b"450"}
    events = _run(engine, range(0, 40), down)
    raised = {e["advisory"]["rule"]: e["advisory"] for e in events if e["event"] == "raised"}
    blinds = raised["shading.raise_shading"]
    assert "raise them to let the sun (450 W/m² outside) warm the space" in blinds["advice"]
    assert "The blinds are lowered: raise them" in raised["comfort.too_cool"]["advice"]
    assert "fans" not in raised["comfort.too_cool"]["advice"]
    assert "fans.turn_down_fans" not in raised
    # no sun: the blinds are no help, and the advice clears
    cloud = _run(engine, range(40, 80), {**down, "ghi": b"50"})
    assert any(e["event"] == "cleared" and e["advisory"]["rule"] == "shading.raise_shading"
               for e in cloud)
