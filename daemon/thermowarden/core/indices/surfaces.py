"""Surfaces: the margin of the coldest monitored surface above the dew point (condensation;
ASHRAE Handbook Fundamentals 2017 ch. 1)."""

from __future__ import annotations

from thermowarden.core.columns import Applicability
from thermowarden.core.indices.inputs import Derived, IndexTable, SpaceInputs


def compute(s: SpaceInputs, d: Derived, out: IndexTable) -> None:
    """The coldest monitored surface's margin above the dew point."""
    app = Applicability(s.n)
    app.require_present([("surface_temperature", s.surface_temperature_min)])
    app.require(out["dew_point"].present, "no dew point (see dew_point)")
    margin = s.surface_temperature_min - out["dew_point"].values
    out["condensation_margin"] = app.column(margin, "K", "coldest monitored surface minus dew "
                                            "point (ASHRAE 2017 ch. 1)")

