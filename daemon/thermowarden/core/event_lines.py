"""The one-line form of an advisory event (what ``replay`` prints and its summaries and the
report's figures of ahead-of-time advice read): when, what, where, which rule, who, how
urgent."""

from __future__ import annotations

import datetime as dt
from typing import Any

__all__ = ["event_line", "local_time"]


def local_time(at: str, tz: dt.tzinfo | None) -> str:
    """An ISO 8601 time (as published, in UTC) in the site's time zone, to the second."""
    if tz is None:
        return at
    when = dt.datetime.fromisoformat(at.replace("Z", "+00:00")).astimezone(tz)
    return when.isoformat(timespec="seconds")


def event_line(payload: dict[str, Any], tz: dt.tzinfo | None = None) -> dict[str, Any]:
    """The one-line form of an event: when (in the site's time zone when ``tz`` is given),
    what, where, which rule, who, how urgent, the advice (for a clearing, what it advised)
    and, for a clearing, the values it cleared at."""
    at = local_time(payload["at"], tz)
    if payload["event"] == "summary":
        return {"at": at, "event": "summary", "space": None, "rule": None,
                "audience": payload["audience"], "priority": None, "count": payload["count"]}
    adv = payload["advisory"]
    line = {"at": at, "event": payload["event"], "space": adv["space"]["id"],
            "rule": adv["rule"], "audience": adv["audience"], "priority": adv["priority"],
            "advisory_id": adv["id"], "title": adv["title"], "advice": adv["advice"]}
    if payload["event"] == "cleared":
        history = adv.get("history") or []
        if history and history[-1].get("values") is not None:
            line["values"] = history[-1]["values"]  # why it cleared (the advice: why raised)
        if history and history[-1].get("turned_into"):
            line["turned_into"] = history[-1]["turned_into"]  # an ahead-of-time advisory
    if adv.get("acted_on"):
        line["acted_on"] = adv["acted_on"]
    return line
