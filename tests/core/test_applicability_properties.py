"""Property tests: every index keeps to its applicability limits, says why when it does
not apply, and no input makes the core or ``thermowarden assess`` fail.

The limits checked here are the ones the README's methods table states (each from its
standard, or a documented decision). Any value an index gives lies inside them; outside
them the index is absent with a reason.
"""

from __future__ import annotations

import contextlib
import io
import json
import sys
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from thermowarden import cli
from thermowarden.core import heat_stress, outdoor
from thermowarden.core import psychrometrics as psy
from thermowarden.core.indices import SpaceInputs, compute_indices

N = 12
TOL = 1e-6


def maybe(low: float, high: float) -> st.SearchStrategy[float]:
    """A reading in a wide physical range, or missing (NaN)."""
    return st.one_of(st.just(float("nan")), st.floats(low, high, allow_nan=False))


space = st.fixed_dictionaries({
    "air_temperature": maybe(-30.0, 65.0),
    "relative_humidity": maybe(0.0, 100.0),
    "globe_temperature": maybe(-30.0, 90.0),
    "mean_radiant_temperature": maybe(-30.0, 90.0),
    "air_speed": maybe(0.0, 20.0),
    "relative_air_speed": maybe(0.0, 3.0),
    "air_speed_height_m": st.floats(0.2, 30.0),
    "natural_wet_bulb": maybe(-10.0, 45.0),
    "running_mean_outdoor": maybe(-5.0, 40.0),
    "met": maybe(0.7, 5.0),
    "clo": maybe(0.0, 2.5),
    "indoor": st.booleans(),
    "naturally_ventilated": st.booleans(),
    "solar_load": st.booleans(),
    "hot_work": st.booleans(),
    "posture": st.sampled_from(sorted(heat_stress.POSTURE_SPELLINGS)),
    "turbulence_intensity": maybe(0.0, 100.0),
    "floor_temperature": maybe(-5.0, 60.0),
    "air_temperature_head": maybe(0.0, 45.0),
    "air_temperature_ankle": maybe(0.0, 45.0),
    "plane_up": maybe(-10.0, 80.0),
    "plane_down": maybe(-10.0, 80.0),
    "plane_front": maybe(-10.0, 80.0),
    "plane_back": maybe(-10.0, 80.0),
    "solar_irradiance": maybe(0.0, 1400.0),
    "latitude": maybe(-90.0, 90.0),
    "longitude": maybe(-180.0, 180.0),
    "time_s": maybe(0.0, 2.5e9),
    "phs_edition": st.sampled_from(heat_stress.PHS_EDITIONS),
})


def build(rows: list[dict[str, Any]]) -> SpaceInputs:
    n = len(rows)
    given_: dict[str, Any] = {}
    planes: dict[str, np.ndarray] = {}
    for key in rows[0]:
        if key.startswith("plane_"):
            planes[key[len("plane_"):]] = np.array([r[key] for r in rows], dtype=np.float64)
        elif key == "phs_edition":
            given_[key] = tuple(r[key] for r in rows)
        elif key == "posture":
            given_[key] = tuple(heat_stress.canonical_posture(r[key]) for r in rows)
        elif isinstance(rows[0][key], bool):
            given_[key] = np.array([r[key] for r in rows], dtype=bool)
        else:
            given_[key] = np.array([r[key] for r in rows], dtype=np.float64)
    given_["plane_radiant"] = planes
    return SpaceInputs.create(n, **given_)


def present(table: dict[str, Any], name: str) -> np.ndarray:
    col = table[name]
    return np.asarray(col.present)


def inside(x: np.ndarray, low: float, high: float) -> np.ndarray:
    result: np.ndarray = (x >= low - TOL) & (x <= high + TOL)
    return result


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(space, min_size=1, max_size=N))
def test_every_index_keeps_to_its_limits(rows):
    s = build(rows)
    t = compute_indices(s, with_phs=False)
    ta, rh, v = s.air_temperature, s.relative_humidity, s.air_speed
    for name, col in t.items():
        ok = col.present
        assert np.all(np.isfinite(col.values[ok])), name
        for i in np.flatnonzero(~ok):
            assert col.reason_at(int(i)), name  # absent always says why
    met_c = np.where(np.isfinite(s.met), s.met, 1.2)
    rel = np.where(np.isfinite(s.relative_air_speed), s.relative_air_speed, v)
    mrt = t["mean_radiant_temperature"].values

    p = present(t, "mean_radiant_temperature")
    from_globe = p & np.isnan(s.mean_radiant_temperature) & np.isfinite(s.globe_temperature)
    assert np.all(np.isfinite(v[from_globe]))  # no still air assumed
    assert np.all(s.globe_temperature[from_globe] >= ta[from_globe] - 5.0 - TOL)
    some_plane = np.zeros(s.n, dtype=bool)
    for plane in s.plane_radiant.values():
        some_plane |= np.isfinite(plane)
    other = p & np.isnan(s.mean_radiant_temperature) & np.isnan(s.globe_temperature)
    # planes with the air for the others, or outdoors in the sun from the irradiance
    assert np.all(np.isfinite(ta[other]))
    from_sun = other & ~some_plane
    assert np.all(~s.indoor[from_sun] & s.solar_load[from_sun])
    assert np.all(np.isfinite(s.solar_irradiance[from_sun]))

    p = present(t, "pmv_iso")
    assert np.all(s.indoor[p])
    assert np.all(inside(ta[p], 10, 30)) and np.all(inside(mrt[p], 10, 40))
    assert np.all(inside(rel[p], 0, 1)) and np.all(inside(met_c[p], 0.8, 4))
    assert np.all(inside(t["pmv_iso"].values[p], -2, 2))
    assert np.all(psy.vapour_pressure(ta[p], t["relative_humidity"].values[p]) <= 2700 + TOL)

    p = present(t, "pmv_ashrae")
    assert np.all(s.indoor[p]) and np.all(inside(ta[p], 10, 40))
    assert np.all(inside(met_c[p], 1, 2)) and np.all(inside(t["pmv_ashrae"].values[p], -3, 3))

    p = present(t, "set")
    assert np.all(inside(ta[p], 10, 40)) and np.all(inside(mrt[p], 10, 40))
    assert np.all(inside(v[p], 0, 2)) and np.all(inside(met_c[p], 1, 4))

    for name in ("adaptive_ashrae_comfort", "adaptive_en_comfort"):
        p = present(t, name)
        assert np.all(s.indoor[p] & s.naturally_ventilated[p]), name
        assert np.all(inside(met_c[p], 1.0, 1.3)), name
    p = present(t, "adaptive_en_II_lower")
    assert np.all(s.running_mean_outdoor[p] >= 15.0 - TOL)

    for name, high in (("heat_index", 50.0), ("humidex", 50.0)):
        p = present(t, name)
        assert not np.any(s.indoor[p]), name
        assert np.all(inside(ta[p], 20, high)), name
    assert np.all(t["heat_index"].values[present(t, "heat_index")] <= 60.0 + TOL)
    p = present(t, "humidex")
    assert not np.any(psy.dew_point(ta[p], rh[p]) > 40.0 + TOL)  # NaN: dry air, no dew point

    p = present(t, "utci")
    assert not np.any(s.indoor[p])
    wind10 = outdoor.wind_at_10m(v, s.air_speed_height_m)
    assert np.all(inside(wind10[p], 0.5, 17.0)) and np.all(inside(ta[p], -50, 50))

    p = present(t, "natural_wet_bulb_estimated")
    assert np.all(np.isnan(s.natural_wet_bulb[p]))
    assert np.all(np.isfinite(v[p])) and np.all(inside(ta[p], 0, 50))
    assert np.all(t["natural_wet_bulb_estimated"].values[p] <= ta[p] + 20.0)

    # the natural wet-bulb estimate: from the mean radiant temperature within its range, or
    # outdoors in the sun without one, from the irradiance at a known place and time
    p = present(t, "natural_wet_bulb_estimated")
    with_mrt = np.isfinite(mrt) & present(t, "mean_radiant_temperature")
    by_mrt = with_mrt & inside(mrt - ta, -10.0, 70.0)
    # (a globe beyond its method's range outdoors in the sun: the irradiance takes over)
    by_sun = ((~with_mrt | ~inside(mrt - ta, -10.0, 70.0)) & ~s.indoor & s.solar_load
              & np.isfinite(s.solar_irradiance)
              & np.isfinite(s.latitude) & np.isfinite(s.longitude) & np.isfinite(s.time_s))
    assert np.all(by_mrt[p] | by_sun[p])
    assert np.all(np.isfinite(rh[p]) | np.isfinite(t["relative_humidity"].values[p]))

    p = present(t, "wbgt")
    assert np.all(np.isfinite(s.globe_temperature[p]))
    assert np.all(np.isfinite(s.natural_wet_bulb[p]) | present(t, "natural_wet_bulb_estimated")[p])

    p = present(t, "operative_temperature")
    assert np.all(np.isfinite(ta[p]) & np.isfinite(mrt[p]) & np.isfinite(v[p]))

    tu = np.where(np.isfinite(s.turbulence_intensity), s.turbulence_intensity, 40.0)
    p = present(t, "draught_rate")
    assert np.all(s.indoor[p]) and np.all(inside(ta[p], 20, 26)) and np.all(v[p] < 0.5)
    assert np.all(inside(tu[p], 10, 60))
    p = present(t, "vertical_temperature_difference_pd")
    assert np.all(s.air_temperature_head[p] - s.air_temperature_ankle[p] < 8.0)
    p = present(t, "floor_temperature_pd")
    assert np.all(inside(s.floor_temperature[p], 10, 40))
    p = present(t, "radiant_asymmetry_pd")
    planes = s.plane_radiant
    h = planes["front"] - planes["back"]
    up = planes["up"] - planes["down"]
    assert np.all(np.isnan(h[p]) | np.where(h[p] >= 0, h[p] < 35, -h[p] < 15))
    assert np.all(np.isnan(up[p]) | np.where(up[p] >= 0, up[p] < 23, -up[p] < 15))

    for name in ("metabolic_rate", "wbgt_reference_acclimatised", "wbgt_margin_unacclimatised"):
        p = present(t, name)
        assert np.all(np.isfinite(s.met[p])), name  # never an assumed metabolic rate
        for i in np.flatnonzero(np.isnan(s.met)):
            assert "metabolic rate" in (t[name].reason_at(int(i)) or ""), name


@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(space, min_size=1, max_size=6))
def test_phs_keeps_to_its_limits(rows):
    """ISO 7933 (either edition, any posture spelling, with or without a metabolic rate):
    PHS only for hot work and inside Annex A's ranges of the edition asked for."""
    s = build(rows)
    t = compute_indices(s, with_phs=True)
    ta, v = s.air_temperature, s.air_speed
    mrt = t["mean_radiant_temperature"].values
    rh = t["relative_humidity"].values
    clo = s.clo
    pa = psy.vapour_pressure(ta, rh)
    m = s.met * 58.15
    is_2004 = np.array([e == "2004" for e in s.phs_edition], dtype=bool)
    for name in ("phs_rectal_temperature", "phs_sweat_loss", "phs_limit_rectal",
                 "phs_limit_water_loss_95"):
        col = t[name]
        p = np.asarray(col.present)
        assert np.all(np.isfinite(col.values[p])), name
        for i in np.flatnonzero(~p):
            assert col.reason_at(int(i)), name
        assert np.all(s.hot_work[p]) and np.all(np.isfinite(s.met[p])), name
        assert np.all(inside(ta[p], 15, 50)) and np.all(inside(mrt[p] - ta[p], 0, 60)), name
        assert np.all(inside(v[p], 0, 3)) and np.all(inside(clo[p], 0.1, 1.0)), name
        assert np.all(pa[p] <= 4500 + TOL), name
        assert np.all(is_2004[p] | (pa[p] >= 500 - TOL)), name
        assert np.all(~is_2004[p] | inside(m[p], 100, 450)), name
        assert np.all(is_2004[p] | inside(m[p], 56, 250)), name


@pytest.mark.parametrize("tpma,applies", [(10.0, True), (33.5, True), (33.50000000000001, True),
                                          (9.99, False), (33.51, False)])
def test_adaptive_limits_tolerate_rounding(tpma, applies):
    """ASHRAE 55 adaptive range 10-33.5 °C: a limit reached up to rounding is inside."""
    s = SpaceInputs.create(1, running_mean_outdoor=np.array([tpma]),
                           naturally_ventilated=np.array([True]), met=np.array([1.1]))
    col = compute_indices(s, with_phs=False)["adaptive_ashrae_comfort"]
    assert bool(col.present[0]) is applies
    if not applies:
        assert "10-33.5" in (col.reason_at(0) or "")


def test_en_adaptive_scope():
    """EN 16798-1 adaptive: only naturally ventilated, at most 1.3 met, lower limit from a
    running mean of 15 °C."""
    s = SpaceInputs.create(4, running_mean_outdoor=np.array([20.0, 20.0, 20.0, 12.0]),
                           naturally_ventilated=np.array([True, False, True, True]),
                           met=np.array([1.2, 1.2, 1.6, 1.2]),
                           air_temperature=np.full(4, 24.0),
                           mean_radiant_temperature=np.full(4, 24.0), air_speed=np.full(4, 0.1))
    t = compute_indices(s, with_phs=False)
    assert list(t["adaptive_en_comfort"].present) == [True, False, False, True]
    assert "mechanically" in (t["adaptive_en_comfort"].reason_at(1) or "")
    assert "1.3" in (t["adaptive_en_comfort"].reason_at(2) or "")
    assert t["adaptive_en_II_upper"].present[3] and not t["adaptive_en_II_lower"].present[3]
    assert "15 °C" in (t["adaptive_en_II_lower"].reason_at(3) or "")


def test_globe_far_colder_than_air_and_no_air_speed():
    """A globe 20 K below the air gives no mean radiant temperature (it used to give
    -96 °C); a globe without an air speed gives none either, and both say why."""
    s = SpaceInputs.create(3, air_temperature=np.array([30.0, 30.0, 30.0]),
                           globe_temperature=np.array([10.0, 32.0, 32.0]),
                           air_speed=np.array([0.2, np.nan, 0.2]))
    table = compute_indices(s, with_phs=False)
    col = table["mean_radiant_temperature"]
    assert not col.present[0] and "colder than the air" in (col.reason_at(0) or "")
    assert not col.present[1] and "air_speed" in (col.reason_at(1) or "")
    assert col.present[2]
    # nor an operative temperature from the rejected globe (found by the property test)
    op = table["operative_temperature"]
    assert not op.present[0] and "mean radiant" in (op.reason_at(0) or "")
    assert op.present[2]


def test_heat_index_and_humidex_upper_bounds():
    """60 °C at 100 % used to give a heat index of 339 °C; now nothing, with a reason."""
    s = SpaceInputs.create(2, air_temperature=np.array([60.0, 45.0]),
                           relative_humidity=np.array([100.0, 70.0]),
                           indoor=np.array([False, False]))
    t = compute_indices(s, with_phs=False)
    for name in ("heat_index", "humidex"):
        assert not t[name].present[0] and t[name].reason_at(0)
    assert not t["heat_index"].present[1]  # 45 °C at 70 %: far beyond Steadman's tables
    assert "60 °C" in (t["heat_index"].reason_at(1) or "")


def test_psychrometer_and_dry_air_messages():
    """A wet bulb far too low says so (not "above dry bulb"); RH 0 % has a wet bulb."""
    s = SpaceInputs.create(3, air_temperature=np.array([30.0, 30.0, 30.0]),
                           psychrometric_wet_bulb=np.array([2.0, 31.0, np.nan]),
                           relative_humidity=np.array([np.nan, np.nan, 0.0]))
    t = compute_indices(s, with_phs=False)
    assert "too low" in (t["relative_humidity"].reason_at(0) or "")
    assert "above dry bulb" in (t["relative_humidity"].reason_at(1) or "")
    assert t["wet_bulb"].present[2]
    assert 9.0 < t["wet_bulb"].values[2] < 12.0  # about 10.5 °C for perfectly dry air at 30 °C
    assert not t["dew_point"].present[2] and "0 %" in (t["dew_point"].reason_at(2) or "")


@pytest.mark.parametrize("spelling", sorted(heat_stress.POSTURE_SPELLINGS))
def test_seated_and_other_postures_in_hot_work(spelling):
    s = SpaceInputs.create(1, air_temperature=np.array([35.0]),
                           mean_radiant_temperature=np.array([35.0]),
                           relative_humidity=np.array([53.3]), air_speed=np.array([1.0]),
                           met=np.array([2.58]), clo=np.array([0.5]),
                           hot_work=np.array([True]),
                           posture=(heat_stress.canonical_posture(spelling),),
                           phs_edition="2004")
    col = compute_indices(s, with_phs=True)["phs_rectal_temperature"]
    assert col.present[0], col.reason_at(0)


def test_iso_7933_2023_vapour_pressure_lower_bound():
    """ISO 7933:2023 Table A.1: water vapour pressure from 0.5 kPa (2004: from 0)."""
    kw = dict(air_temperature=np.array([40.0]), mean_radiant_temperature=np.array([40.0]),
              relative_humidity=np.array([5.0]), air_speed=np.array([0.3]),
              met=np.array([2.5]), clo=np.array([0.5]), hot_work=np.array([True]))
    col = compute_indices(SpaceInputs.create(1, **kw), with_phs=True)["phs_rectal_temperature"]
    assert not col.present[0] and "0.5 kPa" in (col.reason_at(0) or "")
    col = compute_indices(SpaceInputs.create(1, phs_edition="2004", **kw),
                          with_phs=True)["phs_rectal_temperature"]
    assert col.present[0]


def test_floor_and_asymmetry_categories_from_the_tables():
    """ISO 7730:2005 Table A.3 floor ranges (A/B 19-29 °C, C 17-31 °C) and Table A.4
    asymmetry limits (warm ceiling A/B < 5 K, C < 7 K)."""
    s = SpaceInputs.create(4, floor_temperature=np.array([19.0, 30.0, 16.0, 29.0]),
                           plane_radiant={"up": np.array([26.0, 30.0, 24.0, 22.0]),
                                          "down": np.array([22.0, 24.0, 22.0, 22.0])})
    t = compute_indices(s, with_phs=False)
    assert [t["floor_temperature_category"].as_dict(i)["value"] for i in range(4)] == \
        ["A", "C", "outside C", "A"]
    assert [t["radiant_asymmetry_category"].as_dict(i)["value"] for i in range(4)] == \
        ["A", "C", "A", "A"]


json_value = st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(-10**6, 10**6),
              st.floats(allow_nan=False, allow_infinity=False), st.text(max_size=8)),
    lambda inner: st.lists(inner, max_size=8), max_leaves=10)
KEYS = ["air_temperature", "relative_humidity", "globe_temperature", "air_speed",
        "relative_air_speed", "air_speed_height_m", "met", "work_class", "clo", "posture",
        "hot_work", "environment", "barometric_pressure", "psychrometric_wet_bulb",
        "natural_wet_bulb", "outdoor_daily_means", "phs_edition", "units", "bogus",
        "solar_irradiance", "latitude", "longitude", "time", "mean_radiant_temperature",
        "solar_load", "floor_temperature"]


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.dictionaries(st.sampled_from(KEYS), json_value, max_size=8))
def test_assess_never_fails_on_any_input(payload):
    """Any JSON object: exit 0 with a result or exit 2 with one line, never a traceback."""
    out, err = io.StringIO(), io.StringIO()
    old_stdin = sys.stdin
    sys.stdin = io.StringIO(json.dumps(payload))
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                code = cli.main(["assess"])
            except SystemExit as exc:
                code = int(exc.code or 0)
    finally:
        sys.stdin = old_stdin
    assert code in (0, 2)
    if code == 2:
        assert len(err.getvalue().strip().splitlines()) == 1
    else:
        json.loads(out.getvalue())
    assert "Traceback" not in err.getvalue()
