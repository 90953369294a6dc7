"""A report as one self-contained HTML document (inline CSS and SVG, no scripts): the
roll-up by building and floor, a line per space, and each space's plots and advisories."""

from __future__ import annotations

import datetime as dt
import html
import statistics
from typing import Any

from thermowarden.config import SiteConfig
from thermowarden.shell.report.files import GENERATOR
from thermowarden.shell.report.numbers import (
    ISO_LABELS,
    PLOT_LIMIT,
    RuleFacts,
    SpaceReport,
    rollup_rows,
    where_in_site,
)
from thermowarden.shell.report.plots import space_plots

CAUTION = ("Heat-stress figures are screening values for a standard person; individual "
           "factors (acclimatisation, hydration, fitness, medication, clothing) change the "
           "risk. thermowarden is advisory only: follow local regulations and consult a "
           "qualified occupational hygienist.")


def _count(n: int, one: str, many: str) -> str:
    return f"{n} {one if n == 1 else many}"


def _rollup_html(config: SiteConfig, spaces: dict[str, SpaceReport]) -> str:
    rows = rollup_rows(config, spaces)
    if not rows:
        return ""
    e = html.escape
    out = ["<h2>By building and floor</h2><div class=wide><table><tr><th>where</th><th>spaces</th>"
           "<th>occupied (h)</th><th>ISO 7730 A/B/C/outside (% of occupied h)</th>"
           "<th>WBGT &gt; action (h)</th><th>WBGT &gt; limit (h)</th><th>advisories</th>"
           "<th>advice acted on</th></tr>"]
    for label, top, reps in rows:
        iso = [sum(r.hours_iso.get(k, 0.0) for r in reps) for k in ISO_LABELS]
        total = sum(iso)
        shares = " / ".join(f"{100 * v / total:.0f} %" for v in iso) if total else "-"
        hot = [r for r in reps if r.hot_work]
        name = f"<b>{e(label)}</b>" if top else "&nbsp;&nbsp;" + e(label)
        out.append(
            f"<tr><td>{name}</td><td>{_count(len(reps), 'space', 'spaces')}</td>"
            f"<td>{sum(r.hours_occupied for r in reps):.1f} h</td><td>{shares}</td>"
            + (f"<td>{sum(r.hours_wbgt_action for r in hot):.1f} h</td>"
               f"<td>{sum(r.hours_wbgt_limit for r in hot):.1f} h</td>" if hot
               else "<td>-</td><td>-</td>")
            + f"<td>{sum(r.raised for r in reps)} raised, "
            f"{sum(r.acknowledged for r in reps)} acknowledged, "
            f"{sum(r.cleared for r in reps)} cleared</td>"
            f"<td>{_count(sum(r.acted_on for r in reps), 'advisory', 'advisories')}</td>"
            "</tr>")
    out.append("</table></div>")
    return "\n".join(out)


def render_html(config: SiteConfig, spaces: dict[str, SpaceReport], start: float,
                end: float, scope: str | None = None, rules: RuleFacts | None = None,
                ahead: list[dict[str, Any]] | None = None) -> str:
    """The report as one self-contained HTML document (inline CSS and SVG, no scripts).
    ``scope`` names the part of the site reported (a building) in the title; ``rules``: the
    rules' titles; ``ahead``: the measured figures of the ahead-of-time advice
    (:func:`~thermowarden.shell.report.numbers.ahead_figures`), a section of their own."""
    import zoneinfo

    tz = zoneinfo.ZoneInfo(config.site.timezone)
    s0 = dt.datetime.fromtimestamp(start, tz)
    s1 = dt.datetime.fromtimestamp(end, tz)
    e = html.escape
    site = e(config.site.name or config.site.id) + (f" · {e(scope)}" if scope else "")
    where = where_in_site(config)
    placed = any(any(where.get(sid, ())) for sid in spaces)  # a "where" column is needed
    where_th = "<th>where</th>" if placed else ""
    parts = [f"""<!doctype html><html lang="en"><head><meta charset="utf-8">
<meta name="generator" content="{GENERATOR}">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>thermowarden report: {site}, {s0:%d %b %Y %H:%M} to {s1:%d %b %Y %H:%M}</title>
<style>
body{{font-family:system-ui,sans-serif;margin:2em auto;max-width:1000px;color:#222;
padding:0 1em}}
h1{{font-size:1.5em}} h2{{font-size:1.15em;margin-top:2em;border-bottom:1px solid #ccc}}
table{{border-collapse:collapse;font-size:.9em;margin:.5em 0}}
td,th{{border:1px solid #ddd;padding:.25em .6em;text-align:right}}
th:first-child,td:first-child{{text-align:left}} .note{{color:#666;font-size:.85em}}
.caution{{background:#fff4e5;border-left:4px solid #d9712b;padding:.6em 1em}}
svg{{width:100%;max-width:820px;height:auto;display:block}} .wide{{overflow-x:auto}}
.advisories td,.advisories th,.ahead td,.ahead th{{text-align:left;vertical-align:top}}
.levels{{margin:0;padding:0;list-style:none}} .levels li{{margin:.1em 0}}
@media (max-width:640px){{
.cards,.cards tbody,.cards tr,.cards td{{display:block}}
.cards tr:first-child{{display:none}}
.cards tr{{border:1px solid #ccc;margin:.6em 0;padding:.3em 0}}
.cards td{{border:0;text-align:left}} .cards td:first-child{{font-weight:600}}
.advisories td:first-child{{font-weight:400}}
.cards td[data-label]::before{{content:attr(data-label) ": ";color:#666;font-weight:400}}
}}
</style></head><body>
<h1>{site}: thermal comfort and heat stress</h1>
<p>{s0:%A %d %B %Y %H:%M} to {s1:%A %d %B %Y %H:%M} ({e(config.site.timezone)}).
Advisory only: nothing was switched or moved by thermowarden.</p>
<p class=caution>{e(CAUTION)}</p>
{_rollup_html(config, spaces)}
<section id=summary><h2>Summary</h2><div class=wide><table class=cards><tr><th>space</th>{where_th}
<th>occupied (h)</th>
<th>ISO 7730 A/B/C/outside (occupied h)</th>
<th>EN 16798-1 I/II/III/outside (occupied h)</th><th>WBGT &gt; action (h)</th>
<th>WBGT &gt; limit (h)</th><th>advisories</th><th>advice acted on</th><th>helped</th>
</tr>"""]

    def hours(d: dict[str, float]) -> str:
        return " / ".join(f"{v:.1f} h" for v in d.values())

    def wbgt_hours(rep: SpaceReport, h: float) -> str:
        if not rep.hot_work:
            return "-"
        if rep.hours_wbgt_known <= 0:
            return "no 60-minute mean"
        return f"{h:.1f} h"

    for rep in spaces.values():
        med = (f", median {statistics.median(rep.minutes_to_act):.0f} min after raised"
               if rep.minutes_to_act else "")
        cells = ([("where", e(" · ".join(x for x in where.get(rep.space_id, ()) if x)))]
                 if placed else []) + [
            ("occupied", f"{rep.hours_occupied:.1f} h"),
            ("ISO 7730 A/B/C/outside", "-" if rep.outdoor else hours(rep.hours_iso)),
            ("EN 16798-1 I/II/III/outside", hours(rep.hours_en) if rep.natural else "-"),
            ("WBGT above the action value", wbgt_hours(rep, rep.hours_wbgt_action)),
            ("WBGT above the limit", wbgt_hours(rep, rep.hours_wbgt_limit)),
            ("advisories", f"{rep.raised} raised, {rep.acknowledged} acknowledged, "
                           f"{rep.cleared} cleared"),
            ("advice acted on", f"{_count(rep.acted_on, 'advisory', 'advisories')}{med}"),
            ("helped", _count(rep.helped, "advisory", "advisories"))]
        parts.append(f"<tr><td>{e(rep.name)}</td>"
                     + "".join(f'<td data-label="{h}">{v}</td>' for h, v in cells)
                     + "</tr>")
    parts.append("</table></div><p class=note>Hours are counted from 5-minute samples; comfort "
                 "categories over the hours the space was occupied, and not for outdoor "
                 "spaces (ISO 7730 does not apply there: see their heat index and UTCI). "
                 "Helped: the advice was acted on and the condition cleared within the "
                 "rule's expected time. ISO 7730 "
                 "categories from the predicted percentage dissatisfied (A &lt; 6 %, B &lt; "
                 "10 %, C &lt; 15 %); WBGT action = ISO 7243 Annex A unacclimatised "
                 "reference (NIOSH RAL), limit = acclimatised reference (NIOSH REL), both "
                 "against the 60-minute time-weighted WBGT with the clothing adjustment, "
                 "counted only where that mean existed (at least 48 of the last 60 minutes "
                 "covered). Advice acted on: the equipment was put as advised (an "
                 "acknowledgement is not an action).</p></section>")
    if ahead:
        parts.append(_ahead_html(config, ahead, rules or RuleFacts(), tz))
    detailed = len(spaces) <= PLOT_LIMIT
    if not detailed and scope is None:
        parts.append(f"<p class=note>{len(spaces)} spaces: the plots and advisories of each "
                     "space are in the report of its building or area.</p>")
    elif not detailed:
        parts.append(f"<p class=note>{len(spaces)} spaces: too many to plot each here; "
                     "their lines are in the summary above.</p>")
    for rep in spaces.values():
        if not detailed and not rep.t:
            continue
        parts.append(f'<section id="space-{e(rep.space_id)}"><h2>{e(rep.name)}</h2>')
        parts.append(space_plots(rep, tz, start, end))
        if rep.advisories:
            parts.append(_advisories_html(rep, tz, end))
        parts.append("</section>")
    parts.append("<p class=note>Generated by thermowarden. Methods: ISO 7730:2005, "
                 "EN 16798-1:2019, ISO 7243:2017, ASHRAE 55-2020.</p></body></html>")
    return "\n".join(parts)


def _advisories_html(rep: SpaceReport, tz: dt.tzinfo, end: float) -> str:
    """The space's advisories, one row each: the levels it reached (from when, its priority
    and its title at that level), then who acknowledged it and when, when its advice was
    acted on, when it cleared (or that it was still live at the end of the data) and the
    effect. On a phone each advisory is a card, each value under its heading's words."""
    e = html.escape

    def when(t: float | None) -> str:
        return "-" if t is None else f"{dt.datetime.fromtimestamp(t, tz):%H:%M}"

    data_end = min(end, rep.data_end if rep.data_end is not None else end)
    heads = ("acknowledged", "advice acted on", "cleared", "effect")
    out = ["<table class=\"advisories cards\"><tr><th>advisory, level by level: from, priority, "
           "title</th>" + "".join(f"<th>{h}</th>" for h in heads) + "</tr>"]
    for a in rep.advisories:
        ack = "-"
        if a["acknowledged"] is not None:
            ack = when(a["acknowledged"]) + (f" by {a['acknowledged_by']}"
                                             if a["acknowledged_by"] else "")
        cleared = (when(a["cleared"]) if a["cleared"] is not None
                   else f"live at the end of the data ({when(data_end)})")
        levels = "".join(f"<li>{when(lv['from'])} <b>{e(lv['priority'])}</b>: "
                         f"{e(lv['title'])}</li>" for lv in a["levels"])
        values = (ack, when(a["acted"]), cleared, _effect_text(a))
        out.append(f"<tr><td><ul class=levels>{levels}</ul></td>"
                   + "".join(f'<td data-label="{h}">{e(v)}</td>'
                             for h, v in zip(heads, values, strict=True)) + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def _effect_text(a: dict[str, Any]) -> str:
    """``helped: radiant asymmetry -4.3 K realised, -3.0 K predicted`` for an advisory whose
    advice was acted on; ``-`` for one not acted on (an acknowledgement is not an action)."""
    if a.get("acted") is None:
        return "-"
    helped = a.get("helped")
    if helped is True:
        words = "helped: cleared within the expected time"
    elif helped is False:
        words = "did not clear within the expected time"
    elif a.get("cleared") is not None:
        words = "cleared"
    else:
        words = "waiting for its effect"
    eff = a.get("effect") or {}
    if eff.get("realised_change") is not None and eff.get("predicted_change") is not None:
        from thermowarden.core.labels import change_unit, index_label

        q = str(eff.get("quantity") or "")
        unit = change_unit(q)
        if unit:
            words += (f"; {index_label(q)} {eff['realised_change']:+.1f} {unit} realised, "
                      f"{eff['predicted_change']:+.1f} {unit} predicted")
        else:  # an index without a unit (PMV): its name before each value
            name = index_label(q).split(",")[0]
            words += (f"; {name} {eff['realised_change']:+.1f} realised, {name} "
                      f"{eff['predicted_change']:+.1f} predicted")
    return words


def _minutes(v: float) -> str:
    return f"{v:.0f} min"


def _ahead_html(config: SiteConfig, figures: list[dict[str, Any]], rules: RuleFacts,
                tz: dt.tzinfo) -> str:
    """Measured, not promised: per rule with ahead-of-time advice, in words with units."""
    e = html.escape
    names = {s.id: s.name or s.id for s in config.spaces}
    out = ["<section id=ahead><h2>Advice ahead of time, measured</h2>",
           "<p>For each kind of advice given before a crossing happens: how many crossings "
           "of the period it foresaw and how long before, its advisories that were not "
           "followed by the crossing, and the crossings that came with no warning.</p>",
           "<div class=wide><table class=\"ahead cards\"><tr><th>advice ahead of time</th>"
           "<th>what it foresees</th><th>crossings foreseen</th>"
           "<th>warned ahead by</th><th>not followed by the crossing</th>"
           "<th>crossings with no warning</th></tr>"]
    for r in figures:
        target, priority = rules.foresees.get(r["rule"], (r["foresees"], None))
        what = rules.titles.get(target) or target.rsplit(".", 1)[-1].replace("_", " ")
        if priority is not None:
            what += f", raised at {priority} priority or above"
        n, seen = r["crossings"], r["foreseen"]
        foreseen = ("no crossing" if n == 0
                    else f"{seen} of {_count(n, 'crossing', 'crossings')}")
        lead = r["lead_min"]
        warned = ("-" if lead is None else
                  f"{_minutes(lead['min'])} at least, median {_minutes(lead['median'])}")
        parts = []
        if r["withdrawn"]:
            parts.append(f"{_count(r['withdrawn'], 'advisory', 'advisories')} withdrawn "
                         "(the forecast no longer held)")
        if r["acted_on"]:
            parts.append(f"{_count(r['acted_on'], 'advisory', 'advisories')} whose advice "
                         "was acted on (no crossing came)")
        if r["live_at_end"]:
            parts.append(f"{_count(r['live_at_end'], 'advisory', 'advisories')} still "
                         "live at the end of the data")
        not_followed = "; ".join(parts) if parts else "none"
        if r["unwarned"]:
            where = ", ".join(
                f"{names.get(c['space'], c['space'])} at "
                f"{dt.datetime.fromisoformat(c['at']).astimezone(tz):%H:%M}"
                for c in r["unwarned_crossings"])
            more = r["unwarned"] - len(r["unwarned_crossings"])
            unwarned = (f"{_count(r['unwarned'], 'crossing', 'crossings')}: {where}"
                        + (f" and {_count(more, 'other', 'others')}" if more > 0 else ""))
        else:
            unwarned = "none"
        cells = (("what it foresees", what), ("crossings foreseen", foreseen),
                 ("warned ahead by", warned), ("not followed by the crossing", not_followed),
                 ("crossings with no warning", unwarned))
        out.append(f"<tr><td>{e(rules.titles.get(r['rule']) or r['rule'])}</td>"
                   + "".join(f'<td data-label="{h}">{e(v)}</td>' for h, v in cells)
                   + "</tr>")
    out.append("</table></div><p class=note>A crossing: the advice foreseen was raised, at the "
               "priority given or above (or rose to it). Foreseen: an advisory ahead of "
               "time was live for that space when it happened; warned ahead by: the minutes "
               "from that advisory to the crossing. Withdrawn: it cleared by itself before "
               "any crossing (the trend turned, the sky clouded over). A forecast from a "
               "trend is not a weather forecast.</p></section>")
    return "\n".join(out)

