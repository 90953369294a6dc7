"""Delivery of events to people by webhook and e-mail, per audience, beside MQTT.

Every delivery is a row of the store's ``deliveries`` table before anything else happens:
the engine thread writes it (:meth:`Delivery.stage`) in the same transaction as the event's
outbox row, so a crash at any moment loses none and a restart sends what was waiting. One
worker thread per receiver (audience and channel: a webhook, an e-mail relay) with its own
SQLite connection sends that receiver's rows in order, so a slow or failing receiver
delays only itself; it removes a row once the receiver took it (at least once: a crash
between the two sends it again under the same delivery id). Retries use exponential
backoff and jitter; events other than urgent ones wait during the audience's quiet hours
and go out as one digest when they end; low-priority events are collected into a digest
every ``low_priority_digest_s``. The waiting count (``thermowarden_delivery_pending``) is
read from the table when asked.

Around the workers: an audience may have recipients per building (or area), which receive
the events of the spaces there besides the audience's own (a flood summary is split by
building for them); each set of recipients is a route (:func:`delivery_routes`) and its
rows carry the route as their audience, so each has its own workers. Every message links
to the advisory's page when the site has one (``page`` in the webhook JSON, a line in the
e-mail). An urgent alert that nobody acknowledges, shelves or clears within
``escalation.after_s`` goes to the escalation recipients as an ``unacknowledged`` event
(:class:`Escalations`): its timer is a row of the store's ``escalations`` table written in
the same transaction as the event's deliveries, so a restart keeps it, and a step of the
wall clock moves it by the step, so it still waits ``after_s`` of elapsed time.

This module stores deliveries and routes them; its parts: :mod:`~thermowarden.shell.
delivery_channels` (one attempt by webhook or e-mail), :mod:`~thermowarden.shell.
delivery_workers` (a receiver's rows in order, retries, held digests) and :mod:`~thermowarden.
shell.escalations` (the timers of unacknowledged urgent alerts).
"""

from __future__ import annotations

import json
import logging
import pathlib
import sqlite3
import threading
import time
import urllib.parse
import uuid
from collections.abc import Callable
from typing import Any

from prometheus_client import CollectorRegistry, Counter, Gauge

from thermowarden.config.delivery import (
    AudienceDelivery,
    DeliveryConfig,
    EscalationConfig,
)
from thermowarden.core.json_values import iso
from thermowarden.core.quiet_hours import QuietHours
from thermowarden.shell.delivery_channels import Sender, post_webhook, send_email
from thermowarden.shell.delivery_workers import EVENT_SCHEMA, ReceiverWorker
from thermowarden.shell.escalations import Escalations
from thermowarden.shell.store import DELIVERIES_SCHEMA, count_rows

log = logging.getLogger("thermowarden.delivery")

SCHEMA = DELIVERIES_SCHEMA
CHANNELS = ("webhook", "email")
PENDING_COUNT = "SELECT COUNT(*) FROM deliveries WHERE state IN ('held', 'pending')"


def _priority(payload: dict[str, Any]) -> str:
    if payload.get("event") == "report":
        return "urgent"  # sent when written: never held for quiet hours or a digest
    adv = payload.get("advisory")
    if isinstance(adv, dict) and isinstance(adv.get("priority"), str):
        return str(adv["priority"])
    return "medium"


class Delivery:
    """See the module docstring. ``db_path`` is the service's SQLite file; ``now`` the
    service clock (epoch s)."""

    def __init__(self, config: DeliveryConfig, timezone: str, db_path: str | pathlib.Path,
                 registry: CollectorRegistry | None = None,
                 now: Callable[[], float] = time.time,
                 senders: dict[str, Sender] | None = None) -> None:
        self.db_path = str(db_path)
        self.now = now
        self.senders: dict[str, Sender] = senders or {"webhook": post_webhook,
                                                      "email": send_email}
        self.stopping = threading.Event()
        self.started = False
        self.lock = threading.Lock()
        self.workers: dict[tuple[str, str], ReceiverWorker] = {}
        self._configure(config, timezone)
        r = registry or CollectorRegistry()
        self.m_sent = Counter("thermowarden_deliveries", "Deliveries to people by channel and "
                              "outcome (sent, retried, failed, held)", ["channel", "outcome"],
                              registry=r)
        self.m_overflow = Counter("thermowarden_delivery_queue_overflow",
                                  "Events not stored for delivery because delivery.queue_size "
                                  "deliveries were already waiting", registry=r)
        self.m_pending = Gauge("thermowarden_delivery_pending",
                               "Deliveries stored and not yet sent (held or pending), "
                               "counted in the store", registry=r)
        self.m_pending.set_function(lambda: count_rows(self.db_path, PENDING_COUNT))
        self.places: dict[str, tuple[str | None, str]] = {}
        self.page_url: str | None = None
        self.escalations = Escalations(self)

    def _configure(self, config: DeliveryConfig, timezone: str) -> None:
        routes = delivery_routes(config)
        with self.lock:
            self.config = config
            self.routes = routes
            self.quiet: dict[str, QuietHours] = {
                a: QuietHours.parse(d.quiet_hours, timezone)
                for a, d in routes.items() if d.quiet_hours}

    def recipients(self, name: str) -> AudienceDelivery | None:
        """The recipients of a route: an audience, ``audience@building``, or an escalation
        (``audience!escalation``, ``audience@building!escalation``)."""
        return self.routes.get(name)

    def set_site(self, places: dict[str, tuple[str | None, str]],
                 page_url: str | None) -> None:
        """Space id -> (building or area id, "North Building · First floor"), and the web
        page's address for links (None: no links). Called at start and after a reload."""
        self.places = places
        self.page_url = page_url.rstrip("/") if page_url else None

    def reconfigure(self, config: DeliveryConfig, timezone: str) -> None:
        """Take a reloaded configuration; stored deliveries stay and follow the new one."""
        self._configure(config, timezone)
        if self.started:
            self._ensure_workers()
        self.wake()

    # ------------------------------------------------------------------ engine thread
    def wanted(self, audience: str, payload: dict[str, Any]) -> bool:
        """Some recipients (the audience's or its building's) want this event."""
        return bool(self.routed(audience, payload))

    def stage(self, db: sqlite3.Connection, audience: str, payload: dict[str, Any],
              now: float) -> bool:
        """Store the deliveries of one event through ``db``, inside the caller's
        transaction (the engine thread's, which also holds the event's outbox row): a row
        per channel of every route that wants it (:meth:`routed`: the audience's
        recipients and those of the space's building), held or pending; an urgent alert
        also starts (and a later event of it stops) its escalation timer in the same
        transaction. Returns True when delivery rows were written: call :meth:`wake` once
        the transaction is committed. Beyond ``delivery.queue_size`` waiting deliveries an
        event is not stored (counted and logged; it was still published over MQTT)."""
        if audience not in self.config.audiences and audience not in self.routes:
            return False
        self.escalations.observe(db, audience, payload, now)
        stored = False
        for route, part in self.routed(audience, payload):
            stored = self.stage_route(db, route, part, now) or stored
        return stored

    def routed(self, audience: str, payload: dict[str, Any]
               ) -> list[tuple[str, dict[str, Any]]]:
        """(route, payload as sent) for every set of recipients that wants this event of
        ``audience``: the audience's own and its space's building's (a summary split by
        building), each payload with its page link and place. Pure: :meth:`stage` stores
        the result."""
        payload = self.enrich(payload)
        out = []
        for route, part in self._split(audience, payload):
            aud = self.recipients(route)
            if aud is not None and part.get("event") in aud.events:
                out.append((route, part))
        return out

    def offer_report(self, day: str, site_file: pathlib.Path,
                     building_files: dict[str, pathlib.Path]) -> int:
        """The daily reports, to every audience (and building) whose ``events`` list
        ``report``: the site's to the audience's recipients, each building's to its own
        (any thread; one transaction of its own). Returns how many routes got one."""
        parts: list[tuple[str, dict[str, Any]]] = []
        for route, aud in list(self.routes.items()):
            if "report" not in aud.events or "!" in route:
                continue
            audience, _, building = route.partition("@")
            file = building_files.get(building) if building else site_file
            if file is None:
                continue
            payload = {"schema": EVENT_SCHEMA, "event": "report", "at": iso(self.now()),
                       "audience": audience, "day": day, "file": file.name,
                       "path": str(file)}
            if building:
                payload["place"] = self.places_label(building)
            parts.append((route, payload))
        if not parts:
            return 0
        now = self.now()
        return int(self._store_apart(lambda db: sum(
            self.stage_route(db, route, payload, now) for route, payload in parts)))

    def stage_route(self, db: sqlite3.Connection, route: str, payload: dict[str, Any],
                     now: float) -> bool:
        """The rows of one route (``audience=route``), inside the caller's transaction."""
        aud = self.recipients(route)
        if aud is None or payload.get("event") not in aud.events:
            return False
        waiting = int(db.execute(PENDING_COUNT).fetchone()[0])
        if waiting >= self.config.queue_size:
            self.m_overflow.inc()
            log.error("%d deliveries already wait: an event for %s was not stored for "
                      "delivery (it was published over MQTT); delivery.queue_size is %d",
                      waiting, route, self.config.queue_size)
            return False
        prio = _priority(payload)
        state, due = self._placement(route, aud, prio, now)
        text = json.dumps(payload)
        stored = False
        for channel in CHANNELS:
            if getattr(aud, channel) is None:
                continue
            db.execute("INSERT INTO deliveries(id, audience, channel, state, priority, due, "
                       "created, payload) VALUES(?, ?, ?, ?, ?, ?, ?, ?)",
                       (uuid.uuid4().hex, route, channel, state, prio, due, now, text))
            if state == "held":
                self.m_sent.labels(channel=channel, outcome="held").inc()
            stored = True
        return stored

    def offer(self, audience: str, payload: dict[str, Any]) -> bool:
        """Store an event's deliveries in a transaction of their own (a caller without the
        store's connection) and wake the workers. False when not wanted or not stored."""
        return bool(self._store_apart(
            lambda db: self.stage(db, audience, payload, self.now())))

    def _store_apart(self, store: Callable[[sqlite3.Connection], int | bool]) -> int | bool:
        """Run ``store`` in a transaction of its own on a connection of its own (rolled back
        if it fails), then wake the workers if it stored anything; returns what it did."""
        db = self.connect()
        try:
            db.execute("BEGIN IMMEDIATE")
            try:
                stored = store(db)
            except BaseException:
                db.execute("ROLLBACK")
                raise
            db.execute("COMMIT")
        finally:
            db.close()
        if stored:
            self.wake()
        return stored

    def wake(self) -> None:
        """Tell every worker (and the escalation timers) to look at the tables now (after
        rows were committed)."""
        with self.lock:
            workers = list(self.workers.values())
        for w in workers:
            w.wake.set()
        self.escalations.wake.set()

    def clock_stepped(self, step_s: float) -> None:
        """The wall clock was stepped by ``step_s`` (the shell measured it against the
        monotonic clock): the escalation timers move by it, so each still waits its
        ``after_s`` of elapsed time."""
        db = self.connect()
        try:
            db.execute("UPDATE escalations SET since = since + ?, due = due + ? "
                       "WHERE state = 'waiting'", (step_s, step_s))
        finally:
            db.close()
        self.escalations.wake.set()

    def _page(self, advisory_id: str | None) -> str | None:
        if not self.page_url or not advisory_id:
            return None
        return f"{self.page_url}/advisories/{urllib.parse.quote(advisory_id, safe='')}"

    def enrich(self, payload: dict[str, Any]) -> dict[str, Any]:
        """A copy with the link to the advisory's page (and its place, for people); the
        MQTT event is left as it is."""
        if not self.page_url and not self.places:
            return payload
        out = dict(payload)
        if payload.get("event") == "summary":
            items = []
            for it in payload.get("items", []):
                it = dict(it)
                place = self.places.get(str(it.get("space")))
                if place is not None:
                    it["place"] = place[1]
                page = self._page(it.get("advisory_id"))
                if page:
                    it["page"] = page
                items.append(it)
            out["items"] = items
            if self.page_url:
                out["page"] = self.page_url + "/"
            return out
        adv = payload.get("advisory")
        if isinstance(adv, dict):
            page = self._page(adv.get("id"))
            if page:
                out["page"] = page
            place = self.places.get(str((adv.get("space") or {}).get("id")))
            if place is not None and place[1]:
                out["place"] = place[1]
        return out

    def _split(self, audience: str, payload: dict[str, Any]
               ) -> list[tuple[str, dict[str, Any]]]:
        """(route, payload) for the audience and the buildings concerned; a summary goes
        whole to the audience and by building to each building's recipients."""
        out: list[tuple[str, dict[str, Any]]] = [(audience, payload)]
        if payload.get("event") == "summary":
            parts: dict[str, list[dict[str, Any]]] = {}
            for it in payload.get("items", []):
                b = self.places.get(str(it.get("space")), (None, ""))[0]
                if b is not None and f"{audience}@{b}" in self.routes:
                    parts.setdefault(b, []).append(it)
            for b, items in parts.items():
                out.append((f"{audience}@{b}", {
                    **payload, "items": items, "count": len(items),
                    "place": self.places_label(b)}))
            return out
        adv = payload.get("advisory")
        if isinstance(adv, dict):
            b = self.places.get(str((adv.get("space") or {}).get("id")), (None, ""))[0]
            if b is not None and f"{audience}@{b}" in self.routes:
                out.append((f"{audience}@{b}", payload))
        return out

    def places_label(self, building: str) -> str:
        label = next((p[1] for p in self.places.values() if p[0] == building), building)
        return label.split(" · ")[0]

    # ------------------------------------------------------------------ workers
    def start(self) -> None:
        """Start a worker for every configured receiver (each route's webhook and e-mail)
        and every receiver that still has rows waiting in the store (removed from the
        configuration: they are marked failed), and the escalation timers' thread."""
        self.started = True
        self._ensure_workers()
        self.escalations.start()

    def _ensure_workers(self) -> None:
        targets: set[tuple[str, str]] = {
            (route, c) for route, aud in self.routes.items() for c in CHANNELS
            if getattr(aud, c) is not None}
        db = self.connect()
        try:
            targets |= {(str(a), str(c)) for a, c in db.execute(
                "SELECT DISTINCT audience, channel FROM deliveries WHERE state IN "
                "('held', 'pending')")}
        finally:
            db.close()
        with self.lock:
            for target in sorted(targets - set(self.workers)):
                worker = ReceiverWorker(self, *target)
                self.workers[target] = worker
                worker.thread.start()

    def stop(self, timeout: float = 10.0) -> None:
        """Stop the escalation timers and the workers (an attempt under way is waited for
        up to ``timeout`` s in all); what is not sent stays stored for the next start."""
        self.escalations.stop(timeout)
        self.stopping.set()
        self.wake()
        deadline = time.monotonic() + timeout
        with self.lock:
            workers = list(self.workers.values())
        for w in workers:
            w.thread.join(max(0.0, deadline - time.monotonic()))

    @property
    def thread(self) -> threading.Thread | None:
        """The first worker's thread (for tests that check the workers ended)."""
        with self.lock:
            return next((w.thread for w in self.workers.values()), None)

    def alive(self) -> bool:
        with self.lock:
            return any(w.thread.is_alive() for w in self.workers.values())

    def connect(self) -> sqlite3.Connection:
        db = sqlite3.connect(self.db_path, isolation_level=None, timeout=30.0)
        db.execute("PRAGMA journal_mode=WAL")
        db.execute("PRAGMA synchronous=NORMAL")
        db.executescript(SCHEMA)
        return db

    def _placement(self, audience: str, aud: AudienceDelivery, priority: str,
                   now: float) -> tuple[str, float]:
        if priority == "urgent":
            return "pending", now
        quiet = self.quiet.get(audience)
        quiet_end = quiet.until(now) if quiet is not None else None
        digest = priority == "low" and aud.low_priority_digest_s > 0
        if quiet_end is None and not digest:
            return "pending", now
        due = now + aud.low_priority_digest_s if digest else now
        if quiet_end is not None:
            due = max(due, quiet_end)
        return "held", due

    # ------------------------------------------------------------------ queries
    def pending_count(self, db: sqlite3.Connection | None = None) -> int:
        own = db is None
        conn = db or self.connect()
        try:
            return int(conn.execute(PENDING_COUNT).fetchone()[0])
        finally:
            if own:
                conn.close()


def delivery_routes(config: DeliveryConfig) -> dict[str, AudienceDelivery]:
    """Every set of recipients by route name: ``safety`` (the audience's own, when it has
    any), ``safety@north`` (a building's: the audience's events, quiet hours and digest),
    ``safety!escalation`` and ``safety@north!escalation`` (unacknowledged urgent alerts:
    sent at once)."""
    routes: dict[str, AudienceDelivery] = {}

    def escalation(esc: EscalationConfig) -> AudienceDelivery:
        return AudienceDelivery(webhook=esc.webhook, email=esc.email,
                                events=["unacknowledged"], low_priority_digest_s=0)

    for name, aud in config.audiences.items():
        if aud.webhook is not None or aud.email is not None:
            routes[name] = aud
        if aud.escalation is not None:
            routes[f"{name}!escalation"] = escalation(aud.escalation)
        for b, rec in aud.buildings.items():
            routes[f"{name}@{b}"] = AudienceDelivery(
                webhook=rec.webhook, email=rec.email, events=aud.events,
                quiet_hours=aud.quiet_hours, low_priority_digest_s=aud.low_priority_digest_s)
            if rec.escalation is not None:
                routes[f"{name}@{b}!escalation"] = escalation(rec.escalation)
    return routes
