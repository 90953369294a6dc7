"""Helpers of the group tests: a sensor feeder, the lease table as the store has it, and the
invariants every group test checks on what a consumer received."""

from __future__ import annotations

import json
import threading
import time
from collections.abc import Callable

import psycopg
from psycopg import sql

from tests.shell.conftest import Collector
from tests.shell.lease_parts import PG_DSN


class Feeder:
    """Publishes every space's readings every ``every_s`` from ``values()`` (topic ->
    payload), on its own thread, until stopped. A sensor network does the same."""

    def __init__(self, client: Collector, values: Callable[[], dict[str, str]],
                 every_s: float = 0.5) -> None:
        self.client = client
        self.values = values
        self.every_s = every_s
        self.stopped = threading.Event()
        self.thread = threading.Thread(target=self._run, daemon=True)

    def start(self) -> Feeder:
        self.thread.start()
        return self

    def _run(self) -> None:
        while not self.stopped.is_set():
            for topic, payload in self.values().items():
                self.client.client.publish(topic, payload, qos=0)
            self.stopped.wait(self.every_s)

    def stop(self) -> None:
        self.stopped.set()
        self.thread.join(10)


def pg_holders(schema: str, group: str = "g") -> dict[str, tuple[str, int]]:
    """Shard -> (holder, epoch) of the live leases in the PostgreSQL table."""
    with psycopg.connect(PG_DSN, autocommit=True) as conn:
        try:
            rows = conn.execute(sql.SQL(
                "SELECT shard, holder, epoch FROM {}.leases WHERE grp = %s AND "
                "expires_at > now() AND holder <> ''").format(sql.Identifier(schema)),
                (group,)).fetchall()
        except psycopg.errors.UndefinedTable:
            return {}
    return {r[0]: (r[1], int(r[2])) for r in rows}


def wait_until(predicate: Callable[[], bool], timeout: float) -> float | None:
    """Monotonic time at which ``predicate`` first held (polled every 20 ms), or None."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return time.monotonic()
        time.sleep(0.02)
    return None


def check_invariants(collector: Collector, prefix: str) -> dict[str, int]:
    """What a consumer of the site received, in the order it arrived, against the group's
    promises: no event id names two different events; per shard, events never come from
    an older epoch after a newer one; the retained advisory records never go backwards in
    (epoch, history length). Returns the newest epoch per shard."""
    with collector.lock:
        msgs = list(collector.messages)
    bodies: dict[str, str] = {}
    newest: dict[str, int] = {}
    records: dict[str, tuple[int, int]] = {}
    for topic, payload, _ in msgs:
        if not payload or payload.startswith(b"sync-"):
            continue
        if topic.startswith(f"{prefix}/events/"):
            e = json.loads(payload)
            if "shard" not in e:
                continue  # a site-wide notice or summary
            body = json.dumps(e, sort_keys=True)
            first = bodies.setdefault(e["event_id"], body)
            if first != body:
                a, b = json.loads(first), e
                diff = {k: (a.get(k), b.get(k)) for k in set(a) | set(b) if a.get(k) != b.get(k)}
                raise AssertionError(f"event id {e['event_id']} names two different events: "
                                     f"{diff}")
            assert e["epoch"] >= newest.get(e["shard"], -1), \
                f"an event of epoch {e['epoch']} after one of {newest[e['shard']]}"
            newest[e["shard"]] = e["epoch"]
        elif "/advisories/" in topic:
            a = json.loads(payload)
            key = (a["epoch"], len(a["history"]))
            assert key >= records.get(topic, (-1, -1)), \
                f"{topic} went back from {records[topic]} to {key}"
            records[topic] = key
    return newest
