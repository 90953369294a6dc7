"""Where the sun is, and how much of the measured sunlight comes straight from it.

Pure functions of time (an argument: seconds since 1970-01-01 UTC), latitude and longitude
(degrees, north and east positive), for N places at once.

- :func:`sun_position`: cosine of the solar zenith angle and the Earth-sun distance, by the
  low-precision formulas of the Astronomical Almanac (1990, pp. C24, B6-B7, B61-B62), the
  algorithm of Michalsky (1988, Solar Energy 40:227-235) as Liljegren's reference WBGT code
  (Argonne, version 1.1; routine ``solarposition`` by N. Larson) computes it: apparent
  declination and right ascension, local mean sidereal time, hour angle, altitude, plus the
  atmospheric refraction for standard air (1013.25 hPa, 15 °C) added to the altitude.
  Stated precision 0.01° between 1950 and 2050.
- :func:`direct_fraction`: Liljegren et al. (2008) split of the global horizontal irradiance
  into direct beam and diffuse: the measured value is capped at 0.85 of the top-of-atmosphere
  irradiance (1367 W/m² x cos z / d²) and the direct fraction is
  exp(3 - 1.34 n - 1.65 / n), limited to 0-0.9, for n = measured / top of atmosphere; no
  direct beam with the sun less than 0.5° above the horizon (cos z < 0.00873).
- :func:`clear_sky_direct_normal_bound`: the most direct beam a clear sky lets through at the
  sun's elevation: the simplified Solis model (Ineichen 2008, Solar Energy 82:758-762) as
  pvlib implements it, for an atmosphere without aerosol, with 0.2 cm of precipitable water,
  at 800 hPa (a site about 2,000 m up): no clear sky over a site below that gives more.

Two differences from the reference code, on purpose. The direct beam that the split implies
(global x fraction / cos z) is capped at :func:`clear_sky_direct_normal_bound`: with the sun a
few degrees up, the split's formula (made for a higher sun) reads a dawn's few W/m² as 90 %
beam, a beam of about 1,000 W/m² where the clearest sky gives 120 (0.5° up) to 400 (2° up);
the sphere's cross-section term 1/(2 cos z) then warms a person or a globe by tens of
kelvin at sunrise. With the sun more than about 37° up the bound exceeds anything the split
can imply (0.85 x 0.9 of the top-of-atmosphere beam) and changes nothing. And its day
count since 2000 is one day ahead in leap years after 2000 (2004, 2008, ... 2024: it counts
that year's 29 February from 1 January on); the calendar here comes from the timestamp and
is right. The zenith angle then differs by up to about 0.1° in those years.
"""

from __future__ import annotations

from typing import Final

import numpy as np

from thermowarden.core.columns import FloatArray

_J2000_UNIX_DAYS: Final = 10957.5
"""Epoch J2000.0 (2000-01-01 12:00 UT) in days since 1970-01-01 00:00 UTC."""
SOLAR_CONSTANT_W_M2: Final = 1367.0
"""Top-of-atmosphere irradiance at 1 au, as in Liljegren's code."""
COS_ZENITH_MIN: Final = 0.00873
"""Below this (sun less than about 0.5° above the horizon) no direct beam."""
NORMALISED_SOLAR_MAX: Final = 0.85
"""Measured global irradiance is capped at this fraction of the top-of-atmosphere value."""
DIRECT_FRACTION_MAX: Final = 0.9


def sun_position(time_s: FloatArray | float, latitude_deg: FloatArray | float,
                 longitude_deg: FloatArray | float) -> tuple[FloatArray, FloatArray]:
    """Cosine of the solar zenith angle (refraction included) and the Earth-sun distance
    (au) at ``time_s`` (s since 1970-01-01 UTC) for places at ``latitude_deg`` (north
    positive) and ``longitude_deg`` (east positive). NaN where an input is NaN."""
    t = np.asarray(time_s, dtype=np.float64)
    lat = np.radians(np.asarray(latitude_deg, dtype=np.float64))
    lon = np.asarray(longitude_deg, dtype=np.float64)
    unix_days = t / 86400.0
    days = unix_days - _J2000_UNIX_DAYS
    midnight = np.floor(unix_days)
    ut_hours = (unix_days - midnight) * 24.0
    centuries = (midnight - _J2000_UNIX_DAYS) / 36525.0
    mean_anomaly = np.radians(np.mod(357.528 + 0.9856003 * days, 360.0))
    mean_longitude = np.radians(np.mod(280.460 + 0.9856474 * days, 360.0))
    obliquity = np.radians(23.439 - 4.0e-7 * days)
    ecliptic_longitude = (np.radians(1.915 * np.sin(mean_anomaly)
                                     + 0.020 * np.sin(2.0 * mean_anomaly)) + mean_longitude)
    distance = (1.00014 - 0.01671 * np.cos(mean_anomaly)
                - 0.00014 * np.cos(2.0 * mean_anomaly))
    right_ascension_h = np.mod(np.arctan2(np.cos(obliquity) * np.sin(ecliptic_longitude),
                                          np.cos(ecliptic_longitude)), 2.0 * np.pi) * 12.0 / np.pi
    declination = np.arcsin(np.sin(obliquity) * np.sin(ecliptic_longitude))
    gmst0_s = 24110.54841 + centuries * (8640184.812866 + centuries
                                          * (0.093104 - centuries * 6.2e-6))
    gmst0_h = np.mod(gmst0_s / 3600.0, 24.0)
    lmst_h = np.mod(gmst0_h + ut_hours * 1.00273790934 + lon / 15.0, 24.0)
    hour_angle_h = lmst_h - right_ascension_h
    hour_angle_h = np.where(hour_angle_h < -12.0, hour_angle_h + 24.0,
                            np.where(hour_angle_h > 12.0, hour_angle_h - 24.0, hour_angle_h))
    hour_angle = hour_angle_h / 12.0 * np.pi
    sin_altitude = (np.sin(declination) * np.sin(lat)
                    + np.cos(declination) * np.cos(hour_angle) * np.cos(lat))
    altitude = np.degrees(np.arcsin(np.clip(sin_altitude, -1.0, 1.0)))  # rounding at zenith
    # refraction for standard air, A. A. 1990 B61, crossover at 19.225° (as the reference code)
    pressure_hpa, temperature_c = 1013.25, 15.0
    low = ((0.1594 + altitude * (0.0196 + 0.00002 * altitude)) * pressure_hpa
           / ((1.0 + altitude * (0.505 + 0.0845 * altitude)) * (273.0 + temperature_c)))
    with np.errstate(divide="ignore", invalid="ignore"):
        high = 0.00452 * (pressure_hpa / (273.0 + temperature_c)) / np.tan(np.radians(altitude))
    refraction = np.where(altitude < -1.0, 0.0, np.where(altitude < 19.225, low, high))
    refraction = np.where(np.abs(altitude) >= 89.99999, 0.0, refraction)
    cos_zenith: FloatArray = np.sin(np.radians(altitude + refraction))
    return cos_zenith, np.asarray(distance, dtype=np.float64)


def direct_fraction(global_w_m2: FloatArray, cos_zenith: FloatArray,
                    distance_au: FloatArray) -> tuple[FloatArray, FloatArray]:
    """(global irradiance as used, fraction of it in the direct beam), Liljegren et al.
    (2008) as their reference code computes it (see the module docstring).

    ``global_w_m2`` is the measured global horizontal irradiance (W/m²). With the sun up the
    value used is capped at 0.85 of the top-of-atmosphere irradiance (a sensor reading above
    that is a calibration or reflection error); with the sun down it is kept and taken as
    all diffuse."""
    ghi = np.asarray(global_w_m2, dtype=np.float64)
    cza = np.asarray(cos_zenith, dtype=np.float64)
    top = SOLAR_CONSTANT_W_M2 * np.maximum(cza, 0.0) / np.asarray(distance_au) ** 2
    sun_up = cza >= COS_ZENITH_MIN
    # A global irradiance near zero (even a subnormal one) sends 1.65/normalised to
    # infinity: exp(-inf) is 0, the right limit (no direct beam), so overflow is expected.
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        normalised = np.minimum(ghi / top, NORMALISED_SOLAR_MAX)
        fdir = np.exp(3.0 - 1.34 * normalised - 1.65 / normalised)
    used: FloatArray = np.where(sun_up, normalised * top, ghi)
    fraction: FloatArray = np.where(sun_up & (normalised > 0.0),
                                    np.clip(fdir, 0.0, DIRECT_FRACTION_MAX), 0.0)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        beam_cap = np.where(sun_up & (used > 0.0),
                            clear_sky_direct_normal_bound(cza, distance_au) * cza / used, np.inf)
    fraction = np.minimum(fraction, beam_cap)
    fraction = np.where(np.isfinite(used), fraction, np.nan)
    return used, fraction


BOUND_ATMOSPHERE: Final = {"aod700": 0.0, "precipitable_water": 0.2, "pressure": 80_000.0}
"""The clearest atmosphere of :func:`clear_sky_direct_normal_bound`: no aerosol, 0.2 cm of
precipitable water (pvlib's lower limit for the model), 800 hPa."""


def clear_sky_direct_normal_bound(cos_zenith: FloatArray, distance_au: FloatArray
                                  ) -> FloatArray:
    """Upper bound of the direct normal irradiance (W/m²) with the sun at ``cos_zenith``
    (refraction included) and the Earth ``distance_au`` from it: simplified Solis (Ineichen
    2008) by pvlib (``pvlib.clearsky.simplified_solis``) in :data:`BOUND_ATMOSPHERE`, with
    the top-of-atmosphere irradiance of this module; 0 with the sun below the horizon. pvlib
    is imported only when the sun is up somewhere in the call."""
    cza = np.asarray(cos_zenith, dtype=np.float64)
    dist = np.broadcast_to(np.asarray(distance_au, dtype=np.float64), cza.shape)
    up = np.isfinite(cza) & (cza > 0.0) & np.isfinite(dist)
    out: FloatArray = np.zeros(cza.shape, dtype=np.float64)
    if not up.any():
        return out
    import warnings

    import pvlib

    elevation = np.degrees(np.arcsin(np.clip(cza[up], 0.0, 1.0)))
    with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        dni = np.asarray(pvlib.clearsky.simplified_solis(
            elevation, dni_extra=SOLAR_CONSTANT_W_M2 / dist[up] ** 2, **BOUND_ATMOSPHERE
        )["dni"], dtype=np.float64)
    out[up] = np.where(np.isfinite(dni), np.maximum(dni, 0.0), 0.0)
    return out
