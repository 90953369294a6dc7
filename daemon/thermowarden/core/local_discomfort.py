"""Local thermal discomfort, ISO 7730:2005 section 6 and Annex A.

Each function returns the percentage dissatisfied (%) for arrays of spaces.
Temperatures in °C, differences in K, air speed in m/s, turbulence intensity in %.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from thermowarden.core.columns import FloatArray

DEFAULT_TURBULENCE_INTENSITY = 40.0
"""ISO 7730:2005 6.2: use Tu = 40 % when the turbulence intensity is not known."""

# ISO 7730:2005 Annex A category limits (category: value below the limit falls in it).
# PPD and draught rate are Table A.1 (recalled from the standard); the vertical difference
# (Table A.2) and floor ranges (Table A.3) are as printed in a public copy of ISO 7730:2005;
# the radiant asymmetry limits (Table A.4) are recalled from the standard (from memory).
CATEGORY_LIMITS: dict[str, tuple[float, float, float]] = {
    # quantity: (A, B, C) upper limits
    "ppd": (6.0, 10.0, 15.0),  # %
    "draught_rate": (10.0, 20.0, 30.0),  # %
    "vertical_difference": (2.0, 3.0, 4.0),  # K, head 1.1 m minus ankles 0.1 m
    "asymmetry_warm_ceiling": (5.0, 5.0, 7.0),  # K
    "asymmetry_cool_wall": (10.0, 10.0, 13.0),  # K
    "asymmetry_cool_ceiling": (14.0, 14.0, 18.0),  # K
    "asymmetry_warm_wall": (23.0, 23.0, 35.0),  # K
}
FLOOR_RANGES_C: dict[str, tuple[float, float]] = {
    # ISO 7730:2005 Table A.3, floor surface temperature range (°C) per category
    "A": (19.0, 29.0),
    "B": (19.0, 29.0),
    "C": (17.0, 31.0),
}
CATEGORY_NAMES = ("A", "B", "C")
ISO_CATEGORY_LABELS = (*CATEGORY_NAMES, "outside C")
"""Label of each ISO 7730 category value (0 -> A ... 3 -> outside C)."""


def draught_rate(air_c: FloatArray, air_speed: FloatArray,
                 turbulence_pct: FloatArray | float = DEFAULT_TURBULENCE_INTENSITY) -> FloatArray:
    """Draught rate DR (%), ISO 7730:2005 eq. (6).

    DR = (34 - ta)(v - 0.05)^0.62 (0.37 v Tu + 3.14); v < 0.05 m/s is taken as 0.05;
    DR > 100 % is taken as 100 %. Local mean air speed v (m/s), turbulence intensity Tu (%).
    """
    ta = np.asarray(air_c, dtype=np.float64)
    v = np.maximum(np.asarray(air_speed, dtype=np.float64), 0.05)
    tu = np.asarray(turbulence_pct, dtype=np.float64)
    dr = (34.0 - ta) * (v - 0.05) ** 0.62 * (0.37 * v * tu + 3.14)
    result: FloatArray = np.clip(dr, 0.0, 100.0)
    return result


def vertical_difference_pd(delta_k: FloatArray) -> FloatArray:
    """PD (%) from the vertical air temperature difference head minus ankles (K).

    ISO 7730:2005 eq. (7): PD = 100 / (1 + exp(5.76 - 0.856 dta_v)); valid below 8 K.
    """
    d = np.asarray(delta_k, dtype=np.float64)
    result: FloatArray = 100.0 / (1.0 + np.exp(5.76 - 0.856 * d))
    return result


def floor_temperature_pd(floor_c: FloatArray) -> FloatArray:
    """PD (%) from the floor temperature (°C), ISO 7730:2005 eq. (8).

    PD = 100 - 94 exp(-1.387 + 0.118 tf - 0.0025 tf²), people wearing light indoor shoes.
    """
    tf = np.asarray(floor_c, dtype=np.float64)
    result: FloatArray = 100.0 - 94.0 * np.exp(-1.387 + 0.118 * tf - 0.0025 * tf**2)
    return result


def warm_ceiling_pd(asym_k: FloatArray) -> FloatArray:
    """PD (%) for a warm ceiling, ISO 7730:2005 eq. (9); valid for asymmetry < 23 K."""
    d = np.asarray(asym_k, dtype=np.float64)
    result: FloatArray = np.maximum(100.0 / (1.0 + np.exp(2.84 - 0.174 * d)) - 5.5, 0.0)
    return result


def cool_wall_pd(asym_k: FloatArray) -> FloatArray:
    """PD (%) for a cool wall (window), ISO 7730:2005 eq. (10); valid below 15 K."""
    d = np.asarray(asym_k, dtype=np.float64)
    result: FloatArray = 100.0 / (1.0 + np.exp(6.61 - 0.345 * d))
    return result


def cool_ceiling_pd(asym_k: FloatArray) -> FloatArray:
    """PD (%) for a cool ceiling, ISO 7730:2005 eq. (11); valid below 15 K."""
    d = np.asarray(asym_k, dtype=np.float64)
    result: FloatArray = 100.0 / (1.0 + np.exp(9.93 - 0.50 * d))
    return result


def warm_wall_pd(asym_k: FloatArray) -> FloatArray:
    """PD (%) for a warm wall (sunlit window), ISO 7730:2005 eq. (12); valid below 35 K."""
    d = np.asarray(asym_k, dtype=np.float64)
    result: FloatArray = np.maximum(100.0 / (1.0 + np.exp(3.72 - 0.052 * d)) - 3.5, 0.0)
    return result


def category(values: FloatArray, quantity: str) -> npt.NDArray[np.float64]:
    """ISO 7730 category index per space: 0 = A, 1 = B, 2 = C, 3 = outside C, NaN absent."""
    limits = CATEGORY_LIMITS[quantity]
    v = np.asarray(values, dtype=np.float64)
    cat = np.full(v.shape, 3.0)
    for i in (2, 1, 0):
        cat = np.where(v < limits[i], float(i), cat)
    result: npt.NDArray[np.float64] = np.where(np.isnan(v), np.nan, cat)
    return result


def floor_category(floor_c: FloatArray) -> npt.NDArray[np.float64]:
    """ISO 7730 category of a floor temperature from Table A.3's ranges (0 = A ... 3 =
    outside C, NaN absent)."""
    tf = np.asarray(floor_c, dtype=np.float64)
    cat = np.full(tf.shape, 3.0)
    for i, name in reversed(list(enumerate(CATEGORY_NAMES))):
        lo, hi = FLOOR_RANGES_C[name]
        cat = np.where((tf >= lo) & (tf <= hi), float(i), cat)
    result: npt.NDArray[np.float64] = np.where(np.isnan(tf), np.nan, cat)
    return result
