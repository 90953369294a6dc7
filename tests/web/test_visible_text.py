"""The rule for visible text (tests/web/visible_text.py) on good and bad strings: what a
page or report may show, and what it must not."""

from __future__ import annotations

import pytest

from tests.web.visible_text import bare_numbers, field_names, problems

GOOD = [
    "Operative temperature 27.4 °C",
    "Relative humidity 48%",
    "Air speed 0.15 m/s",
    "Solar irradiance 640 W/m²",
    "Margin below the reference −1.2 K",
    "Effect: -10.5 K realised, -6.9 K predicted",
    "Time to the water-loss limit 95 min",
    "Sweat loss 1,250 g",
    "Humidity ratio 0.012 kg/kg",
    "Comfort band 20–24 °C",
    "between 20.5 to 24 °C",
    "12 s ago",
    "2 min ago · 1.5 h ago",
    "raised 17:29 · updated 17:34:05",
    "as of 14 Jul 17:29",
    "as of Jul 14, 2026",
    "on 2026-07-14 and 2026-07-14T17:29:00+02:00",
    "3 spaces · 1 live · 12 advisories",
    "2 of 5 points stopped reporting",
    "Live advisories (3)",
    "Spaces (2 of 12)",
    "Spaces (60 of 120, 1-50 shown)",
    "Method: ISO 7730, EN 16798-1, ASHRAE 55, ISO 7243:2017, ISO 7933",
    "EN 16798-1 adaptive category 2",
    "PMV, ISO 7730 (scale -3 to +3)",
    "PMV (ISO 7730)\n-0.5",
    "PMV -0.5",
    "PMV, ISO 7730 (scale -3 to +3) 0.4",
    "Humidex 34",
    "CO2 and PM10 on floor f2, room north-2",
    "Fans on · Shading lowered · Blinds raised",
    "The WBGT, 60-minute mean, exceeded the reference for 20 minutes.",
    "for 1 hour and 2 days",
    "dissatisfied: 12 percentage points fewer",
    "",
]
BAD = [
    ("Fans 1.0", "[1.0]"),
    ("Shading (lowered) 100.0", "[100.0]"),
    ("radiant asymmetry -10.5 realised, -6.9 predicted", "[-10.5]"),
    ("threshold 28", "[28]"),
    ("Value\n27.4", "[27.4]"),
    ("PPD 12.5 then 3", "[12.5]"),
    ("3.5 spaces", "[3.5]"),
    ("PMV cold, then 7 later", "[7]"),
]


@pytest.mark.parametrize("text", GOOD)
def test_good_text_passes(text):
    assert problems(text) == []


@pytest.mark.parametrize(("text", "shown"), BAD)
def test_a_bare_number_is_found_with_its_context(text, shown):
    found = bare_numbers(text)
    assert found and shown in found[0], found


@pytest.mark.parametrize(("text", "names"), [
    ("wbgt_effective 28.1 °C", ["wbgt_effective"]),
    ("the timeline bar heat_stress.wbgt", ["heat_stress.wbgt"]),
    ("see web.users_file.", ["web.users_file"]),
    ("phs_limit_water_loss_95 and fan_state, fan_state", ["phs_limit_water_loss_95",
                                                         "fan_state"]),
    ("Standard effective temperature (SET)", []),
    ("office-west and e.g. this", []),
])
def test_field_names(text, names):
    assert field_names(text) == names


def test_problems_lists_both_kinds():
    out = problems("fan_state 1.0")
    assert out[0] == "field name 'fan_state'"
    assert out[1].startswith("number without a unit") and "[1.0]" in out[1]


def test_a_unit_is_a_whole_word():
    # "5 hot" is not "5 h", "3 Kitchens" is not "3 K", "2 mins" is not "2 min"
    assert bare_numbers("5 hot")
    assert bare_numbers("3 Kitchens")
    assert bare_numbers("2 mins")


@pytest.mark.parametrize("text", [
    "ISO 7730:2005 6.2 and ASHRAE 55-2020 5.3, ASHRAE Handbook Fundamentals 2017 ch. 1",
    "ISO 7243:2017 eq. (1)/(2); Table 5.4.2.4",
    "Environment Canada humidex (Masterson and Richardson 1979)",
    "the polynomial of Broede and colleagues, 2012); Liljegren et al. (2008)",
    "ISO 8996:2021 (standard person, 1.8 m²)",
    "PMV 0.62 (limit 0.5, ISO 7730 category B)",
    "brings PMV from 0.86 back to 0.5; SET would fall",
    "PMV, ISO 7730 (scale -3 to +3) 0.6 0.3 0.5 ISO 7730:2005",
    "the sky's clearness measured now, 0.94.",
    "PMV when acted on 0.7\nPMV predicted 0.5\nPMV 15 min later 0.6",
    "Sky clearness (0 to 1: overcast to clear) 0.9 1.0 0.6",
])
def test_references_citations_and_scales_pass(text):
    assert problems(text) == []


@pytest.mark.parametrize("text", [
    "Sweat loss 1950",             # a year only after a capitalised word
    "loss 2017",
    "PMV 0.6, then the fans 1.0",  # the scale ends at a word that is not a small one
])
def test_what_looks_like_a_reference_but_is_not(text):
    assert bare_numbers(text)
