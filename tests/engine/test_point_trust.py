"""Points that can be trusted one by one: calibration (scale and offset), a plausible range
narrower than the physical one, a largest believable change per minute, and a stuck window
per point. Through the paths users take: the site file, ingest, the engine."""

from __future__ import annotations

import textwrap

import pytest

from thermowarden.config import ConfigError, load_site
from thermowarden.engine.ingest import IMPLAUSIBLE, IMPLAUSIBLE_CHANGE, Ingestor
from thermowarden.engine.state import SiteState
from thermowarden.site_model import build_site_model

NOW = 1_780_000_000.0

SITE = """\
site: {id: trust, timezone: UTC}
spaces:
  - id: office
    points:
      - topic: t/office/ta
        quantity: air_temperature
        interval_s: 60
        offset: -1.5
        plausible_min: 5
        plausible_max: 40
        max_change_per_min: 2
        stuck_after_s: 1800
      - topic: t/office/ta-f
        quantity: air_temperature
        sensor: spare
        unit: degF
        scale: 1.02
        offset: 0.2
      - {topic: t/office/rh, quantity: relative_humidity}
"""


def _site(tmp_path, text=SITE):
    path = tmp_path / "site.yaml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return load_site(path, {})


@pytest.fixture
def trust(tmp_path):
    model = build_site_model(_site(tmp_path))
    state = SiteState(model)
    return model, state, Ingestor(model, state)


def _value(model, state, key):
    return float(state.last_value[model.point_by_key[key]])


def test_calibration_offset_and_scale_in_canonical_unit(trust):
    model, state, ing = trust
    assert ing.ingest("t/office/ta", b"25.0", NOW) == []
    assert _value(model, state, "office/air_temperature") == pytest.approx(23.5)
    # 77 °F = 25 °C exactly; then 25 * 1.02 + 0.2 = 25.7 °C
    assert ing.ingest("t/office/ta-f", b"77", NOW) == []
    assert _value(model, state, "office/air_temperature/spare") == pytest.approx(25.7)
    # a point without calibration is unchanged
    assert ing.ingest("t/office/rh", b"45", NOW) == []
    assert _value(model, state, "office/relative_humidity") == 45.0


def test_plausible_range_per_point_after_calibration(trust):
    model, state, ing = trust
    # 55 °C is physically possible air but not in this office: refused, counted
    (r,) = ing.ingest("t/office/ta", b"55", NOW)
    assert r.reason == IMPLAUSIBLE and "5..40" in r.detail
    assert ing.rejected[(IMPLAUSIBLE, "office/air_temperature")] == 1
    assert state.last_value[model.point_by_key["office/air_temperature"]] != \
        state.last_value[model.point_by_key["office/air_temperature"]]  # still NaN
    # 41 reads 39.5 after the -1.5 calibration: inside the range
    assert ing.ingest("t/office/ta", b"41", NOW) == []
    assert _value(model, state, "office/air_temperature") == pytest.approx(39.5)
    # the other sensor keeps the physical range only (-60..80 °C)
    assert ing.ingest("t/office/ta-f", b"140", NOW) == []  # 60 °C * 1.02 + 0.2


def test_rate_limit_refuses_spikes_and_accepts_a_real_step_later(trust):
    model, state, ing = trust
    key = "office/air_temperature"
    assert ing.ingest("t/office/ta", b"22.0", NOW) == []  # 20.5 after calibration
    # +1.9 K in 60 s is within 2 K/min
    assert ing.ingest("t/office/ta", b"23.9", NOW + 60) == []
    # +6 K in 60 s is a spike: refused, the last accepted value stays
    (r,) = ing.ingest("t/office/ta", b"29.9", NOW + 120)
    assert r.reason == IMPLAUSIBLE_CHANGE and "2 per minute" in r.detail
    assert _value(model, state, key) == pytest.approx(22.4)
    # compared with the last accepted reading (at NOW + 60): 6 K over 3 minutes is believable
    assert ing.ingest("t/office/ta", b"29.9", NOW + 240) == []
    assert _value(model, state, key) == pytest.approx(28.4)
    assert ing.rejected[(IMPLAUSIBLE_CHANGE, key)] == 1
    # no limit on the other sensor
    assert ing.ingest("t/office/rh", b"20", NOW) == []
    assert ing.ingest("t/office/rh", b"90", NOW + 1) == []


@pytest.mark.parametrize(("point", "message"), [
    ("{topic: a/b, quantity: air_temperature, plausible_min: 30, plausible_max: 20}",
     "plausible_min (30) must be below plausible_max (20) in °C"),
    ("{topic: a/b, quantity: air_temperature, plausible_max: 120}",
     "plausible_max 120 is outside the physical range of air_temperature"),
    ("{topic: a/b, quantity: air_temperature, scale: 0}", "greater than 0"),
    ("{topic: a/b, quantity: air_temperature, stuck_after_s: 10}",
     "greater than or equal to 60"),
    ("{topic: a/b, quantity: fan_state, format: state, offset: 1}",
     "offset apply to measured quantities, not to the state fan_state"),
])
def test_bad_point_settings_refused_with_position(tmp_path, point, message):
    text = f"site: {{id: x}}\nspaces:\n  - id: s\n    points:\n      - {point}\n"
    with pytest.raises(ConfigError) as exc:
        _site(tmp_path, text)
    shown = str(exc.value)
    assert message in shown
    assert "site.yaml:5:" in shown


ENGINE_SITE = """\
site: {id: trust, timezone: UTC}
defaults: {occupancy: {always: true}, rule_packs: [sensor_health]}
spaces:
  - id: office
    points:
      - topic: t/office/ta
        quantity: air_temperature
        interval_s: 60
        stuck_after_s: 1800
        plausible_max: 40
        max_change_per_min: 1
  - id: store
    points:
      - {topic: t/store/ta, quantity: air_temperature, interval_s: 60}
"""


def _engine(tmp_path):
    from thermowarden.engine import Engine
    from thermowarden.rules import load_rule_packs

    config = _site(tmp_path, ENGINE_SITE)
    packs = load_rule_packs(["sensor_health"], [], base=tmp_path / "site.yaml")
    return Engine(config, build_site_model(config), packs, start=NOW)


def _raised(effects):
    from thermowarden.effects import Publish

    return [(e.payload["advisory"]["space"]["id"], e.payload["advisory"]["rule"])
            for e in effects if isinstance(e, Publish) and "/events/" in e.topic
            and e.payload and e.payload.get("event") == "raised"]


def test_stuck_window_per_point(tmp_path):
    engine = _engine(tmp_path)
    raised = []
    # both report the same value every minute for 2.5 hours
    for minute in range(151):
        t = NOW + 60 * minute
        engine.message("t/office/ta", b"22.0", t)
        engine.message("t/store/ta", b"18.0", t)
        raised += [(t - NOW, r) for r in _raised(engine.tick(t + 1))]
    stuck = [(after, space) for after, (space, rule) in raised
             if rule == "sensor_health.stuck_value"]
    # the office's window is 30 minutes; the store keeps the 3-hour default
    assert [space for _, space in stuck] == ["office"]
    assert 1800 <= stuck[0][0] <= 1800 + 120


def test_refused_spikes_and_out_of_range_count_as_implausible(tmp_path):
    engine = _engine(tmp_path)
    engine.message("t/office/ta", b"22.0", NOW)
    assert _raised(engine.tick(NOW + 1)) == []
    (r,) = engine.message("t/office/ta", b"30.0", NOW + 60)  # +8 K in a minute
    assert r.reason == IMPLAUSIBLE_CHANGE
    assert ("office", "sensor_health.implausible_values") in _raised(engine.tick(NOW + 61))
    (r,) = engine.message("t/store/ta", b"95", NOW + 70)  # outside the physical range
    assert r.reason == IMPLAUSIBLE
    assert ("store", "sensor_health.implausible_values") in _raised(engine.tick(NOW + 71))


def test_check_shows_each_points_own_settings(tmp_path):
    from thermowarden.site_check import check_site, resolved_map

    _site(tmp_path)
    report = check_site(str(tmp_path / "site.yaml"))
    assert report.ok and report.model is not None
    lines = resolved_map(report.model)
    (ta,) = [line for line in lines if "t/office/ta " in line]
    assert ta.endswith("(x 1 -1.5 °C; plausible 5..40 °C; at most 2 °C/min; "
                       "stuck after 1800 s)")
    (spare,) = [line for line in lines if "t/office/ta-f" in line]
    assert spare.endswith("(x 1.02 +0.2 °C)")
    (rh,) = [line for line in lines if "t/office/rh" in line]
    assert rh.endswith("]")


def test_runs_of_messages_are_checked_as_one_by_one(tmp_path):
    """Ingest of a run of messages (replay, the service) takes each reading of a
    calibrated, range- and rate-limited point exactly as one message at a time does: the
    same rejections, gaps counted, stored values and rings."""
    import numpy as np

    config = _site(tmp_path)
    feed = []
    t = NOW
    for k in range(600):
        t += 30.0 if k % 41 else 400.0  # now and then a gap of several intervals
        # spikes: too fast (k % 53), out of the plausible range (k % 59)
        ta = 22.0 + (k % 7) * 0.6 + (9.0 if k % 53 == 0 else 0.0) + (25.0 if k % 59 == 0
                                                                      else 0.0)
        feed.append(("t/office/ta", f"{ta:.1f}".encode(), t if k % 67 else t - 90, False))
        feed.append(("t/office/ta-f", f"{ta * 1.8 + 32 + (k % 29 == 0) * 60:.1f}".encode(), t,
                     False))
        feed.append(("t/office/rh", b"45" if k % 31 else b"nan", t, False))
    runs, one = [], []
    for way in (runs, one):
        model = build_site_model(config)
        state = SiteState(model)
        way.extend([model, state, Ingestor(model, state), []])
    for msg in feed:
        one[3].extend((msg[2], r) for r in one[2].ingest(*msg))
    for i in range(0, len(feed), 37):
        runs[3].extend(runs[2].ingest_many(feed[i:i + 37]))
    assert runs[3] == one[3]
    reasons = {r.reason for _, r in one[3]}
    assert {IMPLAUSIBLE, IMPLAUSIBLE_CHANGE, "out_of_order", "not_finite"} <= reasons
    for name in ("received", "accepted", "rejected", "accepted_by_quantity",
                 "missed_by_quantity"):
        assert getattr(runs[2], name) == getattr(one[2], name), name
    assert sum(one[2].missed_by_quantity.values()) > 0
    for name in ("last_value", "last_time", "last_source_time"):
        np.testing.assert_array_equal(getattr(runs[1], name), getattr(one[1], name))
