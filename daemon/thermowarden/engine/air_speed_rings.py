"""Recent air speed readings per point, for the mean and turbulence intensity over a window.

ISO 7726:1998: air speed is the mean over the measuring period (3 min suggested) and the
turbulence intensity = 100 x standard deviation / mean. Each ``air_speed`` or ``wind_speed``
point keeps its latest readings in a ring (receive time, epoch s, and value, m/s).
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from thermowarden.core.columns import FloatArray

IntArray = npt.NDArray[np.int64]


class AirSpeedRings:
    """One ring of ``length`` readings per air speed point; ``row[pid]`` is the point's
    ring (-1: not an air speed point)."""

    def __init__(self, length: int) -> None:
        self.length = length
        self.row: IntArray = np.full(16, -1, dtype=np.int64)
        self._cap = 16
        self.t = np.full((self._cap, length), np.nan)
        self.v = np.full((self._cap, length), np.nan)
        self.head = np.zeros(self._cap, dtype=np.int64)
        self.rows = 0
        self.writes = 0
        """Readings written so far (a capture copies the rings only when this moved)."""
        self._copy: tuple[tuple[int, int], FloatArray, FloatArray] = (
            (-1, -1), np.empty((0, 0)), np.empty((0, 0)))

    def add_point(self, pid: int, has_ring: bool) -> None:
        """A new point ``pid``; an air speed point (``has_ring``) gets a ring."""
        if pid >= self.row.size:
            old = self.row
            self.row = np.full(max(pid + 1, 2 * old.size), -1, dtype=np.int64)
            self.row[:old.size] = old
        if not has_ring:
            return
        if self.rows >= self._cap:
            self._cap *= 2
            for name in ("t", "v"):
                old_ring = getattr(self, name)
                new = np.full((self._cap, self.length), np.nan)
                new[:old_ring.shape[0]] = old_ring
                setattr(self, name, new)
            old_h = self.head
            self.head = np.zeros(self._cap, dtype=np.int64)
            self.head[:old_h.size] = old_h
        self.row[pid] = self.rows
        self.rows += 1

    def record(self, pid: int, t: float, value: float) -> None:
        """A reading of point ``pid`` (no-op for a point without a ring)."""
        row = self.row[pid]
        if row >= 0:
            h = self.head[row]
            self.t[row, h] = t
            self.v[row, h] = value
            self.head[row] = (h + 1) % self.length
            self.writes += 1

    def copy_of(self, pids: IntArray | None, version: int) -> tuple[FloatArray, FloatArray]:
        """The rings of ``pids`` (times, values), copied once per change of readings or of
        ``version`` (the points' layout) and shared between captures meanwhile."""
        key = (self.writes, version)
        if self._copy[0] != key:
            if pids is not None:
                rows = self.row[pids]
                self._copy = (key, self.t[rows], self.v[rows])
            else:
                self._copy = (key, np.empty((0, 0)), np.empty((0, 0)))
        return self._copy[1], self._copy[2]

    def carry_point(self, old: AirSpeedRings, a: int, b: int) -> None:
        """Point ``b`` takes over the readings of point ``a`` of ``old`` (a reload): oldest
        first, keeping the newest that fit."""
        ro, rn = old.row[a], self.row[b]
        if ro < 0 or rn < 0:
            return
        order = (np.arange(old.length) + old.head[ro]) % old.length
        t = old.t[ro, order]
        v = old.v[ro, order]
        keep = min(self.length, old.length)
        self.t[rn, :keep] = t[-keep:]
        self.v[rn, :keep] = v[-keep:]
        self.head[rn] = keep % self.length


def window_mean_and_turbulence(times: FloatArray, t: FloatArray, v: FloatArray,
                               window_s: float) -> tuple[FloatArray, FloatArray]:
    """Mean air speed over the window (m/s) and turbulence intensity (%) per (time, point),
    from rings ``t``, ``v`` of shape (K, points, ring length), at each of ``times`` (K,)."""
    now = times[:, None, None]
    inside = np.isfinite(t) & (t >= now - window_s) & (t <= now)
    cnt = inside.sum(axis=2)
    s = np.where(inside, v, 0.0).sum(axis=2)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(cnt > 0, s / cnt, np.nan)
        var = np.where(inside, (v - mean[:, :, None]) ** 2, 0.0).sum(axis=2) / np.maximum(
            cnt - 1, 1)
        tu = np.where((cnt >= 3) & (mean > 0.05), 100.0 * np.sqrt(var) / mean, np.nan)
    return mean, tu
