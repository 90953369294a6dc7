"""Words a person reads for each index the core computes, with its unit.

The labels of terminal output (``assess``'s table, ``replay --summary``) and of the web
page: an index's name is a field name for programs; a person reads these words and the unit
beside the number. The words are the catalogue's (:mod:`thermowarden.core.catalogue`);
``tests/core/test_catalogue.py`` checks that every index has them and that the unit is the
one the core computes.
"""

from __future__ import annotations

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
