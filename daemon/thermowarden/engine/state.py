"""Per-space, per-point state: latest values, time windows, freshness, and the snapshot
the index core takes.

Everything is a numpy array indexed by point or by space; the engine thread is the only
one that touches it. Time is always an argument (epoch seconds); nothing here reads a clock.
:class:`SiteState` stores the points' latest readings and assembles the snapshot from its
parts: ``sensor_slots`` (combining the sensors of a space), ``air_speed_rings`` (the air
speed window), ``schedules`` (occupancy), ``outdoor_days`` (the outdoor running mean),
``wbgt_window`` (the 60-minute WBGT) and ``space_constants`` (what the configuration fixes).
"""

from __future__ import annotations

import math
import zoneinfo
from dataclasses import dataclass, field
from typing import Final

import numpy as np
import numpy.typing as npt

from thermowarden.config.service import IngestConfig
from thermowarden.config.site import SiteConfig
from thermowarden.core import radiation
from thermowarden.core.adaptive import running_mean_outdoor
from thermowarden.core.columns import BoolArray, FloatArray
from thermowarden.core.indices import SpaceInputs
from thermowarden.engine.air_speed_rings import AirSpeedRings, window_mean_and_turbulence
from thermowarden.engine.outdoor_days import OutdoorDays
from thermowarden.engine.schedules import Schedules
from thermowarden.engine.sensor_slots import Slot, build_slots, combine, extreme
from thermowarden.engine.space_constants import space_constants
from thermowarden.engine.wbgt_window import WbgtWindow
from thermowarden.site_model import SiteModel

IntArray = npt.NDArray[np.int64]

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
        intervals = [p.interval_s for p in model.points if p.quantity == "air_speed"] or [10.0]
        self.rings = AirSpeedRings(int(min(256, max(8, math.ceil(
            self.ingest_cfg.air_speed_window_s / max(min(intervals), 1.0)) + 2))))
        self.n_points = 0
        for pid in range(len(model.points)):
            self._on_new_point(pid)
        model.listeners.append(self._on_new_point)
        self.wbgt = WbgtWindow(model.n_spaces, self.ingest_cfg.wbgt_window_s)
        self.outdoor_days = OutdoorDays(self.tz, list(cfg.site.outdoor_daily_means))
        self._slots_version = -1
        self._slots: dict[str, Slot] = {}
        self._context, self.wind_height_m = space_constants(model)
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
        self.schedules = Schedules(cfg, self.tz)

    @property
    def daily_means(self) -> list[float]:
        """Completed daily mean outdoor temperatures, newest first (°C)."""
        return self.outdoor_days.daily_means

    @daily_means.setter
    def daily_means(self, means: list[float]) -> None:
        self.outdoor_days.daily_means = means

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

    def _on_new_point(self, pid: int) -> None:
        spec = self.model.points[pid]
        if pid >= self._cap:
            self._grow(pid + 1)
        self.interval[pid] = spec.interval_s
        self.rings.add_point(pid, spec.quantity in ("air_speed", "wind_speed"))
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
        self.rings.record(pid, t, value)

    # ------------------------------------------------------------------ snapshot
    def occupied(self, now: float, states: FloatArray) -> BoolArray:
        """Occupied per space: a fresh occupancy point wins, else the weekly schedule."""
        return self.occupied_many(np.array([now]), states)

    def occupied_many(self, times: FloatArray, states: FloatArray) -> BoolArray:
        """:meth:`occupied` at each of ``times``; ``states`` holds K x N rows."""
        return self.schedules.occupied_many(times, states)

    def capture(self, now: float) -> Capture:
        """Copy what an evaluation at ``now`` needs from the points (cheap; see
        :meth:`snapshot_many`)."""
        self._check_slots()
        p = self.n_points
        slot = self._slots.get("air_speed")
        ring_t, ring_v = self.rings.copy_of(slot.pids if slot is not None else None,
                                            self._slots_version)
        return Capture(now, self.last_value[:p].copy(), self.last_time[:p].copy(),
                       ring_t, ring_v)

    def _check_slots(self) -> None:
        if self._slots_version != len(self.model.points):
            self._slots = build_slots(self.model)
            self._slots_version = len(self.model.points)

    def snapshot(self, now: float) -> Snapshot:
        """All spaces at ``now``: index inputs (stale -> NaN), states, freshness."""
        return self.snapshot_many([self.capture(now)])

    def snapshot_many(self, caps: list[Capture]) -> Snapshot:
        """All spaces at each captured time, as K x N rows, computed as one set of array
        operations. Captures must be in time order and are taken in order (the outdoor
        daily means roll forward through them)."""
        self._check_slots()
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
                _, hspread = combine(slot, values, fresh, n)
                q = name.split(":", 2)[2]
                spread[q] = np.fmax(spread.get(q, np.full(rows, np.nan)), hspread)
                continue
            if name == "surface_temperature":
                got[name] = extreme(slot, values, fresh, n, highest=False)
                continue
            got[name], _ = combine(slot, values, fresh, n)
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
            planes[side], spread[f"plane_radiant_temperature_{side}"] = combine(
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
                mean_v, tu = window_mean_and_turbulence(
                    times[usable], np.stack([caps[j].ring_t for j in usable.tolist()]),
                    np.stack([caps[j].ring_v for j in usable.tolist()]),
                    self.ingest_cfg.air_speed_window_s)
                point_vals[np.ix_(usable, slot.pids)] = mean_v
                point_tu[np.ix_(usable, slot.pids)] = tu
            speed, spread["air_speed"] = combine(slot, point_vals, fresh, n)
            turbulence, _ = combine(slot, point_tu, fresh, n)
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
        days = self.outdoor_days
        for j, now in enumerate(times.tolist()):
            known = len(days.daily_means)
            days.roll(now, out_t[j])
            if len(days.daily_means) != known and days.daily_means:
                days_rolled[j] = list(days.daily_means)
            if j == 0 or j in days_rolled:
                mean = (float(running_mean_outdoor([days.daily_means])[0])
                        if len(days.daily_means) >= 7 else math.nan)
            rm[j] = mean
            clo_outdoor[j] = days.at_6am if math.isfinite(days.at_6am) else out_t[j]
        states = {}
        for q in STATE_QUANTITIES:
            slot = self._slots.get(q)
            states[q] = (nan_rows if slot is None
                         else extreme(slot, values, fresh, n, highest=True))
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
        """Add this tick's WBGT (°C per space) to the 60-minute window (:class:`WbgtWindow`)."""
        self.wbgt.record(now, wbgt)

    def wbgt_time_weighted(self, now: float) -> FloatArray:
        """Time-weighted WBGT over the 60 minutes before ``now`` (°C); NaN below 80 % coverage."""
        return self.wbgt.time_weighted(now)
