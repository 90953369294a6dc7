"""Outdoor heat indices: NWS heat index, humidex and UTCI. Temperatures °C, RH %, wind m/s."""

from __future__ import annotations

import warnings

import numpy as np
from pythermalcomfort.models import utci as _ptc_utci

from thermowarden.core.columns import FloatArray
from thermowarden.core.psychrometrics import vapour_pressure


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


def humidex(air_c: FloatArray, rh: FloatArray) -> FloatArray:
    """Humidex (dimensionless, read as °C), Masterson and Richardson (1979), Environment Canada.

    H = T + 0.5555 (e - 10), e the vapour pressure in hPa (here from the ASHRAE 2017
    saturation pressure and the relative humidity).
    """
    e_hpa = vapour_pressure(np.asarray(air_c, dtype=np.float64), rh) / 100.0
    result: FloatArray = np.asarray(air_c) + 0.5555 * (e_hpa - 10.0)
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
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = _ptc_utci(tdb=air_c[ok], tr=mrt_c[ok], v=wind_10m[ok], rh=rh[ok],
                            limit_inputs=False, round_output=False)
        out[ok] = np.asarray(res.utci, dtype=np.float64)
    return out
