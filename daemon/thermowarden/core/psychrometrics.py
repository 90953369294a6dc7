"""Moist-air properties, vectorised, at the site's barometric pressure.

Method: ASHRAE Handbook Fundamentals (2017), chapter 1 (Psychrometrics):
saturation pressure over ice and liquid water (Hyland and Wexler, eqs. 5 and 6),
standard atmospheric pressure from altitude (eq. 3), humidity ratio (eq. 20/22),
wet-bulb relation (eqs. 33 and 35). Temperatures in °C, pressures in Pa, relative
humidity in %, humidity ratio in kg water / kg dry air.

Relative humidity is with respect to liquid water at every temperature (how hygrometers
report it; WMO convention), so below 0 °C the vapour pressure is RH x the saturation
pressure over (supercooled) water and the dew point is over water, not the frost point.
The saturation over ice is used only where the physics needs it: the wet-bulb relation
below 0 °C (an iced wet bulb, eq. 35).

Iterative inversions (dew point by Newton's method, wet bulb by bracketed regula falsi) are
done for all spaces at once on arrays, so one call costs the same few dozen array
operations for 1 or 10,000 spaces.
"""

from __future__ import annotations

import numpy as np

from thermowarden.core.columns import FloatArray
from thermowarden.core.solve import IndexArray, illinois

STANDARD_PRESSURE_PA = 101_325.0
_MOLAR_RATIO = 0.621945  # ratio of molar masses water / dry air (ASHRAE 2017 ch. 1 eq. 20)


def pressure_from_altitude(altitude_m: FloatArray | float) -> FloatArray:
    """Standard barometric pressure (Pa) at an altitude (m). ASHRAE 2017 ch. 1 eq. 3."""
    z = np.asarray(altitude_m, dtype=np.float64)
    result: FloatArray = 101_325.0 * (1.0 - 2.25577e-5 * z) ** 5.2559
    return result


def saturation_pressure(t_c: FloatArray | float) -> FloatArray:
    """Saturation vapour pressure (Pa) over ice below 0 °C, over liquid water above.

    ASHRAE Handbook Fundamentals 2017 ch. 1, eqs. 5 (ice, -100..0 °C) and 6 (water, 0..200 °C).
    """
    t = np.asarray(t_c, dtype=np.float64) + 273.15
    ln_ice = (-5.6745359e03 / t + 6.3925247 - 9.6778430e-03 * t + 6.2215701e-07 * t**2
              + 2.0747825e-09 * t**3 - 9.4840240e-13 * t**4 + 4.1635019 * np.log(t))
    ln_water = (-5.8002206e03 / t + 1.3914993 - 4.8640239e-02 * t + 4.1764768e-05 * t**2
                - 1.4452093e-08 * t**3 + 6.5459673 * np.log(t))
    result: FloatArray = np.exp(np.where(t < 273.15, ln_ice, ln_water))
    return result


def saturation_pressure_water(t_c: FloatArray | float) -> FloatArray:
    """Saturation vapour pressure (Pa) over liquid water, also below 0 °C (supercooled).

    ASHRAE Handbook Fundamentals 2017 ch. 1 eq. 6 (Hyland and Wexler), extended below 0 °C as
    the WMO convention for relative humidity does (WMO No. 8, Annex 4.B: RH is reported
    with respect to water at all temperatures).
    """
    t = np.asarray(t_c, dtype=np.float64) + 273.15
    result: FloatArray = np.exp(-5.8002206e03 / t + 1.3914993 - 4.8640239e-02 * t
                                + 4.1764768e-05 * t**2 - 1.4452093e-08 * t**3
                                + 6.5459673 * np.log(t))
    return result


def vapour_pressure(t_c: FloatArray, rh_pct: FloatArray) -> FloatArray:
    """Partial pressure of water vapour (Pa) from air temperature (°C) and RH (%).

    RH is taken with respect to liquid water at every temperature, as hygrometers report
    it and the WMO convention defines it (below 0 °C too): e = RH/100 x pws,water(t).
    """
    result: FloatArray = (np.asarray(rh_pct, dtype=np.float64) / 100.0
                          * saturation_pressure_water(t_c))
    return result


def humidity_ratio_from_vapour_pressure(pw: FloatArray,
                                        pressure_pa: FloatArray | float) -> FloatArray:
    """Humidity ratio (kg/kg) from vapour pressure (Pa). ASHRAE 2017 ch. 1 eq. 20."""
    result: FloatArray = _MOLAR_RATIO * pw / (np.asarray(pressure_pa) - pw)
    return result


def humidity_ratio(t_c: FloatArray, rh_pct: FloatArray,
                   pressure_pa: FloatArray | float = STANDARD_PRESSURE_PA) -> FloatArray:
    """Humidity ratio (kg water / kg dry air) from air temperature (°C) and RH (%)."""
    return humidity_ratio_from_vapour_pressure(vapour_pressure(t_c, rh_pct), pressure_pa)


def _dln_water_dt(t_c: FloatArray) -> FloatArray:
    """d ln(pws,water) / dT (1/K), analytic."""
    t = np.asarray(t_c, dtype=np.float64) + 273.15
    result: FloatArray = (5.8002206e03 / t**2 - 4.8640239e-02 + 2 * 4.1764768e-05 * t
                          - 3 * 1.4452093e-08 * t**2 + 6.5459673 / t)
    return result


def dew_point(t_c: FloatArray, rh_pct: FloatArray) -> FloatArray:
    """Dew-point temperature (°C), over liquid water also below 0 °C (not the frost point).

    Inverts the ASHRAE 2017 saturation-pressure equation over water: the temperature at
    which the saturation pressure equals the actual vapour pressure. Newton's method on ln(pws) from
    the Magnus estimate; six steps take it below 1e-9 K. NaN where RH <= 0.
    """
    t = np.asarray(t_c, dtype=np.float64)
    pw = vapour_pressure(t, rh_pct)
    with np.errstate(invalid="ignore", divide="ignore"):
        ln_pw = np.log(np.where(pw > 0, pw, np.nan))
        # Magnus (Alduchov and Eskridge 1996) start, good to about 0.1 K
        gamma = ln_pw - np.log(610.94)
        td = 243.04 * gamma / (17.625 - gamma)
        for _ in range(6):
            td = td - (np.log(saturation_pressure_water(td)) - ln_pw) / _dln_water_dt(td)
    result: FloatArray = np.where(np.isfinite(ln_pw) & np.isfinite(t), np.minimum(td, t), np.nan)
    return result


def _humidity_ratio_from_wet_bulb(tdb: FloatArray, twb: FloatArray,
                                  pressure_pa: FloatArray | float) -> FloatArray:
    """Humidity ratio implied by a dry-bulb / thermodynamic wet-bulb pair.

    ASHRAE 2017 ch. 1 eq. 33 (twb >= 0 °C) and eq. 35 (twb < 0 °C).
    """
    ws_star = humidity_ratio_from_vapour_pressure(saturation_pressure(twb), pressure_pa)
    above = ((2501.0 - 2.326 * twb) * ws_star - 1.006 * (tdb - twb)) / (
        2501.0 + 1.86 * tdb - 4.186 * twb)
    below = ((2830.0 - 0.24 * twb) * ws_star - 1.006 * (tdb - twb)) / (
        2830.0 + 1.86 * tdb - 2.1 * twb)
    result: FloatArray = np.where(twb >= 0, above, below)
    return result


def wet_bulb(t_c: FloatArray, rh_pct: FloatArray,
             pressure_pa: FloatArray | float = STANDARD_PRESSURE_PA) -> FloatArray:
    """Thermodynamic (psychrometric) wet-bulb temperature (°C).

    Solves ASHRAE 2017 ch. 1 eq. 33/35 for twb between the dew point and the dry bulb.
    Not the Stull (2011) approximation, which is up to 0.6 K off.
    """
    t = np.asarray(t_c, dtype=np.float64)
    w = humidity_ratio(t, rh_pct, pressure_pa)
    td = dew_point(t, rh_pct)
    ok = np.isfinite(w) & np.isfinite(t)
    # perfectly dry air (RH 0 %) has no dew point, but a wet bulb: search from far below
    lo = np.where(ok, np.where(np.isfinite(td), td - 0.01, t - 80.0), 0.0)
    hi = np.where(ok, t + 0.01, 1.0)
    p = np.broadcast_to(np.asarray(pressure_pa, dtype=np.float64), t.shape)
    idx = np.flatnonzero(ok)
    t_s, w_s, p_s = t[idx], w[idx], p[idx]

    def residual(x: FloatArray, sub: IndexArray) -> FloatArray:
        """Residual for the spaces ``sub`` (positions within the solvable subset)."""
        result: FloatArray = _humidity_ratio_from_wet_bulb(t_s[sub], x, p_s[sub]) - w_s[sub]
        return result

    twb = np.full(t.shape, np.nan)
    if idx.size:
        every = np.arange(idx.size)
        lo_s, hi_s = lo[idx], hi[idx]
        twb[idx] = illinois(residual, lo_s, hi_s, residual(lo_s, every),
                            residual(hi_s, every), tolerance=1e-7, residual_tolerance=1e-10)
    result: FloatArray = np.where(ok, twb, np.nan)
    return result


def relative_humidity_from_wet_bulb(tdb: FloatArray, twb: FloatArray,
                                    pressure_pa: FloatArray | float = STANDARD_PRESSURE_PA
                                    ) -> FloatArray:
    """Relative humidity (%) from a dry-bulb / wet-bulb pair (sling or aspirated psychrometer).

    A well-ventilated psychrometer wet bulb is taken as the thermodynamic wet bulb
    (ASHRAE 2017 ch. 1, "Thermodynamic wet-bulb temperature and psychrometer"); the
    humidity ratio follows from eq. 33/35 and RH from the vapour pressure it implies.
    NaN where the wet bulb is above the dry bulb (impossible reading).
    """
    tdb = np.asarray(tdb, dtype=np.float64)
    twb = np.asarray(twb, dtype=np.float64)
    w = _humidity_ratio_from_wet_bulb(tdb, twb, pressure_pa)
    pw = np.asarray(pressure_pa) * w / (_MOLAR_RATIO + w)
    rh = 100.0 * pw / saturation_pressure_water(tdb)
    result: FloatArray = np.where((twb <= tdb + 1e-9) & (w >= 0), np.minimum(rh, 100.0), np.nan)
    return result
