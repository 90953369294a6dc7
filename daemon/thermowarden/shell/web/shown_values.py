"""Which of the catalogue's values (:mod:`thermowarden.core.catalogue`) the web app shows
for a space: on its card in the overview, and on its page (an index only in the kinds of
place it is for, the WBGT only where people work in the heat)."""

from __future__ import annotations

from typing import Any

from thermowarden.core import catalogue
from thermowarden.shell.web.live import SpaceInfo

OVERVIEW_VALUES = catalogue.shown("overview")
"""On every space's card: the catalogue's overview entries (one for a kind of place only
with a value)."""
SPACE_VALUES = catalogue.shown("space")
"""On the space's page, with a value or why there is none."""


INDOOR_FAMILIES = frozenset({"comfort", "local_discomfort", "adaptive"})
"""Families of indices for people indoors (ISO 7730, EN 16798-1): for comfort."""


def places_of(space: SpaceInfo) -> frozenset[str]:
    """The kinds of place (catalogue.PLACES) a space is: hot work where people work in the
    heat, and comfort indoors or outdoor heat outside."""
    kind = catalogue.OUTDOOR if space.kind == "outdoor" else catalogue.COMFORT
    return frozenset({kind, catalogue.HOT_WORK} if space.hot_work else {kind})


def applies(e: catalogue.Index, space: SpaceInfo, item: dict[str, Any] | None = None
            ) -> bool:
    """Whether a space's page shows this index: the WBGT and everything assessed against
    its references only where people work in the heat (ISO 7243 is for workers, not for an
    office or a garden); an index without a value only where it is meant to apply, with the
    reason there is none (a PMV that needs an air speed in an office), not in a kind of
    place it is not for (no "PMV -, applies to indoor spaces" for a garden)."""
    if e.place == catalogue.HOT_WORK and not space.hot_work:
        return False
    if item is None or item.get("value") is not None:
        return True
    place = e.place or (catalogue.COMFORT if e.family in INDOOR_FAMILIES else "")
    return not place or place in places_of(space)


def reference_label(space: SpaceInfo) -> str:
    """The WBGT reference of the space's own workers, named as configured."""
    return ("WBGT reference (acclimatised)" if space.acclimatised
            else "WBGT reference (not acclimatised)")
