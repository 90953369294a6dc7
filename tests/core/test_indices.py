"""The vectorised index table: applicability, reasons, and properties over many spaces."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from thermowarden.core import comfort, heat_stress
from thermowarden.core.indices import SpaceInputs, compute_indices, select, space_result

MEASURED = ("air_temperature", "relative_humidity", "globe_temperature", "air_speed",
            "natural_wet_bulb", "floor_temperature", "outdoor_air_temperature")

space = st.fixed_dictionaries({
    "air_temperature": st.one_of(st.none(), st.floats(-5, 48)),
    "relative_humidity": st.one_of(st.none(), st.floats(5, 95)),
    "globe_temperature": st.one_of(st.none(), st.floats(-5, 70)),
    "air_speed": st.one_of(st.none(), st.floats(0.0, 3.0)),
    "natural_wet_bulb": st.one_of(st.none(), st.floats(-5, 35)),
    "floor_temperature": st.one_of(st.none(), st.floats(12, 35)),
    "outdoor_air_temperature": st.one_of(st.none(), st.floats(-10, 40)),
    "met": st.floats(0.8, 4.0),
    "clo": st.one_of(st.none(), st.floats(0.3, 1.5)),
    "indoor": st.booleans(),
    "hot_work": st.booleans(),
    "acclimatised": st.booleans(),
})


def build(spaces: list[dict]) -> SpaceInputs:
    n = len(spaces)
    given_: dict[str, object] = {}
    for key in MEASURED + ("clo",):
        given_[key] = np.array([np.nan if s[key] is None else s[key] for s in spaces])
    given_["met"] = np.array([s["met"] for s in spaces])
    for key in ("indoor", "hot_work", "acclimatised"):
        given_[key] = np.array([s[key] for s in spaces], dtype=bool)
    return SpaceInputs.create(n, **given_)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(space, min_size=1, max_size=6))
def test_vectorised_equals_per_space_and_nothing_unexplained(spaces):
    """Property: computing N spaces at once gives each space's own result; every index is a
    finite number or absent with a reason."""
    table = compute_indices(build(spaces))
    for i, s in enumerate(spaces):
        single = compute_indices(build([s]))
        for name, col in table.items():
            a, b = col.as_dict(i), single[name].as_dict(0)
            if a["value"] is None or b["value"] is None:
                assert a["value"] is None and b["value"] is None, name
                assert a["reason"], name
            elif isinstance(a["value"], float):
                assert math.isfinite(a["value"]), name
                assert a["value"] == pytest.approx(b["value"], abs=0.02), name
            else:
                assert a["value"] == b["value"], name


@settings(max_examples=30, deadline=None)
@given(st.floats(12, 28), st.floats(0.05, 0.8), st.floats(20, 70), st.floats(0.4, 1.2))
def test_pmv_rises_with_air_temperature(ta, v, rh, clo):
    """Property: PMV (ISO 7730) rises with air temperature, all else equal."""
    t = np.array([ta, ta + 1.0])
    two = lambda x: np.array([x, x])  # noqa: E731
    pmv = comfort.pmv_fanger(t, two(ta), two(v), two(rh), two(1.2), two(clo))
    assert pmv[1] > pmv[0]


@given(st.floats(100, 790), st.floats(1, 200))
def test_wbgt_references_fall_as_metabolic_rate_rises(m, dm):
    """Property: ISO 7243 Annex A references fall as the metabolic rate rises."""
    ms = np.array([m, m + dm])
    for f in (heat_stress.reference_acclimatised, heat_stress.reference_unacclimatised):
        r = f(ms)
        assert r[1] < r[0]


def test_reasons_name_the_method_range():
    """Outside the method's range the index is absent with a reason naming the range."""
    s = SpaceInputs.create(2, air_temperature=np.array([24.0, 24.0]),
                           relative_humidity=np.array([50.0, 50.0]),
                           mean_radiant_temperature=np.array([24.0, 24.0]),
                           air_speed=np.array([0.1, 1.5]), clo=np.array([0.6, 0.6]),
                           met=np.array([1.1, 1.1]))
    table = compute_indices(s)
    assert table["pmv_iso"].value_at(0) is not None
    assert table["pmv_iso"].value_at(1) is None
    assert table["pmv_iso"].reason_at(1) == "outside ISO 7730 range: relative air speed 0-1 m/s"
    assert table["draught_rate"].reason_at(1) == ("outside ISO 7730 range: draught rate needs "
                                                  "air_speed < 0.5 m/s")
    assert table["wbgt"].reason_at(0).startswith("input missing or stale")


def test_missing_input_is_absent_with_reason():
    s = SpaceInputs.create(1, air_temperature=np.array([24.0]))
    table = compute_indices(s)
    out = space_result(table, 0)
    assert out["pmv_iso"]["value"] is None
    assert "relative_humidity" in out["pmv_iso"]["reason"] or "mean_radiant" in \
        out["pmv_iso"]["reason"]
    assert out["dew_point"]["reason"].startswith("input missing")


def test_no_warning_escapes_with_out_of_range_inputs():
    """pythermalcomfort warns on out-of-range inputs; the core decides applicability itself
    and no warning reaches the caller (pytest runs with filterwarnings = error)."""
    s = SpaceInputs.create(3, air_temperature=np.array([45.0, -20.0, 24.0]),
                           relative_humidity=np.array([95.0, 5.0, 50.0]),
                           mean_radiant_temperature=np.array([80.0, -30.0, 24.0]),
                           air_speed=np.array([0.0, 20.0, 0.2]), clo=np.array([3.0, 0.0, 0.6]),
                           met=np.array([6.0, 0.8, 1.2]), hot_work=np.array([True, True, True]),
                           indoor=np.array([False, False, True]))
    table = compute_indices(s)
    for col in table.values():
        assert np.all(np.isfinite(col.values[col.present]))


def test_adaptive_category_and_select():
    s = SpaceInputs.create(2, air_temperature=np.array([26.0, 31.0]),
                           mean_radiant_temperature=np.array([26.0, 31.0]),
                           air_speed=np.array([0.1, 0.1]),
                           running_mean_outdoor=np.array([20.0, 20.0]),
                           naturally_ventilated=np.array([True, True]),
                           met=np.array([1.2, 1.2]))
    table = compute_indices(s)
    # EN 16798-1: comfort 25.4 °C; 26 °C is within category I, 31 °C outside III (+4 K)
    assert table["adaptive_en_category"].as_dict(0)["value"] == "I"
    assert table["adaptive_en_category"].as_dict(1)["value"] == "outside III"
    sub = select(table, np.array([1]))
    assert sub["adaptive_en_category"].as_dict(0)["value"] == "outside III"


def test_radiant_asymmetry_window_side():
    """A sunlit window side 12 K warmer than the room side: warm-wall asymmetry 12 K, and
    ISO 7730 eq. (12) PD [calc]: 100/(1+exp(3.72-0.052*12)) - 3.5 = 0.84 %."""
    planes = {"front": np.array([36.0]), "back": np.array([24.0])}
    s = SpaceInputs.create(1, plane_radiant=planes)
    table = compute_indices(s)
    assert table["radiant_asymmetry"].value_at(0) == pytest.approx(12.0)
    assert table["radiant_asymmetry_pd"].value_at(0) == pytest.approx(
        100 / (1 + math.exp(3.72 - 0.052 * 12)) - 3.5, abs=1e-6)


def test_phs_2023_edition_selected_by_default_for_hot_work():
    s = SpaceInputs.create(1, air_temperature=np.array([35.0]),
                           relative_humidity=np.array([50.0]),
                           mean_radiant_temperature=np.array([40.0]), air_speed=np.array([0.3]),
                           clo=np.array([0.5]), met=np.array([2.5]),
                           hot_work=np.array([True]), acclimatised=np.array([True]))
    table = compute_indices(s)
    assert table["phs_rectal_temperature"].method == "ISO 7933:2023"
    assert table["phs_rectal_temperature"].value_at(0) is not None
    assert table["phs_limit_water_loss_95"].value_at(0) > 0
