"""Every comfort and heat-stress index for N spaces at once.

:func:`compute_indices` takes a :class:`SpaceInputs` (arrays of what each space measured,
NaN where it lacks a quantity, plus per-space context) and returns an ordered mapping of
index name -> :class:`IndexColumn`. Each index carries its unit, its method, and per space
either a value or the reason it does not apply. This is the vectorised core: a handful of
array calls per index whatever the number of spaces.

One module per family computes its columns (:data:`thermowarden.core.catalogue.FAMILIES`):
:mod:`.psychrometrics` and :mod:`.radiant` first (the relative humidity, mean radiant and
operative temperatures the others read, :class:`Derived`), then :data:`FAMILIES` in order.
What each index is called, its unit, words and method are in
:mod:`thermowarden.core.catalogue`.
"""

from __future__ import annotations

from types import ModuleType
from typing import Final

import numpy as np
import numpy.typing as npt

from thermowarden.core.columns import IndexColumn
from thermowarden.core.indices import (
    adaptive,
    comfort,
    heat_stress,
    local_discomfort,
    outdoor,
    psychrometrics,
    radiant,
    surfaces,
)
from thermowarden.core.indices.comfort import COMFORT_MET_ASSUMED
from thermowarden.core.indices.heat_stress import with_time_weighted_wbgt
from thermowarden.core.indices.inputs import (
    MET_W_M2,
    UPPER_TOLERANCE,
    Derived,
    IndexTable,
    SpaceInputs,
    Sun,
    sun_over,
)
from thermowarden.core.indices.psychrometrics import relative_humidity_method
from thermowarden.core.indices.radiant import MRT_SOURCES
from thermowarden.core.local_discomfort import ISO_CATEGORY_LABELS

__all__ = ["COMFORT_MET_ASSUMED", "FAMILIES", "ISO_CATEGORY_LABELS", "MET_W_M2", "MRT_SOURCES",
           "UPPER_TOLERANCE", "Derived", "IndexColumn", "IndexTable", "SpaceInputs", "Sun",
           "compute_indices", "compute_phs", "relative_humidity_method", "select", "space_result",
           "with_time_weighted_wbgt"]

FAMILIES: Final[tuple[ModuleType, ...]] = (local_discomfort, comfort, adaptive, heat_stress,
                                           outdoor, surfaces)
"""The families computed after the radiant and humidity ones, in this order; each has
``compute(s: SpaceInputs, d: Derived, out: IndexTable) -> None``."""


def compute_indices(s: SpaceInputs, with_phs: bool = True) -> IndexTable:
    """Every index for every space in ``s``; see the module docstring.

    ``with_phs=False`` skips ISO 7933 PHS (a 480-minute simulation per hot-work space),
    which the engine runs on its own, slower schedule.
    """
    out: IndexTable = {}
    derived = _derived(s, out, with_phs)
    for family in FAMILIES:
        family.compute(s, derived, out)
    return out


def compute_phs(s: SpaceInputs) -> IndexTable:
    """Only the ISO 7933 PHS columns of :func:`compute_indices` (the same columns, value for
    value), with only what they read: the relative humidity and the mean radiant
    temperature. The engine refreshes PHS on its own schedule with this, without computing
    the other families again."""
    out: IndexTable = {}
    heat_stress.compute_phs(s, _derived(s, {}, True), out)
    return out


def _derived(s: SpaceInputs, out: IndexTable, with_phs: bool) -> Derived:
    """What the families read: the sun, the relative humidity and the mean radiant and
    operative temperatures (their columns, radiant then humidity, added to ``out``)."""
    sun = sun_over(s)
    humidity: IndexTable = {}
    rh = psychrometrics.compute(s, humidity)
    mrt, operative, mrt_from_sun = radiant.compute(s, out, sun, rh)
    out.update(humidity)
    return Derived(rh, mrt, operative, mrt_from_sun, sun, with_phs)


def space_result(table: IndexTable, i: int) -> dict[str, dict[str, object]]:
    """The JSON-ready result of space ``i``: index name -> value, unit, method, reason."""
    return {name: col.as_dict(i) for name, col in table.items()}


def select(table: IndexTable, index: npt.NDArray[np.intp]) -> IndexTable:
    """The same table for a subset of spaces."""
    return {k: v.take(index) for k, v in table.items()}
