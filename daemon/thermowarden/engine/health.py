"""Point health per space: stale, stuck and implausible points and disagreeing sensors.

These columns feed the ``sensor_health`` rule pack like any index.
"""

from __future__ import annotations

import datetime as dt
import math
from collections import deque
from typing import Any, Final

import numpy as np

from thermowarden.core.columns import BoolArray, FloatArray
from thermowarden.core.quantities import QUANTITIES
from thermowarden.engine.state import SiteState, Snapshot
from thermowarden.site_model import SITE, SiteModel

IMPLAUSIBLE_WINDOW_S: Final = 3600.0
TEMPERATURE_SPREADS: Final = ("air_temperature", "globe_temperature", "natural_wet_bulb",
                              "mean_radiant_temperature", "floor_temperature")
STATE_QUANTITIES: Final = ("shading_position", "fan_state", "occupancy")


class PointHealth:
    """Tracks, per point, when its value last changed and, per space, recent implausible
    readings; turns them into per-space health columns at each evaluation."""

    def __init__(self, model: SiteModel, state: SiteState) -> None:
        self.model = model
        self.state = state
        self.n = model.n_spaces
        self.implausible: list[deque[float]] = [deque(maxlen=200) for _ in range(self.n)]
        self.last_change = np.full(0, np.nan)
        self.last_seen_value = np.full(0, np.nan)
        self._point_cache: tuple[int, Any, Any, Any] = (-1, None, None, None)
        self.stale = np.zeros(0, dtype=bool)
        self.stuck = np.zeros(0, dtype=bool)
        self.implausible_points: list[dict[str, float]] = [{} for _ in range(self.n)]
        """space -> point key -> when a reading of it was last refused as implausible."""

    def note_implausible(self, point_key: str, now: float) -> None:
        """A reading of ``point_key`` was refused as implausible at ``now`` (outside its
        plausible range, or changing faster than believable)."""
        found = self.model.point_by_key.get(point_key)
        if found is not None and self.model.points[found].space != SITE:
            self.implausible[self.model.points[found].space].append(now)
            self.implausible_points[self.model.points[found].space][point_key] = now

    def columns(self, snap: Snapshot, now: float, start: float) -> dict[str, FloatArray]:
        """Per-space counts at ``now`` (epoch s): ``points_total``, ``stale_points``,
        ``stuck_points`` (unchanged for longer than each point's ``stuck_after_s``, by default
        3 hours), ``implausible_recent`` (last hour) and ``max_disagreement`` (K,
        the largest spread between redundant temperature sensors). ``start`` is when the
        engine started: points never seen are stale only after their grace period."""
        n = self.n
        st = self.state
        npts = st.n_points
        if self.last_change.size < npts:
            grow = npts - self.last_change.size
            self.last_change = np.concatenate([self.last_change, np.full(grow, np.nan)])
            self.last_seen_value = np.concatenate([self.last_seen_value, np.full(grow, np.nan)])
        values = st.last_value[:npts]
        changed = values != self.last_seen_value
        seen = np.isfinite(st.last_time[:npts])
        self.last_change = np.where(changed & seen, now, self.last_change)
        self.last_seen_value = values.copy()
        if self._point_cache[0] != npts:
            points = self.model.points
            self._point_cache = (npts, np.array([p.space for p in points], dtype=np.int64),
                                 np.array([p.quantity in STATE_QUANTITIES for p in points],
                                          dtype=bool),
                                 np.array([p.stuck_after_s for p in points]))
        _, spaces, state_q, stuck_after = self._point_cache
        indoor_pts = spaces >= 0
        grace = (now - start) > st.ingest_cfg.stale_after_intervals * st.interval[:npts]
        stale = ~snap.point_fresh & (seen | grace) & indoor_pts
        stuck = (snap.point_fresh & indoor_pts & ~state_q
                 & (now - self.last_change > stuck_after))
        self.stale, self.stuck = stale, stuck
        sp = np.where(indoor_pts, spaces, 0)
        health = {
            "points_total": np.bincount(sp[indoor_pts], minlength=n).astype(np.float64),
            "stale_points": np.bincount(sp[stale], minlength=n).astype(np.float64),
            "stuck_points": np.bincount(sp[stuck], minlength=n).astype(np.float64),
            "implausible_recent": np.array(
                [sum(1 for t in d if t >= now - IMPLAUSIBLE_WINDOW_S) for d in self.implausible],
                dtype=np.float64),
        }
        spread = np.full(n, np.nan)
        for q, arr in snap.disagreement.items():
            if q in TEMPERATURE_SPREADS or q.startswith("plane_radiant"):
                spread = np.fmax(spread, arr)
        health["max_disagreement"] = spread
        return health

    # ------------------------------------------------------------------ what to say
    def _describe(self, pid: int, with_value: bool = True) -> str:
        """``air speed (site/x/v, sensor b): 0.12 m/s at 14:02`` for point ``pid``."""
        p = self.model.points[pid]
        q = QUANTITIES.get(p.quantity)
        label = p.quantity.replace("_", " ")
        tags = ", ".join(x for x in (p.topic, f"sensor {p.sensor}" if p.sensor else "",
                                     f"{p.side} side" if p.side else "",
                                     p.height or "") if x)
        text = f"{label} ({tags})"
        if not with_value:
            return text
        v = float(self.state.last_value[pid])
        t = float(self.state.last_time[pid])
        if not math.isfinite(t):
            return f"{text}: never reported"
        unit = q.unit if q else ""
        local = dt.datetime.fromtimestamp(t, self.state.tz)
        value = f"{v:.1f} {unit}".strip() if math.isfinite(v) else "no value"
        return f"{text}: last {value} at {local:%H:%M} {local:%Z}".rstrip()

    def _points_of(self, space: int, mask: BoolArray) -> list[int]:
        _, spaces, _, _ = self._point_cache
        if spaces is None or mask.size == 0:
            return []
        return [int(p) for p in np.flatnonzero(mask & (spaces[:mask.size] == space))]

    def details(self, space: int, snap: Snapshot) -> dict[str, str]:
        """Sentences that name the sensors behind the health columns of ``space``:
        ``stale_detail``, ``stuck_detail``, ``implausible_detail``, ``disagreement_detail``
        (absent where there is nothing to say)."""
        out: dict[str, str] = {}
        stale = self._points_of(space, self.stale)
        if stale:
            out["stale_detail"] = "; ".join(self._describe(p) for p in stale[:5]) + (
                f"; and {len(stale) - 5} more" if len(stale) > 5 else "")
        stuck = self._points_of(space, self.stuck)
        if stuck:
            out["stuck_detail"] = "; ".join(self._describe(p) for p in stuck[:5])
        bad = self.implausible_points[space]
        if bad:
            recent = sorted(bad, key=lambda k: -bad[k])[:3]
            out["implausible_detail"] = "; ".join(
                self._describe(self.model.point_by_key[k], with_value=False) for k in recent)
        worst: tuple[float, str] | None = None
        for q, arr in snap.disagreement.items():
            spread = float(arr[space])
            if not math.isfinite(spread) or (worst is not None and spread <= worst[0]):
                continue
            pts = [p for p in self._points_of(space, snap.point_fresh)
                   if self.model.points[p].quantity == q]
            if len(pts) < 2:
                continue
            values = self.state.last_value
            hi = max(pts, key=lambda p: float(values[p]))
            lo = min(pts, key=lambda p: float(values[p]))
            unit = QUANTITIES[q].unit if q in QUANTITIES else "K"
            worst = (spread, f"{self._describe(hi)} and {self._describe(lo)} differ by "
                             f"{spread:.1f} {'K' if unit == '°C' else unit}")
        if worst is not None:
            out["disagreement_detail"] = worst[1]
        return out
