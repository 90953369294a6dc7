"""Per-space, per-point state: latest values, time windows, freshness, and the snapshot
the index core takes.

Everything is a numpy array indexed by point or by space; the engine thread is the only
one that touches it. Time is always an argument (epoch seconds); nothing here reads a clock.
"""

from __future__ import annotations

import datetime as dt
import math
import zoneinfo
from dataclasses import dataclass, field
from typing import Final

import numpy as np
import numpy.typing as npt

from thermowarden.config.service import IngestConfig
from thermowarden.config.site import OccupancyConfig, SiteConfig
from thermowarden.core import radiation
from thermowarden.core.adaptive import running_mean_outdoor
from thermowarden.core.columns import BoolArray, FloatArray
from thermowarden.core.indices import SpaceInputs
from thermowarden.core.psychrometrics import STANDARD_PRESSURE_PA, pressure_from_altitude
from thermowarden.site_model import HEIGHT_WEIGHTS, SITE, SiteModel

IntArray = npt.NDArray[np.int64]

WBGT_BIN_S: Final = 60.0
MIN_TWA_COVERAGE: Final = 0.8
DEFAULT_AIR_SPEED_HEIGHT_M: Final = 1.1
"""Height of a space's air speed sensor unless its point says height_m: ISO 7726's abdomen
height of a standing person."""
WIND_HEIGHT_M: Final = 10.0
"""Height of the site's wind_speed unless its point says height_m (meteorological 10 m)."""
WBGT_BINS: Final = 61
"""Per-minute WBGT bins kept: the current, partial minute and the 60 before it, so that the
60-minute mean covers a full 60 minutes (the oldest bin counts for the part of its minute
still inside the window)."""
"""A time-weighted WBGT needs 48 of its 60 minutes covered."""
DAILY_MEANS_KEPT: Final = 30
SIMPLE_SLOTS: Final = ("relative_humidity", "globe_temperature", "mean_radiant_temperature",
                       "natural_wet_bulb", "psychrometric_wet_bulb", "floor_temperature",
                       "turbulence_intensity")
STATE_QUANTITIES: Final = ("shading_position", "fan_state", "occupancy")
OUTDOOR_SLOTS: Final = ("outdoor_air_temperature", "outdoor_relative_humidity", "wind_speed",
                        "solar_irradiance", "barometric_pressure")


@dataclass(frozen=True)
class Capture:
    """The raw state of every point at one evaluation time: what a tick needs from the
    readings, copied so that many ticks can be evaluated together later (replay)."""

    now: float
    values: FloatArray
    """Latest value per point (NaN if never seen)."""
    times: FloatArray
    """Receive time of that value per point (epoch s)."""
    ring_t: FloatArray
    """(points of the ``air_speed`` slot, ring length): receive times of recent readings."""
    ring_v: FloatArray
    """The same readings' values (m/s); both shared between captures while unchanged."""


@dataclass(frozen=True)
class Snapshot:
    """What the site looks like at ``times`` (K evaluation times): the index inputs and
    everything rules need, as arrays of K x N rows (row ``k * N + i`` is space ``i`` at
    ``times[k]``). A live tick is K = 1."""

    now: float
    """The last evaluation time."""
    inputs: SpaceInputs
    present: dict[str, BoolArray]
    """quantity -> space has a fresh reading of it."""
    states: dict[str, FloatArray]
    """equipment / occupancy quantity -> latest fresh value per space (NaN if none)."""
    occupied: BoolArray
    disagreement: dict[str, FloatArray]
    """quantity -> largest difference between fresh redundant sensors (NaN if < 2)."""
    point_fresh: BoolArray
    """(K, points)."""
    point_age_s: FloatArray
    """(K, points)."""
    outdoor: dict[str, FloatArray]
    """Site outdoor quantity -> value per evaluation time (K,)."""
    times: FloatArray
    """(K,) evaluation times, ascending."""
    point_values: FloatArray
    """(K, points) latest value per point at each time."""
    point_times: FloatArray
    """(K, points) receive time of that value."""
    days_rolled: dict[int, list[float]]
    """Evaluation index -> completed daily means (newest first) where a local day ended."""
    assumed: dict[str, BoolArray] = field(default_factory=dict)
    """quantity -> the space's declared assumption stands in for it at this evaluation."""

    @property
    def k(self) -> int:
        return int(self.times.size)


@dataclass
class _Slot:
    pids: IntArray
    spaces: IntArray
    weights: FloatArray
    flux: BoolArray | None = None
    """For plane slots: which points measure radiant flux (converted to a temperature)."""


class SiteState:
    """Buffers for every point of a site and the per-space windows derived from them."""

    def __init__(self, model: SiteModel) -> None:
        self.model = model
        cfg: SiteConfig = model.config
        self.ingest_cfg: IngestConfig = cfg.ingest
        self.tz = zoneinfo.ZoneInfo(cfg.site.timezone)
        self._cap = max(16, len(model.points) * 2)
        self.last_value = np.full(self._cap, np.nan)
        self.last_time = np.full(self._cap, np.nan)
        self.last_source_time = np.full(self._cap, np.nan)
        self.interval = np.full(self._cap, np.inf)
        self.ring_row = np.full(self._cap, -1, dtype=np.int64)
        intervals = [p.interval_s for p in model.points if p.quantity == "air_speed"] or [10.0]
        self.ring_len = int(min(256, max(8, math.ceil(self.ingest_cfg.air_speed_window_s
                                                      / max(min(intervals), 1.0)) + 2)))
        self._ring_cap = 16
        self.ring_t = np.full((self._ring_cap, self.ring_len), np.nan)
        self.ring_v = np.full((self._ring_cap, self.ring_len), np.nan)
        self.ring_head = np.zeros(self._ring_cap, dtype=np.int64)
        self._ring_rows = 0
        self._ring_writes = 0
        self._ring_copy: tuple[int, int, FloatArray, FloatArray] = (-1, -1, np.empty((0, 0)),
                                                                    np.empty((0, 0)))
        self.n_points = 0
        for pid in range(len(model.points)):
            self._on_new_point(pid)
        model.listeners.append(self._on_new_point)
        n = model.n_spaces
        self.wbgt_sum = np.zeros((n, WBGT_BINS))
        self.wbgt_weight = np.zeros((n, WBGT_BINS))
        self.wbgt_minute = np.full((n, WBGT_BINS), -1, dtype=np.int64)
        self._last_wbgt_record: float | None = None
        self.daily_means: list[float] = list(cfg.site.outdoor_daily_means)
        """Completed daily mean outdoor temperatures, newest first (°C)."""
        self._day: dt.date | None = None
        self._day_sum = 0.0
        self._day_weight = 0.0
        self._last_outdoor_t: float | None = None
        self.outdoor_6am: float = math.nan
        self._slots_version = -1
        self._slots: dict[str, _Slot] = {}
        self._context = self._build_context()
        assume = [cfg.assumptions(space) for space in cfg.spaces]
        self.assumed_air_speed = np.array(
            [a.air_speed if a.air_speed is not None else np.nan for a in assume])
        """m/s per space; NaN where the space assumes nothing."""
        self.assumed_mrt_offset = np.array(
            [off if (off := a.mrt_offset_k) is not None else np.nan for a in assume])
        """Mean radiant minus air temperature (K) per space; NaN where nothing is assumed."""
        self.assumed_rh = np.array(
            [a.relative_humidity if a.relative_humidity is not None else np.nan
             for a in assume])
        """Relative humidity (%) per space; NaN where nothing is assumed."""
        groups: dict[int, tuple[OccupancyConfig, list[int]]] = {}
        for i, space in enumerate(cfg.spaces):
            occ = cfg.occupancy(space)
            groups.setdefault(id(occ), (occ, []))[1].append(i)
        self._occupancy_groups = [(occ, np.array(m, dtype=np.int64))
                                  for occ, m in groups.values()]
        """Spaces sharing one occupancy schedule, so a tick evaluates each schedule once."""

    # ------------------------------------------------------------------ points
    def _grow(self, need: int) -> None:
        while self._cap < need:
            self._cap *= 2
        for name in ("last_value", "last_time", "last_source_time"):
            old = getattr(self, name)
            new = np.full(self._cap, np.nan)
            new[:old.size] = old
            setattr(self, name, new)
        old_i = self.interval
        self.interval = np.full(self._cap, np.inf)
        self.interval[:old_i.size] = old_i
        old_r = self.ring_row
        self.ring_row = np.full(self._cap, -1, dtype=np.int64)
        self.ring_row[:old_r.size] = old_r

    def _on_new_point(self, pid: int) -> None:
        spec = self.model.points[pid]
        if pid >= self._cap:
            self._grow(pid + 1)
        self.interval[pid] = spec.interval_s
        if spec.quantity == "air_speed" or (spec.quantity == "wind_speed"):
            if self._ring_rows >= self._ring_cap:
                self._ring_cap *= 2
                for name in ("ring_t", "ring_v"):
                    old = getattr(self, name)
                    new = np.full((self._ring_cap, self.ring_len), np.nan)
                    new[:old.shape[0]] = old
                    setattr(self, name, new)
                old_h = self.ring_head
                self.ring_head = np.zeros(self._ring_cap, dtype=np.int64)
                self.ring_head[:old_h.size] = old_h
            self.ring_row[pid] = self._ring_rows
            self._ring_rows += 1
        self.n_points = max(self.n_points, pid + 1)

    # ------------------------------------------------------------------ readings
    def clock_stepped_back(self, now: float) -> None:
        """The wall clock went back: receipt times after ``now`` become ``now`` (they were
        taken on the clock before its correction), so new readings are not out of order."""
        n = self.n_points
        t = self.last_time[:n]
        self.last_time[:n] = np.where(t > now, now, t)  # NaN (never seen) stays NaN

    def record(self, pid: int, t: float, value: float, source_time: float) -> None:
        """Store an accepted reading (already converted, checked and deduplicated)."""
        self.last_value[pid] = value
        self.last_time[pid] = t
        self.last_source_time[pid] = source_time
        row = self.ring_row[pid]
        if row >= 0:
            h = self.ring_head[row]
            self.ring_t[row, h] = t
            self.ring_v[row, h] = value
            self.ring_head[row] = (h + 1) % self.ring_len
            self._ring_writes += 1

    # ------------------------------------------------------------------ context
    def _build_context(self) -> dict[str, object]:
        cfg = self.model.config
        spaces = cfg.spaces
        n = len(spaces)
        people = [cfg.people(s) for s in spaces]
        globe_d = np.full(n, 0.15)
        globe_e = np.full(n, 0.95)
        for p in self.model.points:  # each point's own globe (not the first on its topic)
            if p.space != SITE and p.quantity == "globe_temperature":
                if p.globe_diameter_m:
                    globe_d[p.space] = p.globe_diameter_m
                if p.globe_emissivity:
                    globe_e[p.space] = p.globe_emissivity
        # heights of the air speed sensors (UTCI converts to 10 m): a space's own air_speed
        # point at 1.1 m unless it says height_m; the site's wind_speed at 10 m unless it says
        speed_height = np.full(n, DEFAULT_AIR_SPEED_HEIGHT_M)
        self.wind_height_m = WIND_HEIGHT_M
        for p in self.model.points:
            # each point's own height (several points may share one topic: a SenML pack)
            if p.quantity not in ("air_speed", "wind_speed") or p.height_m is None:
                continue
            if p.space == SITE:
                self.wind_height_m = p.height_m
            else:
                speed_height[p.space] = p.height_m
        if cfg.site.barometric_pressure_pa is not None:
            pressure = cfg.site.barometric_pressure_pa
        elif cfg.site.altitude_m is not None:
            pressure = float(pressure_from_altitude(cfg.site.altitude_m))
        else:
            pressure = STANDARD_PRESSURE_PA
        indoor = np.array([s.kind == "indoor" for s in spaces], dtype=bool)
        solar = np.array([(s.solar_load if s.solar_load is not None else s.kind == "outdoor")
                          for s in spaces], dtype=bool)
        return {
            "met": np.array([p.met_value for p in people]),
            "clo": np.array([p.clo if p.clothing_model == "fixed" and p.clo is not None
                             else np.nan for p in people]),
            "acclimatised": np.array([p.acclimatised for p in people], dtype=bool),
            "clothing_adjustment_k": np.array([p.adjustment_k for p in people]),
            "posture": tuple(p.posture for p in people),
            "indoor": indoor, "solar_load": solar,
            "hot_work": np.array([s.hot_work for s in spaces], dtype=bool),
            "naturally_ventilated": np.array([s.ventilation == "natural" for s in spaces],
                                             dtype=bool),
            "pressure_pa": np.full(n, pressure),
            "latitude": np.full(n, np.nan if cfg.site.latitude is None else cfg.site.latitude),
            "longitude": np.full(n, np.nan if cfg.site.longitude is None
                                 else cfg.site.longitude),
            "air_speed_height_m": speed_height,
            "globe_diameter_m": globe_d, "globe_emissivity": globe_e,
            "target_pmv": np.array([float(cfg.parameters(s).get("target_pmv", 0.5))
                                    for s in spaces]),
            "phs_edition": tuple(s.phs_edition for s in spaces),
        }

    # ------------------------------------------------------------------ slots
    def _build_slots(self) -> None:
        model = self.model
        groups: dict[str, tuple[list[int], list[int], list[float]]] = {}
        combine = [s.combine for s in model.config.spaces]

        def add(slot: str, pid: int, space: int, w: float) -> None:
            g = groups.setdefault(slot, ([], [], []))
            g[0].append(pid)
            g[1].append(space)
            g[2].append(w)

        for pid, p in enumerate(model.points):
            if p.space == SITE:
                add(p.quantity, pid, 0, 1.0)
                continue
            w = HEIGHT_WEIGHTS[p.height] if combine[p.space] == "height_weighted" else 1.0
            if p.quantity in ("plane_radiant_temperature", "radiant_flux"):
                add(f"plane:{p.side}", pid, p.space, 1.0)
            elif p.quantity == "air_temperature":
                add("air_temperature", pid, p.space, w)
                if p.height in ("head", "ankle"):
                    add(f"air_temperature_{p.height}", pid, p.space, 1.0)
            else:
                add(p.quantity, pid, p.space, w)
            # redundant sensors are compared only with sensors at the same height (and
            # radiant sensors only with sensors facing the same side, below)
            if p.side is None:
                add(f"height:{p.height or 'any'}:{p.quantity}", pid, p.space, 1.0)
        self._slots = {k: _Slot(np.array(v[0], dtype=np.int64), np.array(v[1], dtype=np.int64),
                                np.array(v[2], dtype=np.float64)) for k, v in groups.items()}
        for name, slot in self._slots.items():
            if name.startswith("plane:"):
                slot.flux = np.array([model.points[p].quantity == "radiant_flux"
                                      for p in slot.pids], dtype=bool)
        self._slots_version = len(model.points)

    # ------------------------------------------------------------------ snapshot
    def _combine(self, slot: _Slot, values: FloatArray, fresh: BoolArray, n: int
                 ) -> tuple[FloatArray, FloatArray]:
        """Weighted mean per row (time x space) of fresh values, and the spread (max - min).

        ``values`` and ``fresh`` are (K, points); the results are (K * n,)."""
        k = values.shape[0]
        v = values[:, slot.pids]
        ok = fresh[:, slot.pids] & np.isfinite(v)
        rows = (np.arange(k)[:, None] * n + slot.spaces[None, :]).ravel()
        w = np.where(ok, slot.weights[None, :], 0.0).ravel()
        okr = ok.ravel()
        vr = v.ravel()
        num = np.bincount(rows, weights=np.where(okr, vr, 0.0) * w, minlength=k * n)
        den = np.bincount(rows, weights=w, minlength=k * n)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(den > 0, num / den, np.nan)
        hi = np.full(k * n, -np.inf)
        lo = np.full(k * n, np.inf)
        np.maximum.at(hi, rows[okr], vr[okr])
        np.minimum.at(lo, rows[okr], vr[okr])
        count = np.bincount(rows[okr], minlength=k * n)
        spread = np.where(count >= 2, hi - lo, np.nan)
        return mean, spread

    def _extreme(self, slot: _Slot, values: FloatArray, fresh: BoolArray, n: int,
                 highest: bool) -> FloatArray:
        """Highest (or lowest) fresh value per row (time x space), NaN if none."""
        k = values.shape[0]
        v = values[:, slot.pids]
        ok = (fresh[:, slot.pids] & np.isfinite(v)).ravel()
        rows = (np.arange(k)[:, None] * n + slot.spaces[None, :]).ravel()[ok]
        out = np.full(k * n, -np.inf if highest else np.inf)
        (np.maximum if highest else np.minimum).at(out, rows, v.ravel()[ok])
        result: FloatArray = np.where(np.isfinite(out), out, np.nan)
        return result

    def _air_speed_window(self, times: FloatArray, t: FloatArray, v: FloatArray
                          ) -> tuple[FloatArray, FloatArray]:
        """Mean air speed over the window and turbulence intensity (%) per (time, point),
        from ring buffers ``t``, ``v`` of shape (K, points, ring length).

        ISO 7726:1998: the mean over the measuring period (3 min suggested) and the
        turbulence intensity = 100 x standard deviation / mean.
        """
        now = times[:, None, None]
        inside = np.isfinite(t) & (t >= now - self.ingest_cfg.air_speed_window_s) & (t <= now)
        cnt = inside.sum(axis=2)
        s = np.where(inside, v, 0.0).sum(axis=2)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(cnt > 0, s / cnt, np.nan)
            var = np.where(inside, (v - mean[:, :, None]) ** 2, 0.0).sum(axis=2) / np.maximum(
                cnt - 1, 1)
            tu = np.where((cnt >= 3) & (mean > 0.05), 100.0 * np.sqrt(var) / mean, np.nan)
        return mean, tu

    def occupied(self, now: float, states: FloatArray) -> BoolArray:
        """Occupied per space: a fresh occupancy point wins, else the weekly schedule."""
        return self.occupied_many(np.array([now]), states)

    def occupied_many(self, times: FloatArray, states: FloatArray) -> BoolArray:
        """:meth:`occupied` at each of ``times``; ``states`` holds K x N rows."""
        n = self.model.n_spaces
        out = np.zeros(times.size * n, dtype=bool)
        last_minute: int | None = None
        row = np.zeros(n, dtype=bool)
        for j, now in enumerate(times.tolist()):
            minute = int(now // 60)
            if minute != last_minute:  # schedules have minute resolution
                last_minute = minute
                local = dt.datetime.fromtimestamp(now, self.tz)
                day = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")[local.weekday()]
                hhmm = local.strftime("%H:%M")
                row = np.zeros(n, dtype=bool)
                for occ, members in self._occupancy_groups:
                    row[members] = _scheduled(occ, local.date(), day, hhmm)
            out[j * n:(j + 1) * n] = row
        result: BoolArray = np.where(np.isfinite(states), states >= 0.5, out)
        return result

    def _roll_outdoor(self, now: float, outdoor_t: float) -> None:
        """Accumulate the local-day mean outdoor temperature; push it at local midnight."""
        local = dt.datetime.fromtimestamp(now, self.tz)
        today = local.date()
        if self._day is not None and today != self._day:
            if self._day_weight >= 0.5 * 86_400 * 0.5:  # at least 12 h of data
                self.daily_means.insert(0, self._day_sum / self._day_weight)
                del self.daily_means[DAILY_MEANS_KEPT:]
            self._day_sum = 0.0
            self._day_weight = 0.0
        self._day = today
        if self._last_outdoor_t is not None and math.isfinite(outdoor_t):
            dt_s = min(now - self._last_outdoor_t, 3600.0)
            if dt_s > 0:
                self._day_sum += outdoor_t * dt_s
                self._day_weight += dt_s
        self._last_outdoor_t = now
        if math.isfinite(outdoor_t) and local.hour == 6 and (
                not math.isfinite(self.outdoor_6am) or local.minute < 5):
            self.outdoor_6am = outdoor_t

    def capture(self, now: float) -> Capture:
        """Copy what an evaluation at ``now`` needs from the points (cheap; see
        :meth:`snapshot_many`)."""
        if self._slots_version != len(self.model.points):
            self._build_slots()
        p = self.n_points
        slot = self._slots.get("air_speed")
        version = (self._ring_writes, self._slots_version)
        if self._ring_copy[:2] != version:
            if slot is not None:
                rows = self.ring_row[slot.pids]
                self._ring_copy = (*version, self.ring_t[rows], self.ring_v[rows])
            else:
                self._ring_copy = (*version, np.empty((0, 0)), np.empty((0, 0)))
        return Capture(now, self.last_value[:p].copy(), self.last_time[:p].copy(),
                       self._ring_copy[2], self._ring_copy[3])

    def snapshot(self, now: float) -> Snapshot:
        """All spaces at ``now``: index inputs (stale -> NaN), states, freshness."""
        return self.snapshot_many([self.capture(now)])

    def snapshot_many(self, caps: list[Capture]) -> Snapshot:
        """All spaces at each captured time, as K x N rows, computed as one set of array
        operations. Captures must be in time order and are taken in order (the outdoor
        daily means roll forward through them)."""
        if self._slots_version != len(self.model.points):
            self._build_slots()
        n = self.model.n_spaces
        k = len(caps)
        npts = self.n_points
        times = np.array([c.now for c in caps], dtype=np.float64)
        values = np.full((k, npts), np.nan)
        last = np.full((k, npts), np.nan)
        for j, c in enumerate(caps):
            values[j, :c.values.size] = c.values
            last[j, :c.times.size] = c.times
        age = times[:, None] - last
        limit = self.ingest_cfg.stale_after_intervals * self.interval[:npts]
        fresh: BoolArray = np.isfinite(age) & (age <= limit[None, :])
        rows = k * n
        got: dict[str, FloatArray] = {}
        spread: dict[str, FloatArray] = {}
        outdoor: dict[str, FloatArray] = {}
        for name in OUTDOOR_SLOTS:
            slot = self._slots.get(name)
            if slot is None:
                outdoor[name] = np.full(k, np.nan)
                continue
            v = values[:, slot.pids]
            ok = fresh[:, slot.pids] & np.isfinite(v)
            cnt = ok.sum(axis=1)
            with np.errstate(invalid="ignore", divide="ignore"):
                outdoor[name] = np.where(cnt > 0, np.where(ok, v, 0.0).sum(axis=1) / cnt,
                                         np.nan)
        for name, slot in self._slots.items():
            if name in OUTDOOR_SLOTS or name == "air_speed" or name.startswith("plane:"):
                continue
            if name.startswith("height:"):
                # sensors at one height may be compared; different heights differ by design
                _, hspread = self._combine(slot, values, fresh, n)
                q = name.split(":", 2)[2]
                spread[q] = np.fmax(spread.get(q, np.full(rows, np.nan)), hspread)
                continue
            if name == "surface_temperature":
                got[name] = self._extreme(slot, values, fresh, n, highest=False)
                continue
            got[name], _ = self._combine(slot, values, fresh, n)
        planes: dict[str, FloatArray] = {}
        for side in radiation.SIDES:
            slot = self._slots.get(f"plane:{side}")
            if slot is None:
                continue
            vals = values
            flux = slot.flux if slot.flux is not None else np.zeros(slot.pids.size, dtype=bool)
            if flux.any():
                vals = values.copy()
                vals[:, slot.pids[flux]] = radiation.plane_radiant_temperature_from_flux(
                    values[:, slot.pids[flux]])
            planes[side], spread[f"plane_radiant_temperature_{side}"] = self._combine(
                slot, vals, fresh, n)
        nan_rows = np.full(rows, np.nan)
        speed = nan_rows
        turbulence = nan_rows
        slot = self._slots.get("air_speed")
        if slot is not None:
            point_vals = np.full((k, npts), np.nan)
            point_tu = np.full((k, npts), np.nan)
            usable = np.array([j for j, c in enumerate(caps)
                               if c.ring_t.shape[0] == slot.pids.size], dtype=np.int64)
            if usable.size:
                mean_v, tu = self._air_speed_window(
                    times[usable], np.stack([caps[j].ring_t for j in usable.tolist()]),
                    np.stack([caps[j].ring_v for j in usable.tolist()]))
                point_vals[np.ix_(usable, slot.pids)] = mean_v
                point_tu[np.ix_(usable, slot.pids)] = tu
            speed, spread["air_speed"] = self._combine(slot, point_vals, fresh, n)
            turbulence, _ = self._combine(slot, point_tu, fresh, n)
        measured_tu = got.get("turbulence_intensity", nan_rows)
        turbulence = np.where(np.isfinite(measured_tu), measured_tu, turbulence)

        ctx = self._context
        indoor = ctx["indoor"]
        assert isinstance(indoor, np.ndarray)
        outdoor_space = np.tile(~indoor, k)
        air = got.get("air_temperature", nan_rows)
        rh = got.get("relative_humidity", nan_rows)
        # outdoor spaces without their own sensors use the site's outdoor points
        air = np.where(outdoor_space & np.isnan(air),
                       np.repeat(outdoor["outdoor_air_temperature"], n), air)
        rh = np.where(outdoor_space & np.isnan(rh),
                      np.repeat(outdoor["outdoor_relative_humidity"], n), rh)
        from_wind = outdoor_space & np.isnan(speed)
        speed_height = ctx["air_speed_height_m"]
        assert isinstance(speed_height, np.ndarray)
        speed = np.where(from_wind, np.repeat(outdoor["wind_speed"], n), speed)

        rm = np.full(k, np.nan)
        clo_outdoor = np.full(k, np.nan)
        days_rolled: dict[int, list[float]] = {}
        out_t = outdoor["outdoor_air_temperature"].tolist()
        for j, now in enumerate(times.tolist()):
            known = len(self.daily_means)
            self._roll_outdoor(now, out_t[j])
            if len(self.daily_means) != known and self.daily_means:
                days_rolled[j] = list(self.daily_means)
            if j == 0 or j in days_rolled:
                mean = (float(running_mean_outdoor([self.daily_means])[0])
                        if len(self.daily_means) >= 7 else math.nan)
            rm[j] = mean
            clo_outdoor[j] = self.outdoor_6am if math.isfinite(self.outdoor_6am) else out_t[j]
        states = {}
        for q in STATE_QUANTITIES:
            slot = self._slots.get(q)
            states[q] = (nan_rows if slot is None
                         else self._extreme(slot, values, fresh, n, highest=True))
        twa = np.repeat(np.full(k, np.nan), n)
        twa[(k - 1) * n:] = self.wbgt_time_weighted(float(times[-1]))
        context = {name: (np.tile(v, k) if isinstance(v, np.ndarray) else
                          v * k if isinstance(v, tuple) else v) for name, v in ctx.items()}
        context["air_speed_height_m"] = np.where(from_wind, self.wind_height_m,
                                                 np.tile(speed_height, k))
        # declared assumptions stand in where nothing is measured (ISO 7726 would measure)
        assumed_speed = np.tile(self.assumed_air_speed, k)
        assumed_offset = np.tile(self.assumed_mrt_offset, k)
        measured_speed = np.isfinite(speed)
        speed_assumed = ~measured_speed & np.isfinite(assumed_speed)
        speed = np.where(speed_assumed, assumed_speed, speed)
        mrt = got.get("mean_radiant_temperature", nan_rows)
        radiant_known = np.isfinite(mrt) | np.isfinite(got.get("globe_temperature", nan_rows))
        for v in planes.values():
            radiant_known |= np.isfinite(v)
        # outdoors in the sun the irradiance gives it (better than an assumption)
        sunlit = ctx["solar_load"]
        lat = ctx["latitude"]
        assert isinstance(sunlit, np.ndarray) and isinstance(lat, np.ndarray)
        radiant_known |= (outdoor_space & np.tile(sunlit & np.isfinite(lat), k)
                          & np.repeat(np.isfinite(outdoor["solar_irradiance"]), n))
        mrt_assumed = ~radiant_known & np.isfinite(assumed_offset) & np.isfinite(air)
        mrt = np.where(mrt_assumed, air + assumed_offset, mrt)
        psy_wet = got.get("psychrometric_wet_bulb", nan_rows)
        assumed_rh = np.tile(self.assumed_rh, k)
        rh_assumed = np.isnan(rh) & np.isnan(psy_wet) & np.isfinite(assumed_rh)
        measured_rh = np.isfinite(rh)
        rh = np.where(rh_assumed, assumed_rh, rh)
        inputs = SpaceInputs.create(
            rows,
            air_temperature=air, relative_humidity=rh, air_speed=speed,
            turbulence_intensity=turbulence,
            globe_temperature=got.get("globe_temperature", nan_rows),
            mean_radiant_temperature=mrt,
            natural_wet_bulb=got.get("natural_wet_bulb", nan_rows),
            psychrometric_wet_bulb=got.get("psychrometric_wet_bulb", nan_rows),
            floor_temperature=got.get("floor_temperature", nan_rows),
            air_temperature_head=got.get("air_temperature_head", nan_rows),
            air_temperature_ankle=got.get("air_temperature_ankle", nan_rows),
            surface_temperature_min=got.get("surface_temperature", nan_rows),
            outdoor_air_temperature=np.repeat(clo_outdoor, n),
            wbgt_time_weighted=twa,
            running_mean_outdoor=np.repeat(rm, n),
            solar_irradiance=np.repeat(outdoor["solar_irradiance"], n),
            time_s=self._sun_times(times, k),
            plane_radiant=planes,
            assumed_mrt_offset_k=assumed_offset,
            **context,
        )
        present = {"air_temperature": np.isfinite(air), "relative_humidity": measured_rh}
        present["air_speed"] = measured_speed
        for q, v in got.items():
            present.setdefault(q, np.isfinite(v))
        for side, v in planes.items():
            present[f"plane_radiant_temperature_{side}"] = np.isfinite(v)
        assumed = {"air_speed": speed_assumed, "mean_radiant_temperature": mrt_assumed,
                   "relative_humidity": rh_assumed}
        occupied = self.occupied_many(times, states["occupancy"])
        return Snapshot(float(times[-1]), inputs, present, states, occupied, spread, fresh, age,
                        outdoor, times, values, last, days_rolled, assumed)

    def _sun_times(self, times: FloatArray, k: int) -> FloatArray:
        """The readings' time (s since 1970 UTC) per row where the sun's position can be used
        (outdoor spaces in the sun at a site with latitude and longitude), NaN elsewhere:
        nothing else depends on the time, and rows of unchanged readings must compare equal
        from tick to tick to be computed once (Evaluation._changed_only)."""
        ctx = self._context
        indoor, sunlit = ctx["indoor"], ctx["solar_load"]
        lat, lon = ctx["latitude"], ctx["longitude"]
        assert isinstance(indoor, np.ndarray) and isinstance(sunlit, np.ndarray)
        assert isinstance(lat, np.ndarray) and isinstance(lon, np.ndarray)
        uses_sun = ~indoor & sunlit & np.isfinite(lat) & np.isfinite(lon)
        n = uses_sun.size
        result: FloatArray = np.where(np.tile(uses_sun, k), np.repeat(times, n), np.nan)
        return result

    # ------------------------------------------------------------------ WBGT history
    def record_wbgt(self, now: float, wbgt: FloatArray) -> None:
        """Add this tick's WBGT (°C per space) to the per-minute bins of the 60-min window.

        Each tick's value holds from the previous tick to this one (sample and hold, at most
        two minutes), which is the time weighting of ISO 7243 / NIOSH for sampled data.
        """
        last = self._last_wbgt_record
        self._last_wbgt_record = now
        if last is None:
            return
        dt_s = min(now - last, 2 * WBGT_BIN_S)
        if dt_s <= 0:
            return
        minute = int(now // WBGT_BIN_S)
        slot = minute % WBGT_BINS
        stale = self.wbgt_minute[:, slot] != minute
        self.wbgt_sum[stale, slot] = 0.0
        self.wbgt_weight[stale, slot] = 0.0
        self.wbgt_minute[:, slot] = minute
        ok = np.isfinite(wbgt)
        self.wbgt_sum[ok, slot] += wbgt[ok] * dt_s
        self.wbgt_weight[ok, slot] += dt_s

    def wbgt_time_weighted(self, now: float) -> FloatArray:
        """Time-weighted WBGT over the 60 minutes before ``now`` (°C); NaN below 80 % coverage.

        The window is exactly 60 minutes: the current partial minute, the 59 minutes before
        it in full, and the part of the minute before those still inside the window (its
        bin weighted by that fraction, the samples taken as spread over their minute).
        """
        minute = int(now // WBGT_BIN_S)
        elapsed = (now - minute * WBGT_BIN_S) / WBGT_BIN_S
        age = minute - self.wbgt_minute
        factor = np.where((age >= 0) & (age < 60), 1.0, np.where(age == 60, 1.0 - elapsed, 0.0))
        s = (self.wbgt_sum * factor).sum(axis=1)
        w = (self.wbgt_weight * factor).sum(axis=1)
        window = self.ingest_cfg.wbgt_window_s
        with np.errstate(invalid="ignore", divide="ignore"):
            result: FloatArray = np.where(w >= MIN_TWA_COVERAGE * min(window, 3600.0), s / w,
                                          np.nan)
        return result


def _scheduled(occ: OccupancyConfig, date: dt.date, day: str, hhmm: str) -> bool:
    if occ.always:
        return True
    if date in occ.holidays:
        return False
    for span in occ.hours.get(day, []):  # type: ignore[call-overload]
        start, end = span.split("-")
        if start <= hhmm < end:
            return True
    return False

