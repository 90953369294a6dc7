"""Where the 60-minute WBGT is heading: a robust trend of the spot WBGT and, at that rate,
when the 60-minute mean will cross a reference value (or fall back below it).

Pure functions over N spaces at once (rows); times in seconds, temperatures in °C.

- :func:`theil_sen`: the Theil-Sen slope (Theil 1950; Sen 1968, J. Am. Stat. Assoc. 63:
  1379-1389): the median of the slopes between every pair of points, the intercept the
  median of ``y - slope * t`` (Conover 1980), and Sen's nonparametric confidence interval of
  the slope from the variance of Kendall's S, ``Var(S) = n(n-1)(2n+5)/18`` (no ties), as
  given by Gilbert (1987, *Statistical Methods for Environmental Pollution Monitoring*,
  section 16.5): ``C = z * sqrt(Var(S))``, ``M1 = (N' - C)/2``, ``M2 = (N' + C)/2`` for the
  ``N'`` pairwise slopes; the lower limit is the M1-th and the upper the (M2+1)-th smallest
  slope. One outlying reading moves neither the slope nor the interval much, where a least
  squares fit would follow it.
- **Steady** (our definition): at least ``min_points`` points in the window, and the 90 %
  two-sided confidence interval of the slope lies wholly above zero (a steady rise, +1) or
  wholly below zero (a steady fall, -1); otherwise 0. This is the Mann-Kendall trend test at
  the 10 % level (two-sided) expressed through Sen's interval.
- :func:`minutes_to_mean`: the 60-minute time-weighted mean one, two, ... minutes ahead,
  if the spot value goes on at the fitted level and slope: each future minute drops the
  oldest minute of the window and adds one minute at the projected value of its middle
  (ISO 7243:2017 / NIOSH time weighting, sample and hold per minute). The first minute at
  which the mean reaches the target (rising) or falls below it (falling) is returned,
  interpolated linearly within the minute; NaN when it does not happen within
  ``max_minutes``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final

import numpy as np

from thermowarden.core.columns import FloatArray

Z_90_TWO_SIDED: Final = 1.6449
"""Standard normal quantile for a 90 % two-sided interval (0.95 one-sided)."""
TREND_WINDOW_S: Final = 1200.0
"""Default window of the trend fit: 20 minutes (issue 29; a decision)."""
MIN_POINTS: Final = 10
"""Fewest per-minute points in the trend window for a trend (half of 20 minutes)."""
MEAN_WINDOW_MIN: Final = 60
"""Minutes in the time-weighted WBGT window (ISO 7243:2017, NIOSH 1-hour TWA)."""
QUARTER_HOUR_S: Final = 900.0
FORESIGHT_COLUMNS: Final = (
    "wbgt_trend", "wbgt_trend_steady", "wbgt_minutes_to_action", "wbgt_minutes_to_limit",
    "wbgt_minutes_to_action_latest", "wbgt_minutes_to_limit_latest", "wbgt_minutes_to_ease",
    "sun_minutes_to_windows", "sun_mrt_rise_expected", "sun_asymmetry_expected",
    "sky_clearness",
)
"""Columns the engine adds to each evaluation for the ahead-of-time rules (rules may read
them by name)."""


@dataclass(frozen=True)
class Trend:
    """A Theil-Sen fit per row: ``slope`` (units of y per s), ``level`` (the fitted value at
    the time asked for), Sen's 90 % interval of the slope (``lower``, ``upper``), ``points``
    used, and ``steady`` (+1 steady rise, -1 steady fall, 0 neither). NaN (and steady 0)
    where fewer than ``min_points`` points."""

    slope: FloatArray
    level: FloatArray
    lower: FloatArray
    upper: FloatArray
    points: FloatArray
    steady: FloatArray


def _order_stat(sorted_rows: FloatArray, rank: FloatArray) -> FloatArray:
    """Element ``rank`` (0-based, clipped to the row) of each sorted row; NaN for NaN rank."""
    m = sorted_rows.shape[1]
    ok = np.isfinite(rank)
    r = np.clip(np.where(ok, rank, 0), 0, max(m - 1, 0)).astype(np.int64)
    got = np.take_along_axis(sorted_rows, r[:, None], axis=1)[:, 0]
    out: FloatArray = np.where(ok, got, np.nan)
    return out


def theil_sen(t: FloatArray, y: FloatArray, at: float | FloatArray,
              min_points: int = MIN_POINTS, z: float = Z_90_TWO_SIDED) -> Trend:
    """Theil-Sen fit of each row of ``y`` against ``t`` (both N x m; NaN marks a missing
    point), with Sen's interval and the steadiness defined in the module docstring. The
    level is the fitted value at ``at`` (s)."""
    t = np.atleast_2d(np.asarray(t, dtype=np.float64))
    y = np.atleast_2d(np.asarray(y, dtype=np.float64))
    ok = np.isfinite(t) & np.isfinite(y)
    n_pts = ok.sum(axis=1).astype(np.float64)
    iu, ju = np.triu_indices(t.shape[1], k=1)
    dt = t[:, ju] - t[:, iu]
    pair_ok = ok[:, iu] & ok[:, ju] & (dt != 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        slopes = np.where(pair_ok, (y[:, ju] - y[:, iu]) / np.where(pair_ok, dt, 1.0), np.nan)
    s = np.sort(slopes, axis=1)  # NaN last
    count = pair_ok.sum(axis=1).astype(np.float64)
    enough = (n_pts >= max(min_points, 2)) & (count > 0)
    lo_mid = np.where(enough, np.floor((count - 1) / 2), np.nan)
    hi_mid = np.where(enough, np.floor(count / 2), np.nan)
    slope = 0.5 * (_order_stat(s, lo_mid) + _order_stat(s, hi_mid))
    var_s = n_pts * (n_pts - 1) * (2 * n_pts + 5) / 18.0
    c = z * np.sqrt(var_s)
    m1 = (count - c) / 2.0
    m2 = (count + c) / 2.0
    # ranks are 1-based in Gilbert; rounded to the nearest whole rank
    lower = _order_stat(s, np.where(enough & (np.round(m1) >= 1), np.round(m1) - 1, np.nan))
    upper = _order_stat(s, np.where(enough & (np.round(m2) + 1 <= count), np.round(m2),
                                    np.nan))
    resid = np.where(ok, y - slope[:, None] * t, np.nan)
    r = np.sort(resid, axis=1)
    lo_r = np.where(enough, np.floor((n_pts - 1) / 2), np.nan)
    hi_r = np.where(enough, np.floor(n_pts / 2), np.nan)
    intercept = 0.5 * (_order_stat(r, lo_r) + _order_stat(r, hi_r))
    level = intercept + slope * np.asarray(at, dtype=np.float64)
    steady = np.where(enough & (lower > 0), 1.0, np.where(enough & (upper < 0), -1.0, 0.0))
    nan = np.full(slope.shape, np.nan)
    return Trend(np.where(enough, slope, nan), np.where(enough, level, nan), lower, upper,
                 n_pts, steady)


def minutes_to_mean(values: FloatArray, weights: FloatArray, level: FloatArray,
                    slope: FloatArray, target: FloatArray, *, rising: bool,
                    max_minutes: int = 180) -> FloatArray:
    """Minutes until the 60-minute time-weighted mean reaches ``target`` (``rising``) or
    falls below it (not ``rising``), if the spot value goes on as ``level + slope * s``
    (``level`` °C at now, ``slope`` K/s, s seconds from now).

    ``values`` and ``weights`` (N x 60) are the window's per-minute means and the seconds
    each covers, oldest first (the newest minute may be partly covered; NaN values or zero
    weights are gaps). 0 when the mean is already there; NaN when it does not get there
    within ``max_minutes`` or an input is missing. Linear interpolation within the minute
    of the crossing."""
    v = np.atleast_2d(np.asarray(values, dtype=np.float64))
    w = np.atleast_2d(np.asarray(weights, dtype=np.float64))
    w = np.where(np.isfinite(v) & (w > 0), w, 0.0)
    vw = np.where(w > 0, v, 0.0) * w
    n, m = v.shape
    level = np.broadcast_to(np.asarray(level, dtype=np.float64), (n,))
    slope = np.broadcast_to(np.asarray(slope, dtype=np.float64), (n,))
    target = np.broadcast_to(np.asarray(target, dtype=np.float64), (n,))
    if not (np.isfinite(level) & np.isfinite(slope) & np.isfinite(target)).any():
        return np.full(n, np.nan)
    steps = np.arange(0, max_minutes + 1)
    # the window after j future minutes: the oldest j minutes gone, j projected minutes in
    drop_vw = np.concatenate([np.zeros((n, 1)), np.cumsum(vw, axis=1)], axis=1)
    drop_w = np.concatenate([np.zeros((n, 1)), np.cumsum(w, axis=1)], axis=1)
    j_in = np.minimum(steps, m)
    kept_vw = drop_vw[:, -1:] - drop_vw[:, j_in]
    kept_w = drop_w[:, -1:] - drop_w[:, j_in]
    # projected minute i (1-based) holds level + slope * 60 * (i - 0.5); the last m of them
    # are in the window after j >= m minutes
    first = np.maximum(steps - m, 0)  # projected minutes already dropped again
    def proj_sum(k: FloatArray) -> FloatArray:  # sum over i=1..k of (i - 0.5)
        out: FloatArray = k * k / 2.0
        return out
    count = (steps - first).astype(np.float64)
    mid_sum = proj_sum(steps.astype(np.float64)) - proj_sum(first.astype(np.float64))
    add_vw = 60.0 * (level[:, None] * count[None, :] + slope[:, None] * 60.0 * mid_sum[None, :])
    add_w = 60.0 * count[None, :]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = (kept_vw + add_vw) / (kept_w + add_w)
    diff = mean - target[:, None]
    hit = diff >= 0 if rising else diff < 0
    hit &= np.isfinite(diff)
    any_hit = hit.any(axis=1)
    j = np.argmax(hit, axis=1)
    valid = any_hit & np.isfinite(level) & np.isfinite(slope) & np.isfinite(target)
    rows = np.arange(n)
    b = diff[rows, j]
    a = diff[rows, np.maximum(j - 1, 0)]
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where((a != b) & np.isfinite(a), a / (a - b), 1.0)
    crossing = np.where(j == 0, 0.0, j - 1 + np.clip(frac, 0.0, 1.0))
    result: FloatArray = np.where(valid, crossing, np.nan)
    return result


def bin_centres(minute: FloatArray, weight_s: FloatArray, now: float) -> FloatArray:
    """The time (s) each per-minute bin stands for: the middle of the part of the minute it
    covers (the newest, current minute is covered from its start to ``now``)."""
    start = np.asarray(minute, dtype=np.float64) * 60.0
    end = np.minimum(start + 60.0, now)
    out: FloatArray = np.where(np.asarray(weight_s) > 0, 0.5 * (start + end), np.nan)
    return out
