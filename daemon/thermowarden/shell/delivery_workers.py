"""Sending the stored deliveries of one receiver (an audience's or a building's webhook or
e-mail), in order, on a thread and SQLite connection of its own, so a slow or failing receiver
delays only itself. A row is removed once the receiver took it (at least once: a crash between
the two sends it again under the same delivery id). Retries use exponential backoff and
jitter; held rows (quiet hours, the low-priority digest) go out as one summary event when they
are due. Rows that failed for good are kept ``FAILED_KEPT_S`` for inspection.
"""

from __future__ import annotations

import json
import logging
import random
import sqlite3
import threading
import time
import uuid
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Protocol

from thermowarden.core.json_values import iso
from thermowarden.shell.delivery_channels import DeliveryFailed, Sender

if TYPE_CHECKING:
    from prometheus_client import Counter

    from thermowarden.config.delivery import AudienceDelivery, DeliveryConfig
    from thermowarden.core.quiet_hours import QuietHours

log = logging.getLogger("thermowarden.delivery")

EVENT_SCHEMA = "thermowarden.event/1"
IDLE_WAIT_S = 1.0
FAILED_KEPT_S = 30 * 86_400.0
"""Deliveries that failed for good stay in the store this long, for inspection."""
PRUNE_EVERY_S = 3600.0


class WorkerOwner(Protocol):
    """What a worker uses of :class:`thermowarden.shell.delivery.Delivery`."""

    config: DeliveryConfig
    senders: dict[str, Sender]
    quiet: dict[str, QuietHours]
    stopping: threading.Event
    m_sent: Counter

    def now(self) -> float:
        """The service clock (epoch s)."""
        ...

    def connect(self) -> sqlite3.Connection:
        """A connection of its own to the store."""
        ...

    def recipients(self, route: str) -> AudienceDelivery | None:
        """The recipients of a route, None when no longer configured."""
        ...


@dataclass(frozen=True)
class DeliveryRow:
    """One stored delivery being attempted."""

    seq: int
    id: str
    audience: str
    channel: str
    priority: str
    attempts: int
    payload: dict[str, Any]


class ReceiverWorker:
    """The deliveries of one receiver (an audience's webhook or its e-mail), in order, on a
    thread and SQLite connection of its own."""

    def __init__(self, owner: WorkerOwner, audience: str, channel: str) -> None:
        self.owner = owner
        self.audience = audience
        self.channel = channel
        self.wake = threading.Event()
        self.blocked_until = 0.0
        self.thread = threading.Thread(target=self._run, daemon=True,
                                       name=f"thermowarden-delivery-{audience}-{channel}")

    def _run(self) -> None:
        owner = self.owner
        db = owner.connect()
        last_prune = -PRUNE_EVERY_S
        try:
            while not owner.stopping.is_set():
                self.wake.clear()
                if time.monotonic() - last_prune >= PRUNE_EVERY_S:
                    last_prune = time.monotonic()
                    db.execute("DELETE FROM deliveries WHERE state = 'failed' AND audience = ? "
                               "AND channel = ? AND created < ?",
                               (self.audience, self.channel, owner.now() - FAILED_KEPT_S))
                wait = self._work(db)
                self.wake.wait(wait)
        except Exception:  # noqa: BLE001 - a delivery bug must not take the service down
            log.exception("delivery worker for %s by %s failed; its stored deliveries wait "
                          "for the next start", self.audience, self.channel)
        finally:
            db.close()

    def _work(self, db: sqlite3.Connection) -> float:
        """Release a digest that is due and attempt this receiver's due deliveries in order;
        returns how long to sleep before the next thing is due."""
        owner = self.owner
        now = owner.now()
        self._release(db, now)
        rows = db.execute("SELECT seq, id, priority, attempts, payload, due FROM deliveries "
                          "WHERE state = 'pending' AND audience = ? AND channel = ? "
                          "ORDER BY seq", (self.audience, self.channel)).fetchall()
        next_due = now + IDLE_WAIT_S
        for seq, did, prio, attempts, text, due in rows:
            if owner.stopping.is_set():
                break
            now = owner.now()
            if due > now or self.blocked_until > now:
                # keep the order: nothing later goes before this one
                next_due = min(next_due, max(due, self.blocked_until))
                break
            try:
                payload = json.loads(text)
                if not isinstance(payload, dict):
                    raise ValueError("not a JSON object")
            except (ValueError, RecursionError) as exc:
                self._fail(db, seq, did, f"damaged record: {exc}")
                continue
            row = DeliveryRow(seq, did, self.audience, self.channel, prio, attempts, payload)
            if not self._attempt(db, row, now):
                next_due = min(next_due, self.blocked_until)
                break
        held = db.execute("SELECT MIN(due) FROM deliveries WHERE state = 'held' AND "
                          "audience = ? AND channel = ?",
                          (self.audience, self.channel)).fetchone()[0]
        if held is not None:
            next_due = min(next_due, held)
        return max(0.0, min(IDLE_WAIT_S, next_due - owner.now()))

    def _fail(self, db: sqlite3.Connection, seq: int, did: str, error: str,
              attempts: int | None = None) -> None:
        if attempts is None:
            db.execute("UPDATE deliveries SET state = 'failed', error = ? WHERE seq = ?",
                       (error, seq))
        else:
            db.execute("UPDATE deliveries SET state = 'failed', attempts = ?, error = ? "
                       "WHERE seq = ?", (attempts, error, seq))
        self.owner.m_sent.labels(channel=self.channel, outcome="failed").inc()

    def _attempt(self, db: sqlite3.Connection, row: DeliveryRow, now: float) -> bool:
        owner = self.owner
        aud = owner.recipients(row.audience)
        cfg = getattr(aud, row.channel) if aud is not None else None
        if cfg is None:
            self._fail(db, row.seq, row.id, "channel no longer configured")
            log.error("delivery %s to %s by %s dropped: that channel is no longer configured",
                      row.id, row.audience, row.channel)
            return True
        try:
            owner.senders[row.channel](cfg, row.payload, row.id, now)
        except DeliveryFailed as exc:
            attempts = row.attempts + 1
            retry = owner.config.retry
            if exc.permanent or attempts >= retry.max_attempts:
                self._fail(db, row.seq, row.id, str(exc), attempts)
                log.error("delivery %s to %s by %s failed for good after %d attempt(s): %s",
                          row.id, row.audience, row.channel, attempts, exc)
                return True
            delay = min(retry.max_s, retry.first_s * 2 ** (attempts - 1))
            delay *= random.uniform(0.8, 1.2)
            db.execute("UPDATE deliveries SET attempts = ?, due = ?, error = ? WHERE seq = ?",
                       (attempts, now + delay, str(exc), row.seq))
            self.blocked_until = now + delay
            owner.m_sent.labels(channel=row.channel, outcome="retried").inc()
            log.warning("delivery %s to %s by %s failed (%s); attempt %d of %d in %.1f s",
                        row.id, row.audience, row.channel, exc, attempts + 1,
                        retry.max_attempts, delay)
            return False
        except Exception as exc:  # noqa: BLE001 - a sender bug is a failed attempt, not a crash
            self._fail(db, row.seq, row.id, f"{type(exc).__name__}: {exc}")
            log.exception("delivery %s to %s by %s failed", row.id, row.audience, row.channel)
            return True
        db.execute("DELETE FROM deliveries WHERE seq = ?", (row.seq,))
        self.blocked_until = 0.0
        owner.m_sent.labels(channel=row.channel, outcome="sent").inc()
        return True

    def _release(self, db: sqlite3.Connection, now: float) -> None:
        """This receiver's held rows go out as one digest once one of them is due and the
        audience's quiet hours are over."""
        due = db.execute("SELECT MIN(due) FROM deliveries WHERE state = 'held' AND "
                         "audience = ? AND channel = ?",
                         (self.audience, self.channel)).fetchone()[0]
        quiet = self.owner.quiet.get(self.audience)
        if due is None or due > now or (quiet is not None and quiet.until(now) is not None):
            return
        db.execute("BEGIN IMMEDIATE")
        try:
            rows = db.execute("SELECT seq, payload FROM deliveries WHERE state = 'held' AND "
                              "audience = ? AND channel = ? ORDER BY seq",
                              (self.audience, self.channel)).fetchall()
            payloads: list[dict[str, Any]] = []
            for _, text in rows:
                try:
                    p = json.loads(text)
                except (ValueError, RecursionError):
                    continue
                if isinstance(p, dict):
                    payloads.append(p)
            db.executemany("DELETE FROM deliveries WHERE seq = ?", [(s,) for s, _ in rows])
            if payloads:
                digest = payloads[0] if len(payloads) == 1 else \
                    _digest(self.audience, payloads, now)
                db.execute("INSERT INTO deliveries(id, audience, channel, state, priority, "
                           "due, created, payload) VALUES(?, ?, ?, 'pending', ?, ?, ?, ?)",
                           (uuid.uuid4().hex, self.audience, self.channel, "low", now, now,
                            json.dumps(digest)))
        except BaseException:
            db.execute("ROLLBACK")
            raise
        db.execute("COMMIT")


def _digest(audience: str, payloads: list[dict[str, Any]], now: float) -> dict[str, Any]:
    """Several held events as one summary event (schema ``thermowarden.event/1``)."""
    items: list[dict[str, Any]] = []
    for p in payloads:
        if p.get("event") == "summary":
            items.extend(p.get("items", []))
            continue
        adv = p.get("advisory", {})
        items.append({"event": p.get("event"), "advisory_id": adv.get("id"),
                      "space": adv.get("space", {}).get("id"), "rule": adv.get("rule"),
                      "priority": adv.get("priority"), "title": adv.get("title"),
                      "at": p.get("at")})
    return {"schema": EVENT_SCHEMA, "event": "summary", "at": iso(now), "audience": audience,
            "count": len(items), "items": items,
            "note": f"{len(items)} notification(s) held for quiet hours or the low-priority "
                    "digest, sent together"}
