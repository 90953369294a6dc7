"""The SQLite store (WAL): live advisories with their timers, the event history, the daily
outdoor means, and the outbox of events the broker has not yet acknowledged.

Only the engine thread uses a :class:`Store` (SQLite connections are not shared between
threads here). Writes outside :meth:`Store.transaction` are committed at once; inside it,
an advisory change, its events and their outbox rows are committed together, so a crash
never leaves a live advisory whose event will not be sent.

The folder is created 0700 and the files 0600 (they hold who acknowledged what). At start
the file is checked (``PRAGMA quick_check``) and written to once (a write that is rolled
back), and :meth:`Store.check_records` reads every record the service reads at start (live
advisories, the outbox, the key-value rows, the stored deliveries) and checks that each is
JSON of the expected shape. A file that cannot be opened or written, is not a database,
fails the check or holds a damaged record raises :class:`StoreError` with one line naming
the file (and the table and row) and what to do; :func:`move_aside` sets a damaged store
aside so the service can start empty (the site configuration is a separate file and is
not touched).
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import pathlib
import sqlite3
import time
import urllib.parse
from collections.abc import Iterator
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

DELIVERIES_SCHEMA = """
CREATE TABLE IF NOT EXISTS deliveries (
    seq INTEGER PRIMARY KEY AUTOINCREMENT,
    id TEXT NOT NULL,
    audience TEXT NOT NULL,
    channel TEXT NOT NULL,
    state TEXT NOT NULL,          -- held (quiet hours or digest), pending, failed
    priority TEXT NOT NULL,
    due REAL NOT NULL,
    attempts INTEGER NOT NULL DEFAULT 0,
    created REAL NOT NULL,
    payload TEXT NOT NULL,
    error TEXT
);
CREATE INDEX IF NOT EXISTS deliveries_due ON deliveries(state, due);
CREATE TABLE IF NOT EXISTS escalations (
    advisory_id TEXT PRIMARY KEY,
    route TEXT NOT NULL,          -- where it goes when due: <audience>[@building]!escalation
    since REAL NOT NULL,          -- when the urgent alert was seen (service clock)
    due REAL NOT NULL,
    state TEXT NOT NULL,          -- waiting, sent
    payload TEXT NOT NULL
);
"""
"""Deliveries by webhook and e-mail (:mod:`thermowarden.shell.delivery`): written by the
engine thread in the same transaction as the event's outbox row, sent and removed by the
delivery workers; with them the escalation timers of urgent alerts."""

OUTBOX_COUNT = "SELECT COUNT(*) FROM outbox"
MOVE_ASIDE_HINT = ("start once with --move-damaged-store to keep it aside as "
                   "<file>.damaged-<time> and begin with an empty store")

DELIVERY_CHANNELS = frozenset({"webhook", "email"})
DELIVERY_STATES = frozenset({"held", "pending", "failed"})


class StoreError(RuntimeError):
    """The store cannot be used; the message is one line naming the file and what to do.
    ``damaged``: its content is damaged (``--move-damaged-store`` helps), as opposed to a
    file the service may not open or write (which moving aside would not mend)."""

    def __init__(self, message: str, damaged: bool = False) -> None:
        super().__init__(message)
        self.damaged = damaged


def damaged_record(path: pathlib.Path, table: str, row: object, problem: str) -> StoreError:
    """The error for one damaged record: the file, table and row, what is wrong, what to do."""
    return StoreError(f"store {path}: table {table}, row {row}: {problem}; {MOVE_ASIDE_HINT}",
                      damaged=True)


def _json(path: pathlib.Path, table: str, row: object, text: object) -> Any:
    """A stored JSON text, or :class:`StoreError` naming the row."""
    if not isinstance(text, str):
        raise damaged_record(path, table, row, f"the record is {type(text).__name__}, "
                                               "not JSON text")
    try:
        return json.loads(text)
    except (ValueError, RecursionError) as exc:
        raise damaged_record(path, table, row, f"the record is not JSON ({_one_line(exc)})") \
            from None


def _object(path: pathlib.Path, table: str, row: object, text: object) -> dict[str, Any]:
    value = _json(path, table, row, text)
    if not isinstance(value, dict):
        raise damaged_record(path, table, row, "the record is not a JSON object")
    return value


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split()) or type(exc).__name__


def move_aside(path: str | pathlib.Path, now: float | None = None) -> pathlib.Path | None:
    """Rename a (damaged) store and its WAL files to ``<name>.damaged-<UTC time>`` (kept,
    never deleted); returns the new path of the database, or None when there was no file.
    Raises :class:`StoreError` when it cannot be renamed."""
    p = pathlib.Path(path)
    if not p.exists():
        return None
    t = time.time() if now is None else now
    stamp = time.strftime("%Y%m%dT%H%M%SZ", time.gmtime(t))
    target = p.with_name(f"{p.name}.damaged-{stamp}")
    n = 1
    while target.exists():
        n += 1
        target = p.with_name(f"{p.name}.damaged-{stamp}-{n}")
    try:
        for suffix in ("-wal", "-shm"):
            side = p.with_name(p.name + suffix)
            if side.exists():
                side.rename(target.with_name(target.name + suffix))
        p.rename(target)
    except OSError as exc:
        raise StoreError(f"store {p} could not be moved aside ({_one_line(exc)}); give the "
                         "service's user write access to its folder, or move it by hand") \
            from None
    return target


def count_rows(path: str | pathlib.Path, sql: str) -> float:
    """Run a ``SELECT COUNT(*)`` on the store through a connection of its own (any thread;
    for gauges read when /metrics is asked); NaN when the file cannot be read. Never
    creates the file."""
    try:
        db = sqlite3.connect(f"file:{urllib.parse.quote(str(path))}?mode=rw", uri=True,
                             timeout=2.0)
    except sqlite3.Error:
        return math.nan
    try:
        return float(db.execute(sql).fetchone()[0])
    except sqlite3.Error:
        return math.nan
    finally:
        db.close()


class Store:
    """See the module docstring. ``path`` is the database file (created with its folder)."""

    def __init__(self, path: str | pathlib.Path) -> None:
        p = pathlib.Path(path)
        self.path = p
        for f in (p.parent, p, p.with_name(p.name + "-wal"), p.with_name(p.name + "-shm")):
            # (os.access also answers for root: an immutable file is not writable)
            if f.exists() and not os.access(f, os.W_OK | (os.X_OK if f.is_dir() else 0)):
                which = f"store {p} is" if f == p else f"store {p}: {f} is"
                raise StoreError(f"{which} read-only; the service writes to its "
                                 "store: give the service's user write access to the file, "
                                 "its -wal and -shm files and its folder (chown, chmod; "
                                 "chattr -i if it is immutable), or point --state-dir "
                                 "elsewhere")
        try:
            if not p.parent.exists():
                p.parent.mkdir(parents=True, mode=0o700)
            elif p.parent.stat().st_uid == os.geteuid():
                p.parent.chmod(0o700)
            if not p.exists():
                os.close(os.open(p, os.O_CREAT | os.O_WRONLY, 0o600))
            elif p.stat().st_uid == os.geteuid():
                p.chmod(0o600)
        except OSError as exc:
            raise StoreError(f"store {p}: {_one_line(exc)}; check that the state directory "
                             "exists and belongs to the service's user") from None
        old_umask = os.umask(0o077)  # the WAL and shared-memory files too
        try:
            self.db = sqlite3.connect(str(p), isolation_level=None, check_same_thread=False)
            self.db.execute("PRAGMA journal_mode=WAL")
            self.db.execute("PRAGMA synchronous=NORMAL")
            row = self.db.execute("PRAGMA quick_check").fetchone()
            if row is None or row[0] != "ok":
                self.db.close()
                raise StoreError(f"store {p} is damaged (integrity check: "
                                 f"{_one_line(Exception(row[0] if row else 'no answer'))}); "
                                 + MOVE_ASIDE_HINT, damaged=True)
            self.db.executescript(SCHEMA + DELIVERIES_SCHEMA)
            # a file opened read-only (by its mode, an immutable flag, a read-only mount)
            # passes every read: write once, then roll back, so it fails here and not at
            # the first advisory
            self.db.execute("BEGIN IMMEDIATE")
            try:
                self.db.execute("INSERT OR REPLACE INTO kv(key, value) "
                                "VALUES('.write-check', 'null')")
            finally:
                self.db.execute("ROLLBACK")
        except sqlite3.DatabaseError as exc:
            with contextlib.suppress(Exception):
                self.db.close()
            text = _one_line(exc)
            if "readonly" in text.replace(" ", "").replace("-", "") or "read only" in text:
                raise StoreError(f"store {p} is read-only ({text}); give the service's user "
                                 "write access to it and its folder") from None
            if "unable to open" in text:
                raise StoreError(f"store {p} cannot be opened ({text}); check the state "
                                 "directory and its permissions") from None
            raise StoreError(f"store {p} is damaged ({text}); {MOVE_ASIDE_HINT}",
                             damaged=True) from None
        finally:
            os.umask(old_umask)

    @contextlib.contextmanager
    def transaction(self) -> Iterator[None]:
        """Everything written inside is committed together (or not at all)."""
        if self.db.in_transaction:
            yield
            return
        self.db.execute("BEGIN IMMEDIATE")
        try:
            yield
        except BaseException:
            self.db.execute("ROLLBACK")
            raise
        self.db.execute("COMMIT")

    # advisories
    def put_advisory(self, key: str, record: dict[str, Any] | None) -> None:
        if record is None:
            self.db.execute("DELETE FROM advisories WHERE key = ?", (key,))
        else:
            self.db.execute("INSERT INTO advisories(key, record) VALUES(?, ?) "
                            "ON CONFLICT(key) DO UPDATE SET record = excluded.record",
                            (key, json.dumps(record)))

    def advisories(self) -> list[dict[str, Any]]:
        """The live advisories' records; :class:`StoreError` names a row that is not a
        JSON object (the engine checks the rest of their shape when it restores them)."""
        out: list[dict[str, Any]] = []
        for key, text in self.db.execute("SELECT key, record FROM advisories ORDER BY key"):
            record = _object(self.path, "advisories", repr(key), text)
            if not (isinstance(record.get("space"), str) and isinstance(record.get("rule"), str)
                    and isinstance(record.get("payload"), dict)):
                raise damaged_record(self.path, "advisories", repr(key),
                                     "the record lacks its space, rule or payload")
            out.append(record)
        return out

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
        """Rows in the outbox, counted in the table (never a running tally that could
        drift from it)."""
        return int(self.db.execute(OUTBOX_COUNT).fetchone()[0])

    def outbox_rebase(self, step_s: float) -> None:
        """The wall clock was stepped by ``step_s``: move the rows' creation times with it,
        so that their age (and expiry) goes by the monotonic clock."""
        self.db.execute("UPDATE outbox SET created = created + ?", (step_s,))

    def outbox_expire(self, older_than: float, keep: int) -> list[tuple[int, dict[str, Any]]]:
        """Remove rows created before ``older_than`` and, beyond the newest ``keep`` rows, the
        oldest ones; returns their payloads (the caller counts and reports them)."""
        with self.transaction():
            total = int(self.db.execute("SELECT COUNT(*) FROM outbox").fetchone()[0])
            over = max(0, total - max(keep, 0))
            rows = self.db.execute(
                "SELECT seq, payload FROM outbox WHERE created < ? UNION "
                "SELECT seq, payload FROM (SELECT seq, payload FROM outbox ORDER BY seq "
                "LIMIT ?) ORDER BY seq", (older_than, over)).fetchall()
            self.db.executemany("DELETE FROM outbox WHERE seq = ?", [(r[0],) for r in rows])
        return [(int(r[0]), json.loads(r[1])) for r in rows]

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
        return _json(self.path, "kv", repr(key), row[0]) if row else default

    def daily_means(self) -> list[float] | None:
        """The stored daily outdoor means (newest first, degC), or None; a value of any
        other shape is a damaged record (:class:`StoreError`)."""
        value = self.get("daily_means")
        if value is None:
            return None
        if not isinstance(value, list) or not all(
                isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)
                for v in value):
            raise damaged_record(self.path, "kv", repr("daily_means"),
                                 "expected a list of numbers (daily outdoor means, degC)")
        return [float(v) for v in value]

    # ------------------------------------------------------------------ start-up check
    def check_records(self) -> None:
        """Read every record the service reads at start and check its shape: live
        advisories (JSON objects), the outbox (a topic and a JSON object), the key-value
        rows (JSON; the daily means a list of numbers) and the stored deliveries (a known
        channel and state, numbers where numbers belong, a JSON object). Raises
        :class:`StoreError` naming the file, table and row of the first damaged one."""
        try:
            self._check_records()
        except sqlite3.DatabaseError as exc:
            raise StoreError(f"store {self.path} is damaged ({_one_line(exc)}); "
                             + MOVE_ASIDE_HINT, damaged=True) from None

    def _check_records(self) -> None:
        self.advisories()
        for seq, topic, text in self.db.execute("SELECT seq, topic, payload FROM outbox "
                                                "ORDER BY seq"):
            if not isinstance(topic, str) or not topic:
                raise damaged_record(self.path, "outbox", seq, "the topic is not text")
            _object(self.path, "outbox", seq, text)
        for key, text in self.db.execute("SELECT key, value FROM kv ORDER BY key"):
            _json(self.path, "kv", repr(key), text)
        self.daily_means()
        for seq, did, audience, channel, state, due, attempts, created, text in self.db.execute(
                "SELECT seq, id, audience, channel, state, due, attempts, created, payload "
                "FROM deliveries ORDER BY seq"):
            problem = None
            if not (isinstance(did, str) and isinstance(audience, str)):
                problem = "the id or audience is not text"
            elif channel not in DELIVERY_CHANNELS:
                problem = f"unknown channel {str(channel)[:40]!r} (webhook or email)"
            elif state not in DELIVERY_STATES:
                problem = f"unknown state {str(state)[:40]!r} (held, pending or failed)"
            elif not all(isinstance(v, int | float) for v in (due, created)) \
                    or not isinstance(attempts, int):
                problem = "due, created or attempts is not a number"
            if problem is not None:
                raise damaged_record(self.path, "deliveries", seq, problem)
            _object(self.path, "deliveries", seq, text)

    def close(self) -> None:
        self.db.close()
