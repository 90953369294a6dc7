"""Reports from the service's store: its samples and events read through a read-only
connection of their own, the end of its data (the default day of ``report``), the titles of
the site's rules, and the daily files of a site and of each building or area."""

from __future__ import annotations

import json
import os
import pathlib
from collections.abc import Iterator
from typing import Any

from thermowarden.config import SiteConfig
from thermowarden.shell.report.document import render_html
from thermowarden.shell.report.numbers import PLOT_LIMIT, RuleFacts, ahead_figures, build_report


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


def rule_facts(config: SiteConfig, base: str | os.PathLike[str] | None = None) -> RuleFacts:
    """The titles of the rules of the packs the site's spaces use, and what each rule with
    ahead-of-time advice foresees (``base``: the site file, for relative rule folders)."""
    from thermowarden.rules import load_rule_packs

    names = {p for s in config.spaces for p in config.rule_packs(s)}
    packs = load_rule_packs(names, config.rule_dirs, base)
    rules = [r for pack in packs.values() for r in pack.rules]
    return RuleFacts({r.key: r.config.title for r in rules},
                     {r.key: (f.rule, f.priority) for r in rules
                      if (f := r.config.foresees) is not None})


def write_reports(config: SiteConfig, db_path: str | os.PathLike[str], folder: pathlib.Path,
                  start: float, end: float, label: str, rules: RuleFacts | None = None
                  ) -> list[pathlib.Path]:
    """The report of the period for the whole site (``<site>-<label>.html``: the roll-up by
    building and floor and a line per space) and, for a site with buildings or areas, one
    per building or area (``<site>-<label>-<building>.html``, with plots where it has at
    most :data:`PLOT_LIMIT` spaces). Reads the store through its own connection: meant
    for a thread or process other than the engine's. ``rules``: the rules' titles and what
    the ahead-of-time rules foresee (their measured figures are left out without it)."""
    groups: dict[str, list[str]] = {}
    for s in config.spaces:
        key = s.building or s.area
        if key is not None:
            groups.setdefault(key, []).append(s.id)
    plotted = set(config.spaces[i].id for i in range(len(config.spaces))) \
        if len(config.spaces) <= PLOT_LIMIT else {
            sid for ids in groups.values() if len(ids) <= PLOT_LIMIT for sid in ids}
    events = stored_events(db_path, start - 7 * 86_400, end)
    rules = rules or RuleFacts()
    reports = build_report(config, stored_samples(db_path, start, end), events, start, end,
                           plotted=plotted, titles=rules.titles)
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    site_file = folder / f"{config.site.id}-{label}.html"
    site_file.write_text(render_html(config, reports, start, end, rules=rules,
                                     ahead=ahead_figures(events, rules.foresees, start, end)),
                         encoding="utf-8")
    written.append(site_file)
    for key, ids in groups.items():
        part = {sid: reports[sid] for sid in ids if sid in reports}
        name = (config.level_name("building", None, key)
                if any(b.id == key for b in config.buildings) or
                not any(a.id == key for a in config.areas)
                else config.level_name("area", None, key))
        path = folder / f"{config.site.id}-{label}-{key}.html"
        path.write_text(render_html(config, part, start, end, scope=name, rules=rules,
                                    ahead=ahead_figures(events, rules.foresees, start, end,
                                                        only=set(ids))),
                        encoding="utf-8")
        written.append(path)
    return written
