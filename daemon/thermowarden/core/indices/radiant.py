"""Mean radiant temperature (measured, from a globe, from plane radiant temperatures, or
outdoors from the sun), the black globe estimated in the sun, and the operative
temperature (ISO 7726:1998 Annex B, ASHRAE 55-2020 Appendix A, Liljegren et al. 2008)."""

from __future__ import annotations

from typing import Final

import numpy as np

from thermowarden.core import heat_stress, radiation
from thermowarden.core.columns import Applicability, BoolArray, FloatArray
from thermowarden.core.indices.inputs import IndexTable, SpaceInputs, Sun, nan_array

MRT_SOURCES: Final = ("measured", "globe", "six planes",
                      "planes measured, the others at the air temperature",
                      "planes measured, the others assumed",
                      "sun and irradiance (no globe)")
"""Labels of ``mean_radiant_temperature_source``: where each space's value came from."""

GLOBE_COLDER_LIMIT_K: Final = 5.0
"""A globe more than this colder than the air gives no mean radiant temperature (a check
of the sensor: rooms and even a clear night sky rarely put a globe that far below the air;
decision, common practice, no source)."""


def _planes_filled(s: SpaceInputs) -> tuple[FloatArray, BoolArray, BoolArray]:
    """ISO 7726 Annex B from the planes a space measures, the others at the air temperature
    or at the space's assumption (``assumed_mrt_offset_k``): (mrt, all six measured, some
    filled by the assumption)."""
    n = s.n
    planes = s.plane_radiant
    fill = s.air_temperature + np.where(np.isfinite(s.assumed_mrt_offset_k),
                                        s.assumed_mrt_offset_k, 0.0)
    some = np.zeros(n, dtype=bool)
    every = np.ones(n, dtype=bool)
    full: dict[str, FloatArray] = {}
    for side in radiation.SIDES:
        v = planes.get(side, nan_array(n))
        known = np.isfinite(v)
        some |= known
        every &= known
        full[side] = np.where(known, v, fill)
    by_posture = {p: radiation.mean_radiant_from_planes(full, p) for p in ("standing", "seated")}
    seated = np.array([p == "seated" for p in s.posture], dtype=bool)
    mrt = np.where(seated, by_posture["seated"], by_posture["standing"])
    mrt = np.where(some, mrt, np.nan)
    return mrt, every, some & ~every & np.isfinite(s.assumed_mrt_offset_k)


def compute(s: SpaceInputs, out: IndexTable, sun: Sun, rh: FloatArray
             ) -> tuple[FloatArray, FloatArray, BoolArray]:
    """Mean radiant and operative temperature, and the black globe estimated outdoors in
    the sun without one; returns (mrt, operative, whether the mrt came from the sun)."""
    n = s.n
    from_planes, six, assumed_fill = _planes_filled(s)
    from_globe = radiation.mean_radiant_from_globe(s.globe_temperature, s.air_temperature,
                                                   s.air_speed, s.globe_diameter_m,
                                                   s.globe_emissivity)
    from_sun = heat_stress.mean_radiant_liljegren_sun(
        np.where(sun.usable, s.air_temperature, np.nan), rh,
        sun.global_w_m2, sun.direct, sun.cos_zenith, heat_stress.PERSON_SHORTWAVE_ABSORPTIVITY,
        heat_stress.PERSON_LONGWAVE_EMISSIVITY)
    measured = np.isfinite(s.mean_radiant_temperature)
    globe_cold = s.air_temperature - s.globe_temperature > GLOBE_COLDER_LIMIT_K
    use_globe = ~measured & np.isfinite(s.globe_temperature)
    use_planes = ~measured & ~use_globe & np.isfinite(from_planes)
    use_sun = ~measured & ~use_globe & ~use_planes & sun.usable
    mrt = np.where(measured, s.mean_radiant_temperature,
                   np.where(use_globe, from_globe, np.where(use_planes, from_planes, from_sun)))
    source = np.select([measured, use_globe, use_planes & six, use_planes & ~assumed_fill,
                        use_planes, use_sun], [0.0, 1.0, 2.0, 3.0, 4.0, 5.0], np.nan)
    app = Applicability(n)
    app.require(measured | use_globe | use_planes | use_sun, "input missing or stale: "
                "mean_radiant_temperature (or globe_temperature with air_temperature and "
                "air_speed, or plane radiant temperatures with air_temperature, or outdoors "
                "in the sun solar_irradiance with the site's latitude and longitude)")
    app.require(~use_planes | np.isfinite(s.air_temperature) | six,
                "input missing or stale: air_temperature (it stands in for the planes not "
                "measured)")
    app.require(~use_sun | (np.isfinite(s.air_temperature) & np.isfinite(rh)),
                "input missing or stale: air_temperature and relative_humidity (the sky's "
                "long-wave radiation rests on them)")
    app.require(~use_globe | np.isfinite(s.air_temperature),
                "input missing or stale: air_temperature (needed with the globe)")
    app.require(~use_globe | np.isfinite(s.air_speed),
                "input missing or stale: air_speed (the globe's convective exchange depends "
                "on it; ISO 7726 Annex B; no still air is assumed)")
    app.require(~(use_globe & globe_cold), "globe more than 5 K colder than the air: check the "
                "globe sensor (wet, not yet settled, or misplaced); no mean radiant temperature")
    app.require(np.isfinite(mrt), "no finite mean radiant temperature from these inputs")
    out["mean_radiant_temperature"] = app.column(
        mrt, "°C", "measured, or ISO 7726:1998 Annex B (globe: larger of natural and forced "
        "convection; planes: posture weights, a plane not measured at the air temperature or "
        "the assumption), or outdoors in the sun without a globe a person (as a sphere, "
        "absorbing 70 % of the short-wave radiation) in the radiation field of Liljegren "
        "et al. (2008) (see mean_radiant_temperature_source)")
    out["mean_radiant_temperature_source"] = app.column(
        np.where(app.ok, source, 0.0), "", "where the mean radiant temperature came "
        "from", MRT_SOURCES)
    globe_app = Applicability(n)
    globe_app.require(~np.isfinite(s.globe_temperature), "measured: globe_temperature sensor "
                      "present")
    globe_app.require(sun.usable, "only outdoors with solar load, solar_irradiance and the "
                      "site's latitude and longitude")
    globe_app.require_present([("air_temperature", s.air_temperature),
                               ("relative_humidity", rh),
                               ("air_speed", s.air_speed)])
    out["globe_temperature_estimated"] = globe_app.column(
        heat_stress.globe_temperature_liljegren_sun(
            np.where(globe_app.ok, s.air_temperature, np.nan), rh,
            s.air_speed, sun.global_w_m2, sun.direct, sun.cos_zenith, s.pressure_pa),
        "°C", "Liljegren et al. (2008) black globe (50.8 mm) from the global irradiance at "
        "the sun's position")
    op_app = Applicability(n)
    op_app.require_present([("air_temperature", s.air_temperature)])
    # only a mean radiant temperature that is given (a rejected globe gives none)
    op_app.require(app.ok, "no mean radiant temperature (see mean_radiant_temperature)")
    op_app.require(np.isfinite(s.air_speed), "input missing or stale: air_speed (sets the "
                   "weighting of air and radiant temperature)")
    operative = radiation.operative_temperature(s.air_temperature, mrt, s.air_speed)
    out["operative_temperature"] = op_app.column(operative, "°C",
                                                 "ASHRAE 55-2020 Appendix A (A = 0.5/0.6/0.7)")
    return (np.where(app.ok, mrt, np.nan), np.where(op_app.ok, operative, np.nan),
            app.ok & use_sun)

