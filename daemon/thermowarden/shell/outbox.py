"""Carrying out the engine's effects: store first, then publish, and see every event through
to the broker.

An advisory change, its events and their outbox rows are stored in one transaction before
anything is published. Each outbox row is handed to the MQTT client once; the client keeps it
until the broker acknowledges it (re-sending it itself after a reconnect), and only rows the
client does not hold are published again. Every event carries an ``event_id`` (also an MQTT 5
user property), the same on every copy.

What the broker refuses (an MQTT 5 reason code) is offered again every ``RETRY_REFUSED_S``;
on MQTT 3.1.1, where a denied publish looks like success, an event must come back on the
service's own subscription within ``ECHO_TIMEOUT_S``. Rows too old or beyond the bound expire.
The integrator is told once per episode of refusals and once per batch of expired events, by a
notice that does not go through the outbox (so it starts no loop).

Runs on the engine thread (:mod:`thermowarden.shell.service`).
"""

from __future__ import annotations

import json
import logging
import uuid
from collections.abc import Callable
from typing import TYPE_CHECKING, Any, Protocol

from thermowarden.core.json_values import iso
from thermowarden.effects import Effect, Persist, Publish
from thermowarden.shell.logs import RateLimiter

if TYPE_CHECKING:
    from thermowarden.shell.clock import Clock
    from thermowarden.shell.delivery import Delivery
    from thermowarden.shell.group.instance import Group
    from thermowarden.shell.inbox import Control
    from thermowarden.shell.metrics import Metrics
    from thermowarden.shell.mqtt_link import MqttLink
    from thermowarden.shell.store import Store

log = logging.getLogger("thermowarden.service")

ECHO_TIMEOUT_S = 15.0
"""MQTT 3.1.1: an event not seen back on our own subscription this long after the broker
acknowledged it counts as unconfirmed (an ACL that drops it silently)."""
RETRY_REFUSED_S = 60.0
"""An event the broker refused (MQTT 5 reason code) is offered again this often until it
expires from the outbox."""
EXPIRE_EVERY_S = 60.0
NOTICE_TOPIC_SPACE = "_site"


class OutboxHost(Protocol):
    """What the outbox uses of the service that runs it."""

    group: Group | None
    """One instance of a group: carries out only what its leases allow now."""

    def wall_now(self) -> float:
        """The wall time, after any step of the wall clock was handed to the engine."""
        ...


class Outbox:
    """See the module docstring. ``observers`` are called with every batch of executed
    effects (the web page's live view)."""

    def __init__(self, host: OutboxHost, store: Store, link: MqttLink, metrics: Metrics,
                 clock: Clock, delivery: Delivery | None, prefix: str, max_events: int,
                 max_age_s: float, observers: list[Callable[[list[Effect]], None]]) -> None:
        self.host = host
        self.store = store
        self.link = link
        self.metrics = metrics
        self.clock = clock
        self.delivery = delivery
        """Webhook and e-mail delivery (its own worker thread), when configured."""
        self.prefix = prefix
        """The output topic prefix (no trailing ``/``)."""
        self.observers = observers
        self.inflight: dict[int, int] = {}  # message id -> outbox seq
        self.handed: dict[int, int] = {}  # outbox seq -> message id (the client holds it)
        self.refused: dict[int, float] = {}  # outbox seq -> monotonic time of the refusal
        self.awaiting_echo: dict[str, tuple[int, float]] = {}  # event_id -> (seq, deadline)
        self.echo = link.echo_prefix is not None
        self.pending_retained: dict[str, Publish] = {}
        self.publishing_ok = True
        """MQTT 3.1.1: False from an event never seen back until the next one is."""
        self.refusal_episode = False
        """Publishes are being refused (from the first refusal until :meth:`publishing`
        holds again): the integrator was told once, at its start."""
        self.last_refusal = -float("inf")
        self.max_events = max_events
        self.max_age_s = max_age_s
        self.last_expire = -float("inf")
        self.limiter = RateLimiter()
        self.last_conditions_sent = clock.monotonic()
        """When a conditions message last went out (monotonic s)."""

    def publishing(self) -> bool:
        """The broker takes what we publish: no event waits after a refusal, no refusal in
        the last ``RETRY_REFUSED_S``, and (MQTT 3.1.1) the last event came back."""
        return (not self.refused and self.publishing_ok
                and self.clock.monotonic() - self.last_refusal >= RETRY_REFUSED_S)

    # ------------------------------------------------------------------ effects
    def execute(self, effects: list[Effect]) -> None:
        """Store everything first (one transaction), then publish. One instance of a group
        carries out only what its leases allow now (:meth:`Group.fence`)."""
        group = self.host.group
        if group is not None:
            effects = group.fence(effects)
        now = self.clock.now()
        sends: list[tuple[int, Publish]] = []
        staged = False
        with self.store.transaction():
            for e in effects:
                if isinstance(e, Persist):
                    self._persist(e, now)
                elif "/events/" in e.topic and e.qos == 1:
                    assert e.payload is not None
                    identify(e.payload)
                    sends.append((self.store.outbox_add(e.topic, e.payload, now), e))
                    if self.delivery is not None:
                        # stored with the event's outbox row: a crash loses neither
                        audience = e.topic.split("/events/", 1)[1].split("/", 1)[0]
                        staged |= self.delivery.stage(self.store.db, audience, e.payload, now)
                else:
                    sends.append((0, e))
        if staged:
            assert self.delivery is not None
            self.delivery.wake()
        for seq, e in sends:
            if seq:
                self.hand_over(seq, e.topic, e.payload or {})
            elif e.retain and "/advisories/" in e.topic:
                mid = self.link.publish(e.topic, e.payload, e.qos, True, e.expiry_s)
                if mid is None:
                    self.pending_retained[e.topic] = e  # latest state wins
                else:
                    self.pending_retained.pop(e.topic, None)
            else:
                mid = self.link.publish(e.topic, e.payload, e.qos, e.retain, e.expiry_s)
                if mid is not None and e.topic.endswith("/conditions"):
                    self.last_conditions_sent = self.clock.monotonic()
        for observe in self.observers:
            observe(effects)

    def hand_over(self, seq: int, topic: str, payload: dict[str, Any]) -> None:
        """Give an outbox row to the client, unless it already holds it."""
        if seq in self.handed:
            return
        group = self.host.group
        if group is not None and not group.allows(payload):
            self.store.outbox_done(seq)  # of an epoch this instance no longer holds
            self.metrics.group_fenced.inc()
            return
        event_id = str(payload.get("event_id", ""))
        mid = self.link.publish(topic, payload, 1, False, user=[("event_id", event_id)])
        if mid is not None:
            self.inflight[mid] = seq
            self.handed[seq] = mid
            self.refused.pop(seq, None)
            if self.echo:
                self.awaiting_echo[event_id] = (seq, float("inf"))

    def _persist(self, e: Persist, now: float) -> None:
        if e.kind == "advisory":
            self.store.put_advisory(e.key, e.record)
        elif e.kind == "event":
            assert e.record is not None
            identify(e.record)
            self.store.add_event(e.key, now, e.record)
        elif e.kind == "sample":
            assert e.record is not None
            self.store.add_sample(float(e.record["t"]), e.record)
        elif e.kind == "daily_means":
            assert e.record is not None
            self.store.put("daily_means", e.record["newest_first"])

    def flush_after_connect(self) -> bool:
        """Deliver, in order, every event the broker has not acknowledged and the client
        does not already hold (it re-sends those itself), then the latest state of every
        retained advisory that changed while disconnected. False when the connection was
        lost again on the way (the rest waits for the next connection)."""
        for seq, topic, payload in self.store.outbox():
            if seq in self.handed or seq in self.refused:
                continue
            self.hand_over(seq, topic, payload)
            if not self.link.connected.is_set():
                return False
        group = self.host.group
        for topic, e in list(self.pending_retained.items()):
            if group is not None and not group.fence([e]):
                self.pending_retained.pop(topic, None)  # its shard's lease lapsed meanwhile
                continue
            if self.link.publish(topic, e.payload, e.qos, True, e.expiry_s) is not None:
                self.pending_retained.pop(topic, None)
        return True

    # ------------------------------------------------------------------ the broker's answers
    def dropped(self, c: Control) -> None:
        """The client dropped a fenced message: it is not sent again after a reconnect."""
        seq = self.inflight.pop(c.mid, None)
        if seq is not None:
            self.handed.pop(seq, None)
            self.store.outbox_done(seq)
        self.metrics.group_fenced.inc()

    def acknowledged(self, c: Control) -> None:
        """The broker's PUBACK: the row is done, or (a failure reason code) refused."""
        seq = self.inflight.pop(c.mid, None)
        if seq is not None:
            self.handed.pop(seq, None)
        if c.failed:
            self.metrics.publish_failures.labels(reason=c.reason[:40]).inc()
            self.last_refusal = self.clock.monotonic()
            self._publish_refused(c.topic or f"{self.prefix}/#", f"reason code {c.reason}")
            if seq is not None:
                self.refused[seq] = self.clock.monotonic()
            ok, dropped = self.limiter.allow("publish-refused")
            if ok:
                log.error("the broker refused a publish (reason %s)%s; events stay in the "
                          "outbox until they expire", c.reason,
                          f" ({dropped} similar suppressed)" if dropped else "")
        elif seq is not None:
            self.store.outbox_done(seq)
            if self.echo:
                for k, (sq, _) in self.awaiting_echo.items():
                    if sq == seq:
                        self.awaiting_echo[k] = (seq, self.clock.monotonic() + ECHO_TIMEOUT_S)
                        break

    def echoed(self, payload: bytes) -> None:
        """MQTT 3.1.1: one of our events came back; the broker delivered it."""
        try:
            data = json.loads(payload)
        except ValueError:
            return
        if isinstance(data, dict) and self.awaiting_echo.pop(str(data.get("event_id")),
                                                             None) is not None:
            self.publishing_ok = True

    # ------------------------------------------------------------------ upkeep
    def upkeep(self) -> None:
        """Expire rows that are too old or beyond the bound; offer refused rows again;
        count MQTT 3.1.1 events never seen back."""
        mono = self.clock.monotonic()
        if self.echo and self.awaiting_echo:
            late = [k for k, (_, deadline) in self.awaiting_echo.items() if mono > deadline]
            late_seqs = {self.awaiting_echo[k][0] for k in late}
            for k in late:
                del self.awaiting_echo[k]
                self.metrics.events_unconfirmed.inc()
                self.publishing_ok = False
            if late:
                log.error("%d event(s) acknowledged by the broker never came back on the "
                          "service's own subscription: the broker's ACL may drop them",
                          len(late))
                topic = next((t for s, t, _ in self.store.outbox() if s in late_seqs), "")
                self._publish_refused(topic or f"{self.prefix}/events/#",
                                      f"not seen back within {ECHO_TIMEOUT_S:g} s of the "
                                      "broker's acknowledgement")
        if self.refusal_episode and self.publishing():
            self.refusal_episode = False
            log.info("the broker takes what the service publishes again")
        if self.refused and self.link.connected.is_set():
            for seq, topic, payload in self.store.outbox():
                at = self.refused.get(seq)
                if at is not None and mono - at >= RETRY_REFUSED_S:
                    self.hand_over(seq, topic, payload)
        if mono - self.last_expire < EXPIRE_EVERY_S:
            return
        self.last_expire = mono
        now = self.host.wall_now()
        expired = self.store.outbox_expire(now - self.max_age_s, self.max_events)
        if not expired:
            return
        gone = sorted(str(p.get("event_id")) for _, p in expired)
        for seq, _ in expired:
            self.refused.pop(seq, None)
            mid = self.handed.pop(seq, None)
            if mid is not None:
                self.inflight.pop(mid, None)
        self.metrics.events_expired.inc(len(expired))
        log.error("%d event(s) expired from the outbox undelivered (older than %.0f s or "
                  "beyond %d rows)", len(expired), self.max_age_s, self.max_events)
        notice = {"schema": "thermowarden.event/1", "event": "notice", "at": iso(now),
                  "audience": "integrator", "kind": "events_expired",
                  "count": len(expired),
                  "text": f"{len(expired)} event(s) could not be delivered to the broker and "
                          "expired from the outbox; check the broker's ACL and connection",
                  "event_ids": gone[:100]}
        self._notice(notice, now)

    def _notice(self, notice: dict[str, Any], now: float) -> None:
        """An integrator notice about the broker refusing or losing what the service
        publishes: stored with the events, handed to webhook and e-mail delivery where the
        integrator has it, and published once over MQTT, not through the outbox (so a
        notice the broker refuses too is not offered again, does not expire into another
        notice, and starts no loop)."""
        identify(notice)
        with self.store.transaction():
            self.store.add_event(f"notice.{notice['kind']}.{int(now)}", now, notice)
        if self.delivery is not None:
            self.delivery.offer("integrator", notice)
        topic = f"{self.prefix}/events/integrator/{NOTICE_TOPIC_SPACE}"
        self.link.publish(topic, notice, 1, False, user=[("event_id", str(notice["event_id"]))])
        for observe in self.observers:
            observe([Publish(topic, notice, qos=1)])

    def _publish_refused(self, topic: str, reason: str) -> None:
        """A publish was refused (MQTT 5 reason code) or never came back (3.1.1): at the
        start of an episode of refusals, tell the integrator, once."""
        if self.refusal_episode:
            return
        self.refusal_episode = True
        now = self.clock.now()
        protocol = "5" if self.link.v5 else "3.1.1"
        notice = {"schema": "thermowarden.event/1", "event": "notice", "at": iso(now),
                  "audience": "integrator", "kind": "publishes_refused", "count": 1,
                  "protocol": protocol, "topic": topic[:512], "reason": reason[:200],
                  "text": f"The broker refuses what the service publishes (first: {topic[:200]}"
                          f", {reason[:200]}). Events wait in the outbox and expire after "
                          f"{self.max_age_s:.0f} s; advisories and conditions may not "
                          "reach anyone. Check the broker's ACL for the service's user: it "
                          f"must be allowed to write {self.prefix}/#."}
        log.error("publishes refused by the broker (%s, %s): the integrator is notified once "
                  "for this episode", topic[:200], reason[:200])
        self._notice(notice, now)


def identify(payload: dict[str, Any]) -> None:
    """Give an event its identity once (kept on every copy: stored, sent, re-sent)."""
    if "event_id" not in payload:
        payload["event_id"] = uuid.uuid4().hex
