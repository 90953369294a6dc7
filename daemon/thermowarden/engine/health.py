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
        self.stale = np.zeros((1, 0), dtype=bool)
        """(K, points) at the latest evaluations."""
        self.stuck = np.zeros((1, 0), dtype=bool)
        self.snap: Snapshot | None = None
        self.row = 0
        """The evaluation (row of ``snap``) that texts describe; see :meth:`at`."""
        self.implausible_points: list[dict[str, float]] = [{} for _ in range(self.n)]
        """space -> point key -> when a reading of it was last refused as implausible."""

    def note_implausible(self, point_key: str, now: float) -> None:
        """A reading of ``point_key`` was refused as implausible at ``now`` (outside its
        plausible range, or changing faster than believable)."""
        found = self.model.point_by_key.get(point_key)
        if found is not None and self.model.points[found].space != SITE:
            self.implausible[self.model.points[found].space].append(now)
            self.implausible_points[self.model.points[found].space][point_key] = now

    def columns(self, snap: Snapshot, start: float) -> dict[str, FloatArray]:
        """Per-space counts at each of the snapshot's times, as K x N rows:
        ``points_total``, ``stale_points``, ``stuck_points`` (unchanged for longer than each
        point's ``stuck_after_s``, by default 3 hours), ``implausible_recent`` (last hour)
        and ``max_disagreement`` (K, the largest spread between redundant temperature
        sensors). ``start`` is when the engine started (epoch s): points never seen are
        stale only after their grace period."""
        n = self.n
        k = snap.k
        st = self.state
        times = snap.times
        npts = snap.point_values.shape[1]
        if self.last_change.size < npts:
            grow = npts - self.last_change.size
            self.last_change = np.concatenate([self.last_change, np.full(grow, np.nan)])
            self.last_seen_value = np.concatenate([self.last_seen_value, np.full(grow, np.nan)])
        values = snap.point_values
        seen = np.isfinite(snap.point_times)
        before = np.concatenate([self.last_seen_value[None, :npts], values[:-1]])
        changed = (values != before) & seen
        # time of the last change at or before each evaluation (carried forward)
        idx = np.maximum.accumulate(np.where(changed, np.arange(k)[:, None], -1), axis=0)
        last_change = np.where(idx >= 0, times[np.maximum(idx, 0)],
                               self.last_change[None, :npts])
        self.last_change[:npts] = last_change[-1]
        self.last_seen_value[:npts] = values[-1]
        if self._point_cache[0] != npts:
            points = self.model.points[:npts]
            self._point_cache = (npts, np.array([p.space for p in points], dtype=np.int64),
                                 np.array([p.quantity in STATE_QUANTITIES for p in points],
                                          dtype=bool),
                                 np.array([p.stuck_after_s for p in points]))
        _, spaces, state_q, stuck_after = self._point_cache
        indoor_pts = spaces >= 0
        grace = ((times[:, None] - start)
                 > st.ingest_cfg.stale_after_intervals * st.interval[None, :npts])
        fresh = snap.point_fresh
        stale = ~fresh & (seen | grace) & indoor_pts[None, :]
        stuck = (fresh & indoor_pts[None, :] & ~state_q[None, :]
                 & (times[:, None] - last_change > stuck_after[None, :]))
        self.stale, self.stuck = stale, stuck
        self.snap, self.row = snap, k - 1
        rows = (np.arange(k)[:, None] * n + np.where(indoor_pts, spaces, 0)[None, :])
        inside = np.broadcast_to(indoor_pts[None, :], rows.shape)

        def count(mask: Any) -> FloatArray:
            return np.bincount(rows[mask], minlength=k * n).astype(np.float64)

        implausible = np.zeros(k * n)
        for i, d in enumerate(self.implausible):
            if d:
                ts = np.sort(np.fromiter(d, dtype=np.float64))
                got = (np.searchsorted(ts, times, side="left")
                       - np.searchsorted(ts, times - IMPLAUSIBLE_WINDOW_S, side="left"))
                implausible[i::n] = got
        health = {
            "points_total": count(inside),
            "stale_points": count(stale),
            "stuck_points": count(stuck),
            "implausible_recent": implausible,
        }
        spread = np.full(k * n, np.nan)
        for q, arr in snap.disagreement.items():
            if q in TEMPERATURE_SPREADS or q.startswith("plane_radiant"):
                spread = np.fmax(spread, arr)
        health["max_disagreement"] = spread
        return health

    # ------------------------------------------------------------------ what to say
    def at(self, row: int) -> None:
        """Texts rendered from now on describe evaluation ``row`` of the latest snapshot."""
        self.row = row

    def _describe(self, pid: int, with_value: bool = True) -> str:
        """``air speed (site/x/v, sensor b): 0.12 m/s at 14:02`` for point ``pid``."""
        p = self.model.points[pid]
        q = QUANTITIES.get(p.quantity)
        label = p.quantity.replace("_", " ")
        tags = ", ".join(x for x in (p.topic, f"sensor {p.sensor}" if p.sensor else "",
                                     f"{p.side_as_configured or p.side} side" if p.side else "",
                                     p.height or "") if x)
        text = f"{label} ({tags})"
        if not with_value:
            return text
        snap = self.snap
        if snap is not None and pid < snap.point_values.shape[1]:
            v = float(snap.point_values[self.row, pid])
            t = float(snap.point_times[self.row, pid])
        else:
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
        row = self.row
        stale = self._points_of(space, self.stale[row])
        if stale:
            out["stale_detail"] = "; ".join(self._describe(p) for p in stale[:5]) + (
                f"; and {len(stale) - 5} more" if len(stale) > 5 else "")
        stuck = self._points_of(space, self.stuck[row])
        if stuck:
            out["stuck_detail"] = "; ".join(self._describe(p) for p in stuck[:5])
        bad = self.implausible_points[space]
        if bad:
            recent = sorted(bad, key=lambda k: -bad[k])[:3]
            out["implausible_detail"] = "; ".join(
                self._describe(self.model.point_by_key[k], with_value=False) for k in recent)
        worst: tuple[float, str] | None = None
        for q, arr in snap.disagreement.items():
            spread = float(arr[row * self.n + space])
            if not math.isfinite(spread) or (worst is not None and spread <= worst[0]):
                continue
            pts = [p for p in self._points_of(space, snap.point_fresh[row])
                   if self.model.points[p].quantity == q]
            if len(pts) < 2:
                continue
            values = snap.point_values[row]
            hi = max(pts, key=lambda p: float(values[p]))
            lo = min(pts, key=lambda p: float(values[p]))
            unit = QUANTITIES[q].unit if q in QUANTITIES else "K"
            worst = (spread, f"{self._describe(hi)} and {self._describe(lo)} differ by "
                             f"{spread:.1f} {'K' if unit == '°C' else unit}")
        if worst is not None:
            out["disagreement_detail"] = worst[1]
        return out
