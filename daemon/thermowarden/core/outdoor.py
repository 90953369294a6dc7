"""Outdoor heat indices: NWS heat index, humidex and UTCI. Temperatures °C, RH %, wind m/s."""

from __future__ import annotations

import warnings

import numpy as np

from thermowarden.core.columns import FloatArray
from thermowarden.core.ptc_models import model


def heat_index(air_c: FloatArray, rh: FloatArray) -> FloatArray:
    """Heat index (°C), the full US National Weather Service algorithm.

    NWS Weather Prediction Center, "The Heat Index Equation" (Rothfusz 1990 with Steadman's
    simple formula): in °F, the simple formula 0.5 (T + 61 + 1.2 (T - 68) + 0.094 RH); where
    its average with T is 80 °F or more, the Rothfusz regression, minus
    ((13 - RH)/4) sqrt((17 - |T - 95|)/17) for RH < 13 % and 80 <= T <= 112 °F, plus
    ((RH - 85)/10) ((87 - T)/5) for RH > 85 % and 80 <= T <= 87 °F.
    """
    t = np.asarray(air_c, dtype=np.float64) * 9.0 / 5.0 + 32.0
    r = np.asarray(rh, dtype=np.float64)
    simple = 0.5 * (t + 61.0 + (t - 68.0) * 1.2 + r * 0.094)
    reg = (-42.379 + 2.04901523 * t + 10.14333127 * r - 0.22475541 * t * r
           - 0.00683783 * t * t - 0.05481717 * r * r + 0.00122874 * t * t * r
           + 0.00085282 * t * r * r - 0.00000199 * t * t * r * r)
    dry = (r < 13.0) & (t >= 80.0) & (t <= 112.0)
    with np.errstate(invalid="ignore"):
        dry_adj = ((13.0 - r) / 4.0) * np.sqrt(np.maximum(17.0 - np.abs(t - 95.0), 0.0) / 17.0)
    reg = np.where(dry, reg - dry_adj, reg)
    humid = (r > 85.0) & (t >= 80.0) & (t <= 87.0)
    reg = np.where(humid, reg + ((r - 85.0) / 10.0) * ((87.0 - t) / 5.0), reg)
    hi_f = np.where(0.5 * (simple + t) >= 80.0, reg, simple)
    result: FloatArray = (hi_f - 32.0) * 5.0 / 9.0
    return result


HUMIDEX_SATURATION_HPA = 6.11
"""Environment Canada's humidex: vapour pressure (hPa) at the dew point,
6.11 exp(5417.7530 (1/273.16 - 1/(273.15 + Td)))."""


def humidex_from_dew_point(air_c: FloatArray, dew_point_c: FloatArray) -> FloatArray:
    """Humidex (dimensionless, read as °C) from air temperature and dew point (°C).

    Environment Canada (Masterson and Richardson 1979), as Environment Canada publishes it:
    humidex = T + 0.5555 (6.11 exp(5417.7530 (1/273.16 - 1/(273.15 + Td))) - 10).
    """
    td_k = np.asarray(dew_point_c, dtype=np.float64) + 273.15
    e_hpa = HUMIDEX_SATURATION_HPA * np.exp(5417.7530 * (1.0 / 273.16 - 1.0 / td_k))
    result: FloatArray = np.asarray(air_c, dtype=np.float64) + 0.5555 * (e_hpa - 10.0)
    return result


def humidex(air_c: FloatArray, rh: FloatArray) -> FloatArray:
    """Humidex from air temperature (°C) and relative humidity (%).

    The dew point is taken on Environment Canada's own saturation curve (the same
    exponential), so that e = RH/100 x 6.11 exp(5417.7530 (1/273.16 - 1/(273.15 + T))):
    at 100 % the result is exactly Environment Canada's value for Td = T.
    """
    t_k = np.asarray(air_c, dtype=np.float64) + 273.15
    e_hpa = (np.asarray(rh, dtype=np.float64) / 100.0 * HUMIDEX_SATURATION_HPA
             * np.exp(5417.7530 * (1.0 / 273.16 - 1.0 / t_k)))
    result: FloatArray = np.asarray(air_c, dtype=np.float64) + 0.5555 * (e_hpa - 10.0)
    return result


UTCI_WIND_HEIGHT_M = 10.0
"""UTCI's wind speed is the speed 10 m above ground (Broede et al. 2012)."""
ROUGHNESS_LENGTH_M = 0.01
"""Roughness length of the logarithmic wind profile for the UTCI height conversion: 0.01 m,
the value of the UTCI operational procedure (Broede et al. 2012; recalled from memory)."""


def wind_at_10m(speed: FloatArray, height_m: FloatArray | float) -> FloatArray:
    """Wind speed at 10 m (m/s) from a speed measured at ``height_m``, logarithmic profile.

    v10 = v(h) ln(10 / z0) / ln(h / z0), z0 = :data:`ROUGHNESS_LENGTH_M` (neutral
    stratification). From 1.1 m this multiplies by 1.50. NaN for heights at or below z0.
    """
    h = np.asarray(height_m, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = np.where(h > ROUGHNESS_LENGTH_M,
                          np.log(UTCI_WIND_HEIGHT_M / ROUGHNESS_LENGTH_M)
                          / np.log(h / ROUGHNESS_LENGTH_M), np.nan)
    result: FloatArray = np.asarray(speed, dtype=np.float64) * factor
    return result


def utci(air_c: FloatArray, mrt_c: FloatArray, wind_10m: FloatArray, rh: FloatArray) -> FloatArray:
    """Universal Thermal Climate Index (°C), Broede et al. (2012) polynomial, via pythermalcomfort.

    Wind speed at 10 m height. Valid for ta -50..+50 °C, tr - ta -30..+70 K,
    wind 0.5..17 m/s, vapour pressure below 5 kPa: the caller checks these.
    """
    n = np.asarray(air_c).shape[0]
    out = np.full(n, np.nan)
    ok = np.isfinite(air_c) & np.isfinite(mrt_c) & np.isfinite(wind_10m) & np.isfinite(rh)
    if ok.any():
        _ptc_utci = model("utci")  # costly to import: only here

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = _ptc_utci(tdb=air_c[ok], tr=mrt_c[ok], v=wind_10m[ok], rh=rh[ok],
                            limit_inputs=False, round_output=False)
        out[ok] = np.asarray(res.utci, dtype=np.float64)
    return out
