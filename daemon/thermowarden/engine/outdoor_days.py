"""The outdoor air temperature by local day: the daily means the EN 16798-1 running mean
is taken from, and the 6 a.m. temperature the ASHRAE 55 clothing model reads."""

from __future__ import annotations

import datetime as dt
import math
from typing import Final

DAILY_MEANS_KEPT: Final = 30


class OutdoorDays:
    """Completed daily means (newest first, °C) and the day under way, in the site's time
    zone; fed with the site's outdoor temperature at each evaluation (epoch s)."""

    def __init__(self, tz: dt.tzinfo, seeds: list[float]) -> None:
        self.tz = tz
        self.daily_means: list[float] = list(seeds)
        """Completed daily mean outdoor temperatures, newest first (°C)."""
        self.day: dt.date | None = None
        self.day_sum = 0.0
        self.day_weight = 0.0
        self.last_t: float | None = None
        self.at_6am: float = math.nan

    def roll(self, now: float, outdoor_t: float) -> None:
        """Accumulate the local-day mean outdoor temperature; push it at local midnight."""
        local = dt.datetime.fromtimestamp(now, self.tz)
        today = local.date()
        if self.day is not None and today != self.day:
            if self.day_weight >= 0.5 * 86_400 * 0.5:  # at least 12 h of data
                self.daily_means.insert(0, self.day_sum / self.day_weight)
                del self.daily_means[DAILY_MEANS_KEPT:]
            self.day_sum = 0.0
            self.day_weight = 0.0
        self.day = today
        if self.last_t is not None and math.isfinite(outdoor_t):
            dt_s = min(now - self.last_t, 3600.0)
            if dt_s > 0:
                self.day_sum += outdoor_t * dt_s
                self.day_weight += dt_s
        self.last_t = now
        if math.isfinite(outdoor_t) and local.hour == 6 and (
                not math.isfinite(self.at_6am) or local.minute < 5):
            self.at_6am = outdoor_t

    def carry(self, old: OutdoorDays) -> None:
        """Take over the days of ``old`` (a reload)."""
        self.daily_means = list(old.daily_means)
        self.day, self.day_sum, self.day_weight = old.day, old.day_sum, old.day_weight
        self.last_t, self.at_6am = old.last_t, old.at_6am
