"""``replay --summary`` for a person: the summary of :func:`thermowarden.replay.summarise`
as plain tables, every heading words with a unit (``--json`` prints the summary itself).

Alarm-management figures as in the summary: about one notification per 10 minutes per person
is manageable, more than 10 in 10 minutes is a flood (ISA-18.2 / IEC 62682, EEMUA 191).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from thermowarden.core.labels import change_unit, index_label

FLOOD_IN_10_MIN = 10
"""More notifications than this in 10 minutes is a flood (ISA-18.2 / EEMUA 191)."""


def _table(head: Sequence[str], rows: Sequence[Sequence[object]],
           right: Sequence[bool]) -> list[str]:
    """Columns sized to their widest cell; numbers (``right``) aligned on the right; a
    heading may take two lines (``"busiest\\n10 min"``)."""
    depth = max(h.count("\n") + 1 for h in head)
    heads = [[*([""] * (depth - h.count("\n") - 1)), *h.split("\n")] for h in head]
    body = [["-" if c is None else str(c) for c in r] for r in rows]
    cells = [[h[k] for h in heads] for k in range(depth)] + body
    widths = [max(len(r[k]) for r in cells) for k in range(len(head))]
    out = []
    for r in cells:
        out.append("  " + "  ".join(c.rjust(w) if right[k] else c.ljust(w)
                                    for k, (c, w) in enumerate(zip(r, widths, strict=True)))
                   .rstrip())
    return out


def _minutes(value: object) -> object:
    return None if value is None else f"{value:.0f}" if isinstance(value, float) else value


def _rule_words(rule: str, title: str | None) -> str:
    return f"{title} ({rule})" if title else rule


def format_summary(s: dict[str, Any]) -> str:
    """The summary as text: the feed, per audience, per rule, the longest-standing
    advisories, advice followed and the ahead-of-time figures."""
    lines: list[str] = []
    hours = s.get("feed_hours")
    span = f" over {hours:.1f} h of feed time" if hours is not None else ""
    rejected = sum(s.get("rejected", {}).values())
    refused = (f"; {rejected} refused (" + ", ".join(
        f"{n} {why.replace('_', ' ')}" for why, n in sorted(s["rejected"].items())) + ")"
        if rejected else "")
    lines.append(f"Replayed {s['messages']:,} messages{span}{refused}.")

    lines += ["", "Notifications per audience (a flood: more than "
              f"{FLOOD_IN_10_MIN} in 10 minutes, ISA-18.2 / EEMUA 191)"]
    rows = []
    for aud, a in s["audiences"].items():
        busiest = a["busiest_10_min"]
        rows.append([aud, a["notifications"], a["notifications_per_day"], a["renotifications"],
                     f"{busiest}{' (flood)' if busiest > FLOOD_IN_10_MIN else ''}",
                     a["flood_summaries"], a["held_back_in_summaries"]])
    lines += _table(["audience", "notifications\nsent", "\nper day", "of them\nreminders",
                     "busiest\n10 minutes", "flood\nsummaries", "held back in\nsummaries"],
                    rows, [False, True, True, True, True, True, True])

    lines += ["", "Advisories per rule (raised by the engine, whether sent or held back "
              "under a flood summary)"]
    for aud in sorted({r["audience"] for r in s["rules"]}):
        rows = [[_rule_words(r["rule"], r.get("title")), r["raised"], r["cleared"],
                 r["still_active"], r["max_priority"], _minutes(r["max_active_min"])]
                for r in s["rules"] if r["audience"] == aud]
        lines += _table([f"for {aud}", "\nraised", "\ncleared", "active\nat the end",
                         "highest\npriority", "longest\nactive (min)"],
                        rows, [False, True, True, True, False, True])

    if s.get("standing"):
        lines += ["", "Longest-standing advisories"]
        rows = [[x["space"], x["rule"], x["raised"].replace("T", " ")[:16],
                 "still active" if x["cleared"] is None else x["cleared"].replace("T", " ")[11:16],
                 _minutes(x["minutes"])] for x in s["standing"]]
        lines += _table(["space", "rule", "raised at", "cleared at", "active (min)"], rows,
                        [False, False, False, False, True])

    if s.get("effectiveness"):
        lines += ["", "Advice followed (helped: cleared within the rule's expected time)"]
        rows, notes = [], []
        for e in s["effectiveness"]:
            q = e.get("quantity")
            unit = change_unit(q) if q else ""

            def change(v: object, unit: str = unit) -> object:
                return None if v is None else f"{v:+.2f} {unit}".rstrip()
            rows.append([e["rule"], e["space"], e["given"], e["followed"],
                         _minutes(e["mean_minutes_to_follow"]), e["helped"],
                         change(e["mean_predicted_change"]), change(e["mean_realised_change"])])
            if q:
                words = index_label(q)
                if not words[1:2].isupper():  # keep PMV, UTCI as they are
                    words = words[0].lower() + words[1:]
                notes.append(f"  {e['rule']}: the change in {words}")
        lines += _table(["rule", "space", "advice\ngiven", "\nfollowed",
                         "followed\nafter (min)", "\nhelped", "predicted\nchange (mean)",
                         "realised\nchange (mean)"], rows,
                        [False, False, True, True, True, True, True, True])
        lines += sorted(set(notes))

    if s.get("ahead_of_time"):
        lines += ["", "Advice ahead of time (a crossing: the advisory it foresees raised "
                  "at that priority or higher)"]
        ahead = s["ahead_of_time"]
        figures: list[tuple[str, Any]] = [
            ("foresees", lambda a: a["foresees"]),
            ("advisories ahead of time", lambda a: a["ahead_advisories"]),
            ("crossings", lambda a: a["crossings"]),
            ("crossings foreseen", lambda a: a["foreseen"]),
            ("lead time, least (min)",
             lambda a: None if a["lead_min"] is None else f"{a['lead_min']['min']:.0f}"),
            ("lead time, median (min)",
             lambda a: None if a["lead_min"] is None else f"{a['lead_min']['median']:.0f}"),
            ("withdrawn (the trend turned)", lambda a: a["withdrawn"]),
            ("acted on", lambda a: a["acted_on"]),
            ("active at the end", lambda a: a["live_at_end"]),
            ("not followed by a crossing", lambda a: a["not_followed_by_crossing"]),
            ("crossings with no warning", lambda a: a["unwarned"]),
        ]
        rows = [[words, *(get(a) for a in ahead)] for words, get in figures]
        lines += _table(["rule", *(a["rule"] for a in ahead)], rows,
                        [False, *([True] * len(ahead))])
        for a in ahead:
            for u in a["unwarned_crossings"]:
                lines.append(f"  no warning: {a['foresees']} in {u['space']} at {u['at']}")
    return "\n".join(lines)


def _ab_heads(heads: Sequence[str]) -> list[str]:
    """Each heading over its A column (the B column's heading is just B)."""
    depth = max(h.count("\n") + 1 for h in heads)
    out = []
    for h in heads:
        pad = "\n" * (depth - h.count("\n") - 1)
        out += [f"{pad}{h}\nA", "\n" * depth + "B"]
    return out


def format_comparison(c: dict[str, list[dict[str, Any]]], label_a: str, label_b: str) -> str:
    """:func:`thermowarden.replay.compare` as text: per rule (grouped by audience), then per
    audience, each figure for A and B side by side; a changed row marked ``*``."""
    lines = [f"A: {label_a}", f"B: {label_b}", "",
             "Advisories per rule (raised by the engine, whether sent or held back under a "
             "flood summary)"]
    figures: tuple[str, ...] = ("raised", "cleared", "still_active", "max_active_min")
    heads: tuple[str, ...] = ("raised", "cleared", "active\nat the end",
                              "longest\nactive (min)")
    for aud in sorted({r["audience"] for r in c["rules"]}):
        rows = [["*" if r["changed"] else "", _rule_words(r["rule"], r.get("title")),
                 *(_minutes(v) for f in figures for v in r[f])]
                for r in c["rules"] if r["audience"] == aud]
        lines += _table([" ", f"\n\nfor {aud}", *_ab_heads(heads)], rows,
                        [False, False, *([True] * 2 * len(figures))])
    lines += ["", "Notifications per audience"]
    figures = ("notifications", "renotifications", "busiest_10_min", "flood_summaries",
               "held_back_in_summaries")
    heads = ("sent", "reminders", "busiest\n10 minutes", "flood\nsummaries",
             "held back in\nsummaries")
    rows = [["*" if r["changed"] else "", r["audience"], *(v for f in figures for v in r[f])]
            for r in c["audiences"]]
    lines += _table([" ", "\n\naudience", *_ab_heads(heads)], rows,
                    [False, False, *([True] * 2 * len(figures))])
    changed = sum(r["changed"] for r in c["rules"])
    lines.append("")
    lines.append(f"{changed} rule(s) changed" if changed else "no difference")
    return "\n".join(lines)
