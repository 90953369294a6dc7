"""Quiet hours: a daily period, in a site's time zone, when only urgent notifications go out.

Pure: time is an argument (epoch seconds). A period ``HH:MM-HH:MM`` may span midnight
(``22:00-06:30``). Local times are resolved with :mod:`zoneinfo`; across a daylight-saving
change the end is the first moment the wall clock shows the end time.
"""

from __future__ import annotations

import datetime as dt
import zoneinfo
from dataclasses import dataclass


@dataclass(frozen=True)
class QuietHours:
    """A daily quiet period from ``start`` to ``end`` local time."""

    start: dt.time
    end: dt.time
    tz: zoneinfo.ZoneInfo

    @classmethod
    def parse(cls, text: str, tz: str) -> QuietHours:
        """``"22:00-06:30"`` in the IANA zone ``tz``; raises ValueError when malformed."""
        first, _, second = text.partition("-")
        start = dt.time.fromisoformat(first)
        end = dt.time.fromisoformat(second)
        if start == end:
            raise ValueError(f"{text!r} starts and ends at the same time")
        return cls(start, end, zoneinfo.ZoneInfo(tz))

    def until(self, now: float) -> float | None:
        """When the quiet period containing ``now`` ends (epoch s), or None when ``now`` is
        not in quiet hours."""
        local = dt.datetime.fromtimestamp(now, self.tz)
        t = local.time().replace(tzinfo=None)
        day = local.date()
        if self.start < self.end:
            if not self.start <= t < self.end:
                return None
            end_day = day
        elif t >= self.start:
            end_day = day + dt.timedelta(days=1)
        elif t < self.end:
            end_day = day
        else:
            return None
        return dt.datetime.combine(end_day, self.end, self.tz).timestamp()
