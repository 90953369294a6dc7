"""The 60-minute time-weighted WBGT of every space, from per-minute bins.

ISO 7243:2017 and the NIOSH criteria compare a WBGT averaged over 60 minutes with the
reference values. Each tick's WBGT holds from the previous tick to this one (sample and
hold, at most two minutes); the sums go into one bin per minute and the mean is taken over
exactly 60 minutes. Times are epoch seconds, WBGT °C.
"""

from __future__ import annotations

from typing import Final

import numpy as np

from thermowarden.core.columns import FloatArray

WBGT_BIN_S: Final = 60.0
MIN_TWA_COVERAGE: Final = 0.8
"""A time-weighted WBGT needs 48 of its 60 minutes covered."""
WBGT_BINS: Final = 61
"""Per-minute WBGT bins kept: the current, partial minute and the 60 before it, so that the
60-minute mean covers a full 60 minutes (the oldest bin counts for the part of its minute
still inside the window)."""


class WbgtWindow:
    """Per space, the WBGT of the last 61 minutes in per-minute bins."""

    def __init__(self, n_spaces: int, window_s: float) -> None:
        self.window_s = window_s
        self.sum = np.zeros((n_spaces, WBGT_BINS))
        self.weight = np.zeros((n_spaces, WBGT_BINS))
        self.minute = np.full((n_spaces, WBGT_BINS), -1, dtype=np.int64)
        self.last_record: float | None = None
        self._uniform = n_spaces > 0
        """Every space's bins are of the same minutes (each tick records every space; only
        :meth:`carry_space` makes them differ): the weights are worked out once."""

    def record(self, now: float, wbgt: FloatArray) -> None:
        """Add this tick's WBGT (°C per space) to the per-minute bins of the 60-min window.

        Each tick's value holds from the previous tick to this one (sample and hold, at most
        two minutes), which is the time weighting of ISO 7243 / NIOSH for sampled data.
        """
        last = self.last_record
        self.last_record = now
        if last is None:
            return
        dt_s = min(now - last, 2 * WBGT_BIN_S)
        if dt_s <= 0:
            return
        minute = int(now // WBGT_BIN_S)
        slot = minute % WBGT_BINS
        stale = self.minute[:, slot] != minute
        self.sum[stale, slot] = 0.0
        self.weight[stale, slot] = 0.0
        self.minute[:, slot] = minute
        ok = np.isfinite(wbgt)
        self.sum[ok, slot] += wbgt[ok] * dt_s
        self.weight[ok, slot] += dt_s

    def time_weighted(self, now: float) -> FloatArray:
        """Time-weighted WBGT over the 60 minutes before ``now`` (°C); NaN below 80 % coverage.

        The window is exactly 60 minutes: the current partial minute, the 59 minutes before
        it in full, and the part of the minute before those still inside the window (its
        bin weighted by that fraction, the samples taken as spread over their minute).
        """
        minute = int(now // WBGT_BIN_S)
        elapsed = (now - minute * WBGT_BIN_S) / WBGT_BIN_S
        # one row of minutes stands for all where they are the same (the same factors)
        age = minute - (self.minute[0] if self._uniform else self.minute)
        factor = np.where((age >= 0) & (age < 60), 1.0, np.where(age == 60, 1.0 - elapsed, 0.0))
        s = (self.sum * factor).sum(axis=1)
        w = (self.weight * factor).sum(axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            result: FloatArray = np.where(
                w >= MIN_TWA_COVERAGE * min(self.window_s, 3600.0), s / w, np.nan)
        return result

    def carry_space(self, old: WbgtWindow, i: int, j: int) -> None:
        """Space ``j`` takes over the bins of space ``i`` of ``old`` (a reload)."""
        self._uniform = False
        self.sum[j] = old.sum[i]
        self.weight[j] = old.weight[i]
        self.minute[j] = old.minute[i]
