"""A report as one self-contained HTML document (inline CSS and SVG, no scripts): the
roll-up by building and floor, a line per space, and each space's plots and advisories."""

from __future__ import annotations

import datetime as dt
import html
import statistics
from typing import Any

from thermowarden.config import SiteConfig
from thermowarden.shell.report.numbers import (
    ISO_LABELS,
    PLOT_LIMIT,
    SpaceReport,
    rollup_rows,
    where_in_site,
)
from thermowarden.shell.report.plots import space_plots

CAUTION = ("Heat-stress figures are screening values for a standard person; individual "
           "factors (acclimatisation, hydration, fitness, medication, clothing) change the "
           "risk. thermowarden is advisory only: follow local regulations and consult a "
           "qualified occupational hygienist.")


def _rollup_html(config: SiteConfig, spaces: dict[str, SpaceReport]) -> str:
    rows = rollup_rows(config, spaces)
    if not rows:
        return ""
    e = html.escape
    out = ["<h2>By building and floor</h2><table><tr><th>where</th><th>spaces</th>"
           "<th>occupied (h)</th><th>ISO 7730 A/B/C/outside (% of occupied h)</th>"
           "<th>WBGT &gt; action (h)</th><th>WBGT &gt; limit (h)</th><th>raised</th>"
           "<th>acknowledged</th><th>cleared</th><th>acted on</th></tr>"]
    for label, top, reps in rows:
        iso = [sum(r.hours_iso.get(k, 0.0) for r in reps) for k in ISO_LABELS]
        total = sum(iso)
        shares = " / ".join(f"{100 * v / total:.0f}" for v in iso) if total else "-"
        hot = [r for r in reps if r.hot_work]
        name = f"<b>{e(label)}</b>" if top else "&nbsp;&nbsp;" + e(label)
        out.append(
            f"<tr><td>{name}</td><td>{len(reps)}</td>"
            f"<td>{sum(r.hours_occupied for r in reps):.1f}</td><td>{shares}</td>"
            + (f"<td>{sum(r.hours_wbgt_action for r in hot):.1f}</td>"
               f"<td>{sum(r.hours_wbgt_limit for r in hot):.1f}</td>" if hot
               else "<td>-</td><td>-</td>")
            + f"<td>{sum(r.raised for r in reps)}</td><td>{sum(r.acknowledged for r in reps)}"
            f"</td><td>{sum(r.cleared for r in reps)}</td>"
            f"<td>{sum(r.acted_on for r in reps)}</td></tr>")
    out.append("</table>")
    return "\n".join(out)


def render_html(config: SiteConfig, spaces: dict[str, SpaceReport], start: float,
                end: float, scope: str | None = None) -> str:
    """The report as one self-contained HTML document (inline CSS and SVG, no scripts).
    ``scope`` names the part of the site reported (a building) in the title."""
    import zoneinfo

    tz = zoneinfo.ZoneInfo(config.site.timezone)
    s0 = dt.datetime.fromtimestamp(start, tz)
    s1 = dt.datetime.fromtimestamp(end, tz)
    e = html.escape
    site = e(config.site.name or config.site.id) + (f" · {e(scope)}" if scope else "")
    where = where_in_site(config)
    parts = [f"""<!doctype html><html lang="en"><head><meta charset="utf-8">
<title>thermowarden report: {site}, {s0:%d %b %Y %H:%M} to {s1:%d %b %Y %H:%M}</title>
<style>
body{{font-family:system-ui,sans-serif;margin:2em auto;max-width:1000px;color:#222}}
h1{{font-size:1.5em}} h2{{font-size:1.15em;margin-top:2em;border-bottom:1px solid #ccc}}
table{{border-collapse:collapse;font-size:.9em;margin:.5em 0}}
td,th{{border:1px solid #ddd;padding:.25em .6em;text-align:right}}
th:first-child,td:first-child{{text-align:left}} .note{{color:#666;font-size:.85em}}
.caution{{background:#fff4e5;border-left:4px solid #d9712b;padding:.6em 1em}}
svg{{max-width:100%;height:auto}}
</style></head><body>
<h1>{site}: thermal comfort and heat stress</h1>
<p>{s0:%A %d %B %Y %H:%M} to {s1:%A %d %B %Y %H:%M} ({e(config.site.timezone)}).
Advisory only: nothing was switched or moved by thermowarden.</p>
<p class=caution>{e(CAUTION)}</p>
{_rollup_html(config, spaces)}
<h2>Summary</h2><table><tr><th>space</th><th>where</th><th>occupied (h)</th>
<th>ISO 7730 A/B/C/outside (occupied h)</th>
<th>EN 16798-1 I/II/III/outside (occupied h)</th><th>WBGT &gt; action (h)</th>
<th>WBGT &gt; limit (h)</th><th>raised</th><th>acknowledged</th><th>cleared</th>
<th>acted on, median min</th><th>helped</th></tr>"""]

    def hours(d: dict[str, float]) -> str:
        return " / ".join(f"{v:.1f}" for v in d.values())

    for rep in spaces.values():
        med = (f"{statistics.median(rep.minutes_to_act):.0f}" if rep.minutes_to_act else "-")
        parts.append(
            f"<tr><td>{e(rep.name)}</td>"
            f"<td>{e(' · '.join(x for x in where.get(rep.space_id, ()) if x))}</td>"
            f"<td>{rep.hours_occupied:.1f}</td>"
            f"<td>{'-' if rep.outdoor else hours(rep.hours_iso)}</td>"
            f"<td>{hours(rep.hours_en) if rep.natural else '-'}</td>"
            + (f"<td>{rep.hours_wbgt_action:.1f}</td><td>{rep.hours_wbgt_limit:.1f}</td>"
               if rep.hot_work else "<td>-</td><td>-</td>") +
            f"<td>{rep.raised}</td><td>{rep.acknowledged}</td><td>{rep.cleared}</td>"
            f"<td>{rep.acted_on} ({med})</td><td>{rep.helped}</td></tr>")
    parts.append("</table><p class=note>Hours are counted from 5-minute samples; comfort "
                 "categories over the hours the space was occupied, and not for outdoor "
                 "spaces (ISO 7730 does not apply there: see their heat index and UTCI). "
                 "Helped: the advice was acted on and the condition cleared within the "
                 "rule's expected time. ISO 7730 "
                 "categories from the predicted percentage dissatisfied (A &lt; 6 %, B &lt; "
                 "10 %, C &lt; 15 %); WBGT action = ISO 7243 Annex A unacclimatised "
                 "reference (NIOSH RAL), limit = acclimatised reference (NIOSH REL), both "
                 "against the 60-minute time-weighted WBGT with the clothing adjustment."
                 "</p>")
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
        parts.append(f"<h2>{e(rep.name)}</h2>")
        parts.append(space_plots(rep, tz, start, end))
        if rep.advisories:
            parts.append("<table><tr><th>advisory</th><th>priority</th><th>raised</th>"
                         "<th>acted on</th><th>cleared</th><th>effect</th></tr>")
            for a in rep.advisories:
                def when(t: float | None) -> str:
                    return "-" if t is None else f"{dt.datetime.fromtimestamp(t, tz):%H:%M}"
                parts.append(f"<tr><td>{e(a['title'])}</td><td>{a['priority']}</td>"
                             f"<td>{when(a['raised'])}</td><td>{when(a['acted'])}</td>"
                             f"<td>{when(a['cleared'])}</td><td>{e(_effect_text(a))}</td>"
                             "</tr>")
            parts.append("</table>")
    parts.append("<p class=note>Generated by thermowarden. Methods: ISO 7730:2005, "
                 "EN 16798-1:2019, ISO 7243:2017, ASHRAE 55-2020.</p></body></html>")
    return "\n".join(parts)


def _effect_text(a: dict[str, Any]) -> str:
    """``helped; -4.3 realised against -3.0 predicted`` for an acted-on advisory."""
    if a.get("acted") is None:
        return "-"
    words = {True: "helped", False: "did not clear in time", None: "pending"}[a.get("helped")]
    eff = a.get("effect") or {}
    if eff.get("realised_change") is not None and eff.get("predicted_change") is not None:
        words += (f"; {eff['quantity']} {eff['realised_change']:+.1f} realised, "
                  f"{eff['predicted_change']:+.1f} predicted")
    return words
