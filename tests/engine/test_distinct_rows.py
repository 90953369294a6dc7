"""Indices of many rows with repeats, each distinct row computed once, are the indices of
computing every row (values, reasons, methods), and rows that differ only in a text input
(posture) are not taken for each other."""

from __future__ import annotations

import numpy as np

from thermowarden.core.indices import SpaceInputs, compute_indices
from thermowarden.engine.evaluation import compute_distinct, take_inputs


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
