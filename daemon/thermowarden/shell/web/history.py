"""Read-only access to the service's SQLite store from the web thread.

The store's own connection belongs to the engine thread; the web opens its own read-only
connections (SQLite in WAL mode lets readers and the one writer work at the same time).
Report samples are stored every 5 minutes with one array per index across all spaces;
:meth:`StoreReader.history` picks one space's column out of each.
"""

from __future__ import annotations

import json
import pathlib
import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from thermowarden.core import catalogue

SAMPLE_FIELDS: dict[str, tuple[str, str]] = {
    e.name: (e.kept, e.unit) for e in catalogue.kept() if e.categories is None and e.unit}
"""Fields of a space's history, API name (the catalogue's name) -> (key of the stored
sample, unit): every number the catalogue keeps. Samples written before a field existed
give null."""

OLDER_NAMES: dict[str, str] = {"pmv": "pmv_iso", "wbgt": "wbgt_effective"}
"""Names the history API gave two fields before they took their index's name, still given
(the same values) for the clients that read them."""

UNITS: dict[str, str] = {name: unit for name, (_, unit) in SAMPLE_FIELDS.items()} | {
    old: SAMPLE_FIELDS[name][1] for old, name in OLDER_NAMES.items()}
"""The unit of every field of the history."""

MAX_PERIOD_S = 8 * 86_400.0
HISTORY_DEFAULT_S = 86_400.0
"""A space's page, and the API without ``from``, give this much of the history (s)."""
EVENTS_LIMIT = 1000


class StoreReader:
    """See the module docstring. ``path`` is the service's database file."""

    def __init__(self, path: str | pathlib.Path) -> None:
        self.path = pathlib.Path(path)

    @contextmanager
    def _db(self) -> Iterator[sqlite3.Connection]:
        db = sqlite3.connect(f"file:{self.path}?mode=ro", uri=True, timeout=5.0)
        try:
            yield db
        finally:
            db.close()

    def history(self, space_id: str, start: float, end: float) -> list[dict[str, Any]]:
        """One record per stored sample of ``space_id`` in [start, end): ``t`` (epoch s) and
        every field of :data:`SAMPLE_FIELDS` (null where absent), and of
        :data:`OLDER_NAMES`."""
        with self._db() as db:
            rows = db.execute("SELECT record FROM samples WHERE t >= ? AND t < ? ORDER BY t",
                              (start, end)).fetchall()
        out: list[dict[str, Any]] = []
        for (text,) in rows:
            rec = json.loads(text)
            try:
                i = rec["spaces"].index(space_id)
            except ValueError:
                continue
            item: dict[str, Any] = {"t": float(rec["t"])}
            for name, (key, _) in SAMPLE_FIELDS.items():
                col = rec.get(key)
                v = col[i] if isinstance(col, list) and i < len(col) else None
                item[name] = v if isinstance(v, int | float) and not isinstance(v, bool) \
                    else None
            for old, name in OLDER_NAMES.items():
                item[old] = item[name]
            out.append(item)
        return out

    def events(self, since: float, limit: int = EVENTS_LIMIT, space_id: str | None = None,
               audience: str | None = None) -> list[dict[str, Any]]:
        """Stored events at or after ``since``, oldest first, at most ``limit``."""
        with self._db() as db:
            rows = db.execute("SELECT payload FROM events WHERE at >= ? ORDER BY seq",
                              (since,)).fetchall()
        out: list[dict[str, Any]] = []
        for (text,) in rows:
            ev = json.loads(text)
            adv = ev.get("advisory")
            if space_id is not None and (adv is None or adv["space"]["id"] != space_id):
                continue
            aud = adv["audience"] if adv is not None else ev.get("audience")
            if audience is not None and aud != audience:
                continue
            out.append(ev)
            if len(out) >= limit:
                break
        return out

    def last_advisory(self, advisory_id: str) -> dict[str, Any] | None:
        """The advisory as its latest stored event left it (also after it cleared)."""
        with self._db() as db:
            row = db.execute("SELECT payload FROM events WHERE key = ? ORDER BY seq DESC "
                             "LIMIT 1", (advisory_id,)).fetchone()
        if row is None:
            return None
        adv: dict[str, Any] | None = json.loads(row[0]).get("advisory")
        return adv
