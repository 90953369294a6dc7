"""Indices of many rows with repeats, each distinct row computed once, are the indices of
computing every row (values, reasons, methods), rows that differ only in a text input
(posture) are not taken for each other, and the engine recomputes a space when its inputs
change, not every tick."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

from thermowarden.config import load_site
from thermowarden.core.indices import SpaceInputs, compute_indices
from thermowarden.engine import Engine
from thermowarden.engine.index_rows import compute_distinct, take_inputs
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model


def spaces() -> SpaceInputs:
    """Five invented spaces: an office, a warm office with a fan, a hot work bay with a
    natural wet-bulb, one without any humidity reading and one outdoors."""
    nan = np.nan
    return SpaceInputs.create(
        5,
        air_temperature=np.array([22.5, 29.0, 33.0, 24.0, 31.0]),
        relative_humidity=np.array([45.0, 55.0, 40.0, nan, 35.0]),
        globe_temperature=np.array([23.0, 31.5, 41.0, 24.5, 45.0]),
        air_speed=np.array([0.1, 0.6, 0.3, 0.15, 1.5]),
        natural_wet_bulb=np.array([nan, nan, 25.0, nan, nan]),
        met=np.array([1.2, 1.2, 2.8, 1.1, 2.0]),
        clo=np.array([0.6, 0.5, 0.6, 0.7, 0.5]),
        hot_work=np.array([False, False, True, False, True]),
        indoor=np.array([True, True, True, True, False]),
        posture=("seated", "standing", "standing", "seated", "standing"))


def assert_same_tables(a: dict, b: dict) -> None:
    assert a.keys() == b.keys()
    for name in a:
        ca, cb = a[name], b[name]
        np.testing.assert_array_equal(ca.values, cb.values, err_msg=name)  # NaN where NaN
        assert [ca.reason_at(i) for i in range(ca.values.size)] == \
            [cb.reason_at(i) for i in range(cb.values.size)], name
        assert (ca.unit, ca.method) == (cb.unit, cb.method), name


def test_repeated_rows_computed_once_give_every_row() -> None:
    rows = np.array([0, 1, 2, 0, 3, 1, 1, 4, 2, 0, 3, 4])  # 12 rows, 5 distinct
    s = take_inputs(spaces(), rows)
    assert_same_tables(compute_distinct(s, with_phs=False), compute_indices(s, with_phs=False))


def test_rows_differing_only_in_posture_are_kept_apart() -> None:
    # no globe: the mean radiant temperature comes from six plane radiant temperatures,
    # weighted by posture (ISO 7726 Annex B), so the same numbers give two values
    one = np.ones(4)
    planes = {"up": 40.0 * one, "down": 22.0 * one, "left": 24.0 * one, "right": 24.0 * one,
              "front": 35.0 * one, "back": 23.0 * one}
    s = SpaceInputs.create(4, air_temperature=24.0 * one, relative_humidity=50.0 * one,
                           air_speed=0.1 * one, met=1.2 * one, clo=0.6 * one,
                           plane_radiant=planes,
                           posture=("seated", "standing", "seated", "standing"))
    distinct = compute_distinct(s, with_phs=False)
    assert_same_tables(distinct, compute_indices(s, with_phs=False))
    mrt = distinct["mean_radiant_temperature"].values
    assert mrt[0] == mrt[2] and mrt[1] == mrt[3] and mrt[0] != mrt[1]


SUN_AND_SHADE_SITE = """\
site:
  id: yard
  timezone: UTC
  latitude: 41.7
  longitude: -87.9
  outdoor_points:
    - {topic: yard/out/ghi, quantity: solar_irradiance}
output: {prefix: tw/yard}
defaults: {occupancy: {always: true}, people: {met: 2.0, clo: 0.5}}
templates:
  - {topic: "yard/{space}/ta", quantity: air_temperature, interval_s: 60}
  - {topic: "yard/{space}/rh", quantity: relative_humidity, interval_s: 60}
  - {topic: "yard/{space}/v", quantity: air_speed, interval_s: 60}
spaces:
  - {id: open-yard, kind: outdoor}
  - {id: store, kind: indoor, assume: {mean_radiant_temperature: air}}
"""


def test_the_clock_alone_recomputes_only_where_the_sun_is_used(tmp_path):
    """Readings once a minute, ticks every 10 s (invented yard at Argonne's latitude): the
    indoor store's indices are computed once per change of its readings, not every tick
    (the tick's time is no input of its indices); the open yard without a globe is computed
    every tick, because its natural wet bulb follows the sun's position (Liljegren et al.
    2008 with the global irradiance), and that value moves between ticks of one minute."""
    path = tmp_path / "site.yaml"
    path.write_text(SUN_AND_SHADE_SITE)
    config = load_site(path, {})
    start = dt.datetime(2025, 7, 15, 18, tzinfo=dt.UTC).timestamp()  # sun high
    engine = Engine(config, build_site_model(config), load_rule_packs([], base=path),
                    conditions_every_s=0, start=start)
    yard, store = (config.spaces.index(s) for s in config.spaces)
    nwb: list[float] = []
    computed: list[int] = []
    for minute in range(3):
        t = start + 60 * minute
        for space in ("open-yard", "store"):
            for key, v in (("ta", 31.0 + minute), ("rh", 40.0), ("v", 1.0)):
                engine.message(f"yard/{space}/{key}", str(v).encode(), t)
        engine.message("yard/out/ghi", b"850", t)
        for step in range(0, 60, 10):
            engine.tick(t + step)
            computed.append(engine.evaluation.computed_rows)
            assert engine.last_batch is not None
            nwb.append(float(engine.last_batch[1]["natural_wet_bulb_estimated"].values[yard]))
    assert engine.conditions_payload(store)["indices"]["operative_temperature"]["value"] \
        == pytest.approx(33.0)
    # per tick: the yard always; the store only at the first tick of each minute
    steps = np.diff([0, *computed])
    assert steps.tolist() == [2, 1, 1, 1, 1, 1] * 3
    assert np.isfinite(nwb).all() and len(set(nwb[:6])) == 6, nwb  # the sun moved
