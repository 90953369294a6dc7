"""Quiet hours in the site's time zone, across midnight and a daylight-saving change."""

from __future__ import annotations

import datetime as dt
import zoneinfo

import pytest

from thermowarden.core.quiet_hours import QuietHours

LONDON = zoneinfo.ZoneInfo("Europe/London")


def at(text: str) -> float:
    return dt.datetime.fromisoformat(text).replace(tzinfo=LONDON).timestamp()


def test_span_over_midnight():
    q = QuietHours.parse("22:00-06:30", "Europe/London")
    assert q.until(at("2026-07-14T21:59:59")) is None
    assert q.until(at("2026-07-14T22:00:00")) == at("2026-07-15T06:30:00")
    assert q.until(at("2026-07-15T03:00:00")) == at("2026-07-15T06:30:00")
    assert q.until(at("2026-07-15T06:30:00")) is None
    assert q.until(at("2026-07-15T12:00:00")) is None


def test_span_within_a_day():
    q = QuietHours.parse("12:00-13:00", "Europe/London")
    assert q.until(at("2026-07-14T12:30:00")) == at("2026-07-14T13:00:00")
    assert q.until(at("2026-07-14T13:00:00")) is None
    assert q.until(at("2026-07-14T11:59:00")) is None


def test_local_time_not_utc():
    # 23:30 in London in July is 22:30 UTC: quiet in London time
    q = QuietHours.parse("23:00-07:00", "Europe/London")
    now = dt.datetime(2026, 7, 14, 22, 30, tzinfo=dt.UTC).timestamp()
    assert q.until(now) == dt.datetime(2026, 7, 15, 6, 0, tzinfo=dt.UTC).timestamp()


def test_across_the_autumn_clock_change():
    # 2026-10-25 01:00 UTC the UK goes back to GMT: the night is an hour longer
    q = QuietHours.parse("22:00-06:00", "Europe/London")
    start = at("2026-10-24T22:00:00")
    assert q.until(start) - start == 9 * 3600


def test_malformed():
    with pytest.raises(ValueError):
        QuietHours.parse("07:00-07:00", "UTC")
    with pytest.raises(ValueError):
        QuietHours.parse("7pm-6am", "UTC")
