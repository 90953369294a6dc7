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
import json
import math
import os
import pathlib
import statistics
from collections.abc import Collection, Iterable, Iterator
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from thermowarden.config import SiteConfig
from thermowarden.core import catalogue

OUTDOOR_COLOURS = ("#b5651d", "#6a3d9a", "#1f5f8b")
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
    outdoor_lines: dict[str, list[float]] = field(default_factory=dict)
    """Index name -> its series, for the catalogue's outdoor chart."""
    hours_occupied: float = 0.0
    helped: int = 0


def _weights(times: list[float], end: float) -> np.ndarray:
    t = np.asarray(times, dtype=np.float64)
    nxt = np.append(t[1:], end)
    return np.clip(nxt - t, 0.0, SAMPLE_GAP_MAX_S) / 3600.0


def _f(v: Any) -> float:
    return float(v) if v is not None else math.nan


PLOT_LIMIT = 60
"""Plots are drawn for each space of a report of at most this many spaces; a larger one
(a whole site of thousands of spaces) gives the tables only: report a building for them."""


def _column(sample: dict[str, Any], key: str, n: int) -> np.ndarray:
    values = sample.get(key)
    if values is None:
        return np.full(n, np.nan)
    column: np.ndarray = np.array(values, dtype=np.float64)  # null -> NaN
    return column


class _Totals:
    """Hours per space summed sample by sample (each sample weighs the time to the next,
    at most :data:`SAMPLE_GAP_MAX_S`), over the columns of the report's spaces."""

    def __init__(self, reports: list[SpaceReport]) -> None:
        n = len(reports)
        self.reports = reports
        self.natural = np.array([r.natural for r in reports], dtype=bool)
        self.outdoor = np.array([r.outdoor for r in reports], dtype=bool)
        self.occupied = np.zeros(n)
        self.iso = np.zeros((4, n))
        self.en = np.zeros((4, n))
        self.known = np.zeros(n)
        self.action = np.zeros(n)
        self.limit = np.zeros(n)

    def add(self, sample: dict[str, Any], cols: np.ndarray, rows: np.ndarray, w: float) -> None:
        """One sample of weight ``w`` hours; ``cols`` are the sample's positions of the
        report's spaces ``rows``."""
        m = len(sample["spaces"])

        def take(key: str) -> np.ndarray:
            picked: np.ndarray = _column(sample, key, m)[cols]
            return picked

        occ_raw = sample.get("occupied")
        occ = (np.ones(len(cols), dtype=bool) if occ_raw is None
               else np.array(occ_raw, dtype=bool)[cols])
        self.occupied[rows] += w * occ
        cat = take("category_iso")
        indoor = occ & ~self.outdoor[rows]
        for j in range(4):
            self.iso[j, rows] += w * (indoor & (cat == j))
        en = take("category_en")
        natural = occ & self.natural[rows]
        for j in range(4):
            self.en[j, rows] += w * (natural & (en == j))
        wb, ru, ra = take("wbgt"), take("ref_unacclimatised"), take("ref_acclimatised")
        known = np.isfinite(wb) & np.isfinite(ru)
        with np.errstate(invalid="ignore"):
            self.known[rows] += w * known
            self.action[rows] += w * (known & (wb > ru))
            self.limit[rows] += w * (known & np.isfinite(ra) & (wb > ra))

    def finish(self) -> None:
        for k, rep in enumerate(self.reports):
            rep.hours_occupied = float(self.occupied[k])
            rep.hours_iso = {label: float(self.iso[j, k]) for j, label in enumerate(ISO_LABELS)}
            rep.hours_en = {label: float(self.en[j, k]) for j, label in enumerate(EN_LABELS)}
            rep.hours_wbgt_known = float(self.known[k])
            rep.hours_wbgt_action = float(self.action[k])
            rep.hours_wbgt_limit = float(self.limit[k])


def _series(rep: SpaceReport, sample: dict[str, Any], i: int) -> None:
    """The plotted values of one space at one sample."""
    rep.t.append(sample["t"])
    rep.operative.append(_f(sample["operative"][i]))
    natural = rep.natural
    rep.band_lower.append(_f(sample["en_lower"][i] if natural else sample["band_lower"][i]))
    rep.band_upper.append(_f(sample["en_upper"][i] if natural else sample["band_upper"][i]))
    rep.wbgt.append(_f(sample["wbgt"][i]))
    rep.ref_u.append(_f(sample["ref_unacclimatised"][i]))
    rep.ref_a.append(_f(sample["ref_acclimatised"][i]))
    for e in catalogue.drawn("outdoor"):
        rep.outdoor_lines.setdefault(e.name, []).append(
            _f((sample.get(e.kept) or [None] * (i + 1))[i]))


def build_report(config: SiteConfig, samples: Iterable[dict[str, Any]],
                 events: list[dict[str, Any]], start: float, end: float,
                 only: Collection[str] | None = None,
                 plotted: Collection[str] | None = None) -> dict[str, SpaceReport]:
    """The numbers of a report for the period [start, end) (epoch s).

    ``samples`` may be a stream (one stored sample at a time: a day of 10,000 spaces is
    never held whole); the hours are summed with arrays over the spaces. ``only`` limits the
    report to these space ids (a building); the series for plots are kept for ``plotted``
    (default: every space of a report of at most :data:`PLOT_LIMIT` spaces).
    """
    chosen = [s for s in config.spaces if only is None or s.id in only]
    spaces = {s.id: SpaceReport(s.id, s.name or s.id, s.ventilation == "natural",
                                s.hot_work, s.kind == "outdoor") for s in chosen}
    if plotted is None:
        plotted = set(spaces) if len(spaces) <= PLOT_LIMIT else set()
    plot_set = set(plotted) & set(spaces)
    reports = list(spaces.values())
    row_of = {sid: k for k, sid in enumerate(spaces)}
    totals = _Totals(reports)
    layout: tuple[tuple[str, ...], np.ndarray, np.ndarray, list[tuple[SpaceReport, int]]] | \
        None = None
    previous: dict[str, Any] | None = None

    def account(sample: dict[str, Any], w: float) -> None:
        nonlocal layout
        ids = tuple(sample["spaces"])
        if layout is None or layout[0] != ids:  # the site changed (a reload): map again
            cols, rows, plots = [], [], []
            for i, sid in enumerate(ids):
                k = row_of.get(sid)
                if k is not None:
                    cols.append(i)
                    rows.append(k)
                    if sid in plot_set:
                        plots.append((spaces[sid], i))
            layout = (ids, np.array(cols, dtype=np.intp), np.array(rows, dtype=np.intp), plots)
        totals.add(sample, layout[1], layout[2], w)
        for rep, i in layout[3]:
            _series(rep, sample, i)

    for sample in samples:
        if not start <= sample["t"] < end:
            continue
        if previous is not None:
            account(previous, min(max(sample["t"] - previous["t"], 0.0),
                                  SAMPLE_GAP_MAX_S) / 3600.0)
        previous = sample
    if previous is not None:
        account(previous, min(max(end - previous["t"], 0.0), SAMPLE_GAP_MAX_S) / 3600.0)
    totals.finish()
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
    if rep.outdoor and any(math.isfinite(v) for line in rep.outdoor_lines.values()
                           for v in line):
        fig, ax = plt.subplots(figsize=(9, 2.6))
        for k, e in enumerate(catalogue.drawn("outdoor")):
            ax.plot(times, rep.outdoor_lines[e.name], color=OUTDOOR_COLOURS[k % 3], lw=1.3,
                    label=e.label)
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


def _where(config: SiteConfig) -> dict[str, tuple[str, str]]:
    """space id -> (building label, floor or area label); empty strings where none."""
    out = {}
    for s in config.spaces:
        b = config.level_name("building", None, s.building) or ""
        lv = config.level_name("floor" if s.floor is not None else "area", s.building,
                               s.floor or s.area) or ""
        out[s.id] = (b, lv)
    return out


def rollup_rows(config: SiteConfig, spaces: dict[str, SpaceReport]
                ) -> list[tuple[str, bool, list[SpaceReport]]]:
    """(label, is a building or site area, its spaces) for each building and each of its
    floors and areas, in the order the spaces come; empty when no space is in any."""
    where = _where(config)
    groups: dict[tuple[str, str], list[SpaceReport]] = {}
    for sid, rep in spaces.items():
        b, lv = where.get(sid, ("", ""))
        if b:
            groups.setdefault((b, ""), []).append(rep)
        if lv:
            groups.setdefault((b, lv), []).append(rep)
    if not groups:
        return []
    rows = []
    for (b, lv), reps in groups.items():
        top = not lv or not b
        label = b or lv if top else f"{b} · {lv}"
        rows.append((label, top, reps))
    rows.sort(key=lambda r: (r[0].split(" · ")[0], not r[1]))
    return rows


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
    where = _where(config)
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


# ----------------------------------------------------------------------------- from the store

def stored_samples(db_path: str | os.PathLike[str], start: float, end: float
                   ) -> Iterator[dict[str, Any]]:
    """The stored 5-minute samples of [start, end), one at a time, read through a read-only
    connection of its own (the service's writer is not touched)."""
    import sqlite3

    db = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True, timeout=30.0)
    try:
        cur = db.execute("SELECT record FROM samples WHERE t >= ? AND t < ? ORDER BY t",
                         (start, end))
        for (record,) in cur:
            yield json.loads(record)
    finally:
        db.close()


def stored_events(db_path: str | os.PathLike[str], start: float, end: float
                  ) -> list[dict[str, Any]]:
    """The stored events of [start, end), read-only."""
    import sqlite3

    db = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True, timeout=30.0)
    try:
        rows = db.execute("SELECT payload FROM events WHERE at >= ? AND at < ? ORDER BY seq",
                          (start, end)).fetchall()
        return [json.loads(r[0]) for r in rows]
    finally:
        db.close()


def write_reports(config: SiteConfig, db_path: str | os.PathLike[str], folder: pathlib.Path,
                  start: float, end: float, label: str) -> list[pathlib.Path]:
    """The report of the period for the whole site (``<site>-<label>.html``: the roll-up by
    building and floor and a line per space) and, for a site with buildings or areas, one
    per building or area (``<site>-<label>-<building>.html``, with plots where it has at
    most :data:`PLOT_LIMIT` spaces). Reads the store through its own connection: meant
    for a thread or process other than the engine's."""
    groups: dict[str, list[str]] = {}
    for s in config.spaces:
        key = s.building or s.area
        if key is not None:
            groups.setdefault(key, []).append(s.id)
    plotted = set(config.spaces[i].id for i in range(len(config.spaces))) \
        if len(config.spaces) <= PLOT_LIMIT else {
            sid for ids in groups.values() if len(ids) <= PLOT_LIMIT for sid in ids}
    events = stored_events(db_path, start - 7 * 86_400, end)
    reports = build_report(config, stored_samples(db_path, start, end), events, start, end,
                           plotted=plotted)
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    site_file = folder / f"{config.site.id}-{label}.html"
    site_file.write_text(render_html(config, reports, start, end), encoding="utf-8")
    written.append(site_file)
    for key, ids in groups.items():
        part = {sid: reports[sid] for sid in ids if sid in reports}
        name = (config.level_name("building", None, key)
                if any(b.id == key for b in config.buildings) or
                not any(a.id == key for a in config.areas)
                else config.level_name("area", None, key))
        path = folder / f"{config.site.id}-{label}-{key}.html"
        path.write_text(render_html(config, part, start, end, scope=name), encoding="utf-8")
        written.append(path)
    return written
