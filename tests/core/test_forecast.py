"""The trend of the spot WBGT and the crossing of the 60-minute mean (core/forecast.py).

Every expected value here is worked by hand from the definitions in the module docstring
(Theil 1950, Sen 1968, Gilbert 1987 section 16.5), shown beside the check."""

from __future__ import annotations

import math

import numpy as np
import pytest

from thermowarden.core.forecast import bin_centres, minutes_to_mean, theil_sen


def test_theil_sen_small_case_by_hand() -> None:
    # pairs of t=[0,1,2,3], y=[0,1,2,10]: slopes 1,1,10/3,1,4.5,8 -> sorted 1,1,1,10/3,4.5,8;
    # median (1 + 10/3)/2 = 13/6. Residuals y - 13/6 t: 0, -7/6, -14/6, 3.5; median -7/12.
    # Var(S) = 4*3*13/18 = 26/3, C = 1.6449*sqrt(26/3) = 4.843, M1 = 0.58 -> rank 1 (1),
    # M2 = 5.42 -> rank 6 (8).
    tr = theil_sen(np.array([[0.0, 1, 2, 3]]), np.array([[0.0, 1, 2, 10]]), at=3.0,
                   min_points=2)
    assert tr.slope[0] == pytest.approx(13 / 6)
    assert tr.level[0] == pytest.approx(-7 / 12 + 13 / 6 * 3)
    assert tr.lower[0] == pytest.approx(1.0)
    assert tr.upper[0] == pytest.approx(8.0)
    assert tr.steady[0] == 1.0
    assert tr.points[0] == 4


def test_theil_sen_ignores_one_outlier_and_gaps() -> None:
    t = np.arange(20.0) * 60
    y = 24.0 + t / 900.0  # 1 K per 15 minutes
    y[7] = 40.0           # one wild reading
    y[3] = np.nan         # one missing minute
    tr = theil_sen(t[None, :], y[None, :], at=float(t[-1]))
    # 18 good points: their 153 pairwise slopes are all exactly 1/900 out of 171; the median
    # and both interval ranks (M1 = 52, M2+1 = 120 of 171) fall among them
    assert tr.slope[0] == pytest.approx(1 / 900)
    assert tr.level[0] == pytest.approx(24.0 + t[-1] / 900)
    assert tr.steady[0] == 1.0


def test_theil_sen_not_steady_when_flat_or_few_points() -> None:
    t = np.arange(20.0) * 60
    zigzag = np.where(np.arange(20) % 2 == 0, 24.0, 24.5)  # no trend: median slope 0
    falling = 30.0 - t / 1800.0
    few = np.full(20, np.nan)
    few[:5] = 24.0 + t[:5] / 900
    tr = theil_sen(np.vstack([t, t, t]), np.vstack([zigzag, falling, few]), at=1140.0)
    assert tr.slope[0] == pytest.approx(0.0)
    assert tr.steady[0] == 0.0          # interval spans zero
    assert tr.steady[1] == -1.0         # a steady fall
    assert tr.slope[1] == pytest.approx(-1 / 1800)
    assert math.isnan(tr.slope[2]) and tr.steady[2] == 0.0  # 5 < 10 points


def test_minutes_to_mean_rising_by_hand() -> None:
    # a full window at 24.0 °C, the spot value rising from 24.0 at 1 K per 15 minutes: after
    # j minutes the mean is 24 + j^2/1800 (j projected minutes at 24 + (i - 0.5)/15 replace j
    # at 24), so it reaches 25.0 at j = sqrt(1800) = 42.43 minutes
    values = np.full((1, 60), 24.0)
    weights = np.full((1, 60), 60.0)
    got = minutes_to_mean(values, weights, np.array([24.0]), np.array([1 / 900]),
                          np.array([25.0]), rising=True)
    assert got[0] == pytest.approx(math.sqrt(1800), abs=0.01)


def test_minutes_to_mean_falling_already_there_and_never() -> None:
    values = np.vstack([np.full(60, 26.0), np.full(60, 25.5), np.full(60, 24.0)])
    weights = np.full((3, 60), 60.0)
    level = np.array([26.0, 25.5, 24.0])
    slope = np.array([-1 / 900, 0.0, 0.0])
    target = np.array([25.0, 25.0, 25.0])
    down = minutes_to_mean(values, weights, level, slope, target, rising=False)
    assert down[0] == pytest.approx(math.sqrt(1800), abs=0.01)  # mirror of the rising case
    assert math.isnan(down[1])   # flat above the target: never below
    assert down[2] == 0.0        # already below
    up = minutes_to_mean(values, weights, level, slope, target, rising=True)
    assert up[0] == 0.0 and up[1] == 0.0 and math.isnan(up[2])


def test_minutes_to_mean_uses_the_values_already_in_the_window() -> None:
    # the oldest 30 minutes at 20 °C, the newest 30 at 26 °C (mean 23.0), the spot value flat
    # at 26: each minute replaces one at 20 by one at 26 (+0.1 K per minute), so the mean
    # reaches 25.0 after 20 minutes
    values = np.concatenate([np.full(30, 20.0), np.full(30, 26.0)])[None, :]
    weights = np.full((1, 60), 60.0)
    got = minutes_to_mean(values, weights, np.array([26.0]), np.array([0.0]),
                          np.array([25.0]), rising=True)
    assert got[0] == pytest.approx(20.0)
    # gaps count for nothing: with the newest 30 minutes missing the mean is 20.0; after j
    # minutes 30 - j old minutes at 20 and j new ones at 26 are covered, and
    # (20(30 - j) + 26j) / 30 = 25 at j = 25
    values2 = values.copy()
    values2[0, 30:] = np.nan
    got2 = minutes_to_mean(values2, weights, np.array([26.0]), np.array([0.0]),
                           np.array([25.0]), rising=True)
    assert got2[0] == pytest.approx(25.0)


def test_bin_centres() -> None:
    c = bin_centres(np.array([10.0, 11.0, 12.0]), np.array([60.0, 0.0, 20.0]), now=740.0)
    assert c[0] == 630.0 and math.isnan(c[1]) and c[2] == 730.0
