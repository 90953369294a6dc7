"""Point health per space: stale, stuck and implausible points and disagreeing sensors.

These columns feed the ``sensor_health`` rule pack like any index.
"""

from __future__ import annotations

from collections import deque
from typing import Any, Final

import numpy as np

from thermowarden.core.columns import FloatArray
from thermowarden.engine.state import SiteState, Snapshot
from thermowarden.site_model import SITE, SiteModel

STUCK_AFTER_S: Final = 3 * 3600.0
"""A fresh point whose value has not changed for this long is reported as stuck."""
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
        self._point_cache: tuple[int, Any, Any] = (-1, None, None)

    def note_implausible(self, point_key: str, now: float) -> None:
        """A reading of ``point_key`` was refused as physically implausible at ``now``."""
        found = self.model.point_by_key.get(point_key)
        if found is not None and self.model.points[found].space != SITE:
            self.implausible[self.model.points[found].space].append(now)

    def columns(self, snap: Snapshot, now: float, start: float) -> dict[str, FloatArray]:
        """Per-space counts at ``now`` (epoch s): ``points_total``, ``stale_points``,
        ``stuck_points``, ``implausible_recent`` (last hour) and ``max_disagreement`` (K,
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
            self._point_cache = (npts, np.array([p.space for p in self.model.points],
                                                dtype=np.int64),
                                 np.array([p.quantity in STATE_QUANTITIES
                                           for p in self.model.points], dtype=bool))
        _, spaces, state_q = self._point_cache
        indoor_pts = spaces >= 0
        grace = (now - start) > st.ingest_cfg.stale_after_intervals * st.interval[:npts]
        stale = ~snap.point_fresh & (seen | grace) & indoor_pts
        stuck = (snap.point_fresh & indoor_pts & ~state_q
                 & (now - self.last_change > STUCK_AFTER_S))
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
