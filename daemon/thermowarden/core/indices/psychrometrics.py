"""Humidity: relative humidity (measured, or from a psychrometer's wet and dry bulb), dew
point, wet bulb and humidity ratio (ASHRAE Handbook Fundamentals 2017 ch. 1)."""

from __future__ import annotations

import numpy as np

from thermowarden.core import psychrometrics as psy
from thermowarden.core.columns import Applicability, BoolArray, FloatArray
from thermowarden.core.indices.inputs import IndexTable, SpaceInputs


def relative_humidity_method(measured: BoolArray) -> str:
    """The method of the relative humidity column for spaces where it was ``measured`` (the
    others derive it from a psychrometric wet bulb)."""
    if measured.all():
        return "measured"
    if not measured.any():
        return "ASHRAE Handbook Fundamentals 2017 ch. 1 (from the wet/dry-bulb pair)"
    return "measured, or ASHRAE 2017 ch. 1 from the wet/dry-bulb pair"



def compute(s: SpaceInputs, out: IndexTable) -> FloatArray:
    """Humidity indices; returns the relative humidity (%) the other indices use."""
    n = s.n
    rh_from_psy = psy.relative_humidity_from_wet_bulb(s.air_temperature, s.psychrometric_wet_bulb,
                                                      s.pressure_pa)
    rh = np.where(np.isfinite(s.relative_humidity), s.relative_humidity, rh_from_psy)
    app = Applicability(n)
    app.require(np.isfinite(s.relative_humidity) | np.isfinite(s.psychrometric_wet_bulb),
                "input missing or stale: relative_humidity (or psychrometric_wet_bulb)")
    app.require_present([("air_temperature", s.air_temperature)])
    pair = np.isnan(s.relative_humidity) & np.isfinite(s.psychrometric_wet_bulb)
    app.require(~(pair & (s.psychrometric_wet_bulb > s.air_temperature + 1e-9)),
                "wet bulb above dry bulb: impossible psychrometer reading")
    app.require(~(pair & ~np.isfinite(rh)), "psychrometer wet bulb too low for its dry bulb "
                "(it would mean less than no moisture): check that the wick is wet and "
                "ventilated")
    out["relative_humidity"] = app.column(rh, "%", relative_humidity_method(
        np.isfinite(s.relative_humidity)))
    ok = app.ok
    ta = np.where(ok, s.air_temperature, np.nan)
    rh_ok = np.where(ok, rh, np.nan)
    method_psy = "ASHRAE Handbook Fundamentals 2017 ch. 1"
    dp_app = Applicability(n)
    dp_app.require_from(app)
    dp_app.require(~(rh_ok <= 0.0), "no dew point in perfectly dry air (relative humidity 0 %)")
    out["dew_point"] = dp_app.column(psy.dew_point(ta, rh_ok), "°C",
                                     method_psy + " (over water, also below 0 °C)")
    out["wet_bulb"] = app.column(psy.wet_bulb(ta, rh_ok, s.pressure_pa), "°C", method_psy)
    out["humidity_ratio"] = app.column(psy.humidity_ratio(ta, rh_ok, s.pressure_pa), "kg/kg",
                                       method_psy)
    return rh_ok
