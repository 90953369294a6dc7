"""A space's mean radiant temperature from what it has, through the engine: the example
site's staff garden (the site's pyranometer, no globe) and a perimeter room with window-
and room-facing radiant sensors and no globe."""

from __future__ import annotations

import gzip
import textwrap

import numpy as np
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


def test_the_staff_garden_gets_utci_and_wbgt_from_the_pyranometer():
    config = load_site(SITE, {})
    garden = [s.id for s in config.spaces].index("staff-garden")
    n = len(config.spaces)
    seen = {"utci": 0, "wbgt": 0, "rows": 0, "sources": set()}

    def batch(engine: Engine, _result: object) -> None:
        table = engine.last_batch[1]
        rows = np.arange(garden, table["utci"].values.size, n)
        seen["rows"] += rows.size
        seen["utci"] += int(table["utci"].present[rows].sum())
        seen["wbgt"] += int(table["wbgt"].present[rows].sum())
        src = table["mean_radiant_temperature_source"]
        seen["sources"] |= {src.as_dict(int(r))["value"] for r in rows}

    with gzip.open(FEED, "rt", encoding="utf-8") as fh:
        replay(config, read_feed(fh, str(FEED)), base=str(SITE), tick_s=60, on_batch=batch)
    assert seen["rows"] > 800
    assert seen["utci"] == seen["rows"] and seen["wbgt"] == seen["rows"]
    assert seen["sources"] == {"sun and irradiance (no globe)"}


PERIMETER = """\
site: {id: sunny, timezone: UTC}
output: {prefix: tw/sunny}
defaults: {occupancy: {always: true}, people: {met: 1.2, clo: 0.5}}
spaces:
  - id: perimeter
    rule_packs: [comfort, fans]
    assume: {air_speed: 0.1, mean_radiant_temperature: air}
    points:
      - {topic: s/p/ta, quantity: air_temperature}
      - {topic: s/p/rh, quantity: relative_humidity}
      - {topic: s/p/window, quantity: plane_radiant_temperature, side: window}
      - {topic: s/p/room, quantity: plane_radiant_temperature, side: room}
"""


def test_a_room_with_window_and_room_radiant_sensors_gets_comfort_advice(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent(PERIMETER))
    config = load_site(site, {})
    engine = Engine(config, build_site_model(config), load_rule_packs(["comfort", "fans"]),
                    conditions_every_s=0, start=0.0)
    effects = []
    for minute in range(40):
        t = 60.0 * minute
        for topic, v in (("s/p/ta", 27.0), ("s/p/rh", 50.0), ("s/p/window", 38.0),
                         ("s/p/room", 27.0)):
            engine.message(topic, f"{v}".encode(), t)
        effects += engine.tick(t + 1.0)
    cond = engine.conditions_payload(0)
    # ISO 7726 standing weights, the four planes not measured at the assumed air: (0.35 x
    # (38 + 27) + 0.23 x 54 + 0.08 x 54) / 1.32 = 29.92 °C (hand calculation)
    assert cond["indices"]["mean_radiant_temperature"]["value"] == pytest.approx(29.92,
                                                                                 abs=0.01)
    assert cond["indices"]["mean_radiant_temperature_source"]["value"] == \
        "planes measured, the others assumed"
    raised = {e.payload["advisory"]["rule"] for e in effects if isinstance(e, Publish)
              and "/events/" in e.topic and e.payload and e.payload.get("event") == "raised"}
    assert {"comfort.too_warm", "fans.switch_on_fans"} <= raised
