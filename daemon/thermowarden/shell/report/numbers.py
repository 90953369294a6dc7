"""The numbers of a periodic report, from stored 5-minute samples and advisory events.

Per space: hours in each comfort category (ISO 7730 from PPD; EN 16798-1 adaptive
categories for naturally ventilated spaces) over the hours it was occupied, hours with the
60-minute WBGT above the action level (unacclimatised reference) and above the limit
(acclimatised reference), advisories raised, acknowledged and cleared and how long they
took to be acted on, and the series its plots are drawn from; the roll-up by building and
floor. Times are epoch seconds, hours are hours.

The heat-stress hours and the plotted 60-minute WBGT are the 60-minute time-weighted mean
(ISO 7243:2017), plus the clothing adjustment, only where that mean existed (at least 48 of
the last 60 minutes covered); the spot value is kept apart. An advisory is kept level by
level: each level's title with its own priority. Nothing runs past the end of the data.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Collection, Iterable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from thermowarden.config import SiteConfig
from thermowarden.core import catalogue
from thermowarden.core.ahead_summary import ahead_summary
from thermowarden.core.event_lines import event_line

PRIORITY_ORDER = ("low", "medium", "high", "urgent")
SAMPLE_GAP_MAX_S = 900.0
"""A sample counts for the time to the next one, but never more than 15 minutes."""
WBGT_60MIN = catalogue.BY_NAME["wbgt_mean_60min"].kept
WBGT_SPOT = catalogue.BY_NAME["wbgt_spot_adjusted"].kept
ISO_LABELS = ("A", "B", "C", "outside C")
EN_LABELS = ("I", "II", "III", "outside III")


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
    outdoor_lines: dict[str, list[float]] = field(default_factory=dict)
    """Index name -> its series, for the catalogue's outdoor chart."""
    hours_occupied: float = 0.0
    helped: int = 0
    data_end: float | None = None
    """The time of the last sample or advisory event of the report in the period (epoch s)."""


@dataclass(frozen=True)
class RuleFacts:
    """What a report needs of the site's rules: each rule's title (the words shown for it)
    and, per rule with ahead-of-time advice, the rule and priority it foresees."""

    titles: dict[str, str] = field(default_factory=dict)
    foresees: dict[str, tuple[str, str | None]] = field(default_factory=dict)


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
        wb, ru, ra = (take(WBGT_60MIN), take("ref_unacclimatised"),
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
    rep.wbgt.append(_f((sample.get(WBGT_60MIN) or [None] * (i + 1))[i]))
    rep.wbgt_spot.append(_f((sample.get(WBGT_SPOT) or [None] * (i + 1))[i]))
    rep.ref_u.append(_f(sample["ref_unacclimatised"][i]))
    rep.ref_a.append(_f(sample["ref_acclimatised"][i]))
    for e in catalogue.drawn("outdoor"):
        rep.outdoor_lines.setdefault(e.name, []).append(
            _f((sample.get(e.kept) or [None] * (i + 1))[i]))


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


def where_in_site(config: SiteConfig) -> dict[str, tuple[str, str]]:
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
    where = where_in_site(config)
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


def ahead_figures(events: list[dict[str, Any]], foresees: dict[str, tuple[str, str | None]],
                  start: float, end: float, only: Collection[str] | None = None
                  ) -> list[dict[str, Any]]:
    """Measured, not promised: per rule with ahead-of-time advice, the crossings of the
    period (and of the spaces ``only``, None: all) it foresaw, its lead times, its advisories
    withdrawn or never followed by the crossing, and the crossings that came with no warning
    (the figures of ``replay --summary``: :func:`thermowarden.core.ahead_summary.ahead_summary`
    over the period). ``events``: the stored advisory events, as published (those before
    the period too: an advisory raised before it may foresee a crossing in it; those after
    it are left out, as a store read up to the end gives them)."""
    lines = [event_line(e) for e in events
             if e.get("event") != "summary" and "advisory" in e and _ts(e["at"]) < end
             and (only is None or e["advisory"]["space"]["id"] in only)]
    return ahead_summary(lines, foresees, end, start=start)
