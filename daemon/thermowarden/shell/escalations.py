"""Escalation of urgent alerts nobody acknowledges, shelves or clears within
``escalation.after_s``: they go to the escalation recipients (of the space's building, else of
the audience) as an ``unacknowledged`` event. Each timer is a row of the store's
``escalations`` table written in the same transaction as the event's deliveries, so a restart
keeps it, and a step of the wall clock moves it by the step, so it still waits ``after_s`` of
elapsed time.
"""

from __future__ import annotations

import json
import logging
import sqlite3
import threading
from typing import TYPE_CHECKING, Any, Protocol

from thermowarden.core.json_values import iso
from thermowarden.shell.delivery_workers import IDLE_WAIT_S

if TYPE_CHECKING:
    from thermowarden.config.delivery import AudienceDelivery, DeliveryConfig

log = logging.getLogger("thermowarden.delivery")

ESCALATE_ON = frozenset({"raised", "escalated", "renotified"})
"""Events of an urgent advisory that start its escalation timer (once)."""
RESOLVED_BY = frozenset({"acknowledged", "shelved", "cleared", "deescalated"})
"""Events that stop it: somebody took it on, or it is no longer urgent."""


class EscalationOwner(Protocol):
    """What the escalation timers use of :class:`thermowarden.shell.delivery.Delivery`."""

    config: DeliveryConfig
    places: dict[str, tuple[str | None, str]]

    def now(self) -> float:
        """The service clock (epoch s)."""
        ...

    def connect(self) -> sqlite3.Connection:
        """A connection of its own to the store."""
        ...

    def recipients(self, route: str) -> AudienceDelivery | None:
        """The recipients of a route, None when no longer configured."""
        ...

    def enrich(self, payload: dict[str, Any]) -> dict[str, Any]:
        """A copy with the link to the advisory's page and its place."""
        ...

    def stage_route(self, db: sqlite3.Connection, route: str, payload: dict[str, Any],
                    now: float) -> bool:
        """The rows of one route, inside the caller's transaction."""
        ...

    def wake(self) -> None:
        """Tell the workers to look at the table now."""
        ...


class Escalations:
    """Timers of urgent alerts nobody has acknowledged yet, kept in the store's table
    ``escalations``. :meth:`observe` writes and removes them in the transaction that stores
    the event's deliveries (the engine thread's); a thread of their own fires the due ones:
    in one transaction it stores the ``unacknowledged`` event's deliveries for the
    escalation recipients (of the space's building, else of the audience) and marks the
    timer sent. Times are on the service clock (epoch s); :meth:`Delivery.clock_stepped`
    moves waiting timers by a step of the wall clock."""

    def __init__(self, delivery: EscalationOwner) -> None:
        self.delivery = delivery
        self.wake = threading.Event()
        self.stopping = threading.Event()
        self.thread: threading.Thread | None = None

    def observe(self, db: sqlite3.Connection, audience: str, payload: dict[str, Any],
                now: float) -> None:
        """An event of ``audience`` being stored (inside the caller's transaction): an
        urgent alert starts its timer (once), acknowledging, shelving, clearing or
        de-escalating it removes the timer."""
        event = payload.get("event")
        adv = payload.get("advisory")
        if event not in ESCALATE_ON | RESOLVED_BY or not isinstance(adv, dict) \
                or not adv.get("id"):
            return
        if event in RESOLVED_BY:
            db.execute("DELETE FROM escalations WHERE advisory_id = ?", (str(adv["id"]),))
            return
        if adv.get("priority") != "urgent":
            return
        building = self.delivery.places.get(str((adv.get("space") or {}).get("id")),
                                            (None, ""))[0]
        route = self._route(audience, building)
        if route is None:
            return
        db.execute("INSERT OR IGNORE INTO escalations(advisory_id, route, since, due, "
                   "state, payload) VALUES(?, ?, ?, ?, 'waiting', ?)",
                   (str(adv["id"]), route[0], now, now + route[1], json.dumps(payload)))

    def start(self) -> None:
        if self.thread is not None:
            return
        self.thread = threading.Thread(target=self._run, name="thermowarden-escalation",
                                       daemon=True)
        self.thread.start()

    def stop(self, timeout: float = 10.0) -> None:
        self.stopping.set()
        self.wake.set()
        if self.thread is not None:
            self.thread.join(timeout)

    def _route(self, audience: str, building: str | None) -> tuple[str, float] | None:
        """The escalation route of an alert and its delay, or None when there is none."""
        aud = self.delivery.config.audiences.get(audience)  # type: ignore[call-overload]
        if aud is None:
            return None
        rec = aud.buildings.get(building) if building is not None else None
        if rec is not None and rec.escalation is not None:
            return f"{audience}@{building}!escalation", rec.escalation.after_s
        if aud.escalation is not None:
            return f"{audience}!escalation", aud.escalation.after_s
        return None

    def _run(self) -> None:
        db = self.delivery.connect()
        try:
            while not self.stopping.is_set():
                self.wake.clear()
                wait = self._fire(db)
                self.wake.wait(wait)
        except Exception:  # noqa: BLE001 - must not take the service down
            log.exception("escalation timers failed; they wait in the store for the next "
                          "start")
        finally:
            db.close()

    def _fire(self, db: sqlite3.Connection) -> float:
        """Store the due ones' deliveries; how long to wait for the next."""
        delivery = self.delivery
        now = delivery.now()
        rows = db.execute("SELECT advisory_id, route, since, payload FROM escalations WHERE "
                          "state = 'waiting' AND due <= ? ORDER BY due", (now,)).fetchall()
        fired = False
        for advisory_id, route, since, text in rows:
            if self.stopping.is_set():
                break
            db.execute("BEGIN IMMEDIATE")
            try:
                try:
                    first = json.loads(text)
                    if not isinstance(first, dict):
                        raise ValueError("not a JSON object")
                except (ValueError, RecursionError) as exc:
                    log.error("escalation of advisory %s dropped: damaged record (%s)",
                              advisory_id, exc)
                    db.execute("DELETE FROM escalations WHERE advisory_id = ?",
                               (advisory_id,))
                    db.execute("COMMIT")
                    continue
                waited = now - since
                payload = delivery.enrich({**first, "event": "unacknowledged",
                                            "at": iso(now), "waited_s": round(waited)})
                if delivery.recipients(route) is None:
                    db.execute("DELETE FROM escalations WHERE advisory_id = ?",
                               (advisory_id,))
                    log.error("escalation of urgent advisory %s dropped: its recipients "
                              "(%s) are no longer configured", advisory_id, route)
                elif delivery.stage_route(db, route, payload, now):
                    db.execute("UPDATE escalations SET state = 'sent' WHERE advisory_id = ?",
                               (advisory_id,))
                    fired = True
                    log.warning("urgent advisory %s not acknowledged after %.0f s: sent to %s",
                                advisory_id, waited, route)
            except BaseException:
                db.execute("ROLLBACK")
                raise
            db.execute("COMMIT")
        if fired:
            delivery.wake()
        nxt = db.execute("SELECT MIN(due) FROM escalations WHERE state = 'waiting'"
                         ).fetchone()[0]
        if nxt is None:
            return IDLE_WAIT_S
        return max(0.0, min(IDLE_WAIT_S, float(nxt) - delivery.now()))
