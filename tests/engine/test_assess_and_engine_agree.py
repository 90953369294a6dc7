"""``thermowarden assess`` and the engine give the same number for every index from the
same inputs (the same defaults on both paths: solar load outdoors, air-speed height,
turbulence intensity, pressure from altitude, the sun's position)."""

from __future__ import annotations

import datetime as dt
import io
import json
import sys
import textwrap
from typing import Any

import pytest

from thermowarden import cli
from thermowarden.config import load_site
from thermowarden.core import outdoor
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

T0 = dt.datetime(2026, 7, 14, 12, 0, tzinfo=dt.UTC).timestamp()
MEANS = [22.5, 21.0, 20.0, 19.5, 19.0, 18.0, 17.5]

SITE = f"""\
site:
  id: same
  timezone: Europe/London
  altitude_m: 45
  latitude: 52.2
  longitude: -1.5
  outdoor_daily_means: {MEANS}
  outdoor_points:
    - {{topic: o/ta, quantity: outdoor_air_temperature}}
    - {{topic: o/rh, quantity: outdoor_relative_humidity}}
    - {{topic: o/wind, quantity: wind_speed, height_m: 10}}
    - {{topic: o/ghi, quantity: solar_irradiance}}
output: {{prefix: tw/same}}
defaults: {{occupancy: {{always: true}}}}
spaces:
  - id: office
    people: {{met: 1.2, clo: 0.6}}
    points:
      - {{topic: s/office/ta, quantity: air_temperature}}
      - {{topic: s/office/ta-head, quantity: air_temperature, height: head}}
      - {{topic: s/office/ta-ankle, quantity: air_temperature, height: ankle}}
      - {{topic: s/office/rh, quantity: relative_humidity}}
      - {{topic: s/office/globe, quantity: globe_temperature}}
      - {{topic: s/office/v, quantity: air_speed, interval_s: 10}}
      - {{topic: s/office/tu, quantity: turbulence_intensity}}
      - {{topic: s/office/window, quantity: plane_radiant_temperature, side: window}}
      - {{topic: s/office/room, quantity: plane_radiant_temperature, side: room}}
      - {{topic: s/office/floor, quantity: floor_temperature}}
      - {{topic: s/office/glass, quantity: surface_temperature}}
  - id: studio
    ventilation: natural
    people: {{met: 1.1, clo: 0.5}}
    points:
      - {{topic: s/studio/ta, quantity: air_temperature}}
      - {{topic: s/studio/rh, quantity: relative_humidity}}
      - {{topic: s/studio/globe, quantity: globe_temperature}}
      - {{topic: s/studio/v, quantity: air_speed, interval_s: 10}}
  - id: ovens
    hot_work: true
    people: {{work_class: moderate, clo: 0.6, acclimatised: true}}
    points:
      - {{topic: s/ovens/ta, quantity: air_temperature}}
      - {{topic: s/ovens/rh, quantity: relative_humidity}}
      - {{topic: s/ovens/globe, quantity: globe_temperature}}
      - {{topic: s/ovens/nwb, quantity: natural_wet_bulb}}
      - {{topic: s/ovens/v, quantity: air_speed, interval_s: 10}}
  - id: yard
    kind: outdoor
    people: {{work_class: high, clo: 0.6}}
    points:
      - {{topic: s/yard/ta, quantity: air_temperature}}
      - {{topic: s/yard/rh, quantity: relative_humidity}}
      - {{topic: s/yard/globe, quantity: globe_temperature, globe_diameter_m: 0.05}}
      - {{topic: s/yard/v, quantity: air_speed, interval_s: 10, height_m: 2}}
  - id: garden
    kind: outdoor
    people: {{met: 1.2, clo: 0.5, posture: seated}}
"""

READINGS: dict[str, dict[str, float]] = {
    "office": {"ta": 26.0, "ta-head": 26.5, "ta-ankle": 24.5, "rh": 55.0, "globe": 27.0,
               "v": 0.15, "tu": 30.0, "window": 32.0, "room": 25.0, "floor": 22.0,
               "glass": 18.0},
    "studio": {"ta": 28.0, "rh": 50.0, "globe": 28.5, "v": 0.9},
    "ovens": {"ta": 33.0, "rh": 40.0, "globe": 40.0, "nwb": 25.0, "v": 0.4},
    "yard": {"ta": 32.0, "rh": 45.0, "globe": 48.0, "v": 1.5},
}
OUTDOOR = {"ta": 29.0, "rh": 42.0, "wind": 3.0, "ghi": 780.0}

ASSESS: dict[str, dict[str, Any]] = {
    # the engine's air temperature is the mean of every air temperature sensor of the
    # space, the head and ankle ones too (combine: mean)
    "office": {"air_temperature": (26.0 + 26.5 + 24.5) / 3, "air_temperature_head": 26.5,
               "air_temperature_ankle": 24.5, "relative_humidity": 55.0,
               "globe_temperature": 27.0, "air_speed": 0.15, "turbulence_intensity": 30.0,
               "plane_radiant_temperature_window": 32.0, "plane_radiant_temperature_room": 25.0,
               "floor_temperature": 22.0, "surface_temperature": 18.0, "met": 1.2, "clo": 0.6},
    "studio": {"air_temperature": 28.0, "relative_humidity": 50.0, "globe_temperature": 28.5,
               "air_speed": 0.9, "met": 1.1, "clo": 0.5, "naturally_ventilated": True},
    "ovens": {"air_temperature": 33.0, "relative_humidity": 40.0, "globe_temperature": 40.0,
              "natural_wet_bulb": 25.0, "air_speed": 0.4, "work_class": "moderate",
              "clo": 0.6, "acclimatised": True, "hot_work": True},
    "yard": {"air_temperature": 32.0, "relative_humidity": 45.0, "globe_temperature": 48.0,
             "globe_diameter_m": 0.05, "air_speed": 1.5, "air_speed_height_m": 2.0,
             "work_class": "high", "clo": 0.6, "environment": "outdoor"},
    "garden": {"air_temperature": 29.0, "relative_humidity": 42.0, "air_speed": 3.0,
               "air_speed_height_m": 10.0, "solar_irradiance": 780.0, "met": 1.2,
               "clo": 0.5, "posture": "seated", "environment": "outdoor"},
}
for _space in ASSESS.values():
    _space.update({"altitude_m": 45, "outdoor_daily_means": MEANS, "latitude": 52.2,
                   "longitude": -1.5, "time": "2026-07-14T12:00:00Z"})

ENGINE_ONLY = {"wbgt_time_weighted"}
"""The engine's 60-minute window (assess takes it as an input, not given here)."""
ENGINE_ONLY_PREFIXES = ("wbgt_trend", "wbgt_minutes_to_", "sun_", "sky_clearness")
"""The forecasts of advice ahead of time: they rest on the readings' history and the
windows of a space, which a spot check does not have."""


def _engine_conditions(tmp_path) -> dict[str, dict[str, Any]]:
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent(SITE))
    config = load_site(site, {})
    engine = Engine(config, build_site_model(config), load_rule_packs([]),
                    conditions_every_s=0, start=T0 - 600)
    for step in range(0, 601, 10):
        t = T0 - 600 + step
        for space, values in READINGS.items():
            for key, v in values.items():
                engine.message(f"s/{space}/{key}", str(v).encode(), t)
        for key, v in OUTDOOR.items():
            engine.message(f"o/{key}", str(v).encode(), t)
        engine.tick(t)
    return {s.id: engine.conditions_payload(i)["indices"] for i, s in enumerate(config.spaces)}


def _assess(payload: dict[str, Any], monkeypatch, capsys) -> dict[str, Any]:
    monkeypatch.setattr(sys, "stdin", io.StringIO(json.dumps(payload)))
    code = cli.main(["assess"])
    out, err = capsys.readouterr()
    assert code == 0, err
    result: dict[str, Any] = json.loads(out)
    return result


def test_assess_and_the_engine_agree_on_every_index(tmp_path, monkeypatch, capsys):
    engine = _engine_conditions(tmp_path)
    compared = 0
    for space, payload in ASSESS.items():
        spot = _assess(payload, monkeypatch, capsys)
        for name, item in engine[space].items():
            if name in ENGINE_ONLY or name.startswith(ENGINE_ONLY_PREFIXES):
                continue
            other = spot[name]
            mine, theirs = item["value"], other["value"]
            assert (mine is None) == (theirs is None), (space, name, item, other)
            if isinstance(mine, float | int) and not isinstance(mine, bool):
                # the conditions payload rounds to 2 decimals (5 for kg/kg)
                assert theirs == pytest.approx(mine, abs=0.006), (space, name)
                compared += 1
            elif mine is not None:
                assert theirs == mine, (space, name)
                compared += 1
    assert compared >= 120
    # the indices that differed before: solar load outdoors (WBGT of the yard with the
    # outdoor formula on both paths), the anemometer's height, the garden's sun
    assert engine["yard"]["wbgt"]["value"] is not None
    assert engine["garden"]["utci"]["value"] is not None
    # humidex from the payload's own dew point by Environment Canada's formula
    for space in ("yard", "garden"):
        hx = outdoor.humidex_from_dew_point([READINGS.get(space, {"ta": OUTDOOR["ta"]})["ta"]],
                                            [engine[space]["dew_point"]["value"]])[0]
        assert engine[space]["humidex"]["value"] == pytest.approx(float(hx), abs=0.02)


SENML_SITE = """\
site: {id: pack, timezone: UTC}
output: {prefix: tw/pack}
defaults: {occupancy: {always: true}, people: {met: 1.2, clo: 0.5}}
spaces:
  - id: pitch
    kind: outdoor
    solar_load: false
    points:
      - {topic: p/pack, quantity: air_temperature, format: {type: senml, name: ta}}
      - {topic: p/pack, quantity: relative_humidity, format: {type: senml, name: rh}}
      - {topic: p/pack, quantity: globe_temperature, format: {type: senml, name: tg}}
      - {topic: p/pack, quantity: air_speed, format: {type: senml, name: v}%s}
"""


@pytest.mark.parametrize("height", [None, 2.0])
def test_an_anemometer_height_on_a_shared_senml_topic_counts(tmp_path, height, monkeypatch,
                                                            capsys):
    """Several points on one SenML topic: the anemometer's own height_m converts its speed to
    UTCI's 10 m (the height was looked up by topic, the first point on it winning)."""
    site = tmp_path / "site.yaml"
    site.write_text(SENML_SITE % ("" if height is None else f", height_m: {height}"))
    config = load_site(site, {})
    engine = Engine(config, build_site_model(config), load_rule_packs([]),
                    conditions_every_s=0, start=0.0)
    pack = json.dumps([{"n": "ta", "u": "Cel", "v": 30.0},
                       {"n": "rh", "u": "%RH", "v": 40.0}, {"n": "tg", "u": "Cel", "v": 45.0},
                       {"n": "v", "u": "m/s", "v": 2.0}]).encode()
    for t in range(0, 301, 10):
        engine.message("p/pack", pack, float(t))
        engine.tick(float(t))
    utci = engine.conditions_payload(0)["indices"]["utci"]["value"]
    spot = _assess({"air_temperature": 30.0, "relative_humidity": 40.0,
                    "globe_temperature": 45.0, "air_speed": 2.0, "met": 1.2, "clo": 0.5,
                    "environment": "outdoor", "solar_load": False,
                    **({} if height is None else {"air_speed_height_m": height})},
                   monkeypatch, capsys)
    assert utci == pytest.approx(spot["utci"]["value"], abs=0.006)
    # 2 m: the logarithmic profile multiplies by ln(1000)/ln(200) = 1.30 rather than 1.50
    # from 1.1 m, so less wind at 10 m and a warmer UTCI
    if height is not None:
        base = _assess({"air_temperature": 30.0, "relative_humidity": 40.0,
                        "globe_temperature": 45.0, "air_speed": 2.0, "met": 1.2, "clo": 0.5,
                        "environment": "outdoor", "solar_load": False}, monkeypatch, capsys)
        assert utci > base["utci"]["value"] + 0.3
