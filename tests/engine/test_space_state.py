"""Per-space state: freshness, windows, combination of sensors, WBGT history, occupancy."""

from __future__ import annotations

import datetime as dt
import textwrap

import numpy as np
import pytest

from thermowarden.config import load_site
from thermowarden.engine.ingest import Ingestor
from thermowarden.engine.state import SiteState
from thermowarden.site_model import build_site_model

# Tuesday 2026-06-02 12:00 UTC (13:00 in London)
NOON = dt.datetime(2026, 6, 2, 12, 0, tzinfo=dt.UTC).timestamp()

SITE = """\
site: {id: s, timezone: Europe/London}
ingest: {stale_after_intervals: 3, air_speed_window_s: 180}
defaults:
  occupancy: {hours: {tue: ["08:00-18:00"]}, holidays: [2026-06-09]}
templates:
  - {topic: "s/{space}/ta/{sensor}", quantity: air_temperature, interval_s: 10}
spaces:
  - id: a
    combine: height_weighted
    points:
      - {topic: s/a/ta-ankle, quantity: air_temperature, height: ankle, interval_s: 10}
      - {topic: s/a/ta-mid, quantity: air_temperature, height: abdomen, interval_s: 10}
      - {topic: s/a/ta-head, quantity: air_temperature, height: head, interval_s: 10}
      - {topic: s/a/v, quantity: air_speed, interval_s: 10}
      - {topic: s/a/tg, quantity: globe_temperature, interval_s: 10}
      - {topic: s/a/tnw, quantity: natural_wet_bulb, interval_s: 10}
      - {topic: s/a/flux-up, quantity: radiant_flux, side: ceiling, interval_s: 10}
      - {topic: s/a/tpr-down, quantity: plane_radiant_temperature, side: floor, interval_s: 10}
  - id: b
  - id: yard
    kind: outdoor
site_extra: null
"""


@pytest.fixture
def site(tmp_path):
    text = SITE.replace("site_extra: null\n", "")
    text = text.replace("site: {id: s, timezone: Europe/London}",
                        "site:\n  id: s\n  timezone: Europe/London\n  outdoor_points:\n"
                        "    - {topic: s/out/t, quantity: outdoor_air_temperature, "
                        "interval_s: 60}\n    - {topic: s/out/wind, quantity: wind_speed, "
                        "interval_s: 60}")
    p = tmp_path / "site.yaml"
    p.write_text(textwrap.dedent(text))
    model = build_site_model(load_site(p, {}))
    state = SiteState(model)
    return model, state, Ingestor(model, state)


def test_height_weighting_and_head_ankle(site):
    """ISO 7726 / ISO 7243 heterogeneous weighting (ankle + 2 abdomen + head) / 4."""
    model, state, ing = site
    for topic, v in (("s/a/ta-ankle", b"24"), ("s/a/ta-mid", b"28"), ("s/a/ta-head", b"30")):
        assert ing.ingest(topic, v, NOON) == []
    snap = state.snapshot(NOON + 5)
    assert snap.inputs.air_temperature[0] == pytest.approx((24 + 2 * 28 + 30) / 4)
    assert snap.inputs.air_temperature_head[0] == 30
    assert snap.inputs.air_temperature_ankle[0] == 24
    # sensors at different heights differ by design: not a disagreement
    assert np.isnan(snap.disagreement["air_temperature"][0])


def test_stale_after_three_intervals(site):
    model, state, ing = site
    ing.ingest("s/a/tg", b"30", NOON)
    assert state.snapshot(NOON + 29).inputs.globe_temperature[0] == 30
    snap = state.snapshot(NOON + 31)
    assert np.isnan(snap.inputs.globe_temperature[0])
    assert not snap.present["globe_temperature"][0]


def test_air_speed_window_mean_and_turbulence(site):
    """ISO 7726: mean over the last 3 minutes; Tu = 100 x SD / mean."""
    model, state, ing = site
    speeds = [0.1, 0.3] * 15  # 30 samples, 10 s apart: 300 s
    for k, v in enumerate(speeds):
        ing.ingest("s/a/v", str(v).encode(), NOON + 10 * k)
    now = NOON + 10 * (len(speeds) - 1)
    snap = state.snapshot(now)
    window = np.array(speeds[-19:])  # samples within [now - 180, now]
    assert snap.inputs.air_speed[0] == pytest.approx(window.mean())
    tu = 100 * window.std(ddof=1) / window.mean()
    assert snap.inputs.turbulence_intensity[0] == pytest.approx(tu)


def test_sensor_template_and_redundant_sensors(site):
    model, state, ing = site
    assert ing.ingest("s/b/ta/left", b"21", NOON) == []
    assert ing.ingest("s/b/ta/right", b"23.5", NOON) == []
    snap = state.snapshot(NOON)
    assert snap.inputs.air_temperature[1] == pytest.approx(22.25)
    assert snap.disagreement["air_temperature"][1] == pytest.approx(2.5)


def test_radiant_flux_converted_to_plane_temperature(site):
    model, state, ing = site
    ing.ingest("s/a/flux-up", b"450", NOON)
    ing.ingest("s/a/tpr-down", b"22", NOON)
    snap = state.snapshot(NOON)
    assert snap.inputs.plane_radiant["up"][0] == pytest.approx(25.3, abs=0.05)
    assert snap.inputs.plane_radiant["down"][0] == 22


def test_outdoor_space_uses_site_points(site):
    model, state, ing = site
    ing.ingest("s/out/t", b"31", NOON)
    ing.ingest("s/out/wind", b"2.5", NOON)
    snap = state.snapshot(NOON + 1)
    assert snap.inputs.air_temperature[2] == 31
    assert snap.inputs.air_speed[2] == 2.5
    assert np.isnan(snap.inputs.air_temperature[1])  # indoor spaces do not


def test_wbgt_time_weighted_over_60_minutes(site):
    """Time-weighted mean of WBGT over one hour (ISO 7243 / NIOSH 1-h TWA): 30 minutes at
    26 °C then 30 minutes at 30 °C -> 28 °C [calc]."""
    model, state, ing = site
    n = model.n_spaces
    for k in range(361):
        t = NOON + 10 * k
        value = 26.0 if k <= 180 else 30.0
        state.record_wbgt(t, np.full(n, value))
    twa = state.wbgt_time_weighted(NOON + 3600)
    assert twa[0] == pytest.approx(28.0, abs=0.1)
    assert np.isnan(state.wbgt_time_weighted(NOON + 3 * 3600)[0])  # nothing recorded since


def test_wbgt_time_weighted_covers_the_full_60_minutes(site):
    """The first minute of the hour counts: 60 s at 40 °C then 59 min at 28 °C ->
    (40 x 60 + 28 x 3540) / 3600 = 28.2 °C [calc]; a 59-minute window would give 28.03."""
    model, state, ing = site
    n = model.n_spaces
    for k in range(361):
        value = 40.0 if 1 <= k <= 6 else 28.0
        state.record_wbgt(NOON + 10 * k, np.full(n, value))
    assert state.wbgt_time_weighted(NOON + 3600)[0] == pytest.approx(28.2, abs=0.005)


def test_occupancy_schedule_holiday_and_point(site):
    model, state, ing = site
    snap = state.snapshot(NOON)  # Tuesday 13:00 London
    assert snap.occupied.tolist() == [True, True, True]
    night = dt.datetime(2026, 6, 2, 21, 0, tzinfo=dt.UTC).timestamp()
    assert not state.snapshot(night).occupied.any()
    holiday = dt.datetime(2026, 6, 9, 12, 0, tzinfo=dt.UTC).timestamp()
    assert not state.snapshot(holiday).occupied.any()


def test_daily_outdoor_means_roll_at_local_midnight(site):
    model, state, ing = site
    import zoneinfo

    start = dt.datetime(2026, 6, 1, 0, 0, tzinfo=zoneinfo.ZoneInfo("Europe/London")).timestamp()
    for day in range(8):
        for k in range(0, 86_400, 600):
            t = start + day * 86_400 + k
            ing.ingest("s/out/t", str(15.0 + day).encode(), t)
            state.snapshot(t)
    assert state.daily_means[:3] == pytest.approx([21.0, 20.0, 19.0], abs=0.01)
    snap = state.snapshot(start + 8 * 86_400 + 60)
    # the eighth day (22 °C) rolled over at local midnight: it is now yesterday
    expected = sum(w * (22.0 - i) for i, w in enumerate((1, .8, .6, .5, .4, .3, .2))) / 3.8
    assert snap.inputs.running_mean_outdoor[0] == pytest.approx(expected, abs=0.01)
