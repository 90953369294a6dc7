"""Adaptive thermal comfort for naturally ventilated spaces. Temperatures °C.

ASHRAE 55-2020 section 5.4 and EN 16798-1:2019 Annex B.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Final

import numpy as np

from thermowarden.core.columns import FloatArray

RUNNING_MEAN_WEIGHTS: Final = (1.0, 0.8, 0.6, 0.5, 0.4, 0.3, 0.2)
"""EN 16798-1:2019 eq. (B.2) approximation, yesterday first; the sum is 3.8."""

ASHRAE_BANDS_K: Final = {"80": 3.5, "90": 2.5}
EN_BANDS_K: Final = {"I": (2.0, 3.0), "II": (3.0, 4.0), "III": (4.0, 5.0)}
"""EN 16798-1:2019 Annex B: (upper, lower) offsets from the comfort temperature, K."""
EN_CATEGORY_LABELS: Final = ("I", "II", "III", "outside III")


def running_mean_outdoor(daily_means_newest_first: Sequence[Sequence[float]] | FloatArray
                         ) -> FloatArray:
    """Running mean outdoor temperature (°C) from daily means, newest (yesterday) first.

    EN 16798-1:2019 eq. (B.2): (T-1 + 0.8 T-2 + 0.6 T-3 + 0.5 T-4 + 0.4 T-5 + 0.3 T-6 +
    0.2 T-7) / 3.8. ASHRAE 55-2020 5.4.2.1 accepts this exponentially weighted mean
    (alpha about 0.8) as the prevailing mean outdoor temperature. Input (N, >=7); NaN for a
    space with fewer than seven finite days.
    """
    d = np.atleast_2d(np.asarray(daily_means_newest_first, dtype=np.float64))
    if d.shape[1] < 7:
        return np.full(d.shape[0], np.nan)
    w = np.asarray(RUNNING_MEAN_WEIGHTS)
    result: FloatArray = d[:, :7] @ w / w.sum()
    return result


def ashrae_comfort_temperature(prevailing_mean_c: FloatArray) -> FloatArray:
    """ASHRAE 55-2020 eq. 5.4.2.3: t_cmf = 0.31 t_pma(out) + 17.8 (valid 10-33.5 °C)."""
    result: FloatArray = 0.31 * np.asarray(prevailing_mean_c, dtype=np.float64) + 17.8
    return result


ELEVATED_AIR_SPEED_K: Final = ((0.6, 1.2), (0.9, 1.8), (1.2, 2.2))
"""ASHRAE 55-2020 Table 5.4.2.4: (average air speed from, m/s; increase of the upper
acceptable operative temperature limits, K) in occupant-controlled naturally conditioned
spaces, where the operative temperature is above 25 °C."""


def ashrae_air_speed_increase(air_speed: FloatArray, operative_c: FloatArray) -> FloatArray:
    """Increase (K) of ASHRAE 55's adaptive upper limits for elevated air speed: 1.2 K from
    0.6 m/s, 1.8 K from 0.9 m/s, 2.2 K from 1.2 m/s (ASHRAE 55-2020 5.4.2.4, Table 5.4.2.4;
    steps, as pythermalcomfort applies it), only where the operative temperature is above
    25 °C; 0 elsewhere and where either is not known."""
    v = np.asarray(air_speed, dtype=np.float64)
    to = np.asarray(operative_c, dtype=np.float64)
    inc = np.zeros(v.shape)
    for speed, k in ELEVATED_AIR_SPEED_K:
        inc = np.where(v >= speed - 1e-9, k, inc)  # a mean of readings of 0.9 may be 0.8999...
    result: FloatArray = np.where(to > 25.0, inc, 0.0)
    return result


def en_comfort_temperature(running_mean_c: FloatArray) -> FloatArray:
    """EN 16798-1:2019 eq. (B.1): theta_c = 0.33 theta_rm + 18.8 (valid 10-30 °C)."""
    result: FloatArray = 0.33 * np.asarray(running_mean_c, dtype=np.float64) + 18.8
    return result


def en_category(operative_c: FloatArray, comfort_c: FloatArray) -> FloatArray:
    """EN 16798-1 adaptive category of the operative temperature.

    0 = I, 1 = II, 2 = III, 3 = outside III (see :data:`EN_CATEGORY_LABELS`).

    NaN where an input is missing.
    """
    d = np.asarray(operative_c, dtype=np.float64) - np.asarray(comfort_c, dtype=np.float64)
    cat = np.full(d.shape, 3.0)
    for k, (up, down) in reversed(list(enumerate(EN_BANDS_K.values()))):
        cat = np.where((d <= up) & (d >= -down), float(k), cat)
    result: FloatArray = np.where(np.isnan(d), np.nan, cat)
    return result
