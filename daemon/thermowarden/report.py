"""Periodic reports: one self-contained HTML file per site and period.

Per space: hours in each comfort category (ISO 7730 from PPD; EN 16798-1 adaptive
categories for naturally ventilated spaces), hours with the 60-minute WBGT above the
action level (unacclimatised reference) and above the limit (acclimatised reference),
advisories raised, acknowledged and cleared and how long they took to be acted on; plots
(matplotlib, embedded as SVG) of operative temperature against its comfort band, WBGT
against its references, and a timeline of advisories.

The heat-stress hours and the plotted 60-minute WBGT are the 60-minute time-weighted mean
(ISO 7243:2017), plus the clothing adjustment, only where that mean existed (at least 48 of
the last 60 minutes covered); the spot value is drawn apart and labelled so. An advisory
is shown level by level: each level's title with its own priority. Nothing is drawn past
the end of the data.
"""

from __future__ import annotations

import datetime as dt
import html
import io
import json
import math
import os
import pathlib
import re
import statistics
from collections.abc import Collection, Iterable, Iterator
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from thermowarden.config import SiteConfig

PRIORITY_ORDER = ("low", "medium", "high", "urgent")
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
    """The 60-minute WBGT (°C, with the clothing adjustment), NaN where it did not exist."""
    wbgt_spot: list[float] = field(default_factory=list)
    """The spot WBGT (°C, with the clothing adjustment)."""
    ref_u: list[float] = field(default_factory=list)
    ref_a: list[float] = field(default_factory=list)
    heat_index: list[float] = field(default_factory=list)
    utci: list[float] = field(default_factory=list)
    hours_occupied: float = 0.0
    helped: int = 0
    data_end: float | None = None
    """The time of the last sample of this space in the period (epoch s)."""


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
        # the 60-minute mean only where it existed (a sample stored before the mean was
        # kept apart has none: its hours are not known)
        wb, ru, ra = (take("wbgt_60min"), take("ref_unacclimatised"),
                      take("ref_acclimatised"))
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
    rep.wbgt.append(_f((sample.get("wbgt_60min") or [None] * (i + 1))[i]))
    rep.wbgt_spot.append(_f((sample.get("wbgt_spot") or [None] * (i + 1))[i]))
    rep.ref_u.append(_f(sample["ref_unacclimatised"][i]))
    rep.ref_a.append(_f(sample["ref_acclimatised"][i]))
    rep.heat_index.append(_f((sample.get("heat_index") or [None] * (i + 1))[i]))
    rep.utci.append(_f((sample.get("utci") or [None] * (i + 1))[i]))


LEVEL_EVENTS = frozenset({"raised", "escalated", "deescalated"})
"""Events that start a level of an advisory (its priority and that level's title)."""


def _account_event(seen: dict[str, dict[str, Any]], rep: SpaceReport, event: str, at: float,
                   a: dict[str, Any]) -> None:
    """One lifecycle event of advisory ``a`` at ``at`` (epoch s) into its entry: the levels
    it went through (each with the title it had at that level), who acknowledged it and
    when, when the advice was acted on (the equipment put as advised), its clearing."""
    entry = seen.get(a["id"])
    if entry is None:
        raised = _ts(a["raised_at"])
        entry = seen[a["id"]] = {
            "id": a["id"], "rule": a["rule"], "raised": raised, "cleared": None,
            "levels": [{"priority": a["priority"], "title": a["title"],
                        "from": raised if event == "raised" else at}],
            "acknowledged": None, "acknowledged_by": None, "acted": None, "helped": None,
            "effect": None, "space": rep}
        # (an advisory raised before the period starts its first level at its first event)
    elif event in LEVEL_EVENTS and a["priority"] != entry["levels"][-1]["priority"]:
        entry["levels"].append({"priority": a["priority"], "title": a["title"], "from": at})
    if event == "raised":
        rep.raised += 1
    elif event == "acknowledged":
        rep.acknowledged += 1
        ack = a.get("acknowledged") or {}
        entry["acknowledged"] = entry["acknowledged"] or at
        entry["acknowledged_by"] = ack.get("by") or ack.get("user") or entry["acknowledged_by"]
    elif event == "cleared":
        rep.cleared += 1
        entry["cleared"] = at
    acted = a.get("acted_on")
    if acted:
        if entry["acted"] is None:
            entry["acted"] = _ts(acted["at"])
        entry["helped"] = acted.get("helped")
        entry["effect"] = acted.get("effect")
    # the highest priority it reached (the summary and the timeline's colour)
    entry["priority"] = max((lv["priority"] for lv in entry["levels"]),
                            key=PRIORITY_ORDER.index)


def build_report(config: SiteConfig, samples: Iterable[dict[str, Any]],
                 events: list[dict[str, Any]], start: float, end: float,
                 only: Collection[str] | None = None,
                 plotted: Collection[str] | None = None,
                 titles: dict[str, str] | None = None) -> dict[str, SpaceReport]:
    """The numbers of a report for the period [start, end) (epoch s).

    ``samples`` may be a stream (one stored sample at a time: a day of 10,000 spaces is
    never held whole); the hours are summed with arrays over the spaces. ``only`` limits the
    report to these space ids (a building); the series for plots are kept for ``plotted``
    (default: every space of a report of at most :data:`PLOT_LIMIT` spaces); ``titles``:
    rule -> its title (the timeline's words).
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
    data_end = previous["t"] if previous is not None else None
    for e in events:
        if e.get("event") == "summary" or "advisory" not in e:
            continue
        at = _ts(e["at"])
        if start <= at < end:
            data_end = at if data_end is None else max(data_end, at)
    for rep in reports:
        rep.data_end = data_end
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
        _account_event(seen, owner, e["event"], at, a)
    for entry in seen.values():
        rep = entry.pop("space")
        entry["rule_title"] = (titles or {}).get(entry["rule"])
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
    text = text[text.index("<svg"):]
    # no text a browser could show but the figure's own: the file's metadata goes, and the
    # style sheet matplotlib writes becomes the (inherited) style of the drawing
    text = re.sub(r"\s*<metadata>.*?</metadata>", "", text, flags=re.S)
    text = re.sub(r"\s*<style[^>]*>.*?</style>", "", text, flags=re.S)
    return text.replace("<svg ", '<svg style="stroke-linejoin:round;stroke-linecap:butt" ',
                        1)


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
        ax.set_xlim(num(start), num(end))  # every plot of a space on the same time axis
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False)
        ax.grid(alpha=0.3)

    times = [num(t) for t in rep.t]
    fmt = mdates.DateFormatter("%H:%M" if end - start <= 2 * 86_400 else "%d %b",  # type: ignore[no-untyped-call]
                               tz=tz)
    if rep.outdoor and any(math.isfinite(v) for v in rep.heat_index + rep.utci):
        fig, ax = plt.subplots(figsize=(7.5, 2.6))
        ax.plot(times, rep.heat_index, color="#b5651d", lw=1.4, label="heat index (NWS)")
        ax.plot(times, rep.utci, color="#6a3d9a", lw=1.2, label="UTCI")
        finish(ax)
        out.append(_svg(fig))
    if not rep.outdoor and any(math.isfinite(v) for v in rep.operative):
        fig, ax = plt.subplots(figsize=(7.5, 2.6))
        if not rep.hot_work and not rep.outdoor:  # a comfort band means nothing there
            lo = next((v for v in rep.band_lower if math.isfinite(v)), math.nan)
            hi = next((v for v in rep.band_upper if math.isfinite(v)), math.nan)
            ax.fill_between(times, rep.band_lower, rep.band_upper, color="#cfe8d4",
                            label="EN 16798-1 category II band" if rep.natural else
                            f"comfort band {lo:g}-{hi:g} °C (space parameters)")
        ax.plot(times, rep.operative, color="#1f4e79", lw=1.4, label="operative temperature")
        finish(ax)
        out.append(_svg(fig))
    if rep.hot_work and any(math.isfinite(v) for v in rep.wbgt + rep.wbgt_spot):
        fig, ax = plt.subplots(figsize=(7.5, 2.6))
        if any(math.isfinite(v) for v in rep.wbgt_spot):
            ax.plot(times, rep.wbgt_spot, color="#d4a5a5", lw=0.8,
                    label="WBGT, spot value (not the 60-minute mean)")
        if any(math.isfinite(v) for v in rep.wbgt):  # a gap where the mean did not exist
            ax.plot(times, rep.wbgt, color="#8b1e1e", lw=1.6,
                    label="WBGT, 60-minute mean (with the clothing adjustment)")
        ax.plot(times, rep.ref_u, color="#d98c1f", lw=1, ls="--",
                label="unacclimatised reference (action)")
        ax.plot(times, rep.ref_a, color="#555555", lw=1, ls=":",
                label="acclimatised reference (limit)")
        finish(ax)
        out.append(_svg(fig))
    if rep.advisories:
        fig, ax = plt.subplots(figsize=(7.5, 0.9 + 0.28 * len(rep.advisories)))
        colours = {"low": "#9bbbd4", "medium": "#e0b040", "high": "#d9712b",
                   "urgent": "#b22222"}
        for k, t0, t1, priority in timeline_spans(rep, start, end):
            ax.barh(k, num(t1) - num(t0), left=num(t0), color=colours[priority], height=0.6)
        for k, a in enumerate(rep.advisories):
            ax.text(num(max(a["raised"], start)), k, " " + rule_words(a), va="center",
                    fontsize=7)
        for priority in PRIORITY_ORDER:
            if any(lv["priority"] == priority for a in rep.advisories for lv in a["levels"]):
                ax.barh(0, 0, color=colours[priority], label=f"priority {priority}")
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False)
        ax.set_yticks([])
        ax.set_ylim(-0.6, len(rep.advisories) - 0.4)
        ax.xaxis_date(tz)
        ax.xaxis.set_major_formatter(fmt)
        ax.set_xlim(num(start), num(end))
        ax.grid(axis="x", alpha=0.3)
        out.append(_svg(fig))
    return "\n".join(out)


def _count(n: int, one: str, many: str) -> str:
    return f"{n} {one if n == 1 else many}"


GENERATOR = "thermowarden report"
"""The mark in every report's head: a file that has it was written by a report, and a
report may write over it; any other file is never written over."""


class ReportFileError(Exception):
    """The report would write over a file it did not create."""


def made_by_report(path: pathlib.Path) -> bool:
    """Whether ``path`` is a report this program wrote (its head carries the mark)."""
    try:
        with path.open("rb") as fh:
            head = fh.read(2048)
    except OSError:
        return False
    return f'<meta name="generator" content="{GENERATOR}">'.encode() in head


def report_destination(output: str | None, default: pathlib.Path) -> tuple[pathlib.Path, str]:
    """Where to write a report, and what to tell the person about it.

    ``output`` given: that file, unless it exists and is not a report (refused with
    :class:`ReportFileError`: nothing is written over). Not given: ``default``, or where a
    file of that name exists that a report did not write, the first free
    ``<name>-2.html``, ``<name>-3.html``... (and the note says so)."""
    if output is not None:
        path = pathlib.Path(output)
        if path.exists() and not made_by_report(path):
            raise ReportFileError(
                f"{path} exists and is not a report written by thermowarden: not written "
                "over (give another --output, or move that file)")
        return path, ""
    if not default.exists() or made_by_report(default):
        return default, ""
    k = 2
    while True:
        other = default.with_name(f"{default.stem}-{k}{default.suffix}")
        if not other.exists() or made_by_report(other):
            return other, (f"{default} exists and is not a report written by thermowarden: "
                           f"left as it is, the report went to {other} instead")
        k += 1


def write_report_file(path: pathlib.Path, text: str) -> None:
    """Write ``text`` to ``path`` through a new file beside it, renamed over it when whole
    (a report being read is never half written; a file created meanwhile that is not a
    report is never written over)."""
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    with tmp.open("x", encoding="utf-8") as fh:
        fh.write(text)
    try:
        if path.exists() and not made_by_report(path):
            raise ReportFileError(f"{path} appeared meanwhile and is not a report: not "
                                  "written over")
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


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
    placed = any(any(where.get(sid, ())) for sid in spaces)  # a "where" column is needed
    where_th = "<th>where</th>" if placed else ""
    parts = [f"""<!doctype html><html lang="en"><head><meta charset="utf-8">
<meta name="generator" content="{GENERATOR}">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>thermowarden report: {site}, {s0:%d %b %Y %H:%M} to {s1:%d %b %Y %H:%M}</title>
<style>
body{{font-family:system-ui,sans-serif;margin:2em auto;max-width:1000px;color:#222}}
h1{{font-size:1.5em}} h2{{font-size:1.15em;margin-top:2em;border-bottom:1px solid #ccc}}
table{{border-collapse:collapse;font-size:.9em;margin:.5em 0}}
td,th{{border:1px solid #ddd;padding:.25em .6em;text-align:right}}
th:first-child,td:first-child{{text-align:left}} .note{{color:#666;font-size:.85em}}
.caution{{background:#fff4e5;border-left:4px solid #d9712b;padding:.6em 1em}}
svg{{max-width:100%;height:auto}} .wide{{overflow-x:auto}}
.advisories td{{text-align:left;vertical-align:top}}
</style></head><body>
<h1>{site}: thermal comfort and heat stress</h1>
<p>{s0:%A %d %B %Y %H:%M} to {s1:%A %d %B %Y %H:%M} ({e(config.site.timezone)}).
Advisory only: nothing was switched or moved by thermowarden.</p>
<p class=caution>{e(CAUTION)}</p>
{_rollup_html(config, spaces)}
<section id=summary><h2>Summary</h2><div class=wide><table><tr><th>space</th>{where_th}
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
        parts.append(
            f"<tr><td>{e(rep.name)}</td>"
            + (f"<td>{e(' · '.join(x for x in where.get(rep.space_id, ()) if x))}</td>"
               if placed else "") +
            f"<td>{rep.hours_occupied:.1f} h</td>"
            f"<td>{'-' if rep.outdoor else hours(rep.hours_iso)}</td>"
            f"<td>{hours(rep.hours_en) if rep.natural else '-'}</td>"
            f"<td>{wbgt_hours(rep, rep.hours_wbgt_action)}</td>"
            f"<td>{wbgt_hours(rep, rep.hours_wbgt_limit)}</td>"
            f"<td>{rep.raised} raised, {rep.acknowledged} acknowledged, "
            f"{rep.cleared} cleared</td>"
            f"<td>{_count(rep.acted_on, 'advisory', 'advisories')}{med}</td>"
            f"<td>{_count(rep.helped, 'advisory', 'advisories')}</td></tr>")
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
        parts.append(_plots(rep, tz, start, end))
        if rep.advisories:
            parts.append(_advisories_html(rep, tz, end))
        parts.append("</section>")
    parts.append("<p class=note>Generated by thermowarden. Methods: ISO 7730:2005, "
                 "EN 16798-1:2019, ISO 7243:2017, ASHRAE 55-2020.</p></body></html>")
    return "\n".join(parts)


def timeline_spans(rep: SpaceReport, start: float, end: float
                   ) -> list[tuple[int, float, float, str]]:
    """(row, from, to, priority) of each level of each advisory of ``rep`` (epoch s), within
    the period and never past the end of the data (an advisory live when the data stop
    ends there)."""
    data_end = min(end, rep.data_end if rep.data_end is not None else end)
    out = []
    for k, a in enumerate(rep.advisories):
        stop = min(a["cleared"] or data_end, data_end)
        levels = a["levels"]
        for j, lv in enumerate(levels):
            t0 = max(lv["from"], start)
            t1 = min(levels[j + 1]["from"] if j + 1 < len(levels) else stop, stop)
            if t1 > t0:
                out.append((k, t0, t1, str(lv["priority"])))
    return out


def rule_words(a: dict[str, Any]) -> str:
    """The words for an advisory's rule on the timeline: the rule's title (the section is
    the space's), else its name made readable."""
    if a.get("rule_title"):
        return str(a["rule_title"])
    return str(a["rule"]).rsplit(".", 1)[-1].replace("_", " ").capitalize()


def rule_titles(config: SiteConfig, base: str | os.PathLike[str] | None = None
                ) -> dict[str, str]:
    """Rule (``pack.id``) -> its title, for the rule packs the site's spaces use."""
    from thermowarden.rules import load_rule_packs

    names = {p for s in config.spaces for p in config.rule_packs(s)}
    packs = load_rule_packs(names, config.rule_dirs, base)
    return {r.key: r.config.title for pack in packs.values() for r in pack.rules}


def _advisories_html(rep: SpaceReport, tz: dt.tzinfo, end: float) -> str:
    """The space's advisories, one row per level each reached (its title and priority at
    that level), then who acknowledged it and when, when its advice was acted on, when it
    cleared (or that it was still live at the end of the data) and the effect."""
    e = html.escape

    def when(t: float | None) -> str:
        return "-" if t is None else f"{dt.datetime.fromtimestamp(t, tz):%H:%M}"

    data_end = min(end, rep.data_end if rep.data_end is not None else end)
    out = ["<div class=wide><table class=advisories><tr><th>advisory, at each level</th>"
           "<th>priority</th><th>from</th><th>acknowledged</th><th>advice acted on</th>"
           "<th>cleared</th><th>effect</th></tr>"]
    for a in rep.advisories:
        n = len(a["levels"])
        ack = "-"
        if a["acknowledged"] is not None:
            ack = when(a["acknowledged"]) + (f" by {a['acknowledged_by']}"
                                             if a["acknowledged_by"] else "")
        cleared = (when(a["cleared"]) if a["cleared"] is not None
                   else f"live at the end of the data ({when(data_end)})")
        tail = (f"<td rowspan={n}>{e(ack)}</td><td rowspan={n}>{when(a['acted'])}</td>"
                f"<td rowspan={n}>{e(cleared)}</td><td rowspan={n}>{e(_effect_text(a))}</td>")
        for j, lv in enumerate(a["levels"]):
            out.append(f"<tr><td>{e(lv['title'])}</td><td>{e(lv['priority'])}</td>"
                       f"<td>{when(lv['from'])}</td>{tail if j == 0 else ''}</tr>")
    out.append("</table></div>")
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


def last_stored_time(db_path: str | os.PathLike[str]) -> float | None:
    """The time of the last stored sample or event (epoch s), None when the store has
    neither: the end of the data, from which ``report`` takes its default day."""
    import sqlite3

    db = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True, timeout=30.0)
    try:
        t_sample = db.execute("SELECT max(t) FROM samples").fetchone()[0]
        t_event = db.execute("SELECT max(at) FROM events").fetchone()[0]
    finally:
        db.close()
    known = [float(t) for t in (t_sample, t_event) if t is not None]
    return max(known) if known else None


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
