"""Occupancy from the spaces' weekly schedules and holidays, where no fresh occupancy point
says otherwise. Minute resolution, in the site's time zone."""

from __future__ import annotations

import datetime as dt

import numpy as np

from thermowarden.config.site import OccupancyConfig, SiteConfig
from thermowarden.core.columns import BoolArray, FloatArray

_DAYS = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")


class Schedules:
    """The site's occupancy schedules, each evaluated once per minute for all its spaces."""

    def __init__(self, cfg: SiteConfig, tz: dt.tzinfo) -> None:
        self.tz = tz
        self.n = len(cfg.spaces)
        groups: dict[int, tuple[OccupancyConfig, list[int]]] = {}
        for i, space in enumerate(cfg.spaces):
            occ = cfg.occupancy(space)
            groups.setdefault(id(occ), (occ, []))[1].append(i)
        self.groups = [(occ, np.array(m, dtype=np.int64)) for occ, m in groups.values()]
        """Spaces sharing one occupancy schedule, so a tick evaluates each schedule once."""

    def occupied_many(self, times: FloatArray, states: FloatArray) -> BoolArray:
        """Occupied per space at each of ``times``: a fresh occupancy point (``states``,
        K x N rows, NaN where none) wins, else the weekly schedule."""
        n = self.n
        out = np.zeros(times.size * n, dtype=bool)
        last_minute: int | None = None
        row = np.zeros(n, dtype=bool)
        for j, now in enumerate(times.tolist()):
            minute = int(now // 60)
            if minute != last_minute:  # schedules have minute resolution
                last_minute = minute
                local = dt.datetime.fromtimestamp(now, self.tz)
                day = _DAYS[local.weekday()]
                hhmm = local.strftime("%H:%M")
                row = np.zeros(n, dtype=bool)
                for occ, members in self.groups:
                    row[members] = scheduled(occ, local.date(), day, hhmm)
            out[j * n:(j + 1) * n] = row
        result: BoolArray = np.where(np.isfinite(states), states >= 0.5, out)
        return result


def scheduled(occ: OccupancyConfig, date: dt.date, day: str, hhmm: str) -> bool:
    """Whether the schedule ``occ`` has the space occupied at local ``hhmm`` of ``date``
    (``day``: its weekday as ``mon`` ... ``sun``)."""
    if occ.always:
        return True
    if date in occ.holidays:
        return False
    for span in occ.hours.get(day, []):  # type: ignore[call-overload]
        start, end = span.split("-")
        if start <= hhmm < end:
            return True
    return False
