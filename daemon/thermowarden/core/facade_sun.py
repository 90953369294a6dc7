"""The sun on a window: where the sun is, the clear-sky irradiance, the direct sun on a
window's plane (with an overhang or a horizon), and what it does to a person behind it.

Pure functions of times (an argument: seconds since 1970-01-01 UTC, an array), the place
(latitude and longitude in degrees, north and east positive; altitude in m) and a window.

- Sun position: NREL's Solar Position Algorithm (Reda and Andreas 2004, NREL/TP-560-34302;
  stated uncertainty ±0.0003°) as pvlib implements it (``pvlib.solarposition``,
  ``method="nrel_numpy"``), with its refraction for 1013.25 hPa and 12 °C.
- Clear-sky irradiance: the simplified Solis model (Ineichen 2008, Solar Energy 82:758-762)
  in pvlib (``pvlib.clearsky.simplified_solis``), with its default aerosol optical depth 0.1
  at 700 nm and 1 cm of precipitable water: global horizontal, direct normal and diffuse.
- Direct sun on a window: the beam component on the window's plane (pvlib
  ``irradiance.beam_component``: DNI x cos(angle of incidence), 0 from behind), times the
  part of the glazing an overhang leaves in sun, from the profile (vertical shadow) angle
  ``tan(P) = tan(altitude) / cos(sun azimuth - facade azimuth)`` (ASHRAE Handbook -
  Fundamentals 2017, ch. 15, "exterior shading"; from memory): an overhang ``depth`` m deep,
  ``gap`` m above the top of a glazing ``height`` m tall, shades ``depth * tan(P) - gap`` m
  of it. No direct sun while the sun is below the window's horizon angle (an obstruction).
- The occupant's mean radiant rise: ASHRAE 55-2017/2023 Appendix C (the SolarCal method,
  Arens et al. 2015, Building and Environment 88:3-9) as pythermalcomfort's ``solar_gain``
  computes it: the effective radiant field (W/m²) and the rise of mean radiant temperature
  (K) from the direct normal irradiance, the solar altitude, the sun's horizontal angle to
  the person (SHARP), the window's total solar transmittance, the sky-vault view fraction,
  the body fraction in sun and the short-wave absorptivity.
- The radiant asymmetry it causes (our estimate): the short-wave flux absorbed by a small
  plane facing the window in the sun patch, ``a * tau * E_beam``, taken as a rise of that
  side's plane radiant temperature by the linearised Stefan-Boltzmann law (ISO 7726:1998
  Annex B: a plane radiant temperature is the temperature of the uniform surroundings that
  give the same radiant flux): ``dT = a * tau * E_beam / (4 * sigma * T^3)``, the room side
  unchanged.

pvlib and pythermalcomfort load where this module is used (they import pandas and numba),
not with :mod:`thermowarden.core`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any, Final

import numpy as np

from thermowarden.core.columns import FloatArray

STEFAN_BOLTZMANN: Final = 5.670374419e-8
"""W/(m² K⁴), CODATA 2018."""
SUN_ON_WINDOW_W_M2: Final = 50.0
"""Direct irradiance on the window's plane (before the glazing) from which the sun counts as
falling on the window (a decision: below it the beam is grazing or the sun low and weak)."""


@dataclass(frozen=True)
class WindowGeometry:
    """One window (or a row of windows on one facade) of a space.

    ``azimuth_deg``: the direction the facade faces (outward normal), degrees clockwise from
    north (west 270); ``tilt_deg``: 90 vertical, 0 a roof light facing up;
    ``transmittance``: total solar transmittance of the glazing (0-1, no blinds);
    ``overhang_depth_m``, ``overhang_gap_m`` (from the top of the glazing up to the
    overhang), ``height_m`` (of the glazing); ``horizon_deg``: the altitude of obstructions
    in front of it (no direct sun below); for the occupant behind it:
    ``sky_view_fraction`` and ``body_in_sun`` (ASHRAE 55 Appendix C f_svv and f_bes),
    ``absorptivity`` (short-wave, 0.7 typical), ``posture`` (sitting, standing, supine)
    and ``facing_deg`` (the person's facing direction relative to the facade normal: 0
    facing the window, 90 side on, 180 back to it)."""

    azimuth_deg: float
    transmittance: float
    tilt_deg: float = 90.0
    overhang_depth_m: float = 0.0
    overhang_gap_m: float = 0.0
    height_m: float = 1.5
    horizon_deg: float = 0.0
    sky_view_fraction: float = 0.3
    body_in_sun: float = 0.5
    absorptivity: float = 0.7
    posture: str = "sitting"
    facing_deg: float = 0.0


@dataclass(frozen=True)
class SunTrack:
    """The sun at each of ``times`` (s since 1970 UTC): apparent elevation and azimuth
    (degrees, azimuth clockwise from north), apparent zenith, and clear-sky global
    horizontal, direct normal and diffuse horizontal irradiance (W/m²; 0 at night)."""

    times: FloatArray
    elevation: FloatArray
    azimuth: FloatArray
    zenith: FloatArray
    ghi: FloatArray
    dni: FloatArray
    dhi: FloatArray


def _index(times_s: FloatArray) -> Any:
    import pandas as pd

    return pd.DatetimeIndex(pd.to_datetime(np.asarray(times_s, dtype=np.float64), unit="s",
                                           utc=True))


def sun_track(times_s: FloatArray, latitude_deg: float, longitude_deg: float,
              altitude_m: float = 0.0) -> SunTrack:
    """Sun position (NREL SPA) and clear-sky irradiance (simplified Solis) at ``times_s``."""
    import pvlib

    t = np.asarray(times_s, dtype=np.float64)
    sp = pvlib.solarposition.get_solarposition(_index(t), latitude_deg, longitude_deg,
                                               altitude=altitude_m, method="nrel_numpy")
    elevation = sp["apparent_elevation"].to_numpy(dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        cs = pvlib.clearsky.simplified_solis(
            elevation, pressure=pvlib.atmosphere.alt2pres(altitude_m))
    def clean(name: str) -> FloatArray:
        v = np.asarray(cs[name], dtype=np.float64)
        out: FloatArray = np.where(np.isfinite(v) & (elevation > 0), np.maximum(v, 0.0), 0.0)
        return out
    return SunTrack(t, elevation, sp["azimuth"].to_numpy(dtype=np.float64),
                    sp["apparent_zenith"].to_numpy(dtype=np.float64),
                    clean("ghi"), clean("dni"), clean("dhi"))


def _wrap180(deg: FloatArray) -> FloatArray:
    out: FloatArray = (np.asarray(deg) + 180.0) % 360.0 - 180.0
    return out


def sunlit_fraction(sun: SunTrack, w: WindowGeometry) -> FloatArray:
    """Part of the glazing in direct sun (0-1): 0 with the sun behind the facade, below
    the horizon angle or below the horizon; an overhang shades the top by the profile
    angle (module docstring)."""
    rel = np.radians(_wrap180(sun.azimuth - w.azimuth_deg))
    alt = np.radians(np.clip(sun.elevation, 0.0, 90.0))
    in_front = np.cos(rel) > 0
    frac = np.where(in_front & (sun.elevation > max(w.horizon_deg, 0.0)), 1.0, 0.0)
    if w.overhang_depth_m > 0 and w.tilt_deg >= 45.0:
        with np.errstate(divide="ignore", invalid="ignore"):
            tan_profile = np.tan(alt) / np.where(in_front, np.cos(rel), 1.0)
        shaded_m = w.overhang_depth_m * tan_profile - w.overhang_gap_m
        frac = frac * np.clip(1.0 - shaded_m / w.height_m, 0.0, 1.0)
    result: FloatArray = frac
    return result


def window_beam(sun: SunTrack, w: WindowGeometry, dni: FloatArray | None = None) -> FloatArray:
    """Direct irradiance on the window's plane, outside the glazing, over its sunlit part
    (W/m²): pvlib's beam component times :func:`sunlit_fraction`. ``dni``: the direct normal
    irradiance to use (default: clear sky)."""
    import pvlib

    beam = np.asarray(pvlib.irradiance.beam_component(
        w.tilt_deg, w.azimuth_deg, sun.zenith, sun.azimuth,
        sun.dni if dni is None else dni), dtype=np.float64)
    out: FloatArray = np.maximum(np.nan_to_num(beam), 0.0) * sunlit_fraction(sun, w)
    return out


def sharp_deg(sun_azimuth: FloatArray, w: WindowGeometry) -> FloatArray:
    """The sun's horizontal angle to the front of the person (0-180°, ASHRAE 55 SHARP) for
    a person facing ``facing_deg`` from the facade normal."""
    facing = w.azimuth_deg + w.facing_deg
    out: FloatArray = np.abs(_wrap180(np.asarray(sun_azimuth) - facing))
    return out


def mean_radiant_rise(altitude_deg: FloatArray, sharp: FloatArray, dni: FloatArray,
                      transmittance: float | FloatArray, sky_view_fraction: float,
                      body_in_sun: float | FloatArray, absorptivity: float = 0.7,
                      posture: str = "sitting") -> tuple[FloatArray, FloatArray]:
    """(effective radiant field W/m², rise of mean radiant temperature K) on an occupant,
    ASHRAE 55 Appendix C through pythermalcomfort's ``solar_gain`` (module docstring).
    Zero where the sun is down or the direct irradiance is zero."""
    from pythermalcomfort.models import solar_gain

    alt = np.clip(np.asarray(altitude_deg, dtype=np.float64), 0.0, 90.0)
    n = alt.size
    def full(v: float | FloatArray) -> FloatArray:
        out: FloatArray = np.broadcast_to(np.asarray(v, dtype=np.float64), (n,)).copy()
        return out
    sh = np.clip(full(sharp), 0.0, 180.0)
    e = np.maximum(np.nan_to_num(full(dni)), 0.0)
    if n == 0:
        return np.zeros(0), np.zeros(0)
    r = solar_gain(sol_altitude=alt.tolist(), sharp=sh.tolist(), sol_radiation_dir=e.tolist(),
                   sol_transmittance=full(transmittance).tolist(),
                   f_svv=full(sky_view_fraction).tolist(), f_bes=full(body_in_sun).tolist(),
                   asw=full(absorptivity).tolist(), posture=posture, round_output=False)
    erf = np.nan_to_num(np.asarray(r.erf, dtype=np.float64).reshape(n))
    rise = np.nan_to_num(np.asarray(r.delta_mrt, dtype=np.float64).reshape(n))
    return erf, rise


def asymmetry_rise(beam_on_window: FloatArray, transmittance: float,
                   absorptivity: float = 0.7, radiant_c: float = 25.0) -> FloatArray:
    """Rise of the window side's plane radiant temperature (K) in the sun patch behind the
    glazing: ``a * tau * E / (4 sigma T^3)`` at ``radiant_c`` (module docstring)."""
    t = radiant_c + 273.15
    out: FloatArray = (absorptivity * transmittance * np.asarray(beam_on_window)
                       / (4.0 * STEFAN_BOLTZMANN * t ** 3))
    return out


def clearness(measured_ghi: FloatArray, clear_ghi: FloatArray,
              min_clear_w_m2: float = 100.0) -> FloatArray:
    """Measured over clear-sky global horizontal irradiance (1 a clear sky, near 0
    overcast); NaN where either is missing or the clear-sky value is below
    ``min_clear_w_m2`` (the sun low: the ratio means little)."""
    m = np.asarray(measured_ghi, dtype=np.float64)
    c = np.asarray(clear_ghi, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        out: FloatArray = np.where(np.isfinite(m) & (c >= min_clear_w_m2), m / c, np.nan)
    return out
