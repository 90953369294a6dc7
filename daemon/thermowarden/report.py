"""Periodic reports: one self-contained HTML file per site and period.

Per space: hours in each comfort category (ISO 7730 from PPD; EN 16798-1 adaptive
categories for naturally ventilated spaces), hours with the 60-minute WBGT above the
action level (unacclimatised reference) and above the limit (acclimatised reference),
advisories raised, acknowledged and cleared and how long they took to be acted on; plots
(matplotlib, embedded as SVG) of operative temperature against its comfort band, WBGT
against its references, and a timeline of advisories.
"""

from __future__ import annotations

import datetime as dt
import html
import io
import math
import statistics
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from thermowarden.config import SiteConfig

SAMPLE_GAP_MAX_S = 900.0
"""A sample counts for the time to the next one, but never more than 15 minutes."""
ISO_LABELS = ("A", "B", "C", "outside C")
EN_LABELS = ("I", "II", "III", "outside III")
CAUTION = ("Heat-stress figures are screening values for a standard person; individual "
           "factors (acclimatisation, hydration, fitness, medication, clothing) change the "
           "risk. thermowarden is advisory only: follow local regulations and consult a "
           "qualified occupational hygienist.")


def _ts(s: str) -> float:
    return dt.datetime.fromisoformat(s.replace("Z", "+00:00")).timestamp()


@dataclass
class SpaceReport:
    space_id: str
    name: str
    natural: bool
    hot_work: bool
    outdoor: bool = False
    hours_iso: dict[str, float] = field(default_factory=dict)
    hours_en: dict[str, float] = field(default_factory=dict)
    hours_wbgt_action: float = 0.0
    hours_wbgt_limit: float = 0.0
    hours_wbgt_known: float = 0.0
    raised: int = 0
    acknowledged: int = 0
    cleared: int = 0
    acted_on: int = 0
    minutes_to_act: list[float] = field(default_factory=list)
    advisories: list[dict[str, Any]] = field(default_factory=list)
    t: list[float] = field(default_factory=list)
    operative: list[float] = field(default_factory=list)
    band_lower: list[float] = field(default_factory=list)
    band_upper: list[float] = field(default_factory=list)
    wbgt: list[float] = field(default_factory=list)
    ref_u: list[float] = field(default_factory=list)
    ref_a: list[float] = field(default_factory=list)
    heat_index: list[float] = field(default_factory=list)
    utci: list[float] = field(default_factory=list)
    hours_occupied: float = 0.0
    helped: int = 0


def _weights(times: list[float], end: float) -> np.ndarray:
    t = np.asarray(times, dtype=np.float64)
    nxt = np.append(t[1:], end)
    return np.clip(nxt - t, 0.0, SAMPLE_GAP_MAX_S) / 3600.0


def _f(v: Any) -> float:
    return float(v) if v is not None else math.nan


def build_report(config: SiteConfig, samples: list[dict[str, Any]],
                 events: list[dict[str, Any]], start: float, end: float
                 ) -> dict[str, SpaceReport]:
    """The numbers of a report for the period [start, end) (epoch s)."""
    spaces = {s.id: SpaceReport(s.id, s.name or s.id, s.ventilation == "natural",
                                s.hot_work, s.kind == "outdoor") for s in config.spaces}
    samples = [s for s in samples if start <= s["t"] < end]
    for rep in spaces.values():
        rep.hours_iso = dict.fromkeys(ISO_LABELS, 0.0)
        rep.hours_en = dict.fromkeys(EN_LABELS, 0.0)
    if samples:
        times = [s["t"] for s in samples]
        w = _weights(times, end)
        for k, sample in enumerate(samples):
            for i, sid in enumerate(sample["spaces"]):
                found = spaces.get(sid)
                if found is None:
                    continue
                rep = found
                rep.t.append(sample["t"])
                rep.operative.append(_f(sample["operative"][i]))
                natural = rep.natural
                rep.band_lower.append(_f(sample["en_lower"][i] if natural
                                         else sample["band_lower"][i]))
                rep.band_upper.append(_f(sample["en_upper"][i] if natural
                                         else sample["band_upper"][i]))
                wb, ru, ra = (_f(sample["wbgt"][i]), _f(sample["ref_unacclimatised"][i]),
                              _f(sample["ref_acclimatised"][i]))
                rep.wbgt.append(wb)
                rep.ref_u.append(ru)
                rep.ref_a.append(ra)
                rep.heat_index.append(_f((sample.get("heat_index") or [None] * (i + 1))[i]))
                rep.utci.append(_f((sample.get("utci") or [None] * (i + 1))[i]))
                occ = sample.get("occupied")
                # comfort categories count the hours people were there (older samples
                # without occupancy count every hour)
                occupied = True if occ is None else bool(occ[i])
                if occupied:
                    rep.hours_occupied += w[k]
                cat = sample["category_iso"][i]
                if cat is not None and occupied and not rep.outdoor:
                    rep.hours_iso[ISO_LABELS[int(cat)]] += w[k]
                en = sample["category_en"][i]
                if en is not None and natural and occupied:
                    rep.hours_en[EN_LABELS[int(en)]] += w[k]
                if math.isfinite(wb) and math.isfinite(ru):
                    rep.hours_wbgt_known += w[k]
                    if wb > ru:
                        rep.hours_wbgt_action += w[k]
                    if math.isfinite(ra) and wb > ra:
                        rep.hours_wbgt_limit += w[k]
    seen: dict[str, dict[str, Any]] = {}
    for e in events:
        if e.get("event") == "summary" or "advisory" not in e:
            continue
        at = _ts(e["at"])
        if not start <= at < end:
            continue
        a = e["advisory"]
        owner = spaces.get(a["space"]["id"])
        if owner is None:
            continue
        rep = owner
        entry = seen.setdefault(a["id"], {"id": a["id"], "rule": a["rule"],
                                          "title": a["title"], "priority": a["priority"],
                                          "raised": _ts(a["raised_at"]), "cleared": None,
                                          "acted": None, "space": rep})
        order = ("low", "medium", "high", "urgent")
        if order.index(a["priority"]) > order.index(entry["priority"]):
            entry["priority"] = a["priority"]
        if e["event"] == "raised":
            rep.raised += 1
        elif e["event"] == "acknowledged":
            rep.acknowledged += 1
            entry["acted"] = entry["acted"] or at
        elif e["event"] == "cleared":
            rep.cleared += 1
            entry["cleared"] = at
        if a.get("acted_on") and entry["acted"] is None:
            entry["acted"] = _ts(a["acted_on"]["at"])
        if a.get("acted_on"):
            entry["helped"] = a["acted_on"].get("helped")
            entry["effect"] = a["acted_on"].get("effect")
    for entry in seen.values():
        rep = entry.pop("space")
        rep.advisories.append(entry)
        if entry.get("helped"):
            rep.helped += 1
        if entry["acted"] is not None:
            rep.acted_on += 1
            rep.minutes_to_act.append((entry["acted"] - entry["raised"]) / 60.0)
    return spaces


# ----------------------------------------------------------------------------- rendering

def _svg(fig: Any) -> str:
    import matplotlib.pyplot as plt

    buf = io.StringIO()
    fig.savefig(buf, format="svg", bbox_inches="tight", metadata={"Date": None})
    plt.close(fig)
    text = buf.getvalue()
    return text[text.index("<svg"):]


def _plots(rep: SpaceReport, tz: dt.tzinfo, start: float, end: float) -> str:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.dates as mdates
    import matplotlib.pyplot as plt

    out = []
    if not rep.t:
        return "<p class=note>No samples in this period.</p>"
    def num(t: float) -> float:
        return float(mdates.date2num(dt.datetime.fromtimestamp(t, tz)))  # type: ignore[no-untyped-call]

    def finish(ax: Any) -> None:
        ax.set_ylabel("°C")
        ax.xaxis_date(tz)
        ax.xaxis.set_major_formatter(fmt)
        ax.legend(loc="upper left", fontsize=8, frameon=False)
        ax.grid(alpha=0.3)

    times = [num(t) for t in rep.t]
    fmt = mdates.DateFormatter("%H:%M" if end - start <= 2 * 86_400 else "%d %b",  # type: ignore[no-untyped-call]
                               tz=tz)
    if rep.outdoor and any(math.isfinite(v) for v in rep.heat_index + rep.utci):
        fig, ax = plt.subplots(figsize=(9, 2.6))
        ax.plot(times, rep.heat_index, color="#b5651d", lw=1.4, label="heat index (NWS)")
        ax.plot(times, rep.utci, color="#6a3d9a", lw=1.2, label="UTCI")
        finish(ax)
        out.append(_svg(fig))
    if not rep.outdoor and any(math.isfinite(v) for v in rep.operative):
        fig, ax = plt.subplots(figsize=(9, 2.6))
        if not rep.hot_work and not rep.outdoor:  # a comfort band means nothing there
            lo = next((v for v in rep.band_lower if math.isfinite(v)), math.nan)
            hi = next((v for v in rep.band_upper if math.isfinite(v)), math.nan)
            ax.fill_between(times, rep.band_lower, rep.band_upper, color="#cfe8d4",
                            label="EN 16798-1 category II band" if rep.natural else
                            f"comfort band {lo:g}-{hi:g} °C (space parameters)")
        ax.plot(times, rep.operative, color="#1f4e79", lw=1.4, label="operative temperature")
        finish(ax)
        out.append(_svg(fig))
    if rep.hot_work and any(math.isfinite(v) for v in rep.wbgt):
        fig, ax = plt.subplots(figsize=(9, 2.6))
        ax.plot(times, rep.wbgt, color="#8b1e1e", lw=1.4, label="WBGT (60-min, with "
                "clothing adjustment)")
        ax.plot(times, rep.ref_u, color="#d98c1f", lw=1, ls="--",
                label="unacclimatised reference (action)")
        ax.plot(times, rep.ref_a, color="#555555", lw=1, ls=":",
                label="acclimatised reference (limit)")
        finish(ax)
        out.append(_svg(fig))
    if rep.advisories:
        fig, ax = plt.subplots(figsize=(9, 0.5 + 0.28 * len(rep.advisories)))
        colours = {"low": "#9bbbd4", "medium": "#e0b040", "high": "#d9712b",
                   "urgent": "#b22222"}
        for k, a in enumerate(rep.advisories):
            s0 = num(max(a["raised"], start))
            s1 = num(min(a["cleared"] or end, end))
            ax.barh(k, s1 - s0, left=s0, color=colours[a["priority"]], height=0.6)
            ax.text(s0, k, " " + a["rule"], va="center", fontsize=7)
        ax.set_yticks([])
        ax.xaxis_date(tz)
        ax.xaxis.set_major_formatter(fmt)
        ax.set_xlim(num(start), num(end))
        ax.grid(axis="x", alpha=0.3)
        out.append(_svg(fig))
    return "\n".join(out)


def render_html(config: SiteConfig, spaces: dict[str, SpaceReport], start: float,
                end: float) -> str:
    """The report as one self-contained HTML document (inline CSS and SVG, no scripts)."""
    import zoneinfo

    tz = zoneinfo.ZoneInfo(config.site.timezone)
    s0 = dt.datetime.fromtimestamp(start, tz)
    s1 = dt.datetime.fromtimestamp(end, tz)
    e = html.escape
    site = e(config.site.name or config.site.id)
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
<h2>Summary</h2><table><tr><th>space</th><th>occupied (h)</th>
<th>ISO 7730 A/B/C/outside (occupied h)</th>
<th>EN 16798-1 I/II/III/outside (occupied h)</th><th>WBGT &gt; action (h)</th>
<th>WBGT &gt; limit (h)</th><th>raised</th><th>acknowledged</th><th>cleared</th>
<th>acted on, median min</th><th>helped</th></tr>"""]

    def hours(d: dict[str, float]) -> str:
        return " / ".join(f"{v:.1f}" for v in d.values())

    for rep in spaces.values():
        med = (f"{statistics.median(rep.minutes_to_act):.0f}" if rep.minutes_to_act else "-")
        parts.append(
            f"<tr><td>{e(rep.name)}</td><td>{rep.hours_occupied:.1f}</td>"
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
    for rep in spaces.values():
        parts.append(f"<h2>{e(rep.name)}</h2>")
        parts.append(_plots(rep, tz, start, end))
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
