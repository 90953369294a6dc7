"""The SQLite store (WAL): live advisories with their timers, the event history, the daily
outdoor means, and the outbox of events the broker has not yet acknowledged.

Only the engine thread uses a :class:`Store` (SQLite connections are not shared between
threads here). Every write is committed at once: a SIGKILL loses nothing already stored.
"""

from __future__ import annotations

import json
import pathlib
import sqlite3
from typing import Any

SCHEMA = """
CREATE TABLE IF NOT EXISTS advisories (
    key TEXT PRIMARY KEY,
    record TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS events (
    seq INTEGER PRIMARY KEY AUTOINCREMENT,
    key TEXT NOT NULL,
    at REAL NOT NULL,
    payload TEXT NOT NULL
);
CREATE INDEX IF NOT EXISTS events_at ON events(at);
CREATE TABLE IF NOT EXISTS outbox (
    seq INTEGER PRIMARY KEY AUTOINCREMENT,
    topic TEXT NOT NULL,
    payload TEXT NOT NULL,
    created REAL NOT NULL
);
CREATE TABLE IF NOT EXISTS samples (
    t REAL PRIMARY KEY,
    record TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS kv (
    key TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
"""


class Store:
    """See the module docstring. ``path`` is the database file (created with its folder)."""

    def __init__(self, path: str | pathlib.Path) -> None:
        p = pathlib.Path(path)
        p.parent.mkdir(parents=True, exist_ok=True)
        self.path = p
        self.db = sqlite3.connect(str(p), isolation_level=None, check_same_thread=False)
        self.db.execute("PRAGMA journal_mode=WAL")
        self.db.execute("PRAGMA synchronous=NORMAL")
        self.db.executescript(SCHEMA)

    # advisories
    def put_advisory(self, key: str, record: dict[str, Any] | None) -> None:
        if record is None:
            self.db.execute("DELETE FROM advisories WHERE key = ?", (key,))
        else:
            self.db.execute("INSERT INTO advisories(key, record) VALUES(?, ?) "
                            "ON CONFLICT(key) DO UPDATE SET record = excluded.record",
                            (key, json.dumps(record)))

    def advisories(self) -> list[dict[str, Any]]:
        rows = self.db.execute("SELECT record FROM advisories ORDER BY key").fetchall()
        return [json.loads(r[0]) for r in rows]

    # events
    def add_event(self, key: str, at: float, payload: dict[str, Any]) -> None:
        self.db.execute("INSERT INTO events(key, at, payload) VALUES(?, ?, ?)",
                        (key, at, json.dumps(payload)))

    def events_between(self, start: float, end: float) -> list[dict[str, Any]]:
        rows = self.db.execute("SELECT payload FROM events WHERE at >= ? AND at < ? ORDER BY seq",
                               (start, end)).fetchall()
        return [json.loads(r[0]) for r in rows]

    def prune_events(self, older_than: float) -> int:
        cur = self.db.execute("DELETE FROM events WHERE at < ?", (older_than,))
        return cur.rowcount

    # outbox
    def outbox_add(self, topic: str, payload: dict[str, Any], now: float) -> int:
        cur = self.db.execute("INSERT INTO outbox(topic, payload, created) VALUES(?, ?, ?)",
                              (topic, json.dumps(payload), now))
        seq = cur.lastrowid
        assert seq is not None
        return seq

    def outbox_done(self, seq: int) -> None:
        self.db.execute("DELETE FROM outbox WHERE seq = ?", (seq,))

    def outbox(self) -> list[tuple[int, str, dict[str, Any]]]:
        rows = self.db.execute("SELECT seq, topic, payload FROM outbox ORDER BY seq").fetchall()
        return [(int(r[0]), str(r[1]), json.loads(r[2])) for r in rows]

    def outbox_depth(self) -> int:
        row = self.db.execute("SELECT COUNT(*) FROM outbox").fetchone()
        return int(row[0])

    # report samples
    def add_sample(self, t: float, record: dict[str, Any]) -> None:
        self.db.execute("INSERT OR REPLACE INTO samples(t, record) VALUES(?, ?)",
                        (t, json.dumps(record)))

    def samples_between(self, start: float, end: float) -> list[dict[str, Any]]:
        rows = self.db.execute("SELECT record FROM samples WHERE t >= ? AND t < ? ORDER BY t",
                               (start, end)).fetchall()
        return [json.loads(r[0]) for r in rows]

    def prune_samples(self, older_than: float) -> int:
        return self.db.execute("DELETE FROM samples WHERE t < ?", (older_than,)).rowcount

    # key-value (daily means)
    def put(self, key: str, value: Any) -> None:
        self.db.execute("INSERT INTO kv(key, value) VALUES(?, ?) "
                        "ON CONFLICT(key) DO UPDATE SET value = excluded.value",
                        (key, json.dumps(value)))

    def get(self, key: str, default: Any = None) -> Any:
        row = self.db.execute("SELECT value FROM kv WHERE key = ?", (key,)).fetchone()
        return json.loads(row[0]) if row else default

    def close(self) -> None:
        self.db.close()
