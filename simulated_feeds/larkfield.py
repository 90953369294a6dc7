"""A summer Tuesday at Larkfield Works, the invented site of deploy/example-site.yaml.

Every number here is invented for the demo and the tests; nothing comes from a real site.
The day is built so that every default rule fires at least once, and people act on some
advice (blinds lowered, fans switched on) so that those advisories clear because someone
acted. Seeded: the same seed gives the same feed.

Timeline (local time, Europe/London):
  05:00-06:45  humid spell in the office; the night-cooled glazing nears the dew point
  07:30-09:00  office cold and draughty (a supply jet), studio below its adaptive band
  from 08:00   the studio air-speed sensor sticks at one value
  09:00        office air handling corrected
  08:00-17:00  bakery ovens: WBGT climbs; lunch break 12:00-13:00; ovens off at 17:00
  09:00-18:00  loading yard in the sun: heat index, UTCI and WBGT rise
  10:00-11:30  the bakery air-speed sensor drops out
  12:00-14:30  the studio is dry; from 12:00 the east globe drifts 3 K high
  13:00-17:30  sun on the office's west facade; blinds lowered at 15:00
  14:00-14:05  the bakery head-height sensor reads nonsense
  14:00        office warm and still; fans switched on at 16:00
  15:00-16:30  the studio humidity sensor drops out; the studio overheats 15:00-18:00
  18:30        the office empties

The demo's day (:func:`demo_day`) is the same day, reading for reading, until 20:00 (where
the recorded day, simulated_feeds/recorded/larkfield-day.jsonl.gz, ends), then goes on to
23:00 with a night bake, so that the demo shows each outcome of the advice ahead of time:
  20:00-20:25  one oven heats up: the bakery's WBGT rises, then holds just below the action
               value (heat stress foreseen at the present rise, the forecast withdrawn
               when the rise stops, no crossing)
  21:30-21:40  the oven's steam vent sticks open: the WBGT jumps about 16 K at once and the
               60-minute mean crosses the action value within the minute, before a trend
               could see it (a crossing with no warning)
  21:45-22:00  the bake ends and the oven cools; the alert eases and clears before 23:00
"""

from __future__ import annotations

import datetime as dt
import json
import math
import zoneinfo
from collections.abc import Iterator
from typing import Any

import numpy as np

TZ = zoneinfo.ZoneInfo("Europe/London")
DAY = dt.date(2026, 7, 14)


def _local(h: float, day: dt.date = DAY) -> float:
    hh, mm = int(h), int(round((h - int(h)) * 60))
    return dt.datetime.combine(day, dt.time(hh, mm), TZ).timestamp()


def _ramp(h: float, h0: float, h1: float, v0: float, v1: float) -> float:
    if h <= h0:
        return v0
    if h >= h1:
        return v1
    return v0 + (v1 - v0) * (h - h0) / (h1 - h0)


def _bump(h: float, start: float, peak: float, end: float) -> float:
    """0 before start and after end, rising to 1 at peak (a smooth day curve)."""
    if h <= start or h >= end:
        return 0.0
    if h <= peak:
        return math.sin(0.5 * math.pi * (h - start) / (peak - start))
    return math.sin(0.5 * math.pi * (end - h) / (end - peak))


HEAT = {"wave": 0.0}
"""Extra degrees at the afternoon peak, set per day of a multi-day run (a heat wave)."""


def outdoor(h: float) -> tuple[float, float, float, float]:
    """Outdoor air (°C), RH (%), wind (km/h) and solar irradiance (W/m²) at hour h."""
    t = 18.0 + (13.0 + HEAT["wave"]) * _bump(h, 4.0, 16.0, 28.0)
    rh = 82.0 - 45.0 * _bump(h, 4.0, 16.0, 28.0)
    wind = 8.0 + 6.0 * _bump(h, 8.0, 15.0, 21.0)
    sun = 860.0 * _bump(h, 5.0, 13.5, 21.5)
    return t, rh, wind, sun


def office(h: float) -> dict[str, float]:
    occupied = 7.5 <= h < 18.5
    ta = 21.0
    ta = _ramp(h, 7.5, 8.0, 21.0, 20.2) if h < 9.0 else _ramp(h, 9.0, 10.0, 20.2, 23.5)
    ta += 3.0 * _ramp(h, 12.0, 15.0, 0.0, 1.0)  # afternoon warming
    fans_on = h >= 16.0
    if fans_on:
        ta -= 0.6 * _ramp(h, 16.0, 17.0, 0.0, 1.0)
    v = 0.27 if 7.5 <= h < 9.0 else (0.65 if fans_on else 0.08)
    rh = 76.0 if h < 6.5 else _ramp(h, 6.5, 7.5, 76.0, 50.0)
    sun = _bump(h, 13.0, 15.5, 17.5)
    blinds = 100.0 if 15.0 <= h < 19.0 else 0.0
    excess = 13.0 * sun * (0.4 if blinds >= 80 else 1.0)
    room = ta + 0.3
    window = room + excess
    tr = room + 0.265 * excess  # mean radiant: window side weighted by its area factor
    glazing = 17.8 if h < 6.75 else ta + 2.0 + 6.0 * sun
    globe = ta + 0.85 * (tr - ta)
    return {"ta": ta, "rh": rh, "v": v, "globe": globe, "window": window, "room": room,
            "glazing": glazing, "blinds": blinds, "fans": 1.0 if fans_on else 0.0,
            "presence": 1.0 if occupied else 0.0}


DEMO_END_H = 23.0
"""The demo's day ends at 23:00 (after the night bake)."""
NIGHT_BAKE_H = 20.0


def night_bake(h: float) -> dict[str, float]:
    """The bakery from 20:00 on the demo's day: one oven, then a stuck steam vent."""
    oven = _ramp(h, 20.0, 20.0 + 25 / 60, 0.0, 0.405) if h < 21.75 else \
        _ramp(h, 21.75, 22.0, 0.405, 0.0)
    steam = 1.0 if 21.5 <= h < 21.5 + 10 / 60 else 0.0
    tg = 25.0 + 15.0 * oven + 11.0 * steam
    tnw = 19.0 + 8.0 * oven + 18.0 * steam
    return {"tg": tg, "tnw": tnw, "ankle": 23.0 + 4.0 * oven + 4.0 * steam,
            "head": 25.0 + 7.0 * oven + 8.0 * steam, "rh": 42.0 + 5.0 * oven + 40.0 * steam,
            "v": 0.35}


def bakery(h: float, evening: bool = False) -> dict[str, float]:
    if evening and h >= NIGHT_BAKE_H:
        return night_bake(h)
    ovens = _ramp(h, 8.0, 11.5, 0.0, 1.0) * (1.0 if h < 17.0 else _ramp(h, 17.0, 17.5, 1.0, 0.0))
    if 12.0 <= h < 13.0:
        ovens *= 0.35
    tg = 25.0 + 15.0 * ovens
    tnw = 19.0 + 8.0 * ovens
    return {"tg": tg, "tnw": tnw, "ankle": 23.0 + 4.0 * ovens, "head": 25.0 + 7.0 * ovens,
            "rh": 42.0 + 5.0 * ovens, "v": 0.35}


def yard(h: float) -> dict[str, float]:
    t, rh, _, sun = outdoor(h)
    return {"ta": t, "rh": rh, "tg": t + 17.0 * sun / 860.0, "tnw": t - 8.0 + 2.5 * sun / 860.0}


def studio(h: float) -> dict[str, float]:
    ta = _ramp(h, 7.0, 7.5, 22.0, 20.3) if h < 9.5 else _ramp(h, 9.5, 11.0, 20.3, 24.5)
    ta += 5.0 * _ramp(h, 14.5, 15.5, 0.0, 1.0) * (1.0 if h < 18.0 else 0.0)
    rh = 27.0 if 12.0 <= h < 14.5 else 45.0
    drift = 3.0 if h >= 12.0 else 0.0
    return {"ta": ta, "rh": rh, "globe_w": ta + 0.4, "globe_e": ta + 0.4 + drift, "v": 0.12}


def _rec(t: float, topic: str, payload: Any) -> dict[str, Any]:
    return {"t": round(t, 3), "topic": topic, "payload": payload}


def larkfield_days(days: int = 3, seed: int = 20260714, step_s: float = 60.0
                   ) -> Iterator[dict[str, Any]]:
    """Several whole days (00:00-24:00) of a building heat wave, each 1.5 K hotter at the
    afternoon peak than the one before, so the studio's running mean outdoor temperature
    moves. The same timeline repeats each day."""
    for d in range(days):
        HEAT["wave"] = 1.5 * d
        try:
            yield from larkfield_day(seed + d, 0.0, 24.0, step_s,
                                     day=DAY + dt.timedelta(days=d))
        finally:
            HEAT["wave"] = 0.0


def larkfield_day(seed: int = 20260714, start_h: float = 5.0, end_h: float = 20.0,
                  step_s: float = 60.0, day: dt.date = DAY, evening: bool = False
                  ) -> Iterator[dict[str, Any]]:
    """The feed records, in time order: {t, topic, payload}; ``evening``: the bakery's
    night bake from 20:00 (the demo's day)."""
    rng = np.random.default_rng(seed)
    t0 = _local(start_h, day)
    steps = int((end_h - start_h) * 3600 / step_s)

    def noise(scale: float) -> float:
        return float(rng.normal(0.0, scale))

    for k in range(steps):
        t = t0 + k * step_s
        h = start_h + k * step_s / 3600.0
        out: list[dict[str, Any]] = []
        ot, orh, wind, sun = outdoor(h)
        out.append(_rec(t, "larkfield/roof/weather", {
            "temp_c": round(ot + noise(0.1), 2), "rh": round(orh + noise(0.5), 1),
            "wind_kmh": round(max(wind + noise(1.0), 0.5), 1), "ts": int(t)}))
        out.append(_rec(t + 1, "larkfield/roof/pyranometer", f"{max(sun + noise(5), 0):.0f}"))

        o = office(h)
        p = "larkfield/office-west"
        out.append(_rec(t + 2, f"{p}/air/temperature", f"{o['ta'] + noise(0.05):.2f}"))
        out.append(_rec(t + 2, f"{p}/air/humidity", f"{o['rh'] + noise(0.3):.1f}"))
        out.append(_rec(t + 3, f"{p}/globe", f"{o['globe'] + noise(0.05):.2f}"))
        out.append(_rec(t + 3, f"{p}/radiant/window", f"{o['window'] + noise(0.1):.2f}"))
        out.append(_rec(t + 3, f"{p}/radiant/room", f"{o['room'] + noise(0.05):.2f}"))
        out.append(_rec(t + 4, f"{p}/glazing-surface", f"{o['glazing'] + noise(0.05):.2f}"))
        for j in range(3):  # anemometer every 20 s, in ft/min
            v = max(o["v"] * (1.0 + noise(0.35 if 7.5 <= h < 9.0 else 0.15)), 0.02)
            out.append(_rec(t + 5 + 20 * j, f"{p}/anemometer", {"speed": round(v / 0.00508, 1)}))
        if k % 2 == 0:
            out.append(_rec(t + 6, f"{p}/presence", "occupied" if o["presence"] else "vacant"))
        if k % 5 == 0:
            out.append(_rec(t + 7, f"{p}/blinds", "down" if o["blinds"] >= 80 else "up"))
            out.append(_rec(t + 7, f"{p}/fans", "on" if o["fans"] else "off"))

        b = bakery(h, evening)
        q = "larkfield/bakery-floor"
        out.append(_rec(t + 8, f"{q}/senml", [
            {"bn": "urn:dev:bakery:", "bt": int(t + 8), "n": "globe", "u": "Cel",
             "v": round(b["tg"] + noise(0.1), 2)},
            {"n": "tnw", "u": "Cel", "v": round(b["tnw"] + noise(0.05), 2)}]))
        head = b["head"] + noise(0.1)
        if 14.0 <= h < 14.0 + 5 / 60:
            head = 250.0 + noise(5.0)  # the head-height sensor reads nonsense
        out.append(_rec(t + 9, f"{q}/air/ankle", f"{b['ankle'] + noise(0.1):.2f}"))
        out.append(_rec(t + 9, f"{q}/air/head", f"{head:.2f}"))
        out.append(_rec(t + 9, f"{q}/air/humidity", f"{b['rh'] + noise(0.3):.1f}"))
        if not 10.0 <= h < 11.5:  # the air-speed sensor drops out
            for j in range(3):
                out.append(_rec(t + 10 + 20 * j, f"{q}/air-speed",
                                f"{max(b['v'] + noise(0.05), 0.05):.2f}"))

        y = yard(h)
        r = "larkfield/loading-yard"
        out.append(_rec(t + 11, f"{r}/wbgt-station", {
            "globe": {"c": round(y["tg"] + noise(0.1), 2)},
            "nwb": {"c": round(y["tnw"] + noise(0.05), 2)},
            "time": dt.datetime.fromtimestamp(t + 11, dt.UTC).isoformat()}))
        out.append(_rec(t + 11, f"{r}/air/temperature", f"{y['ta'] + noise(0.05):.2f}"))
        out.append(_rec(t + 11, f"{r}/air/humidity", f"{y['rh'] + noise(0.3):.1f}"))

        s = studio(h)
        r = "larkfield/studio-north"
        out.append(_rec(t + 12, f"{r}/air/temperature", f"{s['ta'] + noise(0.05):.2f}"))
        if not 15.0 <= h < 16.5:
            out.append(_rec(t + 12, f"{r}/air/humidity", f"{s['rh'] + noise(0.3):.1f}"))
        out.append(_rec(t + 13, f"{r}/globe", f"{(s['globe_w'] + noise(0.05)) * 9 / 5 + 32:.2f}"))
        out.append(_rec(t + 13, f"{r}/globe-east", f"{s['globe_e'] + noise(0.05):.2f}"))
        stuck = h >= 8.0
        out.append(_rec(t + 14, f"{r}/air-speed", "0.12" if stuck else
                        f"{max(s['v'] + noise(0.03), 0.03):.2f}"))
        out.sort(key=lambda rec: rec["t"])
        yield from out


def demo_day(seed: int = 20260714) -> Iterator[dict[str, Any]]:
    """The demo's day: the recorded day's 05:00-20:00 reading for reading, then the night
    bake to 22:30 (module docstring)."""
    return larkfield_day(seed, end_h=DEMO_END_H, evening=True)


def write_feed(path: str, **kwargs: Any) -> int:
    """Write the day as gzip-compressed JSON lines; returns the number of records."""
    import gzip

    records = sorted(larkfield_day(**kwargs), key=lambda rec: rec["t"])
    with gzip.open(path, "wt", encoding="utf-8") as fh:
        for rec in records:
            fh.write(json.dumps(rec, separators=(",", ":")) + "\n")
    return len(records)


if __name__ == "__main__":
    import sys

    target = sys.argv[1] if len(sys.argv) > 1 else "simulated_feeds/recorded/larkfield-day.jsonl.gz"
    print(write_feed(target), "records written to", target)
