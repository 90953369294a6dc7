"""The compiled per-space solvers of the cooling effect and of the air speed needed
(core/comfort_kernels.py) on a dense grid of office and warm-workplace conditions."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from thermowarden.core import comfort


def grid() -> tuple[np.ndarray, ...]:
    rows = list(itertools.product(
        np.arange(20.0, 36.1, 2.0),        # air temperature, °C
        (-1.0, 0.0, 3.0),                  # mean radiant minus air temperature, K
        (0.15, 0.3, 0.6, 1.0, 1.6),        # relative air speed, m/s
        (30.0, 50.0, 70.0),                # relative humidity, %
        (1.0, 1.2, 1.6),                   # met
        (0.5, 0.8)))                       # clo
    m = np.array(rows, dtype=np.float64).T
    ta, dtr, vr, rh, met, clo = m
    return ta, ta + dtr, vr, rh, met, clo


def test_cooling_effect_matches_pythermalcomfort_on_a_grid():
    """pythermalcomfort's own cooling_effect (brentq per space, rounded to 0.01 K) [lib]:
    ours solves to a SET residual of 0.01 K (CE to about 0.01 K), so the two agree within
    0.02 K wherever pythermalcomfort gives a value."""
    from pythermalcomfort.models import cooling_effect as ptc_cooling_effect

    ta, tr, vr, rh, met, clo = grid()
    ours = comfort.cooling_effect(ta, tr, vr, rh, met, clo)
    theirs = np.asarray(ptc_cooling_effect(tdb=ta, tr=tr, vr=vr, rh=rh, met=met, clo=clo).ce,
                        dtype=np.float64)
    both = np.isfinite(theirs)
    assert both.sum() > 0.9 * ta.size
    assert np.all(np.isfinite(ours[both]))
    assert np.max(np.abs(ours[both] - theirs[both])) <= 0.02


def test_cooling_effect_is_the_same_alone_or_in_a_batch():
    """A row's result depends on its inputs alone: one core or several, alone or among
    thousands (the live engine computes a few spaces a tick, replay thousands of rows)."""
    ta, tr, vr, rh, met, clo = grid()
    batch = comfort.cooling_effect(ta, tr, vr, rh, met, clo)
    assert ta.size >= comfort.PARALLEL_FROM  # the multi-core kernel
    for i in range(0, ta.size, 97):
        one = comfort.cooling_effect(ta[i:i + 1], tr[i:i + 1], vr[i:i + 1], rh[i:i + 1],
                                     met[i:i + 1], clo[i:i + 1])
        assert one[0] == batch[i] or (np.isnan(one[0]) and np.isnan(batch[i]))


def test_air_speed_needed_reaches_the_target_on_a_grid():
    """Fed back through the ASHRAE 55 method, the speed found gives the target PMV (within
    the solver's tolerances: 0.01 K of SET, 0.001 of PMV), where a speed up to 2 m/s
    suffices."""
    ta, tr, vr, rh, met, clo = grid()
    target = np.full(ta.size, 0.5)
    v = comfort.air_speed_for_pmv(ta, tr, vr, rh, met, clo, target)
    found = np.isfinite(v) & (v > comfort.STILL_AIR)
    assert found.sum() > 200
    pmv = comfort.pmv_ashrae(ta[found], tr[found], v[found], rh[found], met[found], clo[found])
    assert pmv == pytest.approx(target[found], abs=0.02)
    still = np.isfinite(v) & (v == comfort.STILL_AIR)
    pmv_still = comfort.pmv_fanger(ta[still], tr[still], np.full(still.sum(), 0.1), rh[still],
                                   met[still], clo[still])
    assert np.all(pmv_still > target[still])  # only warm spaces get a speed
    # the batch equals each row alone
    for i in range(0, ta.size, 131):
        one = comfort.air_speed_for_pmv(ta[i:i + 1], tr[i:i + 1], vr[i:i + 1], rh[i:i + 1],
                                        met[i:i + 1], clo[i:i + 1], target[i:i + 1])
        assert one[0] == v[i] or (np.isnan(one[0]) and np.isnan(v[i]))


def test_remembered_results_are_the_solved_ones():
    """The memo returns what solving gives, for repeated rows within and across calls, and
    keeps to its size."""
    from thermowarden.core.comfort_kernels import _Memo

    solved_rows: list[int] = []

    def solve(cols):
        solved_rows.append(cols[0].size)
        return cols[0] * 10.0 + cols[1]

    memo = _Memo(slots=8)
    a = np.array([1.0, 2.0, 1.0, 3.0, 2.0])
    b = np.array([0.5, 0.5, 0.5, 0.5, 0.5])
    assert memo.apply([a, b], solve).tolist() == [10.5, 20.5, 10.5, 30.5, 20.5]
    assert solved_rows == [3]  # each distinct row once
    assert memo.apply([a[::-1], b], solve).tolist() == [20.5, 30.5, 10.5, 20.5, 10.5]
    assert solved_rows == [3]  # all remembered
    c = np.array([1.0, 1.0, 4.0])
    assert memo.apply([c, np.array([0.5, 0.25, 0.5])], solve).tolist() == [10.5, 10.25, 40.5]
    assert solved_rows == [3, 2]
    many = np.arange(20.0)
    assert memo.apply([many, many], solve).tolist() == (many * 11.0).tolist()
    assert len(memo) <= 8


def test_air_speed_remembered_per_upper_speed():
    """A speed remembered for one upper bound is not returned for another."""
    ta = np.array([28.0])
    args = (ta, ta, np.array([0.1]), np.array([50.0]), np.array([1.1]), np.array([0.5]),
            np.array([0.5]))
    wide = comfort.air_speed_for_pmv(*args)
    assert np.isfinite(wide[0]) and wide[0] > 0.2
    narrow = comfort.air_speed_for_pmv(*args, max_speed=0.8 * wide[0])
    assert np.isnan(narrow[0])  # a bound below the speed needed does not suffice


def test_memo_gives_what_solving_gives_whatever_its_size():
    """Rows that recur and rows that differ in one bit only, in tables too small for them
    (slots taken over): every result is the one solving the row gives."""
    from thermowarden.core.comfort_kernels import _Memo

    rng = np.random.default_rng(5)
    base = np.round(rng.uniform(20.0, 35.0, (40, 3)), 1)
    base[1] = base[0]
    base[1, 2] = np.nextafter(base[0, 2], np.inf)  # one bit apart
    base[2:4] = base[0]
    base[2, 1], base[3, 1] = 0.0, -0.0  # the same number, not the same bits

    def solve(cols):
        return cols[0] * 1000.0 + cols[1] * 10.0 + cols[2]

    for slots in (1, 4, 64, 4096):
        memo = _Memo(slots=slots)
        for _ in range(6):
            rows = base[rng.integers(0, len(base), 25)]
            cols = [rows[:, 0], rows[:, 1], rows[:, 2]]
            assert memo.apply(cols, solve).tolist() == solve(cols).tolist(), slots
        assert len(memo) <= slots
    assert memo.hits > 0
