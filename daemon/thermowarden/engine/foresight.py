"""Ahead-of-time columns: where the 60-minute WBGT is heading, and when the sun reaches each
space's windows, added to every evaluation for the rules of the ``ahead`` pack.

Heat stress (hot-work spaces), from the per-minute WBGT bins the engine keeps for the
60-minute mean (:mod:`thermowarden.engine.state`), once per minute:

- ``wbgt_trend`` (K per 15 minutes): the Theil-Sen slope of the spot WBGT's completed minutes
  over ``evaluation.trend_window_s`` (default 20 minutes), :mod:`thermowarden.core.forecast`;
- ``wbgt_trend_steady``: +1 a steady rise, -1 a steady fall, 0 neither (Sen's 90 % interval
  of the slope wholly above or below zero, at least half the window's minutes present);
- ``wbgt_minutes_to_action`` / ``wbgt_minutes_to_limit``: minutes until the 60-minute mean
  plus the clothing adjustment reaches the action value (ISO 7243 reference for the
  unacclimatised, NIOSH RAL) or the limit (acclimatised, NIOSH REL) if the spot value goes
  on at the present rate (the values already in the window count: a flat spot value above
  the reference still brings the mean up to it); 0 when already there; absent beyond 3
  hours;
- ``wbgt_minutes_to_action_latest`` / ``..._limit_latest``: the same at the lower limit of
  the rate's 90 % interval: the latest the crossing plausibly comes. A crossing is
  *foreseen* (the ``ahead`` pack) when even this is within the horizon;
- ``wbgt_minutes_to_ease``: with the mean above the action value, minutes until it is back
  below the highest reference it is above, at the present rate.

The sun (spaces with ``windows``; the site's latitude and longitude), from a schedule of
the local day at one-minute steps (:mod:`thermowarden.core.facade_sun`), computed once a
day:

- ``sun_minutes_to_windows``: minutes until direct sun falls on any of the space's windows
  (at least 50 W/m² on the glazing's plane under a clear sky), negative while it does
  (minutes since it began); absent when no more sun reaches them that day;
- ``sun_mrt_rise_expected``: the largest rise of mean radiant temperature (K, ASHRAE 55
  Appendix C) for the person by the window in the first hour of that sun, and
  ``sun_asymmetry_expected``: the window side's plane radiant rise (K) then, both from the
  clear-sky direct irradiance times the sky's clearness where the site measures it;
- ``sky_clearness``: measured over clear-sky global horizontal irradiance (site-wide).
"""

from __future__ import annotations

import datetime as dt
import zoneinfo
from collections.abc import Callable, Mapping
from collections.abc import Set as AbstractSet
from dataclasses import dataclass
from typing import Final

import numpy as np
import numpy.typing as npt

from thermowarden.config.windows import WindowConfig
from thermowarden.core import forecast
from thermowarden.core.columns import Applicability, BoolArray, FloatArray, IndexColumn
from thermowarden.core.indices import IndexTable, SpaceInputs
from thermowarden.engine.state import SiteState
from thermowarden.site_model import SiteModel

MAX_MINUTES: Final = 180
"""Crossings further ahead than this (minutes) are not given."""
RISE_HOUR_MIN: Final = 60
"""The expected rise is the largest in this many minutes from the sun's arrival."""
TREND_METHOD: Final = ("Theil-Sen slope of the spot WBGT's minutes (Sen 1968), 90 % "
                       "interval for steadiness")
CROSSING_METHOD: Final = ("60-minute time-weighted WBGT projected at the Theil-Sen rate "
                          "(ISO 7243:2017 time weighting)")
LATEST_METHOD: Final = ("60-minute time-weighted WBGT projected at the lower limit of the "
                        "Theil-Sen rate's 90 % interval (Sen 1968)")
SUN_METHOD: Final = ("NREL SPA sun position and simplified Solis clear sky (pvlib); beam "
                     "on the window's plane with its overhang or horizon")
RISE_METHOD: Final = "ASHRAE 55 Appendix C (pythermalcomfort solar_gain)"
ASYMMETRY_METHOD: Final = ("absorbed beam behind the glazing as a plane radiant rise "
                           "(linearised Stefan-Boltzmann, ISO 7726)")


@dataclass
class _DaySchedule:
    """One local day of one space's windows at one-minute steps."""

    start: float
    """Epoch s of local midnight."""
    onset: FloatArray
    """Per minute: signed minutes to the start of the current or next sunlit run (NaN:
    none left today)."""
    rise: FloatArray
    """Per minute: the expected mean radiant rise of that run (K, clear sky)."""
    asymmetry: FloatArray
    clear_ghi: FloatArray
    """Per minute: clear-sky global horizontal irradiance (W/m²)."""


class Foresight:
    """Builds the ahead-of-time columns of an evaluation (module docstring)."""

    def __init__(self, model: SiteModel, state: SiteState) -> None:
        config = model.config
        self.state = state
        self.n = model.n_spaces
        self.hot = np.array([s.hot_work for s in config.spaces], dtype=bool)
        self.window_bins = max(2, int(round(config.evaluation.trend_window_s / 60.0)))
        self.min_points = max(2, self.window_bins // 2)
        site = config.site
        self.position = ((site.latitude, site.longitude, site.altitude_m or 0.0)
                         if site.latitude is not None and site.longitude is not None else None)
        self.tz = zoneinfo.ZoneInfo(site.timezone)
        self.windows: dict[int, list[WindowConfig]] = {
            i: list(s.windows) for i, s in enumerate(config.spaces) if s.windows}
        self._minute = -1
        self._wbgt: dict[str, FloatArray] = {}
        self._days: dict[dt.date, dict[int, _DaySchedule]] = {}

    @property
    def has_sun(self) -> bool:
        return bool(self.windows) and self.position is not None

    # ------------------------------------------------------------------ heat stress
    def begin(self, k: int, table: IndexTable, s: SpaceInputs) -> Callable[[int, float], None]:
        """Start an evaluation of ``k`` ticks; the returned function is called at each tick
        (index, time) before that tick's spot WBGT is recorded. The forecast is made once a
        minute (from the completed minutes) and each tick takes its minute's, less the part
        of the minute gone (assembled in :meth:`wbgt_columns`)."""
        n = self.n
        self._k = k
        self._tick_minute = np.zeros(k, dtype=np.int64)
        self._tick_elapsed = np.zeros(k)
        self._made: list[dict[str, FloatArray]] = []
        ref_u = table["wbgt_reference_unacclimatised"].values
        ref_a = table["wbgt_reference_acclimatised"].values
        adj = s.clothing_adjustment_k
        if not self.hot.any():
            return lambda j, t: None
        if self._wbgt:
            self._made.append(self._wbgt)  # the minute the last evaluation ended in

        def at_tick(j: int, t: float) -> None:
            minute = int(t // 60)
            if minute != self._minute or not self._made:
                rows = slice(j * n, (j + 1) * n)
                self._minute = minute
                self._wbgt = self._wbgt_minute(minute, ref_u[rows] - adj[rows],
                                               ref_a[rows] - adj[rows])
                self._made.append(self._wbgt)
            self._tick_minute[j] = len(self._made) - 1
            self._tick_elapsed[j] = (t - minute * 60.0) / 60.0
        return at_tick

    def _wbgt_minute(self, minute: int, action: FloatArray, limit: FloatArray
                     ) -> dict[str, FloatArray]:
        """The trend and crossings at the start of ``minute`` from the completed minutes,
        computed for the hot-work spaces only (NaN, and not ready, elsewhere)."""
        h = np.flatnonzero(self.hot)
        part = self._wbgt_rows(h, minute, action[h], limit[h])
        out: dict[str, FloatArray] = {}
        for name, v in part.items():
            full = np.full(self.n, 0.0 if name == "ready" else np.nan)
            full[h] = v
            out[name] = full
        return out

    def _wbgt_rows(self, h: npt.NDArray[np.intp], minute: int, action: FloatArray,
                   limit: FloatArray) -> dict[str, FloatArray]:
        st = self.state
        n = h.size
        window = forecast.MEAN_WINDOW_MIN
        wanted = minute - window + np.arange(window)  # oldest first
        slots = wanted % st.wbgt.minute.shape[1]
        have = st.wbgt.minute[np.ix_(h, slots)] == wanted[None, :]
        weight = np.where(have, st.wbgt.weight[np.ix_(h, slots)], 0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            values = np.where(weight > 0, st.wbgt.sum[np.ix_(h, slots)]
                              / np.where(weight > 0, weight, 1.0), np.nan)
        recent = slice(window - self.window_bins, window)
        centres = (wanted[recent].astype(np.float64) * 60.0 + 30.0)
        tr = forecast.theil_sen(np.broadcast_to(centres, (n, centres.size)), values[:, recent],
                                at=minute * 60.0, min_points=self.min_points)
        covered = weight.sum(axis=1)
        ready = (covered >= 0.8 * window * 60.0) & np.isfinite(tr.slope)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(covered > 0, np.nansum(values * weight, axis=1)
                            / np.where(covered > 0, covered, 1.0), np.nan)
        slope = np.where(ready, tr.slope, 0.0)
        lower = np.where(ready & np.isfinite(tr.lower), tr.lower, np.nan)
        out: dict[str, FloatArray] = {
            "trend": np.where(ready, tr.slope * forecast.QUARTER_HOUR_S, np.nan),
            "steady": np.where(ready, tr.steady, np.nan), "ready": ready.astype(np.float64)}
        # the four rising projections in one call: at the rate and at the interval's lower
        # end, to the action value and to the limit
        lower0 = np.nan_to_num(lower)
        at4 = forecast.minutes_to_mean(
            np.tile(values, (4, 1)), np.tile(weight, (4, 1)), np.tile(tr.level, 4),
            np.concatenate([slope, slope, lower0, lower0]),
            np.concatenate([action, limit, action, limit]), rising=True,
            max_minutes=MAX_MINUTES).reshape(4, n)
        for q, (name, target) in enumerate((("action", action), ("limit", limit))):
            above = ready & (mean >= target)
            out[name] = np.where(above, 0.0, np.where(ready, at4[q], np.nan))
            out[name + "_latest"] = np.where(above, 0.0, np.where(np.isfinite(lower),
                                                                   at4[q + 2], np.nan))
        over = np.where(mean >= limit, limit, np.where(mean >= action, action, np.nan))
        ease = forecast.minutes_to_mean(values, weight, tr.level, slope, over, rising=False,
                                        max_minutes=MAX_MINUTES)
        out["ease"] = np.where(ready & np.isfinite(over), ease, np.nan)
        return out

    def wbgt_columns(self, hot: BoolArray) -> dict[str, IndexColumn]:
        """The heat-stress columns of the evaluation begun with :meth:`begin`."""
        k, n = self._k, self.n
        names = ("trend", "steady", "action", "limit", "ease", "action_latest", "limit_latest")
        if self._made:
            pick = self._tick_minute
            elapsed = self._tick_elapsed[:, None]
            rows: dict[str, FloatArray] = {}
            for name in names:
                v = np.stack([m[name] for m in self._made])[pick]
                if name not in ("trend", "steady"):
                    v = np.where(v > 0, np.maximum(v - elapsed, 0.0), v)
                rows[name] = v.ravel()
            ready = (np.stack([m["ready"] for m in self._made])[pick] > 0).ravel()
        else:
            rows = {name: np.full(k * n, np.nan) for name in names}
            ready = np.zeros(k * n, dtype=bool)
        self._ready = ready
        hot_rows = np.asarray(hot, dtype=bool)
        base = Applicability(hot_rows.size)
        base.require(hot_rows, "only for hot-work spaces")
        base.require(self._ready, "not enough WBGT history: the 60-minute mean and half of "
                     "the trend window are needed")

        def col(values: FloatArray, unit: str, method: str, *extra: tuple[object, str]
                ) -> IndexColumn:
            app = Applicability(hot_rows.size)
            app.require_from(base)
            for ok, reason in extra:
                app.require(np.asarray(ok, dtype=bool), reason)
            return app.column(values, unit, method)

        return {
            "wbgt_trend": col(rows["trend"], "K/15 min", TREND_METHOD),
            "wbgt_trend_steady": col(rows["steady"], "", TREND_METHOD),
            "wbgt_minutes_to_action": col(rows["action"], "min", CROSSING_METHOD, (
                np.isfinite(rows["action"]), "not rising towards it within 3 hours")),
            "wbgt_minutes_to_limit": col(rows["limit"], "min", CROSSING_METHOD, (
                np.isfinite(rows["limit"]), "not rising towards it within 3 hours")),
            "wbgt_minutes_to_action_latest": col(rows["action_latest"], "min", LATEST_METHOD, (
                np.isfinite(rows["action_latest"]), "not within 3 hours at the lower end of "
                "the rate's interval")),
            "wbgt_minutes_to_limit_latest": col(rows["limit_latest"], "min", LATEST_METHOD, (
                np.isfinite(rows["limit_latest"]), "not within 3 hours at the lower end of "
                "the rate's interval")),
            "wbgt_minutes_to_ease": col(rows["ease"], "min", CROSSING_METHOD, (
                np.isfinite(rows["ease"]), "not above the action value and falling, or "
                "not back below within 3 hours")),
        }

    # ------------------------------------------------------------------ the sun
    def _day(self, day: dt.date) -> dict[int, _DaySchedule]:
        got = self._days.get(day)
        if got is not None:
            return got
        from thermowarden.core import facade_sun

        assert self.position is not None
        lat, lon, alt = self.position
        start = dt.datetime.combine(day, dt.time(0, 0), self.tz).timestamp()
        end = dt.datetime.combine(day + dt.timedelta(days=1), dt.time(0, 0),
                                  self.tz).timestamp()
        minutes = int(round((end - start) / 60.0))
        times: FloatArray = start + 60.0 * np.arange(minutes, dtype=np.float64)
        track = facade_sun.sun_track(times, lat, lon, alt)
        out: dict[int, _DaySchedule] = {}
        for i, wins in self.windows.items():
            lit = np.zeros(minutes, dtype=bool)
            rise = np.zeros(minutes)
            asym = np.zeros(minutes)
            for w in wins:
                g = facade_sun.WindowGeometry(
                    azimuth_deg=w.facade_azimuth, transmittance=w.transmittance,
                    tilt_deg=w.tilt, overhang_depth_m=w.overhang.depth_m if w.overhang else 0.0,
                    overhang_gap_m=w.overhang.gap_m if w.overhang else 0.0,
                    height_m=w.overhang.glazing_height_m if w.overhang else 1.5,
                    horizon_deg=w.horizon, sky_view_fraction=w.sky_view_fraction,
                    body_in_sun=w.body_in_sun, absorptivity=w.absorptivity,
                    posture=w.posture, facing_deg=w.facing)
                beam = facade_sun.window_beam(track, g)
                on = beam >= facade_sun.SUN_ON_WINDOW_W_M2
                lit |= on
                idx = np.flatnonzero(on)
                if idx.size:
                    # the person is in the sun patch only while the sun is on the glazing
                    f_bes = np.where(on, w.body_in_sun, 0.0)[idx]
                    _, r = facade_sun.mean_radiant_rise(
                        track.elevation[idx], facade_sun.sharp_deg(track.azimuth[idx], g),
                        track.dni[idx], w.transmittance, w.sky_view_fraction, f_bes,
                        w.absorptivity, w.posture)
                    rise[idx] = np.maximum(rise[idx], r)
                    asym[idx] = np.maximum(asym[idx], facade_sun.asymmetry_rise(
                        beam[idx], w.transmittance, w.absorptivity))
            onset, run_rise, run_asym = _runs(lit, rise, asym)
            out[i] = _DaySchedule(start, onset, run_rise, run_asym, track.ghi)
        if len(self._days) > 3:
            self._days.pop(next(iter(self._days)))
        self._days[day] = out
        return out

    def sun_columns(self, times: FloatArray, measured_ghi: FloatArray) -> dict[str, IndexColumn]:
        """The sun columns for ``times`` (K ticks) x every space; ``measured_ghi`` per tick
        (W/m², NaN where not measured)."""
        from thermowarden.core import facade_sun

        n = self.n
        k = times.size
        onset = np.full((k, n), np.nan)
        rise = np.full((k, n), np.nan)
        asym = np.full((k, n), np.nan)
        clear_ghi = np.full(k, np.nan)
        has = np.zeros(n, dtype=bool)
        has[list(self.windows)] = True
        if self.has_sun:
            days = [dt.datetime.fromtimestamp(float(t), self.tz).date() for t in times]
            for day in dict.fromkeys(days):
                js = np.array([j for j, d in enumerate(days) if d == day])
                sched = self._day(day)
                for i, ds in sched.items():
                    m = np.clip(((times[js] - ds.start) // 60).astype(np.int64), 0,
                                ds.onset.size - 1)
                    onset[js, i] = ds.onset[m]
                    rise[js, i] = ds.rise[m]
                    asym[js, i] = ds.asymmetry[m]
                    clear_ghi[js] = ds.clear_ghi[m]
        clearness = facade_sun.clearness(measured_ghi, clear_ghi)
        scale = np.where(np.isfinite(clearness), np.clip(clearness, 0.0, 1.0), 1.0)
        rise = rise * scale[:, None]
        asym = asym * scale[:, None]
        has_rows = np.tile(has, k)

        def col(values: FloatArray, unit: str, method: str) -> IndexColumn:
            app = Applicability(k * n)
            app.require(has_rows, "the space declares no windows")
            app.require(np.full(k * n, self.position is not None),
                        "the site gives no latitude and longitude")
            flat = values.ravel()
            app.require(np.isfinite(flat), "no more direct sun on its windows today")
            return app.column(flat, unit, method)

        sky = Applicability(k * n)
        sky_rows = np.repeat(clearness, n)
        sky.require(np.isfinite(np.repeat(measured_ghi, n)), "input missing or stale: "
                    "solar_irradiance")
        sky.require(np.isfinite(sky_rows), "the sun is too low for a clear-sky comparison")
        return {
            "sun_minutes_to_windows": col(onset, "min", SUN_METHOD),
            "sun_mrt_rise_expected": col(rise, "K", RISE_METHOD),
            "sun_asymmetry_expected": col(asym, "K", ASYMMETRY_METHOD),
            "sky_clearness": sky.column(sky_rows, "", "measured over clear-sky global "
                                        "horizontal irradiance (simplified Solis, pvlib)"),
        }


def _runs(lit: BoolArray, rise: FloatArray, asym: FloatArray
          ) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Per minute of a day: signed minutes to the start of the sunlit run it is in (negative
    or 0) or of the next one (NaN: none left), and that run's largest rise and asymmetry in
    its first hour."""
    minutes = lit.size
    idx = np.arange(minutes)
    starts = lit & ~np.concatenate([[False], lit[:-1]])
    current = np.maximum.accumulate(np.where(starts, idx, -1))
    big = minutes + 1
    upcoming = np.minimum.accumulate(np.where(starts, idx, big)[::-1])[::-1]
    run = np.where(lit, current, upcoming)
    known = run < big
    onset: FloatArray = np.where(known, run - idx, np.nan).astype(np.float64)
    first_rise = np.zeros(minutes)
    first_asym = np.zeros(minutes)
    for s in np.flatnonzero(starts).tolist():
        hour = slice(s, min(s + RISE_HOUR_MIN, minutes))
        first_rise[s] = float(rise[hour].max())
        first_asym[s] = float(asym[hour].max())
    safe = np.where(known, run, 0)
    run_rise: FloatArray = np.where(known, first_rise[safe], np.nan)
    run_asym: FloatArray = np.where(known, first_asym[safe], np.nan)
    return onset, run_rise, run_asym


AHEAD_TEXTS: Final = {"wbgt_action_at": "wbgt_minutes_to_action",
                      "wbgt_limit_at": "wbgt_minutes_to_limit",
                      "wbgt_ease_at": "wbgt_minutes_to_ease",
                      "sun_on_windows_at": "sun_minutes_to_windows"}
"""Clock times a message may insert: now plus the column's minutes, in the site's time zone,
to the nearest 5 minutes (a forecast is not more exact than that)."""
WINDOW_TEXTS: Final = ("windows_name",)


def clock_at(now: float, minutes: float, tz: dt.tzinfo) -> str:
    """``HH:MM`` of ``now`` plus ``minutes``, rounded to the nearest 5 minutes."""
    t = now + minutes * 60.0
    t = round(t / 300.0) * 300.0
    return dt.datetime.fromtimestamp(t, tz).strftime("%H:%M")


def text_fields(foresight: Foresight, i: int, now: float,
                table: Mapping[str, IndexColumn], wanted: AbstractSet[str]
                ) -> dict[str, object]:
    """The words of the ahead-of-time messages for space ``i`` (those of ``wanted``)."""
    out: dict[str, object] = {}
    for name, column in AHEAD_TEXTS.items():
        if name in wanted and column in table:
            v = table[column].value_at(i)
            if v is not None:
                out[name] = clock_at(now, max(v, 0.0), foresight.tz)
    if "windows_name" in wanted:
        wins = foresight.windows.get(i, [])
        facades = list(dict.fromkeys(w.facade_name for w in wins))
        if facades:
            out["windows_name"] = (" and ".join(facades) + " windows" if len(facades) < 3
                                   else "windows")
    return out
