"""Words a person reads for each index the core computes, with its unit.

The labels of terminal output (``assess``'s table, ``replay --summary``) and of the web
page: an index's name is a field name for programs; a person reads these words and the unit
beside the number. The words are the catalogue's (:mod:`thermowarden.core.catalogue`);
``tests/core/test_catalogue.py`` checks that every index has them and that the unit is the
one the core computes.
"""

from __future__ import annotations

import re
from typing import Final

from thermowarden.core.catalogue import BY_NAME, computed

INDEX_LABELS: Final[dict[str, tuple[str, str]]] = {e.name: (e.label, e.unit) for e in computed()}
"""Index name -> (words, unit as the core gives it), for every column the core computes
(from :mod:`thermowarden.core.catalogue`)."""

CHANGE_UNIT: Final[dict[str, str]] = {"°C": "K", "1": "", "%": "percentage points"}
"""The unit of a change of an index, by the index's unit (a change in °C is in kelvin)."""


def index_label(name: str) -> str:
    """The words for index ``name``; an unknown name is made readable, never shown raw."""
    if name in BY_NAME:
        return BY_NAME[name].label
    return name.replace("_", " ").capitalize()


def change_unit(name: str) -> str:
    """The unit in which a change of index ``name`` is read ("K" for a temperature)."""
    unit = BY_NAME[name].unit if name in BY_NAME else ""
    return CHANGE_UNIT.get(unit, unit)


QUANTITY_LABELS: Final[dict[str, str]] = {
    "air_temperature": "Air temperature", "relative_humidity": "Relative humidity",
    "globe_temperature": "Globe temperature", "air_speed": "Air speed",
    "mean_radiant_temperature": "Mean radiant temperature",
    "plane_radiant_temperature": "Plane radiant temperature", "radiant_flux": "Radiant flux",
    "natural_wet_bulb": "Natural wet-bulb", "psychrometric_wet_bulb": "Psychrometric wet-bulb",
    "surface_temperature": "Surface temperature", "floor_temperature": "Floor temperature",
    "turbulence_intensity": "Turbulence intensity", "shading_position": "Shading",
    "fan_state": "Fans", "occupancy": "Occupancy",
    "outdoor_air_temperature": "Outdoor air temperature",
    "outdoor_relative_humidity": "Outdoor relative humidity", "wind_speed": "Wind speed",
    "solar_irradiance": "Solar irradiance", "barometric_pressure": "Barometric pressure",
    "relative_air_speed": "Air speed relative to the body", "metabolic_rate": "Metabolic rate",
}
"""Quantity name (a measured input) -> the words a person reads."""


def quantity_label(name: str) -> str:
    """The words for the measured quantity ``name`` (an index name gives its index words)."""
    if name in QUANTITY_LABELS:
        return QUANTITY_LABELS[name]
    return index_label(name)


def state_text(quantity: str, value: float) -> str | None:
    """An equipment or occupancy state in words (``on``, ``lowered``, ``40 % lowered``),
    or None when ``quantity`` is not a state. Shading is in % lowered (0 raised, 100 fully
    down); fans and occupancy are 1 (on, occupied) or 0."""
    if quantity == "fan_state":
        return "on" if value >= 0.5 else "off"
    if quantity == "occupancy":
        return "occupied" if value >= 0.5 else "vacant"
    if quantity == "shading_position":
        if value <= 0.5:
            return "raised"
        if value >= 99.5:
            return "lowered"
        return f"{value:.0f} % lowered"
    return None


def point_tags(side: str | None = None, height: str | None = None,
               sensor: str | None = None) -> str:
    """Where a point measures, as configured: ``window side, head height, sensor west``."""
    parts = []
    if side:
        parts.append(f"{side} side")
    if height:
        parts.append(f"{height} height")
    if sensor:
        parts.append(f"sensor {sensor}")
    return ", ".join(parts)


EVENT_WORDS: Final[dict[str, str]] = {
    "raised": "raised", "escalated": "priority raised", "deescalated": "priority lowered",
    "renotified": "reminder sent", "no_effect": "acted on, no effect yet",
    "acknowledged": "acknowledged", "unacknowledged": "acknowledgement withdrawn",
    "shelved": "shelved", "unshelved": "unshelved", "cleared": "cleared",
    "acted_on": "acted on", "moved": "moved to another instance",
}
"""Lifecycle event name -> the words a person reads in a history."""


def event_words(event: str) -> str:
    """The words for lifecycle event ``event`` (``deescalated`` -> ``priority lowered``)."""
    return EVENT_WORDS.get(event, event.replace("_", " "))


_FIELD = re.compile(r"(?<![\w.])[A-Za-z][A-Za-z0-9]*(?:_[A-Za-z0-9]+)+(?![\w])")


def readable(text: str) -> str:
    """``text`` with every field name (``air_speed``, ``globe_temperature_estimated``) in
    words: an index's or quantity's own words, in lower case unless they start with an
    abbreviation (``WBGT``); any other name with spaces for its underscores."""
    def words(m: re.Match[str]) -> str:
        name = m.group(0)
        if name in QUANTITY_LABELS:
            label = QUANTITY_LABELS[name]
        elif name in INDEX_LABELS:
            label = INDEX_LABELS[name][0]
        elif name in OTHER_VALUE_LABELS:
            label = OTHER_VALUE_LABELS[name][0]
        else:
            return name.replace("_", " ")
        first = label.split(" ", 1)[0].rstrip(",")
        return label if first.isupper() else label[0].lower() + label[1:]
    return _FIELD.sub(words, text)


OTHER_VALUE_LABELS: Final[dict[str, tuple[str, str]]] = {
    # measured inputs whose canonical unit is a bare ratio
    "turbulence_intensity": ("Turbulence intensity", "%"),
    "shading_position": ("Shading lowered", "%"),
    # sensor health (engine/health.py)
    "stale_points": ("Points not reporting", "points"),
    "stuck_points": ("Points stuck on one value", "points"),
    "implausible_recent": ("Implausible readings refused lately", "readings"),
    "max_disagreement": ("Largest spread between redundant sensors", "K"),
    "points_total": ("Points configured", "points"),
    "rules_unknown_long": ("Rules unable to decide for over 30 minutes", "rules"),
    "failed_phs": ("PHS computations failed", "times"),
    "failed_indices": ("Index computations failed", "times"),
    # advice ahead of time (engine/foresight.py)
    "sky_clearness": ("Sky clearness (0 to 1: overcast to clear)", "1"),
    # expected benefits of the shipped rule packs (rules/*.yaml)
    "air_speed_needed": ("Air speed needed", "m/s"),
    "set_after": ("SET afterwards", "°C"),
    "pmv_after": ("PMV afterwards", "1"),
    "asymmetry_after": ("Radiant asymmetry afterwards", "K"),
    "mean_radiant_after": ("Mean radiant temperature afterwards", "°C"),
    "operative_after": ("Operative temperature afterwards", "°C"),
    "pd_before": ("Dissatisfied by radiant asymmetry now", "%"),
    "pd_after": ("Dissatisfied by radiant asymmetry afterwards", "%"),
}
"""Words and unit of values that are not indices: inputs in a bare ratio, sensor health,
and the expected benefits the shipped rule packs name."""
COUNT_UNITS: Final = frozenset({"points", "readings", "rules", "times"})
"""Units that count things: the value is shown as a whole number of them."""


def value_label(name: str) -> str:
    """The words for any value an advisory shows (index, input, health, benefit)."""
    if name in INDEX_LABELS:
        return INDEX_LABELS[name][0]
    if name in OTHER_VALUE_LABELS:
        return OTHER_VALUE_LABELS[name][0]
    return quantity_label(name)


def value_unit(name: str) -> str:
    """The unit a person reads for value ``name`` when its payload gives none ("" when
    not known)."""
    if name in INDEX_LABELS:
        return INDEX_LABELS[name][1]
    return OTHER_VALUE_LABELS.get(name, ("", ""))[1]
