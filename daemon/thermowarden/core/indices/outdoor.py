"""Outdoor weather indices: NWS heat index, Environment Canada humidex, UTCI."""

from __future__ import annotations

from typing import Final

import numpy as np

from thermowarden.core import outdoor
from thermowarden.core import psychrometrics as psy
from thermowarden.core.columns import Applicability
from thermowarden.core.indices.inputs import (
    UPPER_TOLERANCE,
    Derived,
    IndexTable,
    SpaceInputs,
    between,
)

HEAT_INDEX_MAX_C: Final = 60.0
"""Heat index values above this are not given: beyond the top of Steadman's apparent
temperature tables (about 136-140 °F), where the NWS regression only extrapolates
(decision; the NWS states the regression is not valid beyond Steadman's data)."""

HUMIDEX_MAX_DEW_POINT_C: Final = 40.0
"""Humidex is not given above this dew point: outdoor dew points have not been observed much
above 35 °C (from memory), so beyond 40 °C the reading, not the weather, is in question
(decision)."""


def compute(s: SpaceInputs, d: Derived, out: IndexTable) -> None:
    """Heat index, humidex and UTCI for outdoor spaces."""
    n = s.n
    rh, mrt = d.rh, d.mrt
    hi_values = outdoor.heat_index(s.air_temperature, rh)
    app = Applicability(n)
    app.require(~s.indoor, "heat index is an outdoor weather index (shade, light wind); "
                "indoors use PMV/SET, or WBGT for hot work")
    app.require_present([("air_temperature", s.air_temperature), ("relative_humidity", rh)])
    app.require(between(s.air_temperature, 20.0, 50.0),
                "heat index applies at air_temperature 20-50 °C")
    app.require(~(hi_values > HEAT_INDEX_MAX_C),
                "heat index above 60 °C: beyond Steadman's tables, the NWS regression only "
                "extrapolates there")
    out["heat_index"] = app.column(hi_values, "°C",
                                   "NWS heat index (Rothfusz regression with adjustments)")
    hx = Applicability(n)
    hx.require(~s.indoor, "humidex is an outdoor weather index; indoors use PMV/SET, or WBGT "
               "for hot work")
    hx.require_present([("air_temperature", s.air_temperature), ("relative_humidity", rh)])
    hx.require(between(s.air_temperature, 20.0, 50.0),
               "humidex applies at air_temperature 20-50 °C")
    hx.require(out["dew_point"].present, "no dew point (see dew_point)")
    hx.require(~(psy.dew_point(s.air_temperature, rh) > HUMIDEX_MAX_DEW_POINT_C),
               "humidex not given above a dew point of 40 °C (beyond any outdoor dew point "
               "observed: check the humidity sensor)")
    out["humidex"] = hx.column(outdoor.humidex_from_dew_point(s.air_temperature,
                                                              out["dew_point"].values), "1",
                               "Environment Canada humidex (Masterson and Richardson 1979) "
                               "from the dew point given here")
    wind10 = outdoor.wind_at_10m(s.air_speed, s.air_speed_height_m)
    u = Applicability(n)
    u.require(~s.indoor, "UTCI applies to outdoor spaces")
    u.require_present([("air_temperature", s.air_temperature), ("mean_radiant_temperature", mrt),
                       ("air_speed", s.air_speed), ("relative_humidity", rh)])
    u.require(np.isfinite(wind10), "air speed height must be above 0.01 m (roughness length)")
    u.require(between(s.air_temperature, -50.0, 50.0),
              "outside UTCI range: air_temperature -50..50 °C")
    u.require(between(mrt - s.air_temperature, -30.0, 70.0),
              "outside UTCI range: mean radiant minus air temperature -30..70 K")
    u.require(between(wind10, 0.5, 17.0), "outside UTCI range: wind at 10 m 0.5-17 m/s "
              "(converted from the sensor height by the logarithmic profile)")
    u.require(psy.vapour_pressure(s.air_temperature, rh) <= 5000.0 + UPPER_TOLERANCE,
              "outside UTCI range: water vapour pressure above 5 kPa")
    ok = u.ok
    out["utci"] = u.column(outdoor.utci(np.where(ok, s.air_temperature, np.nan), mrt, wind10, rh),
                           "°C", "UTCI, Broede et al. (2012) polynomial; wind converted to 10 m "
                           "(logarithmic profile, z0 0.01 m)")

