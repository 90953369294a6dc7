"""The numbers of a periodic report, from stored 5-minute samples and advisory events.

Per space: hours in each comfort category (ISO 7730 from PPD; EN 16798-1 adaptive
categories for naturally ventilated spaces) over the hours it was occupied, hours with the
60-minute WBGT above the action level (unacclimatised reference) and above the limit
(acclimatised reference), advisories raised, acknowledged and cleared and how long they
took to be acted on, and the series its plots are drawn from; the roll-up by building and
floor. Times are epoch seconds, hours are hours.
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

SAMPLE_GAP_MAX_S = 900.0
"""A sample counts for the time to the next one, but never more than 15 minutes."""
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
