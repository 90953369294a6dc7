"""Heat stress: WBGT, its reference values, and ISO 7933 Predicted Heat Strain.

WBGT is a screening index. Every result built from it is advisory: individual factors
(acclimatisation, hydration, fitness, medication, clothing) matter, and local regulations
and a qualified occupational hygienist have the last word.

Temperatures °C, metabolic rate W (whole body, standard 1.8 m² person) or W/m² where noted.
"""

from __future__ import annotations

import warnings
from typing import Final

import numpy as np
from pythermalcomfort.models import phs as _ptc_phs

from thermowarden.core.columns import BoolArray, FloatArray

BODY_SURFACE_AREA_M2: Final = 1.8
"""Standard person of ISO 7243:2017 Annex A and ISO 8996."""

WORK_CLASSES_W_M2: Final[dict[str, float]] = {
    # ISO 8996:2021 Table A.2 (class: mean metabolic rate, W/m²), recalled from the standard.
    "rest": 65.0,
    "low": 100.0,
    "moderate": 165.0,
    "high": 230.0,
    "very_high": 290.0,
}

CLOTHING_ADJUSTMENTS_K: Final[dict[str, float]] = {
    # Clothing adjustment values (CAV, K of WBGT), ISO 7243:2017 Table B.1 / ACGIH TLV,
    # recalled from the standard (confirm against the current edition before relying on it).
    "work_clothes": 0.0,
    "cloth_coveralls": 0.0,
    "double_layer_woven": 3.0,
    "sms_polypropylene_coveralls": 0.5,
    "polyolefin_coveralls": 1.0,
    "limited_use_vapour_barrier_coveralls": 11.0,
}

REFERENCE_METHOD: Final = "ISO 7243:2017 Annex A (= NIOSH 2016 REL/RAL)"


def metabolic_rate_w(met_w_m2: FloatArray) -> FloatArray:
    """Whole-body metabolic rate (W) of the 1.8 m² standard person from W/m²."""
    result: FloatArray = np.asarray(met_w_m2, dtype=np.float64) * BODY_SURFACE_AREA_M2
    return result


def wbgt(natural_wet_bulb: FloatArray, globe: FloatArray, air: FloatArray | None = None,
         solar_load: BoolArray | bool = False) -> FloatArray:
    """WBGT (°C), ISO 7243:2017 eq. (1) and (2).

    Without solar load: 0.7 tnw + 0.3 tg. With solar load (outdoors in sun):
    0.7 tnw + 0.2 tg + 0.1 ta.
    """
    tnw = np.asarray(natural_wet_bulb, dtype=np.float64)
    tg = np.asarray(globe, dtype=np.float64)
    indoor = 0.7 * tnw + 0.3 * tg
    if air is None:
        return indoor
    ta = np.asarray(air, dtype=np.float64)
    outdoor = 0.7 * tnw + 0.2 * tg + 0.1 * ta
    result: FloatArray = np.where(np.asarray(solar_load, dtype=bool), outdoor, indoor)
    return result


def natural_wet_bulb_indoor(air_c: FloatArray, psychrometric_wet_bulb_c: FloatArray,
                            air_speed: FloatArray) -> FloatArray:
    """Natural wet-bulb temperature (°C) estimated indoors without radiant load.

    Bernard and Pourmoghani (1999), "Prediction of workplace wet bulb global temperature",
    Appl. Occup. Environ. Hyg. 14:126-134, in the form used by Lemke and Kjellstrom (2012)
    for indoor workplaces (equation recalled from memory, not yet checked against the paper):
    tnw = 0.67 tpwb + 0.33 ta - 0.048 log10(va) (ta - tpwb), va in m/s.
    Limits: indoors only, globe within 1 K of air temperature (no radiant load: the model
    has no radiant term), va 0.1-3 m/s (va is clamped to that range). Outdoors, or near hot
    surfaces, a natural wet-bulb sensor is required.
    """
    ta = np.asarray(air_c, dtype=np.float64)
    twb = np.asarray(psychrometric_wet_bulb_c, dtype=np.float64)
    va = np.clip(np.asarray(air_speed, dtype=np.float64), 0.1, 3.0)
    result: FloatArray = 0.67 * twb + 0.33 * ta - 0.048 * np.log10(va) * (ta - twb)
    return result


def reference_acclimatised(metabolic_w: FloatArray) -> FloatArray:
    """WBGT reference (°C) for acclimatised workers: 56.7 - 11.5 log10(M), M in W.

    ISO 7243:2017 Annex A eq. (A.1); identical to the NIOSH (2016) REL.
    """
    result: FloatArray = 56.7 - 11.5 * np.log10(np.asarray(metabolic_w, dtype=np.float64))
    return result


def reference_unacclimatised(metabolic_w: FloatArray) -> FloatArray:
    """WBGT reference (°C) for unacclimatised workers: 59.9 - 14.1 log10(M), M in W.

    ISO 7243:2017 Annex A eq. (A.2); identical to the NIOSH (2016) RAL.
    """
    result: FloatArray = 59.9 - 14.1 * np.log10(np.asarray(metabolic_w, dtype=np.float64))
    return result



PHS_EDITIONS: Final = ("2023", "2004")


def predicted_heat_strain(air_c: FloatArray, mrt_c: FloatArray, air_speed: FloatArray,
                          rh: FloatArray, met_w_m2: FloatArray, clo: FloatArray,
                          posture: list[str], acclimatised: FloatArray,
                          edition: str = "2023", duration_min: int = 480
                          ) -> dict[str, FloatArray]:
    """ISO 7933 Predicted Heat Strain for spaces marked as hot work, via pythermalcomfort.

    Returns rectal temperature at the end of the work period (°C), sweat loss (g), and the
    allowable exposure durations (min) limited by rectal temperature and by water loss for
    a mean (50 %) and a 95 % worker. Drinking freely, 75 kg, 1.8 m, no external work.
    ``edition`` is "2023" (default) or "2004"; ``acclimatised`` 1/0 per space.
    """
    n = np.asarray(air_c).shape[0]
    keys = ("t_re", "sweat_loss_g", "d_lim_t_re", "d_lim_loss_50", "d_lim_loss_95")
    out = {k: np.full(n, np.nan) for k in keys}
    if edition not in PHS_EDITIONS:
        raise ValueError(f"unknown ISO 7933 edition {edition!r}; expected 2023 or 2004")
    ok = (np.isfinite(air_c) & np.isfinite(mrt_c) & np.isfinite(air_speed) & np.isfinite(rh)
          & np.isfinite(met_w_m2) & np.isfinite(clo))
    met = np.asarray(met_w_m2) / 58.15
    for accl_value in (1.0, 0.0):
        sel = np.flatnonzero(ok & (np.asarray(acclimatised) == accl_value))
        if sel.size == 0:
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = _ptc_phs(tdb=air_c[sel], tr=mrt_c[sel], v=air_speed[sel], rh=rh[sel],
                           met=met[sel], clo=clo[sel], posture=[posture[i] for i in sel],
                           model=f"7933-{edition}", round_output=False, limit_inputs=False,
                           acclimatized=100 if accl_value else 0, duration=duration_min)
        for k in keys:
            out[k][sel] = np.asarray(getattr(res, k), dtype=np.float64)
    return out
