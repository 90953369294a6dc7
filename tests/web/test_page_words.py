"""The words the web page uses for states, sensors, advisories and values, without a
browser: equipment states as states, sensors as configured, acted-on advice as such, one
story of acknowledgement and effect, and every value with words and a unit."""

from __future__ import annotations

import datetime as dt

import pytest

from tests.web.visible_text import problems
from thermowarden.config.loading import load_site
from thermowarden.core.labels import (
    OTHER_VALUE_LABELS,
    event_words,
    point_tags,
    readable,
    state_text,
    value_label,
)
from thermowarden.core.quantities import QUANTITIES
from thermowarden.shell.web.advisory_page import advisory_page
from thermowarden.shell.web.fragments import advisory_item, age_text, fmt_value, shown_state
from thermowarden.shell.web.live import SiteDirectory
from thermowarden.shell.web.overview_page import space_card
from thermowarden.shell.web.space_page import point_value
from thermowarden.site_model import build_site_model

UTC = dt.UTC


@pytest.mark.parametrize(("quantity", "value", "words"), [
    ("fan_state", 1.0, "on"), ("fan_state", 0.0, "off"),
    ("shading_position", 100.0, "lowered"), ("shading_position", 0.0, "raised"),
    ("shading_position", 40.0, "40 % lowered"),
    ("occupancy", 1.0, "occupied"), ("occupancy", 0.0, "vacant"),
    ("air_temperature", 21.0, None),
])
def test_states_read_as_states(quantity, value, words):
    assert state_text(quantity, value) == words


def test_a_points_value_is_a_state_or_a_number_with_its_unit():
    assert point_value({"quantity": "fan_state", "value": 1.0, "unit": ""}) == "on"
    assert point_value({"quantity": "shading_position", "value": 100.0,
                              "unit": ""}) == "lowered"
    assert point_value({"quantity": "air_speed", "value": 0.25,
                              "unit": "m/s"}) == "0.2 m/s"
    assert "–" in point_value({"quantity": "fan_state", "value": None, "unit": ""})


def test_every_state_quantity_has_words():
    states = [q for q, spec in QUANTITIES.items() if spec.kind == "state"]
    assert states and all(state_text(q, 1.0) and state_text(q, 0.0) for q in states)


def test_sensors_are_named_as_the_site_configures_them():
    """deploy/example-site.yaml names the office's plane sensors ``side: window`` and
    ``side: room``: the conditions (and so the page) carry those names, while the point's
    key and the computation use their ISO 7726 directions (front, back). The browser test
    (test_visible_pages.py) reads them on the running page."""
    config = load_site("deploy/example-site.yaml")
    model = build_site_model(config)
    planes = [p for p in model.points if p.quantity == "plane_radiant_temperature"]
    assert {p.side for p in planes} == {"front", "back"}
    assert {p.side_as_configured for p in planes} == {"window", "room"}
    assert point_tags("window", "head", "west") == "window side, head height, sensor west"


def test_field_names_in_a_method_or_reason_become_words():
    text = readable("measured: globe_temperature sensor present; needs air_speed < 0.5 m/s; "
                    "see mean_radiant_temperature_source; wbgt_effective; some_new_name")
    assert "_" not in text
    assert "globe temperature sensor" in text and "air speed < 0.5 m/s" in text
    assert "WBGT assessed" in text and "some new name" in text


def test_events_read_as_words():
    assert event_words("deescalated") == "priority lowered"
    assert event_words("renotified") == "reminder sent"
    assert event_words("something_new") == "something new"


def test_values_beyond_the_indices_have_words_and_units():
    for name, (words, unit) in OTHER_VALUE_LABELS.items():
        assert "_" not in words and words[0].isupper(), name
        assert unit, name
    assert value_label("air_temperature") == "Air temperature"
    assert fmt_value({"value": 2.0, "unit": "points"}) == "2 points"
    assert fmt_value({"value": 1.0, "unit": "points"}) == "1 point"
    assert fmt_value({"value": "A", "unit": "category"}) == "A"
    assert age_text(-9.0) == "just now"


def _advisory(**change) -> dict:
    a = {"id": "office-west.fans.switch_on_fans.1", "rule": "fans.switch_on_fans",
         "state": "active", "priority": "medium", "audience": "facilities",
         "space": {"id": "office-west", "name": "Office"}, "title": "Switch on the fans",
         "advice": "Switch on the fans.", "rationale": "PMV 0.62 (limit 0.5).",
         "raised_at": "2026-07-14T14:00:00Z", "updated_at": "2026-07-14T14:05:00Z",
         "cleared_at": None, "numbers": {}, "benefit": {}, "cautions": [],
         "acknowledged": None, "shelved": None, "acted_on": None, "history": []}
    a.update(change)
    return a


ACTED = {"at": "2026-07-14T14:05:00Z", "minutes_after_raised": 5.0,
         "effect": {"quantity": "pmv_ashrae", "unit": "1", "value_then": 0.7,
                    "predicted": 0.5, "checks": []}}


def test_advice_acted_on_is_not_shown_as_just_active():
    """Five minutes after the fans went on, the fans advisory reads "acted on, waiting for
    its effect", in the list and on its page, not "active"."""
    a = _advisory(acted_on=ACTED)
    assert shown_state(a) == "acted on, waiting for its effect"
    assert "acted on, waiting for its effect" in advisory_item(a, UTC)
    assert shown_state(_advisory()) == "active"
    assert shown_state(_advisory(acted_on={**ACTED, "helped": False})) == \
        "acted on, no effect yet"
    assert shown_state(_advisory(state="acknowledged", acted_on=ACTED)) == \
        "acknowledged, acted on"
    assert shown_state(_advisory(acted_on=ACTED, state="cleared",
                                       cleared_at="2026-07-14T14:30:00Z")) == "cleared"


def _directory(followed: frozenset[str]) -> SiteDirectory:
    config = load_site("deploy/example-site.yaml")
    return SiteDirectory.build(config, {"fans.switch_on_fans": 3600.0,
                                        "heat_stress.wbgt": 3600.0}, followed)


def test_an_acknowledged_alert_is_not_also_not_acted_on():
    """A kitchen's heat-stress alert acknowledged by a person: the page says who, and
    claims nothing the sensors cannot know (the rule names no sign of its advice done)."""
    a = _advisory(rule="heat_stress.wbgt", audience="safety", state="acknowledged",
                  acknowledged={"by": "ana", "at": "2026-07-14T14:03:00Z",
                                "note": "water and shade"})
    html = advisory_page(_directory(frozenset({"fans.switch_on_fans"})), a, True,
                               None, UTC, 3600.0)
    assert "Acknowledged by <strong>ana</strong>" in html
    assert "Not acted on" not in html and "not acted on" not in html
    assert html.index("Acknowledged by") < html.index("cannot show whether")
    # a rule that follows its advice says what the sensors show
    followed = advisory_page(_directory(frozenset({"fans.switch_on_fans"})),
                                   _advisory(), True, None, UTC, 3600.0)
    assert "The sensors do not show the advice carried out yet" in followed
    acted = advisory_page(_directory(frozenset({"fans.switch_on_fans"})),
                                _advisory(acted_on=ACTED), True, None, UTC, 3600.0)
    assert "Acted on at" in acted and "PMV when acted on" in acted


def test_an_advisory_page_reads_as_words_with_units():
    import re
    from html import unescape

    a = _advisory(acted_on=ACTED, numbers={
        "pmv_ashrae": {"value": 0.62, "unit": "1", "threshold": 0.5,
                       "method": "ASHRAE 55-2020 5.3 (unless relative_air_speed is given)"},
        "turbulence_intensity": {"value": 34.3, "unit": "", "method": "measured"},
        "stuck_points": {"value": 1.0, "unit": "", "method": "thermowarden"}},
        benefit={"air_speed_needed": {"value": 0.3}, "set_after": {"value": 27.7},
                 "pmv_after": {"value": 0.5}},
        history=[{"at": "2026-07-14T14:00:00Z", "event": "raised"},
                 {"at": "2026-07-14T14:05:00Z", "event": "deescalated"}])
    html = advisory_page(_directory(frozenset({"fans.switch_on_fans"})), a, True,
                               None, UTC, 3600.0)
    body = html.split("<main>", 1)[1]
    text = unescape(re.sub(r"<[^>]+>", "\n", body))
    assert problems(text) == []
    assert "34.3%" in text and "1 point" in text and "0.3 m/s" in text


def test_a_cards_live_count_has_the_colour_of_its_most_urgent_advisory():
    from thermowarden.shell.web.live import SpaceInfo

    garden = SpaceInfo("staff-garden", "Staff garden", "outdoor", False, "mechanical", 0)
    medium = space_card(garden, None, [{"priority": "medium"}, {"priority": "low"}], UTC)
    assert '<span class="badge medium">2 live</span>' in medium
    high = space_card(garden, None, [{"priority": "low"}, {"priority": "high"}], UTC)
    assert '<span class="badge high">2 live</span>' in high
    assert "live</span>" not in space_card(garden, None, [], UTC)
