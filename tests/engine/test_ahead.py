"""Ahead-of-time advisories through the engine (pack ahead, engine/foresight.py,
engine/crossings.py): a crossing foreseen and turned into the alert, a rise that levels off
below the reference withdrawn with one message, and the sun on a west window."""

from __future__ import annotations

import datetime as dt
import pathlib
import random
import textwrap
import zoneinfo

import numpy as np
import pytest

from thermowarden.config import SiteConfig, load_site
from thermowarden.core import facade_sun
from thermowarden.replay import FeedRecord, replay
from thermowarden.rules import HEAT_STRESS_CAUTIONS

HOT_SITE = """\
site: {id: works, timezone: UTC}
output: {prefix: tw/works}
spaces:
  - id: floor
    hot_work: true
    people: {work_class: moderate, clo: 0.6, acclimatised: true}
    rule_packs: [heat_stress, ahead]
    points:
      - {topic: w/floor/tg, quantity: globe_temperature, interval_s: 60}
      - {topic: w/floor/tnw, quantity: natural_wet_bulb, interval_s: 60}
      - {topic: w/floor/ta, quantity: air_temperature, interval_s: 60}
      - {topic: w/floor/rh, quantity: relative_humidity, interval_s: 60}
      - {topic: w/floor/v, quantity: air_speed, interval_s: 60}
"""
ACTION_C = 59.9 - 14.1 * np.log10(297.0)
"""ISO 7243:2017 Annex A reference for unacclimatised workers at 297 W (work class moderate,
165 W/m² for 1.8 m²): 59.9 - 14.1 log10(M) = 25.03 °C (NIOSH RAL); no clothing adjustment
for ordinary work clothes."""


T0 = 1_784_000_000.0
"""2026-07-14 04:53:20 UTC: the feeds' start (a whole minute)."""


def config_of(tmp: pathlib.Path, text: str) -> tuple[SiteConfig, str]:
    site = tmp / "site.yaml"
    site.write_text(textwrap.dedent(text))
    return load_site(site, {}), str(site)


def drive(tmp: pathlib.Path, t1: float, wbgt, text: str = HOT_SITE,
          sent: list[dict] | None = None) -> list[dict]:
    """Replay (the engine as ``thermowarden replay`` runs it) readings every minute from T0
    to T0 + ``t1`` (globe = wet bulb = the WBGT wanted, so WBGT is that value; ``wbgt`` of
    seconds since T0); returns every event the engine raised (sent or not); ``sent``
    receives those sent to the audiences."""
    config, base = config_of(tmp, text)
    records = []
    for t in np.arange(0.0, t1, 60.0):
        w = wbgt(float(t))
        for q, v in (("tg", w), ("tnw", w), ("ta", w), ("rh", 40.0), ("v", 0.3)):
            records.append(FeedRecord(T0 + float(t), f"w/floor/{q}", f"{v:.3f}".encode()))
    result = replay(config, records, base=base, full_events=True)
    if sent is not None:
        sent.extend(result.events)
    return result.raised_events


def events(payloads: list[dict]) -> list[tuple[float, str, str, str, dict]]:
    out = []
    for p in payloads:
        if "advisory" in p:
            at = dt.datetime.fromisoformat(p["at"]).timestamp() - T0
            out.append((at, p["event"], p["advisory"]["rule"], p["advisory"]["priority"], p))
    return out


def ramp(t: float, start: float = 3600.0, top: float = 99.0, base: float = 22.0,
         noise: random.Random | None = None) -> float:
    """22 °C, then from ``start`` rising 1 K per 15 minutes up to ``top``."""
    w = min(base + max(t - start, 0.0) / 900.0, top)
    return w + (noise.uniform(-0.1, 0.1) if noise else 0.0)


def test_a_foreseen_crossing_turns_into_the_alert(tmp_path: pathlib.Path) -> None:
    sent: list[dict] = []
    ev = events(drive(tmp_path, 3600.0 + 8000.0, ramp, sent=sent))
    # By hand: once the ramp fills the whole hour the 60-minute mean lags the spot value by
    # 30 minutes (0.5 h x 4 K/h = 2 K), so it reaches 25.03 °C at 1800 s + (25.03 - 22) x
    # 900 s = 4527 s after the ramp starts
    crossing = [e for e in ev if e[2] == "heat_stress.wbgt" and e[3] == "high"]
    assert crossing and crossing[0][0] == pytest.approx(3600 + 4527, abs=90)
    t_cross = crossing[0][0]
    ahead = [e for e in ev if e[2] == "ahead.wbgt_action"]
    assert [e[1] for e in ahead] == ["raised", "cleared"]
    raised, cleared = ahead
    lead_min = (t_cross - raised[0]) / 60
    assert 15 <= lead_min <= 46
    assert cleared[0] == t_cross  # turned into the alert at the same evaluation
    history = cleared[4]["advisory"]["history"]
    assert history[-1]["turned_into"] == crossing[0][4]["advisory"]["id"]
    # it turned into the alert: stored, not sent (the alert is the message of that moment)
    sent_ahead = [(p["event"], p["advisory"]["rule"]) for p in sent if "advisory" in p
                  and p["advisory"]["rule"].startswith("ahead.")]
    assert sent_ahead == [("raised", "ahead.wbgt_action"), ("raised", "ahead.wbgt_limit")]
    adv = raised[4]["advisory"]
    assert f"will reach the action value of {ACTION_C:.1f} °C in about" in adv["advice"]
    assert "at the present rise of 1.0 K per 15 minutes" in adv["advice"]
    # the clock time it gives is the crossing's, to within the 5-minute rounding
    said = adv["advice"].split("about ")[2][:5]
    hh, mm = int(said[:2]), int(said[3:])
    assert abs(hh * 3600 + mm * 60 - (T0 + t_cross) % 86400) <= 6 * 60
    assert adv["cautions"] == list(HEAT_STRESS_CAUTIONS)
    assert "occupational hygienist" in " ".join(adv["cautions"])
    # the limit (28.26 °C, NIOSH REL 56.7 - 11.5 log10 297) is foreseen the same way
    limit = [e for e in ev if e[2] == "ahead.wbgt_limit"]
    urgent = [e for e in ev if e[2] == "heat_stress.wbgt" and e[3] == "urgent"]
    assert [e[1] for e in limit] == ["raised", "cleared"] and urgent
    assert 15 * 60 <= urgent[0][0] - limit[0][0] <= 46 * 60 and limit[1][0] == urgent[0][0]


@pytest.mark.parametrize("seed", [None, 1, 2])
def test_a_rise_that_levels_off_below_the_reference_is_withdrawn_once(
        tmp_path: pathlib.Path, seed: int | None) -> None:
    noise = random.Random(seed) if seed is not None else None
    sent: list[dict] = []
    ev = events(drive(tmp_path, 3600.0 + 3 * 3600.0, lambda t: ramp(t, top=24.5, noise=noise),
                      sent=sent))
    ahead = [e for e in ev if e[2].startswith("ahead.")]
    # while rising at 1 K per 15 minutes the mean is heading for 25.03 °C; once the spot
    # value levels off at 24.5 °C it never gets there: one advisory, one withdrawal
    assert [e[1] for e in ahead] == ["raised", "cleared"]
    assert "turned_into" not in ahead[1][4]["advisory"]["history"][-1]
    assert not [e for e in ev if e[2] == "heat_stress.wbgt" and e[3] in ("high", "urgent")]
    assert ahead[1][0] - ahead[0][0] < 40 * 60  # withdrawn once the trend has turned
    # the withdrawal is sent: one message
    assert [p["event"] for p in sent if "advisory" in p
            and p["advisory"]["rule"].startswith("ahead.")] == ["raised", "cleared"]


def test_a_flat_or_falling_wbgt_gets_no_advice_ahead(tmp_path: pathlib.Path) -> None:
    ev = events(drive(tmp_path, 4 * 3600.0, lambda t: 24.0 - t / 7200.0))
    assert not [e for e in ev if e[2].startswith("ahead.")]


OFFICE_SITE = """\
site:
  id: office
  timezone: Europe/London
  latitude: 52.2
  longitude: -1.5
  outdoor_points:
    - {topic: o/sun, quantity: solar_irradiance, interval_s: 60}
spaces:
  - id: west
    rule_packs: [shading, ahead]
    occupancy: {always: true}
    points:
      - {topic: o/west/ta, quantity: air_temperature, interval_s: 60}
      - topic: o/west/blinds
        quantity: shading_position
        format: {type: state, states: {down: 100, up: 0}}
        interval_s: 300
    windows:
      - facade_azimuth: 270
        transmittance: 0.4
        overhang: {depth_m: 0.3, gap_m: 0.1, glazing_height_m: 1.6}
"""
TZ = zoneinfo.ZoneInfo("Europe/London")
DAY0 = dt.datetime(2026, 7, 14, 11, 0, tzinfo=TZ).timestamp()


def drive_office(tmp: pathlib.Path, t1: float, sky: float, blinds,
                 text: str = OFFICE_SITE) -> list[tuple[float, str, str, str, dict]]:
    """Replay from 11:00 local time: the pyranometer at ``sky`` times the clear-sky global
    irradiance, the blinds as ``blinds(t)`` says every 5 minutes."""
    config, base = config_of(tmp, text)
    times = DAY0 + np.arange(0.0, t1, 60.0)
    clear = facade_sun.sun_track(times, 52.2, -1.5).ghi
    records = []
    for k, t in enumerate(times.tolist()):
        records.append(FeedRecord(t, "o/sun", f"{sky * clear[k]:.0f}".encode()))
        records.append(FeedRecord(t, "o/west/ta", b"24.0"))
        if k % 5 == 0:
            records.append(FeedRecord(t, "o/west/blinds", blinds(t).encode()))
    out = []
    for p in replay(config, records, base=base, full_events=True).events:
        if "advisory" in p:
            at = dt.datetime.fromisoformat(p["at"]).timestamp()
            out.append((at, p["event"], p["advisory"]["rule"], p["advisory"]["priority"], p))
    return out


def test_the_sun_on_a_west_window_is_announced_before_it_arrives(tmp_path: pathlib.Path
                                                                  ) -> None:
    ev = [e for e in drive_office(tmp_path, 5 * 3600, 0.95, lambda t: "up")
          if e[2] == "ahead.sun_on_windows"]
    assert [e[1] for e in ev] == ["raised", "cleared"]
    adv = ev[0][4]["advisory"]
    # the geometry puts the sun on this glazing at 14:02 (core/facade_sun, checked
    # against the hand-worked overhang in tests/core): raised 45 minutes before
    raised_local = dt.datetime.fromtimestamp(ev[0][0], TZ)
    assert (raised_local.hour, raised_local.minute) == (13, 17)
    assert adv["title"] == "Lower the blinds on the west windows of west before about 14:00"
    assert "when the sun reaches them (expected rise of mean radiant temperature about" in \
        adv["advice"]
    rise = adv["numbers"]["sun_mrt_rise_expected"]["value"]
    assert 5 < rise < 15
    # no shading rule can fire here (no radiant sensors): it ends an hour after the sun came
    assert ev[1][0] - ev[0][0] == pytest.approx((45 + 61) * 60, abs=120)


@pytest.mark.parametrize("case", ["overcast", "blinds down", "unoccupied"])
def test_no_sun_advice_when_it_would_be_wrong(tmp_path: pathlib.Path, case: str) -> None:
    text = OFFICE_SITE
    if case == "unoccupied":
        text = text.replace("occupancy: {always: true}", "occupancy: {hours: {}}")
    ev = drive_office(tmp_path, 4 * 3600, 0.25 if case == "overcast" else 0.95,
                      (lambda t: "down") if case == "blinds down" else (lambda t: "up"), text)
    assert not [e for e in ev if e[2] == "ahead.sun_on_windows"]


def test_blinds_lowered_on_the_advice_end_it_as_acted_on(tmp_path: pathlib.Path) -> None:
    lowered = DAY0 + 2.5 * 3600  # 13:30, after the advice at 13:17
    ev = [e for e in drive_office(tmp_path, 4 * 3600, 0.95,
                                  lambda t: "down" if t >= lowered else "up")
          if e[2] == "ahead.sun_on_windows"]
    assert [e[1] for e in ev] == ["raised", "cleared"]
    assert ev[1][0] == pytest.approx(lowered, abs=60)
    assert ev[1][4]["advisory"]["acted_on"] is not None


def test_without_the_heat_stress_pack_the_announcement_ends_after_the_crossing(
        tmp_path: pathlib.Path) -> None:
    # nothing to turn into: the advisory ends by itself once the 60-minute WBGT is past the
    # reference by passed_k (0.3 K), with its own message, and is not left standing
    text = HOT_SITE.replace("rule_packs: [heat_stress, ahead]", "rule_packs: [ahead]")
    sent: list[dict] = []
    ev = events(drive(tmp_path, 3600.0 + 8000.0, ramp, text=text, sent=sent))
    action = [e for e in ev if e[2] == "ahead.wbgt_action"]
    assert [e[1] for e in action] == ["raised", "cleared"]
    # past 25.03 + 0.3 °C: 0.3 K at 4 K/h after the crossing at 4527 s, 270 s later
    assert action[1][0] == pytest.approx(3600 + 4527 + 270, abs=90)
    assert "turned_into" not in action[1][4]["advisory"]["history"][-1]
    assert [p["event"] for p in sent if p["advisory"]["rule"] == "ahead.wbgt_action"] == [
        "raised", "cleared"]
