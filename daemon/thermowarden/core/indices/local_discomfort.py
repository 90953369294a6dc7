"""Local thermal discomfort, ISO 7730:2005 section 6: radiant asymmetry, draught rate,
vertical air temperature difference and floor temperature, with their percentages
dissatisfied and categories (Annex A)."""

from __future__ import annotations

import numpy as np

from thermowarden.core import local_discomfort
from thermowarden.core.columns import Applicability
from thermowarden.core.indices.inputs import Derived, IndexTable, SpaceInputs, between, nan_array
from thermowarden.core.local_discomfort import ISO_CATEGORY_LABELS


def compute(s: SpaceInputs, d: Derived, out: IndexTable) -> None:
    """Radiant asymmetry, then the other local discomfort indices."""
    _asymmetry(s, out)
    _local_discomfort(s, out)


def _asymmetry(s: SpaceInputs, out: IndexTable) -> None:
    """Radiant asymmetry (K) and its ISO 7730 percentage dissatisfied."""
    n = s.n
    p = s.plane_radiant
    nan = nan_array(n)
    horizontal = p.get("front", nan) - p.get("back", nan)  # window side minus room side
    vertical = p.get("up", nan) - p.get("down", nan)
    pd_wall = np.where(horizontal >= 0, local_discomfort.warm_wall_pd(np.abs(horizontal)),
                       local_discomfort.cool_wall_pd(np.abs(horizontal)))
    pd_ceiling = np.where(vertical >= 0, local_discomfort.warm_ceiling_pd(np.abs(vertical)),
                          local_discomfort.cool_ceiling_pd(np.abs(vertical)))
    pd_wall = np.where(np.isnan(horizontal), np.nan, pd_wall)
    pd_ceiling = np.where(np.isnan(vertical), np.nan, pd_ceiling)
    asym = np.fmax(np.abs(horizontal), np.abs(vertical))
    pd = np.fmax(pd_wall, pd_ceiling)
    app = Applicability(n)
    app.require(np.isfinite(asym), "input missing or stale: a pair of opposite plane radiant "
                "temperatures (front/back = window/room, or up/down)")
    valid = (np.isnan(horizontal) | np.where(horizontal >= 0, np.abs(horizontal) < 35,
                                             np.abs(horizontal) < 15))
    valid &= np.isnan(vertical) | np.where(vertical >= 0, np.abs(vertical) < 23,
                                           np.abs(vertical) < 15)
    app.require(valid, "outside ISO 7730 range: radiant asymmetry beyond the measured "
                "curves (warm ceiling 23 K, cool wall/ceiling 15 K, warm wall 35 K)")
    method = "ISO 7730:2005 6.5"
    out["radiant_asymmetry_horizontal"] = app.column(horizontal, "K", method)
    out["radiant_asymmetry_vertical"] = app.column(vertical, "K", method)
    out["radiant_asymmetry"] = app.column(asym, "K", method)
    out["radiant_asymmetry_pd"] = app.column(pd, "%", method)
    cat_wall = np.where(horizontal >= 0,
                        local_discomfort.category(np.abs(horizontal), "asymmetry_warm_wall"),
                        local_discomfort.category(np.abs(horizontal), "asymmetry_cool_wall"))
    cat_ceiling = np.where(vertical >= 0,
                           local_discomfort.category(np.abs(vertical), "asymmetry_warm_ceiling"),
                           local_discomfort.category(np.abs(vertical), "asymmetry_cool_ceiling"))
    out["radiant_asymmetry_category"] = app.column(
        np.fmax(cat_wall, cat_ceiling), "category",
        "ISO 7730:2005 Table A.4 (limits on the asymmetry, K)", ISO_CATEGORY_LABELS)


def _local_discomfort(s: SpaceInputs, out: IndexTable) -> None:
    n = s.n
    tu = np.where(np.isfinite(s.turbulence_intensity), s.turbulence_intensity,
                  local_discomfort.DEFAULT_TURBULENCE_INTENSITY)
    app = Applicability(n)
    app.require_present([("air_temperature", s.air_temperature), ("air_speed", s.air_speed)])
    app.require(between(s.air_temperature, 20.0, 26.0),
                "outside ISO 7730 range: draught rate needs air_temperature 20-26 °C")
    app.require(s.air_speed < 0.5, "outside ISO 7730 range: draught rate needs air_speed < 0.5 m/s")
    app.require(between(tu, 10.0, 60.0),
                "outside ISO 7730 range: turbulence_intensity must be 10-60 %")
    app.require(s.indoor, "draught rate applies to indoor spaces")
    dr = local_discomfort.draught_rate(s.air_temperature, s.air_speed, tu)
    out["draught_rate"] = app.column(dr, "%", "ISO 7730:2005 6.2")
    out["draught_category"] = app.column(local_discomfort.category(dr, "draught_rate"),
                                         "category", "ISO 7730:2005 Table A.2", ISO_CATEGORY_LABELS)

    dv = s.air_temperature_head - s.air_temperature_ankle
    app = Applicability(n)
    app.require_present([("air_temperature_head", s.air_temperature_head),
                         ("air_temperature_ankle", s.air_temperature_ankle)])
    app.require(dv < 8.0, "outside ISO 7730 range: vertical difference must be below 8 K")
    pd_v = local_discomfort.vertical_difference_pd(dv)
    out["vertical_temperature_difference"] = app.column(dv, "K", "ISO 7726:1998 (head 1.1 m "
                                                        "minus ankle 0.1 m, seated)")
    out["vertical_temperature_difference_pd"] = app.column(pd_v, "%", "ISO 7730:2005 6.3")
    out["vertical_temperature_difference_category"] = app.column(
        local_discomfort.category(dv, "vertical_difference"), "category",
        "ISO 7730:2005 Table A.2 (limits on the difference, K)", ISO_CATEGORY_LABELS)

    app = Applicability(n)
    app.require_present([("floor_temperature", s.floor_temperature)])
    app.require(between(s.floor_temperature, 10.0, 40.0),
                "outside ISO 7730 range: floor_temperature 10-40 °C")
    pd_f = local_discomfort.floor_temperature_pd(s.floor_temperature)
    out["floor_temperature_pd"] = app.column(pd_f, "%", "ISO 7730:2005 6.4")
    out["floor_temperature_category"] = app.column(
        local_discomfort.floor_category(s.floor_temperature), "category",
        "ISO 7730:2005 Table A.3 (floor surface temperature ranges)", ISO_CATEGORY_LABELS)

