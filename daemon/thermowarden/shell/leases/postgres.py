"""Shard leases in PostgreSQL (client: psycopg 3), for sites whose broker is not nats-server.

Two tables in one schema (``group.store.schema``, created when missing):

- ``leases(grp, shard, holder, epoch, expires_at)``: one row per shard of a group. *Take*
  is one statement: insert the row, or update it only where it has expired
  (``expires_at <= now()``), adding one to ``epoch``; *renew* is one conditional UPDATE that
  moves ``expires_at`` on only while the row still names this holder and epoch and has not
  expired; *release* empties the holder and ends the lease at once. Every comparison uses
  the server's clock (``now()``), so the instances' clocks never decide who holds what.
  Two instances racing for a row are ordered by its row lock: the second re-reads the row
  the first wrote and finds it live.
- ``presence(grp, instance, expires_at)``: one row per instance, moved on at every round.

The epoch counts takes: every change of holder (and a holder taking its own expired
lease again) adds one, so it only grows.

Each call is one autocommit statement. The connection is opened again after an error;
``connect_timeout``, ``statement_timeout`` and ``tcp_user_timeout`` bound how long a call
can block (a lost server or a partition is then an error, not a hang).
"""

from __future__ import annotations

import contextlib
import math
import time
from collections.abc import Callable, Iterable
from typing import Any

import psycopg
from psycopg import sql

from thermowarden.shell.leases.base import Lease, LeaseStoreError


class PostgresLeaseStore:
    """See the module docstring. ``dsn``: a libpq connection string or URL."""

    def __init__(self, dsn: str, group: str, ttl_s: float, *, schema: str = "thermowarden",
                 timeout_s: float | None = None,
                 mono: Callable[[], float] = time.monotonic) -> None:
        self.dsn = dsn
        self.group = group
        self.ttl_s = float(ttl_s)
        self.schema = schema
        self.timeout_s = timeout_s if timeout_s is not None else max(0.5, min(2.0,
                                                                              ttl_s / 5))
        self.mono = mono
        self._conn: psycopg.Connection[Any] | None = None
        s = sql.Identifier(schema)
        self._leases = sql.SQL("{}.leases").format(s)
        self._presence = sql.SQL("{}.presence").format(s)

    # ------------------------------------------------------------------ connection
    def open(self) -> None:
        conn = self._connect()
        ddl = [sql.SQL("CREATE SCHEMA IF NOT EXISTS {}").format(sql.Identifier(self.schema)),
               sql.SQL("CREATE TABLE IF NOT EXISTS {} (grp text NOT NULL, shard text NOT NULL,"
                       " holder text NOT NULL DEFAULT '', epoch bigint NOT NULL DEFAULT 0,"
                       " expires_at timestamptz NOT NULL DEFAULT '-infinity',"
                       " PRIMARY KEY (grp, shard))").format(self._leases),
               sql.SQL("CREATE TABLE IF NOT EXISTS {} (grp text NOT NULL, instance text NOT "
                       "NULL, expires_at timestamptz NOT NULL, PRIMARY KEY (grp, instance))"
                       ).format(self._presence)]
        for attempt in range(3):
            try:
                for statement in ddl:
                    conn.execute(statement)
                return
            except psycopg.errors.UniqueViolation:
                # two instances creating the schema at once: the other one won; again
                if attempt == 2:
                    raise LeaseStoreError("could not create the lease tables") from None
            except psycopg.Error as exc:
                self._drop()
                raise LeaseStoreError(f"PostgreSQL: {exc}".strip()) from exc

    def _connect(self) -> psycopg.Connection[Any]:
        if self._conn is not None and not self._conn.closed:
            return self._conn
        ms = int(self.timeout_s * 1000)
        try:
            self._conn = psycopg.connect(
                self.dsn, autocommit=True, connect_timeout=max(1, math.ceil(self.timeout_s)),
                options=f"-c statement_timeout={ms} -c lock_timeout={ms}",
                tcp_user_timeout=ms, keepalives=1, keepalives_idle=1, keepalives_interval=1,
                keepalives_count=max(1, math.ceil(self.timeout_s)),
                application_name="thermowarden-leases")
        except psycopg.Error as exc:
            raise LeaseStoreError(f"PostgreSQL: {exc}".strip()) from exc
        return self._conn

    def _drop(self) -> None:
        if self._conn is not None:
            with contextlib.suppress(Exception):
                self._conn.close()
        self._conn = None

    def close(self) -> None:
        self._drop()

    def _rows(self, query: sql.Composed, params: dict[str, Any]) -> list[tuple[Any, ...]]:
        conn = self._connect()
        try:
            cur = conn.execute(query, params)
            return cur.fetchall() if cur.description is not None else []
        except psycopg.Error as exc:
            self._drop()  # open again at the next call
            raise LeaseStoreError(f"PostgreSQL: {exc}".strip()) from exc

    # ------------------------------------------------------------------ leases
    def take(self, shard: str, holder: str) -> Lease | None:
        t0 = self.mono()
        rows = self._rows(sql.SQL(
            "INSERT INTO {t} AS l (grp, shard, holder, epoch, expires_at)"
            " VALUES (%(g)s, %(s)s, %(h)s, 1, now() + make_interval(secs => %(ttl)s))"
            " ON CONFLICT (grp, shard) DO UPDATE SET holder = excluded.holder,"
            " epoch = l.epoch + 1, expires_at = excluded.expires_at"
            " WHERE l.expires_at <= now() RETURNING l.epoch").format(t=self._leases),
            {"g": self.group, "s": shard, "h": holder, "ttl": self.ttl_s})
        if not rows:
            return None
        return Lease(shard, holder, int(rows[0][0]), t0 + self.ttl_s)

    def renew(self, lease: Lease) -> Lease | None:
        t0 = self.mono()
        rows = self._rows(sql.SQL(
            "UPDATE {t} SET expires_at = now() + make_interval(secs => %(ttl)s)"
            " WHERE grp = %(g)s AND shard = %(s)s AND holder = %(h)s AND epoch = %(e)s"
            " AND expires_at > now() RETURNING epoch").format(t=self._leases),
            {"g": self.group, "s": lease.shard, "h": lease.holder, "e": lease.epoch,
             "ttl": self.ttl_s})
        if not rows:
            return None
        return Lease(lease.shard, lease.holder, lease.epoch, t0 + self.ttl_s)

    def release(self, lease: Lease) -> None:
        self._rows(sql.SQL(
            "UPDATE {t} SET holder = '', expires_at = '-infinity'"
            " WHERE grp = %(g)s AND shard = %(s)s AND holder = %(h)s AND epoch = %(e)s"
            ).format(t=self._leases),
            {"g": self.group, "s": lease.shard, "h": lease.holder, "e": lease.epoch})

    def read(self, shards: Iterable[str]) -> dict[str, Lease]:
        t0 = self.mono()
        rows = self._rows(sql.SQL(
            "SELECT shard, holder, epoch, extract(epoch FROM expires_at - now())::float8"
            " FROM {t} WHERE grp = %(g)s AND shard = ANY(%(s)s) AND expires_at > now()"
            " AND holder <> ''").format(t=self._leases),
            {"g": self.group, "s": list(shards)})
        return {r[0]: Lease(r[0], r[1], int(r[2]), t0 + float(r[3])) for r in rows}

    # ------------------------------------------------------------------ presence
    def announce(self, instance: str) -> None:
        self._rows(sql.SQL(
            "INSERT INTO {t} (grp, instance, expires_at)"
            " VALUES (%(g)s, %(i)s, now() + make_interval(secs => %(ttl)s))"
            " ON CONFLICT (grp, instance) DO UPDATE SET expires_at = excluded.expires_at"
            ).format(t=self._presence), {"g": self.group, "i": instance, "ttl": self.ttl_s})

    def withdraw(self, instance: str) -> None:
        self._rows(sql.SQL("DELETE FROM {t} WHERE grp = %(g)s AND instance = %(i)s").format(
            t=self._presence), {"g": self.group, "i": instance})

    def present(self) -> set[str]:
        rows = self._rows(sql.SQL(
            "SELECT instance FROM {t} WHERE grp = %(g)s AND expires_at > now()").format(
            t=self._presence), {"g": self.group})
        return {str(r[0]) for r in rows}
