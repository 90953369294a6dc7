"""SenML (RFC 8428) through the ingest path: each value is taken only from the field that
fits the quantity, and a pack refuses only the points whose own records are wrong.

Field meanings, RFC 8428 section 4.2 (from memory of the RFC text): ``v`` a number,
``vs`` a string, ``vb`` a boolean, ``vd`` binary data, ``s`` a sum; section 4.5.3:
a resolved time below 2**28 is relative to now."""

from __future__ import annotations

import json
import math
import textwrap

import pytest

from tests.conftest import REPO
from thermowarden.config import load_site
from thermowarden.engine.ingest import Ingestor
from thermowarden.engine.state import SiteState
from thermowarden.site_model import build_site_model

NOW = 1_780_000_000.0
TOPIC = "larkfield/bakery-floor/senml"
GLOBE = "bakery-floor/globe_temperature"
NWB = "bakery-floor/natural_wet_bulb"


@pytest.fixture
def bakery():
    config = load_site(REPO / "deploy" / "example-site.yaml", {})
    model = build_site_model(config)
    state = SiteState(model)
    return model, state, Ingestor(model, state)


def send(ing, pack, topic=TOPIC, at=NOW):
    return ing.ingest(topic, json.dumps(pack).encode(), at)


def value(model, state, key) -> float:
    return float(state.last_value[model.point_by_key[key]])


def test_a_boolean_is_never_a_globe_temperature(bakery):
    model, state, ing = bakery
    pack = [{"bn": "urn:dev:bakery:", "n": "globe", "vb": True},
            {"n": "tnw", "u": "Cel", "v": 24.0}]
    (r,) = send(ing, pack)
    assert (r.reason, r.point) == ("not_numeric", GLOBE)
    assert "boolean (vb)" in r.detail and "number (v)" in r.detail
    assert math.isnan(value(model, state, GLOBE))  # no 1.0 °C globe
    assert value(model, state, NWB) == 24.0  # the other record of the pack is taken


@pytest.mark.parametrize("record, field", [
    ({"vs": "33.5"}, "string (vs)"),
    ({"vd": "MzMuNQ"}, "data (vd)"),
    ({"s": 33.5}, "sum (s)"),
    ({"v": "33.5"}, "v is str"),
    ({"v": True}, "v is bool"),
])
def test_only_v_for_a_measured_quantity(bakery, record, field):
    model, state, ing = bakery
    (r,) = send(ing, [{"bn": "urn:dev:bakery:", "n": "globe", "u": "Cel", **record},
                      {"n": "tnw", "u": "Cel", "v": 24.0}])
    assert r.reason == "not_numeric" and r.point == GLOBE and field in r.detail
    assert math.isnan(value(model, state, GLOBE))


def test_a_pack_without_one_record_is_not_malformed(bakery):
    model, state, ing = bakery
    # the device sent the globe alone this time
    (r,) = send(ing, [{"bn": "urn:dev:bakery:", "bt": NOW - 5, "n": "globe", "u": "Cel",
                       "v": 33.5}])
    assert (r.reason, r.point) == ("record_absent", NWB)
    assert "urn:dev:bakery:globe" in r.detail
    assert value(model, state, GLOBE) == 33.5
    assert ing.rejected[("malformed", NWB)] == 0 and ing.rejected[("malformed", GLOBE)] == 0


def test_a_damaged_record_refuses_only_its_own_point(bakery):
    model, state, ing = bakery
    pack = [{"bn": "urn:dev:bakery:", "n": "globe", "u": "Cel", "v": 33.5},
            {"n": "tnw", "u": "Cel", "v": {"not": "a number"}},
            "not a record"]
    (r,) = send(ing, pack)
    assert (r.reason, r.point) == ("not_numeric", NWB)
    assert value(model, state, GLOBE) == 33.5
    # a broken base name makes the records after it unreadable, not those before
    pack = [{"bn": "urn:dev:bakery:", "n": "globe", "u": "Cel", "v": 34.0, "t": 1},
            {"bn": 7, "n": "tnw", "u": "Cel", "v": 24.0}]
    (r,) = send(ing, pack)
    assert (r.reason, r.point) == ("malformed", NWB) and "bn" in r.detail
    assert value(model, state, GLOBE) == 34.0


def test_base_value_and_kelvin_still_resolved(bakery):
    model, state, ing = bakery
    # RFC 8428 4.5.1: the base value is added to v; 297.35 K = 24.2 °C
    assert send(ing, [{"bn": "urn:dev:bakery:", "bv": 290.0, "bu": "K", "n": "tnw",
                       "v": 7.35}, {"n": "globe", "u": "Cel", "bv": 0, "v": 33.0}]) == []
    assert value(model, state, NWB) == pytest.approx(24.2)
    assert value(model, state, GLOBE) == 33.0


STATE_SITE = """\
site: {id: states, timezone: UTC}
spaces:
  - id: office
    points:
      - {topic: s/office/pack, quantity: shading_position, format: {type: senml, name: blind}}
      - {topic: s/office/pack, quantity: fan_state, format: {type: senml, name: fan}}
      - {topic: s/office/pack, quantity: occupancy, format: {type: senml, name: pir}}
      - {topic: s/office/pack, quantity: air_temperature, format: {type: senml, name: ta}}
"""


@pytest.fixture
def office(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent(STATE_SITE))
    config = load_site(site, {})
    model = build_site_model(config)
    state = SiteState(model)
    return model, state, Ingestor(model, state)


def test_states_take_vb_vs_and_v(office):
    model, state, ing = office
    pack = [{"n": "blind", "vb": True}, {"n": "fan", "vs": "on"}, {"n": "pir", "v": 1},
            {"n": "ta", "u": "Cel", "v": 23.5}]
    assert send(ing, pack, "s/office/pack") == []
    assert value(model, state, "office/shading_position") == 100.0  # true: fully lowered
    assert value(model, state, "office/fan_state") == 1.0
    assert value(model, state, "office/occupancy") == 1.0
    assert value(model, state, "office/air_temperature") == 23.5
    pack = [{"n": "blind", "vs": "40"}, {"n": "fan", "vb": False}, {"n": "pir", "vs": "off"},
            {"n": "ta", "vs": "23.5"}]
    rejected = send(ing, pack, "s/office/pack", NOW + 10)
    assert [(r.reason, r.point) for r in rejected] == [
        ("not_numeric", "office/air_temperature")]  # a string is a state, not a reading
    assert value(model, state, "office/shading_position") == 40.0
    assert value(model, state, "office/fan_state") == 0.0
    assert value(model, state, "office/occupancy") == 0.0
    (r,) = send(ing, [{"n": "blind", "vs": "sideways"}, {"n": "fan", "vb": True},
                      {"n": "pir", "vb": True}, {"n": "ta", "v": 23.0}],
                "s/office/pack", NOW + 20)
    assert (r.reason, r.point) == ("unknown_state", "office/shading_position")


@pytest.mark.parametrize("payload", [b"{not json", b"[]", b'{"n": "globe", "v": 33}'])
def test_an_unreadable_pack_is_one_bad_message(bakery, payload):
    """A pack that cannot be read at all is one malformed message, counted once, not once
    per point that reads it (the globe and the natural wet bulb share this topic)."""
    model, state, ing = bakery
    rejected = ing.ingest(TOPIC, payload, NOW)
    assert [r.reason for r in rejected] == ["malformed"]
    assert sum(n for (reason, _), n in ing.rejected.items() if reason == "malformed") == 1
    assert math.isnan(value(model, state, GLOBE)) and math.isnan(value(model, state, NWB))
