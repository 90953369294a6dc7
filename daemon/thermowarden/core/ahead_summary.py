"""Measured, not promised: how the ahead-of-time advisories of a replay did.

Per rule with ``foresees`` (pack ``ahead``): the crossings of the advisory it foresees (that
advisory raised at the foreseen priority or higher, or escalated to it from below), how many
were foreseen (an ahead-of-time advisory of the same space live at that moment: raised
before it and not yet cleared, or turned into it), the lead time (minutes from the
ahead-of-time advisory to the crossing: minimum and median), the ahead-of-time advisories
withdrawn (cleared by their own condition: the trend turned, the sky clouded over), acted on
(the advice followed, e.g. the blinds lowered, and cleared after), still live at the end of
the feed, and never followed by a crossing; and the crossings that came with no warning.

Over a whole replay, or over a period (the report's day): then the crossings in the period
and the ahead-of-time advisories raised in it are counted (a crossing in the period may have
been foreseen by one raised before it; its lead time counts).
"""

from __future__ import annotations

import datetime as dt
import statistics
from collections.abc import Mapping
from typing import Any

PRIORITY_ORDER = ("low", "medium", "high", "urgent")


def _ts(s: str) -> float:
    return dt.datetime.fromisoformat(s.replace("Z", "+00:00")).timestamp()


def crossings(events: list[dict[str, Any]], rule: str, priority: str | None
              ) -> list[tuple[str, float, str]]:
    """(space, time, advisory id) of every crossing of ``rule`` to ``priority`` (None: any
    raise) in one-line ``events``, in time order."""
    level = PRIORITY_ORDER.index(priority) if priority is not None else 0
    now_at: dict[str, int] = {}
    out: list[tuple[str, float, str]] = []
    for e in events:
        if e.get("rule") != rule or e.get("priority") is None:
            continue
        aid = e["advisory_id"]
        p = PRIORITY_ORDER.index(e["priority"])
        before = now_at.get(aid, -1)
        if e["event"] == "cleared":
            now_at.pop(aid, None)
            continue
        now_at[aid] = p
        if e["event"] in ("raised", "escalated", "deescalated") and p >= level > before:
            out.append((e["space"], _ts(e["at"]), aid))
    return out


def ahead_summary(events: list[dict[str, Any]], foresees: Mapping[str, tuple[str, str | None]],
                  end: float | None, start: float | None = None) -> list[dict[str, Any]]:
    """The figures of the module docstring per ahead-of-time rule, from the engine's
    one-line ``events`` (every lifecycle event, sent or held back); ``foresees``: ahead rule
    -> (foreseen rule, priority or None). ``start``, ``end`` (epoch s; None: open): the
    period whose crossings and ahead-of-time advisories count."""

    def within(t: float) -> bool:
        return (start is None or t >= start) and (end is None or t < end)

    out: list[dict[str, Any]] = []
    for rule, (target, priority) in sorted(foresees.items()):
        spans: list[dict[str, Any]] = []
        live: dict[str, dict[str, Any]] = {}
        for e in events:
            if e.get("rule") != rule:
                continue
            if e["event"] == "raised":
                live[e["advisory_id"]] = {"space": e["space"], "raised": _ts(e["at"]),
                                          "cleared": None, "turned_into": None,
                                          "acted_on": False}
            elif e["event"] == "cleared" and e["advisory_id"] in live:
                span = live.pop(e["advisory_id"])
                span.update(cleared=_ts(e["at"]), turned_into=e.get("turned_into"),
                            acted_on=bool(e.get("acted_on")))
                spans.append(span)
            elif e.get("acted_on") and e["advisory_id"] in live:
                live[e["advisory_id"]]["acted_on"] = True
        spans.extend(live.values())
        crossed = [c for c in crossings(events, target, priority) if within(c[1])]
        leads: list[float] = []
        unwarned: list[dict[str, Any]] = []
        followed: set[int] = set()
        for space, t, aid in crossed:
            match = [k for k, s in enumerate(spans) if s["space"] == space
                     and s["raised"] <= t and (s["cleared"] is None or s["cleared"] >= t)
                     and k not in followed]
            if match:
                k = match[0]
                followed.add(k)
                leads.append((t - spans[k]["raised"]) / 60.0)
            else:
                unwarned.append({"space": space, "at": dt.datetime.fromtimestamp(
                    t, dt.UTC).isoformat(timespec="seconds"), "advisory_id": aid})
        counted = [k for k, s in enumerate(spans) if within(s["raised"])]
        not_followed = [spans[k] for k in counted if k not in followed]
        out.append({
            "rule": rule,
            "foresees": target + (f" at {priority}" if priority else ""),
            "ahead_advisories": len(counted),
            "crossings": len(crossed),
            "foreseen": len(leads),
            "lead_min": ({"min": round(min(leads), 1),
                          "median": round(statistics.median(leads), 1)} if leads else None),
            "withdrawn": sum(1 for s in not_followed if s["cleared"] is not None
                             and not s["acted_on"]),
            "acted_on": sum(1 for s in not_followed if s["acted_on"]),
            "live_at_end": sum(1 for s in not_followed if s["cleared"] is None),
            "not_followed_by_crossing": len(not_followed),
            "unwarned": len(unwarned),
            "unwarned_crossings": unwarned[:10],
        })
    return out


def _n(count: int, one: str, many: str) -> str:
    return f"{count} {one if count == 1 else many}"


def in_words(figures: list[dict[str, Any]], titles: Mapping[str, str],
             tz: dt.tzinfo | None = None) -> list[str]:
    """:func:`ahead_summary`'s figures as sentences, one per ahead-of-time rule that raised
    an advisory or whose foreseen advisory was reached (for the demo's summary). ``titles``:
    rule -> title; times of crossings with no warning in ``tz`` (else UTC)."""
    out: list[str] = []
    for r in figures:
        if not r["ahead_advisories"] and not r["crossings"]:
            continue
        target, _, priority = r["foresees"].partition(" at ")
        what = titles.get(target, target) + (f" at {priority} priority" if priority else "")
        crossed = f"{_n(r['crossings'], 'crossing', 'crossings')} of {what}"
        parts = []
        if r["foreseen"]:
            lead = r["lead_min"]
            least, median = round(lead["min"]), round(lead["median"])
            parts.append(f"{r['foreseen']} foreseen {least} minutes ahead" if r["foreseen"] == 1
                         else f"{r['foreseen']} foreseen at least {least} minutes ahead "
                         f"(median {median})")
        if r["unwarned"]:
            where = ", ".join(
                f"{u['space']} at {dt.datetime.fromisoformat(u['at']).astimezone(tz):%H:%M}"
                for u in r["unwarned_crossings"])
            parts.append(f"{r['unwarned']} with no warning ({where})")
        if parts:
            crossed += ": " + ", ".join(parts)
        ends = []
        if r["withdrawn"]:
            ends.append(f"{r['withdrawn']} withdrawn when the forecast no longer held, with "
                        "no crossing after it")
        if r["acted_on"]:
            ends.append(f"{r['acted_on']} acted on before a crossing")
        if r["live_at_end"]:
            ends.append(f"{r['live_at_end']} still standing at the end")
        given = _n(r["ahead_advisories"], "advisory", "advisories") + " ahead of time"
        if ends:
            given += ": " + ", ".join(ends)
        out.append(f"{titles.get(r['rule'], r['rule'])} ({r['rule']}): {crossed}; {given}.")
    return out
