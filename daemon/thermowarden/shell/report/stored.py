"""Reports from the service's store: its samples and events read through a read-only
connection of their own, and the daily files of a site and of each building or area."""

from __future__ import annotations

import json
import os
import pathlib
from collections.abc import Iterator
from typing import Any

from thermowarden.config import SiteConfig
from thermowarden.shell.report.document import render_html
from thermowarden.shell.report.numbers import PLOT_LIMIT, build_report


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
