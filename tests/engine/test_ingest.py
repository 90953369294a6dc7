"""Ingest: every message becomes readings in the right space in SI units, or a counted
rejection. Decoders are fuzzed with arbitrary bytes and JSON shapes."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.conftest import REPO
from thermowarden.config import load_site
from thermowarden.engine.ingest import Ingestor
from thermowarden.engine.state import SiteState
from thermowarden.site_model import build_site_model

NOW = 1_780_000_000.0


@pytest.fixture
def site():
    config = load_site(REPO / "deploy" / "example-site.yaml", {})
    model = build_site_model(config)
    state = SiteState(model)
    return model, state, Ingestor(model, state)


def latest(model, state, key):
    pid = model.point_by_key[key]
    return state.last_value[pid]


def test_template_and_explicit_points(site):
    model, state, ing = site
    assert ing.ingest("larkfield/office-west/air/temperature", b"26.5", NOW) == []
    assert latest(model, state, "office-west/air_temperature") == 26.5
    # 20 fpm -> 0.1016 m/s (1 fpm = 0.00508 m/s exactly)
    assert ing.ingest("larkfield/office-west/anemometer", b'{"speed": 20}', NOW) == []
    assert latest(model, state, "office-west/air_speed") == pytest.approx(0.1016)
    # °F on the studio globe
    assert ing.ingest("larkfield/studio-north/globe", b"77", NOW) == []
    assert latest(model, state, "studio-north/globe_temperature/west") == pytest.approx(25.0)


def test_senml_pack_feeds_two_points(site):
    model, state, ing = site
    pack = [{"bn": "urn:dev:bakery:", "bt": NOW - 5, "n": "globe", "u": "Cel", "v": 33.5},
            {"n": "tnw", "u": "K", "v": 297.35}]
    assert ing.ingest("larkfield/bakery-floor/senml", json.dumps(pack).encode(), NOW) == []
    assert latest(model, state, "bakery-floor/globe_temperature") == 33.5
    assert latest(model, state, "bakery-floor/natural_wet_bulb") == pytest.approx(24.2)
    assert state.last_time[model.point_by_key["bakery-floor/globe_temperature"]] == NOW - 5
    # the same pack again (QoS 1 redelivery) is a duplicate, counted per point
    again = ing.ingest("larkfield/bakery-floor/senml", json.dumps(pack).encode(), NOW + 1)
    assert [r.reason for r in again] == ["duplicate", "duplicate"]
    assert ing.rejected[("duplicate", "bakery-floor/globe_temperature")] == 1


def test_senml_unknown_unit_refused(site):
    _, _, ing = site
    pack = [{"bn": "urn:dev:bakery:", "n": "globe", "u": "degR", "v": 600}]
    (r,) = ing.ingest("larkfield/bakery-floor/senml", json.dumps(pack).encode(), NOW)[:1]
    assert r.reason == "unknown_unit"


def test_json_timestamps_ms_and_iso(site):
    model, state, ing = site
    body = {"globe": {"c": 41.0}, "nwb": {"c": 26.0}, "time": int((NOW - 30) * 1000)}
    assert ing.ingest("larkfield/loading-yard/wbgt-station", json.dumps(body).encode(), NOW) == []
    pid = model.point_by_key["loading-yard/globe_temperature"]
    assert state.last_time[pid] == NOW - 30
    body["time"] = "2026-05-28T20:27:00Z"  # 1_780_000_020 s: 20 s in the future is within skew
    body["globe"]["c"] = 42.0
    assert ing.ingest("larkfield/loading-yard/wbgt-station", json.dumps(body).encode(),
                      NOW) == []
    assert state.last_value[pid] == 42.0


def test_states(site):
    model, state, ing = site
    assert ing.ingest("larkfield/office-west/blinds", b"half", NOW) == []
    assert latest(model, state, "office-west/shading_position") == 50
    assert ing.ingest("larkfield/office-west/blinds", b"true", NOW + 1) == []
    assert latest(model, state, "office-west/shading_position") == 100
    assert ing.ingest("larkfield/office-west/fans", b"ON", NOW) == []
    assert latest(model, state, "office-west/fan_state") == 1
    (r,) = ing.ingest("larkfield/office-west/blinds", b"sideways", NOW + 2)
    assert r.reason == "unknown_state"


@pytest.mark.parametrize("topic,payload,reason", [
    ("larkfield/nowhere", b"1", "unknown_topic"),
    ("larkfield/ghost-room/air/temperature", b"21", "unknown_space"),
    ("larkfield/office-west/air/temperature", b"warm", "not_numeric"),
    ("larkfield/office-west/air/temperature", b"NaN", "not_finite"),
    ("larkfield/office-west/air/temperature", b"inf", "not_finite"),
    ("larkfield/office-west/air/humidity", b"140", "implausible"),
    ("larkfield/office-west/air/temperature", b"\xff\xfe", "malformed"),
    ("larkfield/office-west/anemometer", b'{"sped": 1}', "malformed"),
    ("larkfield/office-west/anemometer", b'{"speed": true}', "not_numeric"),
    ("larkfield/office-west/air/temperature", b"1" * 5000, "payload_too_large"),
])
def test_rejections_are_counted(site, topic, payload, reason):
    _, _, ing = site
    (r,) = ing.ingest(topic, payload, NOW)
    assert r.reason == reason
    assert ing.rejected_by_reason()[reason] == 1
    assert ing.accepted == 0


def test_time_checks(site):
    model, state, ing = site
    t = "larkfield/loading-yard/wbgt-station"
    old = json.dumps({"globe": {"c": 30}, "nwb": {"c": 20}, "time": NOW - 3600}).encode()
    assert {r.reason for r in ing.ingest(t, old, NOW)} == {"too_old"}
    future = json.dumps({"globe": {"c": 30}, "nwb": {"c": 20}, "time": NOW + 600}).encode()
    assert {r.reason for r in ing.ingest(t, future, NOW)} == {"in_future"}
    newer = json.dumps({"globe": {"c": 30}, "nwb": {"c": 20}, "time": NOW - 10}).encode()
    older = json.dumps({"globe": {"c": 31}, "nwb": {"c": 21}, "time": NOW - 20}).encode()
    assert ing.ingest(t, newer, NOW) == []
    assert {r.reason for r in ing.ingest(t, older, NOW)} == {"out_of_order"}
    assert latest(model, state, "loading-yard/globe_temperature") == 30


def test_one_space_cannot_corrupt_another(site):
    model, state, ing = site
    ing.ingest("larkfield/office-west/air/temperature", b"22", NOW)
    for bad in (b"1e999", b"-300", b"{}", b"", b"[1,2]"):
        ing.ingest("larkfield/studio-north/air/temperature", bad, NOW)
    assert latest(model, state, "office-west/air_temperature") == 22


json_values = st.recursive(
    st.none() | st.booleans() | st.floats(allow_nan=True, allow_infinity=True)
    | st.integers(min_value=-(10**30), max_value=10**30) | st.text(max_size=12),
    lambda children: st.lists(children, max_size=4)
    | st.dictionaries(st.sampled_from(["v", "n", "u", "bn", "bt", "t", "vb", "speed", "globe",
                                       "c", "time", "bu", "bv", "value", "nwb", "temp_c"]),
                      children, max_size=5),
    max_leaves=12)


def fresh_site(topic_index: int):
    """A new example site (model, state, ingest) and one of its topics."""
    config = load_site(REPO / "deploy" / "example-site.yaml", {})
    model = build_site_model(config)
    state = SiteState(model)
    topics = sorted({p.topic for p in model.points})
    return model, state, Ingestor(model, state), topics[topic_index % len(topics)]


@settings(max_examples=300, deadline=None)
@given(topic_index=st.integers(0, 50), raw=st.binary(max_size=300))
@pytest.mark.long
def test_fuzz_bytes_only_readings_or_counted_rejections(topic_index, raw):
    model, state, ing, topic = fresh_site(topic_index)
    before = ing.accepted + sum(ing.rejected.values())
    rejections = ing.ingest(topic, raw, NOW)
    after = ing.accepted + sum(ing.rejected.values())
    assert after > before
    assert len(rejections) == sum(ing.rejected.values())
    assert np.all(np.isfinite(state.last_value[:state.n_points][
        np.isfinite(state.last_time[:state.n_points])]))


@settings(max_examples=300, deadline=None)
@given(topic_index=st.integers(0, 50), doc=json_values)
@pytest.mark.long
def test_fuzz_json_shapes(topic_index, doc):
    model, state, ing, topic = fresh_site(topic_index)
    payload = json.dumps(doc, allow_nan=True).encode()
    rejections = ing.ingest(topic, payload, NOW)
    assert ing.accepted + len(rejections) >= 1
    for pid in range(state.n_points):
        if math.isfinite(state.last_time[pid]):
            spec = model.points[pid]
            assert spec.low <= state.last_value[pid] <= spec.high


def _feed() -> list[tuple[str, bytes, float, bool]]:
    """Plain numbers on template and explicit points (°F, plausible range, rate limits),
    with every kind of oddity a sensor sends, in one order."""
    odd = [b" 21.5 ", b"21.5\n", b"nan", b"-inf", b"1e400", b"\xff\xfe", b"", b"1_0",
           "\u0662\u0663".encode(), b"23.4\x00", b"+22", b"-0", b"2.2e1", b"abc", b"1" * 100_000,
           b'{"v": 1}', b"95", b"-80", b"0x10", b"\xc2\xa022.5"]
    topics = ["larkfield/office-west/air/temperature", "larkfield/office-west/air/humidity",
              "larkfield/studio-north/globe", "larkfield/bakery-floor/air/ankle",
              "larkfield/office-west/anemometer", "larkfield/nowhere/air/temperature",
              "larkfield/office-west/unknown", "larkfield/office-west/blinds",
              "larkfield/office-west/fans"]
    # states: configured words, on/off words, booleans, numbers, JSON, and words refused
    states = [b"down", b"half", b"up", b" up ", b"on", b"OFF", b"true", b"1", b"0", b"50",
              b"nan", b"maybe", b'"on"', b"{bad", b'{"v": 1}', b"", b"\xff", b"Down", b"150"]
    feed = []
    t = NOW
    for k in range(4000):
        topic = topics[k % len(topics)]
        if topic.endswith(("blinds", "fans")):
            payload = states[(k // len(topics)) % len(states)]
        else:
            payload = (odd[k % len(odd)] if k % 3 == 0
                       else f"{18 + (k * 7) % 130 / 10:.1f}".encode())
        t += 1.0
        # sometimes back in time (out of order), sometimes retained
        feed.append((topic, payload, t - 100 if k % 50 == 0 else t, k % 97 == 0))
    return feed


def test_many_messages_at_once_as_one_by_one():
    """ingest_many (the live service's batches) takes every message as ingest() would:
    the same rejections with the same words, readings, counters and touched points."""
    config = load_site(REPO / "deploy" / "example-site.yaml", {})
    feed = _feed()
    one_model = build_site_model(config)
    one_state = SiteState(one_model)
    one = Ingestor(one_model, one_state)
    expected, touched = [], []
    for topic, payload, t, retained in feed:
        expected.extend((t, r) for r in one.ingest(topic, payload, t, retained))
        touched.extend(one.last_points)
    many_model = build_site_model(config)
    many_state = SiteState(many_model)
    many = Ingestor(many_model, many_state)
    got, touched_many = [], []
    for i in range(0, len(feed), 250):  # in batches, like the service's
        got.extend(many.ingest_many(feed[i:i + 250]))
        touched_many.extend(many.last_points)
    assert got == expected
    assert touched_many == touched
    reasons = {r.reason for _, r in got}
    assert {"not_numeric", "not_finite", "malformed", "unknown_space", "unknown_topic",
            "payload_too_large", "implausible", "out_of_order",
            "retained_without_time"} <= reasons
    assert many.received == one.received == len(feed)
    assert many.accepted == one.accepted > 1000
    assert many.rejected == one.rejected
    assert many.accepted_by_quantity == one.accepted_by_quantity
    assert many.missed_by_quantity == one.missed_by_quantity
    for name in ("last_value", "last_time", "last_source_time"):
        np.testing.assert_array_equal(getattr(many_state, name), getattr(one_state, name))
    for name in ("t", "v", "head"):
        np.testing.assert_array_equal(getattr(many_state.rings, name),
                                      getattr(one_state.rings, name))
