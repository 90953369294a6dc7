"""The running service: one engine thread, the MQTT link, the calendar jobs, the store, the
operations endpoint, systemd notification. Built by :func:`thermowarden.shell.bootstrap.
bootstrap`; this module executes effects and holds no rules.

Time: timestamps are wall time, read at each use (a corrected system clock is followed at
once); durations are measured on the monotonic clock. The shell reads both; the engine is
fed the wall time and, before it is fed a time after a step, the step itself (the wall
clock's change minus the monotonic clock's, :meth:`Engine.clock_stepped`), which moves
every timer of the engine (delays, shelving and its daily budget, reminders, the conditions
and sample schedules) and the outbox's expiry by the step: so each ends after the same
monotonic time as without it, and no schedule stops. The evaluation tick, retries and
readiness run on the monotonic clock directly. Calendar jobs (rollup, prune, digest,
report) are due at a wall time and fire once when the wall clock reaches it, so a step
forward runs a skipped job once and a step back does not run it again.

Delivery: an advisory change, its events and their outbox rows are stored in one
transaction before anything is published. Each outbox row is handed to the MQTT client
once; the client keeps it until the broker acknowledges it (re-sending it itself after a
reconnect), and only rows the client does not hold are published again. Every event
carries an ``event_id`` (also an MQTT 5 user property), the same on every copy.
"""

from __future__ import annotations

import gc
import json
import logging
import pathlib
import queue
import threading
import time
import uuid
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from apscheduler.triggers.cron import CronTrigger

from thermowarden.config import SiteConfig
from thermowarden.core.payloads import RECORD_ABSENT
from thermowarden.effects import Effect, Persist, Publish
from thermowarden.engine import Engine
from thermowarden.engine.ingest import Rejection
from thermowarden.shell import systemd
from thermowarden.shell.clock import Clock
from thermowarden.shell.delivery import Delivery
from thermowarden.shell.group import Group
from thermowarden.shell.logs import IntervalLog, RateLimiter
from thermowarden.shell.metrics import Metrics
from thermowarden.shell.mqtt_link import Control, Inbox, Incoming, MqttLink, SensorMessage
from thermowarden.shell.reloading import Prepared, ReloadRefused, finish_reload
from thermowarden.shell.store import Store

log = logging.getLogger("thermowarden.service")

PROMPT_EVAL_S = 0.25
"""A space with new readings is evaluated within this long (not only at the next tick)."""
DRAIN_BATCH = 5000
BATCH_PAUSE_S = 0.005
KNOWN_VERBS = frozenset({"acknowledge", "shelve", "unshelve"})
"""Only these become metric labels; anything else is counted as "unknown"."""
STEP_TOLERANCE_S = 2.0
"""A wall-clock change this much larger or smaller than the monotonic one is counted and
logged as a step."""
SHIFT_TOLERANCE_S = 0.5
"""... and from this much on the engine's timers and the outbox's expiry move by it (the
wall and monotonic clocks are read one after the other: they never differ this much
otherwise; a slewing clock slews both)."""
CONDITIONS_LATE_FACTOR = 2.5
"""Not ready when no conditions message went out for this many conditions intervals."""
ECHO_TIMEOUT_S = 15.0
"""MQTT 3.1.1: an event not seen back on our own subscription this long after the broker
acknowledged it counts as unconfirmed (an ACL that drops it silently)."""
RETRY_REFUSED_S = 60.0
"""An event the broker refused (MQTT 5 reason code) is offered again this often until it
expires from the outbox."""
EXPIRE_EVERY_S = 60.0
REJECTION_LOG_INTERVAL_S = 600.0
"""Sensor rejections are logged once per point and reason this often (all are counted)."""
NOTICE_TOPIC_SPACE = "_site"


@dataclass
class CalendarJob:
    """A job due at a wall time (local calendar of the site)."""

    name: str
    trigger: CronTrigger
    due: float

    def advance(self, now: float) -> None:
        """The next due time strictly after both ``now`` and the current one."""
        import datetime as dt

        after = max(now, self.due) + 1.0
        tz = self.trigger.timezone
        nxt = self.trigger.get_next_fire_time(None, dt.datetime.fromtimestamp(after, tz))
        self.due = nxt.timestamp() if nxt is not None else float("inf")


class Service:
    """See the module docstring."""

    def __init__(self, engine: Engine, link: MqttLink, store: Store, metrics: Metrics,
                 inbox: Inbox, control: queue.Queue[Control],
                 command_prefix: str, reply_topic: str, clock: Clock,
                 notify: Callable[[str], bool] = systemd.notify,
                 delivery: Delivery | None = None,
                 reloader: Callable[[Engine], Prepared] | None = None,
                 per_space_subscriptions: bool = False) -> None:
        cfg = engine.config
        self.engine = engine
        self.link = link
        self.store = store
        self.metrics = metrics
        self.inbox = inbox
        self.control = control
        self.command_prefix = command_prefix
        self.reply_topic = reply_topic
        self.clock = clock
        self.notify = notify
        self.delivery = delivery
        """Webhook and e-mail delivery (its own worker thread), when configured."""
        self.reloader = reloader
        """Loads and builds a new engine for a reload (run beside the engine thread)."""
        self.per_space_subscriptions = per_space_subscriptions
        self.reloads: queue.Queue[Prepared] = queue.Queue()
        self.reloading = threading.Event()
        self.stop_requested = threading.Event()
        self.stopped = threading.Event()
        self.first_evaluation = threading.Event()
        self.jobs: queue.Queue[str] = queue.Queue()
        self.steps_done = 0
        """Steps asked for by :meth:`step` and finished (a driven clock only)."""
        self.inflight: dict[int, int] = {}  # message id -> outbox seq
        self.handed: dict[int, int] = {}  # outbox seq -> message id (the client holds it)
        self.refused: dict[int, float] = {}  # outbox seq -> monotonic time of the refusal
        self.awaiting_echo: dict[str, tuple[int, float]] = {}  # event_id -> (seq, deadline)
        self.echo = link.echo_prefix is not None
        self.pending_retained: dict[str, Publish] = {}
        self.dirty = False
        self.tick_s = cfg.evaluation.tick_s
        self.prompt_eval_s = min(PROMPT_EVAL_S, cfg.evaluation.tick_s / clock.speed)
        self.received_seen = 0
        self.counts_seen: dict[str, dict[str, int]] = {"accepted": {}, "missed": {}}
        self.last_eval = clock.monotonic()
        self.last_tick = clock.monotonic()
        self.last_loop = clock.monotonic()
        self.started = clock.monotonic()
        self.last_sensor: float | None = None
        self.silence_limit_s = cfg.ingest.silence_limit_s
        self.publishing_ok = True
        """MQTT 3.1.1: False from an event never seen back until the next one is."""
        self.refusal_episode = False
        """Publishes are being refused (from the first refusal until :meth:`publishing`
        holds again): the integrator was told once, at its start."""
        self.last_refusal = -float("inf")
        self.outbox_max = cfg.outbox.max_events
        self.outbox_max_age_s = cfg.outbox.max_age_s
        self.last_expire = -float("inf")
        self.limiter = RateLimiter()
        self.rejection_log = IntervalLog(REJECTION_LOG_INTERVAL_S, clock.monotonic)
        self.calendar: list[CalendarJob] = []
        self.wall_seen = (clock.now(), clock.monotonic())
        """The wall and monotonic readings at the last step taken into account."""
        self.last_conditions_sent = clock.monotonic()
        """When a conditions message last went out (monotonic s)."""
        self.watchdog_s = systemd.watchdog_interval_s()
        self.last_watchdog = 0.0
        self.last_digest = clock.now()
        self.failures_seen: set[tuple[int, str]] = set()
        self.observers: list[Callable[[list[Effect]], None]] = []
        """Called with every batch of executed effects (the web page's live view)."""
        self.reload_observers: list[Callable[[Engine], None]] = []
        """Called with the new engine after every reload (the web page's site directory)."""
        self.group: Group | None = None
        """One instance of a group sharing the site's spaces (``run --group``)."""
        self.report_thread: threading.Thread | None = None
        """The daily report being written (never on the engine thread)."""

    # ------------------------------------------------------------------ health
    def alive(self) -> bool:
        return not self.stopped.is_set() and self.clock.monotonic() - self.last_loop < 30.0

    def ready(self) -> tuple[bool, dict[str, bool]]:
        """Ready when connected, subscribed, evaluated once, the broker takes what we
        publish, and a sensor message arrived within ``ingest.silence_limit_s``."""
        receiving = True
        if self.silence_limit_s is not None:
            last = self.last_sensor if self.last_sensor is not None else self.started
            receiving = self.clock.monotonic() - last < self.silence_limit_s
            if self.group is not None and not self.group.evaluating:
                receiving = True  # a member of a group with no shard has nothing to hear
        parts = {"connected": self.link.connected.is_set(),
                 "subscribed": self.link.subscribed.is_set(),
                 "evaluated": self.first_evaluation.is_set(),
                 "publishing": self.publishing(),
                 "receiving": receiving,
                 "conditions": self.conditions_flowing()}
        return all(parts.values()), parts

    def conditions_flowing(self) -> bool:
        """Conditions go out: one was published within ``CONDITIONS_LATE_FACTOR`` times the
        conditions interval (or a few ticks, when longer), by the monotonic clock. True
        where none are due (no interval, no space this instance evaluates)."""
        every = self.engine.publication.conditions_every_s
        if every <= 0 or not self.engine.owned.any():
            return True
        if self.group is not None and not self.group.holding.any():
            return True
        limit = max(CONDITIONS_LATE_FACTOR * every, every + 3 * self.tick_s)
        return self.clock.monotonic() - self.last_conditions_sent < limit

    def publishing(self) -> bool:
        """The broker takes what we publish: no event waits after a refusal, no refusal in
        the last ``RETRY_REFUSED_S``, and (MQTT 3.1.1) the last event came back."""
        return (not self.refused and self.publishing_ok
                and self.clock.monotonic() - self.last_refusal >= RETRY_REFUSED_S)

    # ------------------------------------------------------------------ calendar jobs
    def _schedule(self) -> None:
        if self.clock.simulated:
            # a simulated clock (the demo): the engine loop ticks by itself and there are
            # no calendar jobs
            return
        tz = self.engine.state.tz
        now = self.clock.now()
        for name, trigger in (("rollup", CronTrigger(hour=0, minute=0, second=30, timezone=tz)),
                              ("prune", CronTrigger(hour=3, minute=17, timezone=tz)),
                              ("digest", CronTrigger(hour=7, minute=0, timezone=tz)),
                              ("report", CronTrigger(hour=6, minute=30, timezone=tz))):
            job = CalendarJob(name, trigger, now - 1.0)
            job.advance(now - 1.0)
            self.calendar.append(job)

    def _check_clock(self) -> None:
        """Take wall-clock steps into account and run the calendar jobs that are due
        (once each)."""
        now = self._now()
        for job in self.calendar:
            if now >= job.due:
                job.advance(now)
                self.jobs.put(job.name)

    def _now(self) -> float:
        """The wall time to give the engine, after any step of the wall clock since the
        last look has been handed to it (so a time after a step never meets timers set
        before it)."""
        now, mono = self.clock.now(), self.clock.monotonic()
        if self.clock.simulated:
            return now
        last_now, last_mono = self.wall_seen
        drift = (now - last_now) - (mono - last_mono)
        if abs(drift) < SHIFT_TOLERANCE_S:
            return now
        self.wall_seen = (now, mono)
        if abs(drift) > STEP_TOLERANCE_S:
            direction = "forward" if drift > 0 else "backward"
            self.metrics.clock_steps.labels(direction=direction).inc()
            log.warning("the wall clock stepped %s by %.0f s; timestamps follow it, "
                        "durations (shelving, delays, reminders, schedules, outbox expiry, "
                        "escalation timers) are kept by the monotonic clock", direction, abs(drift))
        else:
            log.info("the wall clock moved %.1f s against the monotonic clock", drift)
        self.engine_clock_stepped(now, drift)
        return now

    def engine_clock_stepped(self, now: float, drift: float) -> None:
        """Move the engine's timers, the outbox's expiry and the escalation timers by a step
        of the wall clock, and store the advisories' moved timers."""
        self.store.outbox_rebase(drift)
        if self.delivery is not None:
            self.delivery.clock_stepped(drift)
        hook = getattr(self.engine, "clock_stepped", None)
        if hook is not None:
            effects = hook(now, drift)
            if effects:
                self.execute(effects)

    # ------------------------------------------------------------------ effects
    def execute(self, effects: list[Effect]) -> None:
        """Store everything first (one transaction), then publish. One instance of a group
        carries out only what its leases allow now (:meth:`Group.fence`)."""
        if self.group is not None:
            effects = self.group.fence(effects)
        now = self.clock.now()
        sends: list[tuple[int, Publish]] = []
        staged = False
        with self.store.transaction():
            for e in effects:
                if isinstance(e, Persist):
                    self._persist(e, now)
                elif "/events/" in e.topic and e.qos == 1:
                    assert e.payload is not None
                    _identify(e.payload)
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
                self._hand_over(seq, e.topic, e.payload or {})
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

    def _hand_over(self, seq: int, topic: str, payload: dict[str, Any]) -> None:
        """Give an outbox row to the client, unless it already holds it."""
        if seq in self.handed:
            return
        if self.group is not None and not self.group.allows(payload):
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
            _identify(e.record)
            self.store.add_event(e.key, now, e.record)
        elif e.kind == "sample":
            assert e.record is not None
            self.store.add_sample(float(e.record["t"]), e.record)
        elif e.kind == "daily_means":
            assert e.record is not None
            self.store.put("daily_means", e.record["newest_first"])

    def _flush_after_connect(self) -> None:
        """Deliver, in order, every event the broker has not acknowledged and the client
        does not already hold (it re-sends those itself), then the latest state of every
        retained advisory that changed while disconnected."""
        for seq, topic, payload in self.store.outbox():
            if seq in self.handed or seq in self.refused:
                continue
            self._hand_over(seq, topic, payload)
            if not self.link.connected.is_set():
                return
        for topic, e in list(self.pending_retained.items()):
            if self.group is not None and not self.group.fence([e]):
                self.pending_retained.pop(topic, None)  # its shard's lease lapsed meanwhile
                continue
            if self.link.publish(topic, e.payload, e.qos, True, e.expiry_s) is not None:
                self.pending_retained.pop(topic, None)
        self.engine.republish_all()  # live advisories and conditions at the next tick
        self.dirty = True

    def _outbox_upkeep(self) -> None:
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
                self._publish_refused(topic or f"{self._prefix()}/events/#",
                                      f"not seen back within {ECHO_TIMEOUT_S:g} s of the "
                                      "broker's acknowledgement")
        if self.refusal_episode and self.publishing():
            self.refusal_episode = False
            log.info("the broker takes what the service publishes again")
        if self.refused and self.link.connected.is_set():
            for seq, topic, payload in self.store.outbox():
                at = self.refused.get(seq)
                if at is not None and mono - at >= RETRY_REFUSED_S:
                    self._hand_over(seq, topic, payload)
        if mono - self.last_expire < EXPIRE_EVERY_S:
            return
        self.last_expire = mono
        now = self._now()
        expired = self.store.outbox_expire(now - self.outbox_max_age_s, self.outbox_max)
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
                  "beyond %d rows)", len(expired), self.outbox_max_age_s, self.outbox_max)
        notice = {"schema": "thermowarden.event/1", "event": "notice", "at": _iso(now),
                  "audience": "integrator", "kind": "events_expired",
                  "count": len(expired),
                  "text": f"{len(expired)} event(s) could not be delivered to the broker and "
                          "expired from the outbox; check the broker's ACL and connection",
                  "event_ids": gone[:100]}
        self._notice(notice, now)

    def _prefix(self) -> str:
        return self.command_prefix.removesuffix("/commands/")

    def _notice(self, notice: dict[str, Any], now: float) -> None:
        """An integrator notice about the broker refusing or losing what the service
        publishes: stored with the events, handed to webhook and e-mail delivery where the
        integrator has it, and published once over MQTT, not through the outbox (so a
        notice the broker refuses too is not offered again, does not expire into another
        notice, and starts no loop)."""
        _identify(notice)
        with self.store.transaction():
            self.store.add_event(f"notice.{notice['kind']}.{int(now)}", now, notice)
        if self.delivery is not None:
            self.delivery.offer("integrator", notice)
        topic = f"{self._prefix()}/events/integrator/{NOTICE_TOPIC_SPACE}"
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
        notice = {"schema": "thermowarden.event/1", "event": "notice", "at": _iso(now),
                  "audience": "integrator", "kind": "publishes_refused", "count": 1,
                  "protocol": protocol, "topic": topic[:512], "reason": reason[:200],
                  "text": f"The broker refuses what the service publishes (first: {topic[:200]}"
                          f", {reason[:200]}). Events wait in the outbox and expire after "
                          f"{self.outbox_max_age_s:.0f} s; advisories and conditions may not "
                          "reach anyone. Check the broker's ACL for the service's user: it "
                          f"must be allowed to write {self._prefix()}/#."}
        log.error("publishes refused by the broker (%s, %s): the integrator is notified once "
                  "for this episode", topic[:200], reason[:200])
        self._notice(notice, now)

    # ------------------------------------------------------------------ the loop
    def _handle_control(self, c: Control) -> None:
        if c.kind == "connected":
            log.info("connected to the broker %s:%s", self.link.host, self.link.port)
            if self.group is not None:
                self.group.connected()
            self._flush_after_connect()
        elif c.kind == "subscribed":
            log.info("subscribed to %d topic filter(s)", len(self.link.subscriptions))
        elif c.kind == "disconnected":
            log.warning("disconnected from the broker (%s)", c.reason)
        elif c.kind == "refused":
            log.error("the broker refused: %s", c.reason)
        elif c.kind == "dropped":  # fenced: not sent again after a reconnect
            seq = self.inflight.pop(c.mid, None)
            if seq is not None:
                self.handed.pop(seq, None)
                self.store.outbox_done(seq)
            self.metrics.group_fenced.inc()
        elif c.kind == "puback":
            seq = self.inflight.pop(c.mid, None)
            if seq is not None:
                self.handed.pop(seq, None)
            if c.failed:
                self.metrics.publish_failures.labels(reason=c.reason[:40]).inc()
                self.last_refusal = self.clock.monotonic()
                self._publish_refused(c.topic or f"{self._prefix()}/#",
                                      f"reason code {c.reason}")
                if seq is not None:
                    self.refused[seq] = self.clock.monotonic()
                ok, dropped = self.limiter.allow("publish-refused")
                if ok:
                    log.error("the broker refused a publish (reason %s)%s; events stay in the "
                              "outbox until they expire", c.reason,
                              f" ({dropped} similar suppressed)" if dropped else "")
            else:
                if seq is not None:
                    self.store.outbox_done(seq)
                    if self.echo:
                        for k, (sq, _) in self.awaiting_echo.items():
                            if sq == seq:
                                self.awaiting_echo[k] = (seq, self.clock.monotonic()
                                                         + ECHO_TIMEOUT_S)
                                break

    def _drain(self) -> int:
        """Take up to ``DRAIN_BATCH`` messages in the order they came: runs of sensor
        messages go to the engine in one call each, the others one by one. Returns how many
        were taken."""
        batch = self.inbox.take(DRAIN_BATCH)
        run: list[SensorMessage] = []
        for m in batch:
            if m.__class__ is tuple:
                run.append(m)
            else:
                if run:
                    self._sensors(run)
                    run = []
                self._handle_message(m)  # type: ignore[arg-type]
        if run:
            self._sensors(run)
        return len(batch)

    def _sensors(self, run: list[SensorMessage]) -> None:
        self.last_sensor = self.clock.monotonic()
        rejections = self.engine.messages(run)
        self.dirty = True
        if rejections:
            self._rejected(rejections)

    def _rejected(self, rejections: list[Rejection]) -> None:
        """Count every rejection (one metric update per reason, not per message: a flood
        of bad payloads does not take the metric's lock for each); log one line per point
        and reason per ``REJECTION_LOG_INTERVAL_S`` (the first at once, then how many more
        came: :meth:`_rejection_summaries`)."""
        for reason, count in Counter(r.reason for r in rejections).items():
            self.metrics.rejected.labels(reason=reason).inc(count)
        for r in rejections:
            if self.rejection_log.first(f"{r.reason}|{r.point}", f"on {r.topic}: {r.detail}"):
                log.log(_rejection_level(r.reason), "rejected %s on %s [%s]: %s (one line "
                        "per point and reason every %.0f s; all are counted)", r.reason,
                        r.topic, r.point, r.detail, self.rejection_log.interval_s)

    def _rejection_summaries(self) -> None:
        """One line per point and reason whose interval ended with rejections not logged."""
        for key, count, last in self.rejection_log.due():
            reason, point = key.split("|", 1)
            log.log(_rejection_level(reason), "rejected %s [%s]: %d more in the last %.0f s "
                    "(the last %s)", reason, point, count, self.rejection_log.interval_s, last)

    def _handle_message(self, m: Incoming) -> None:
        if m.kind == "command":
            self._handle_command(m)
            return
        if m.kind == "echo":
            self._echo(m.payload)
            return
        if m.kind == "sys":
            self._sys(m.topic, m.payload)
            return
        if m.kind == "oversize":
            self.last_sensor = self.clock.monotonic()
            self._rejected(self.engine.oversized(m.topic, m.oversize))
            return
        if m.kind == "watch":
            if self.group is not None:
                self._group_step(self.group.receive, m.topic, m.payload)
            return
        self._sensors([(m.topic, m.payload, m.received, m.retained)])

    def _group_step(self, step: Callable[..., None], *args: Any) -> None:
        """A step of the group (a record from the broker, the periodic update): whatever
        goes wrong in it is counted and logged, never the end of the engine thread (the
        records come from anyone who may publish on the group's topics)."""
        try:
            step(*args)
        except Exception:  # noqa: BLE001 - logged with its traceback and counted
            self.metrics.group_errors.inc()
            ok, dropped = self.limiter.allow("group-error")
            if ok:
                log.exception("group step %s failed%s", getattr(step, "__name__", step),
                              f" ({dropped} similar suppressed)" if dropped else "")

    def handle_command(self, m: Incoming) -> None:
        """Act on a command now (a group's new holder, for commands kept as a standby)."""
        self._handle_command(m)

    def _handle_command(self, m: Incoming) -> None:
        """``<prefix>/commands/<audience>/<verb>[/<user>]``: the audience in the topic lets a
        broker ACL decide who may act on whose advisories (the engine checks that it matches
        the advisory's); ``<user>`` is recorded as who acted, which the broker vouches for
        only when its ACL lets each person write to topics ending in their own name. The
        configured MQTT 5 user property (set by a trusted gateway) takes precedence."""
        if not m.payload and not m.oversize and m.on_reply is None:
            # the empty message that clears a retained command (ours, below, or anyone's):
            # no command, nothing to answer; answered and cleared again, it came back to
            # every instance on MQTT 3.1.1, for ever (about 60 a second on nats-server)
            return
        parts = m.topic[len(self.command_prefix):].split("/")
        now = self._now()
        verb = parts[-1]
        audience = parts[0] if len(parts) in (2, 3) else None
        verb = parts[1] if len(parts) in (2, 3) else verb
        if m.oversize:
            reply: dict[str, Any] = {
                "schema": "thermowarden.reply/1", "ok": False, "verb": verb[:32],
                "error": f"the command body has {m.oversize} bytes; at most "
                         f"{self.link.max_command_bytes} are accepted",
                "request_id": None, "at": _iso(now)}
            effects: list[Effect] = []
        elif audience is None:
            reply = {"schema": "thermowarden.reply/1", "ok": False, "verb": verb[:32],
                     "error": "commands go to <prefix>/commands/<audience>/<verb> (audience "
                              "facilities, safety or integrator)",
                     "request_id": None, "at": _iso(now)}
            effects = []
        elif self.group is not None and m.on_reply is not None and self.group.route(
                m, _advisory_id(m.payload), keep=False) != "answer":
            # from this instance's web page: only the holder of the shard may act on it
            reply = {"schema": "thermowarden.reply/1", "ok": False, "verb": verb[:32],
                     "error": "this instance of the group does not hold the shard of that "
                              "advisory; use the holder's page (its status record names "
                              "its shards) or send the command over MQTT",
                     "request_id": None, "at": _iso(now)}
            effects = []
        else:
            if self.group is not None and m.on_reply is None and \
                    self.group.route(m, _advisory_id(m.payload)) != "answer":
                return  # every instance receives it: the holder of its shard answers
            identity = m.identity or (parts[2] if len(parts) == 3 else None)
            reply, effects = self.engine.command(verb, m.payload, now, audience=audience,
                                                 identity=identity)
            if self.group is not None:  # fenced as records are (dropped, not sent late)
                reply.update(self.group.fencing(_advisory_id(m.payload)))
        label = verb if verb in KNOWN_VERBS else "unknown"
        self.metrics.commands.labels(verb=label, ok=str(reply["ok"]).lower()).inc()
        self.execute(effects)
        target = self.reply_topic
        if not m.oversize:
            for wanted in (_reply_to(m.payload), m.response_topic):
                if wanted and wanted.startswith(self.reply_topic + "/"):
                    target = wanted
        self.link.publish(target, reply, 1, False, correlation=m.correlation)
        if m.on_reply is not None:  # from the web page or API, which waits for the reply
            m.on_reply(reply)
        elif not self.link.v5:
            # MQTT 3.1.1 cannot say whether this was retained: clear it in case it was
            self.link.client.publish(m.topic, b"", qos=1, retain=True)
        if not reply["ok"]:
            ok, dropped = self.limiter.allow(f"command|{label}")
            if ok:
                log.info("command %s refused: %s%s", verb[:64], reply.get("error"),
                         f" ({dropped} similar suppressed)" if dropped else "")
        self.dirty = True

    def _echo(self, payload: bytes) -> None:
        """MQTT 3.1.1: one of our events came back; the broker delivered it."""
        try:
            data = json.loads(payload)
        except ValueError:
            return
        if isinstance(data, dict) and self.awaiting_echo.pop(str(data.get("event_id")),
                                                             None) is not None:
            self.publishing_ok = True

    def _sys(self, topic: str, payload: bytes) -> None:
        try:
            value = float(payload.decode().split()[0])
        except (ValueError, IndexError, UnicodeDecodeError):
            return
        if topic.endswith("/publish/messages/dropped"):
            self.metrics.broker_dropped.set(value)
        elif topic.endswith("/store/messages/count"):
            self.metrics.broker_stored.set(value)

    def _sync_counters(self) -> None:
        """Copy the network thread's plain counter and the ingest counters into the
        metrics (cheaper than a locked metric update per message)."""
        self._rejection_summaries()
        received = self.link.received
        if received != self.received_seen:
            self.metrics.received.inc(received - self.received_seen)
            self.received_seen = received
        self.metrics.queue_depth.set(self.inbox.qsize())
        ingest = getattr(self.engine, "ingest", None)
        if ingest is None:
            return
        for name, counts, metric in (("accepted", ingest.accepted_by_quantity,
                                      self.metrics.readings),
                                     ("missed", ingest.missed_by_quantity,
                                      self.metrics.missed)):
            seen = self.counts_seen[name]
            for q, n in counts.items():
                if n != seen.get(q, 0):
                    metric.labels(quantity=q).inc(n - seen.get(q, 0))
                    seen[q] = n

    def evaluate(self) -> None:
        now = self._now()
        t0 = time.perf_counter()
        effects = self.engine.tick(now)
        self.execute(effects)
        took = time.perf_counter() - t0
        self.metrics.evaluation_seconds.observe(took)
        self.metrics.last_evaluation.set(now)
        self.metrics.active.clear()
        for (rule, prio), count in self.engine.active_counts().items():
            self.metrics.active.labels(rule=rule, priority=prio).set(count)
        self.dirty = False
        self.last_eval = self.clock.monotonic()
        if self.group is not None:
            self.group.evaluated(now)
        self._report_failures()
        if not self.first_evaluation.is_set():
            self.first_evaluation.set()
            log.info("first evaluation done in %.0f ms", took * 1000)

    def _report_failures(self) -> None:
        """Log and count each index computation that started failing for a space (the
        integrator also gets the sensor_health advisory naming the space and the index)."""
        failures = self.engine.evaluation.failures
        now_failing = {(i, group) for i, (group, _) in failures.items()}
        for i, group in now_failing - self.failures_seen:
            self.metrics.computation_failures.labels(index=group).inc()
            log.error("space %s: the %s computation failed (%s); the other spaces go on",
                      self.engine.model.space_ids[i], group, failures[i][1])
        for i, group in self.failures_seen - now_failing:
            log.info("space %s: the %s computation works again",
                     self.engine.model.space_ids[i], group)
        self.failures_seen = now_failing

    def _job(self, name: str) -> None:
        now = self._now()
        if name == "rollup":
            self.evaluate()
        elif name == "prune":
            keep = self.engine.config.retention
            n = self.store.prune_events(now - keep.events_days * 86_400)
            m = self.store.prune_samples(now - keep.samples_days * 86_400)
            log.info("pruned %d event(s) older than %g days and %d sample(s) older than %g "
                     "days", n, keep.events_days, m, keep.samples_days)
        elif name == "reload":
            self._start_reload()
        elif name == "digest":
            self.execute(self.engine.digest(now, self.last_digest))
            self.last_digest = now
        elif name == "report":
            self._report_off_thread(now)
        elif name == "step":
            while self._drain():  # every message received before the step is taken in
                pass
            self._check_clock()
            self.evaluate()

    def step(self) -> None:
        """Ask for one step of a driven clock (see :class:`Clock`): take in what was
        received, run the calendar jobs now due, evaluate; :attr:`steps_done` counts it once
        it and the jobs it made due are done. Enqueues only."""
        self.jobs.put("step")

    def request_reload(self) -> None:
        """Ask for the configuration to be reloaded (from a signal handler: enqueue only)."""
        self.jobs.put("reload")

    def _start_reload(self) -> None:
        """Load and build the new configuration beside the engine thread, which goes on
        evaluating meanwhile; :meth:`_finish_reload` swaps it in."""
        if self.reloader is None:
            log.warning("reload requested but not available here")
            return
        if self.reloading.is_set():
            log.info("a reload is already in progress")
            return
        self.reloading.set()
        self.notify(f"RELOADING=1\nMONOTONIC_USEC={time.monotonic_ns() // 1000}")
        old = self.engine
        reloader = self.reloader

        def prepare() -> None:
            try:
                self.reloads.put(reloader(old))
                return
            except ReloadRefused as exc:
                for line in exc.lines:
                    log.error("reload refused: %s", line)
                log.error("reload refused: %d problem(s); still running the previous "
                          "configuration", len(exc.lines))
            except Exception:  # noqa: BLE001 - a failed reload must not stop the service
                log.exception("reload failed; still running the previous configuration")
            self.reloading.clear()
            self.notify("READY=1")

        threading.Thread(target=prepare, name="thermowarden-reload", daemon=True).start()

    def _finish_reload(self, prepared: Prepared) -> None:
        """Carry the running state into the new engine and swap it in (engine thread)."""
        try:
            try:
                result = finish_reload(self.engine, prepared)
            except Exception:  # noqa: BLE001 - the old engine is intact: keep running it
                log.exception("reload failed; still running the previous configuration")
                return
            self.engine = result.engine
            for note in result.notes:
                log.info("%s", note)
            for observer in self.reload_observers:
                observer(result.engine)
            self.execute(result.effects)
            config = result.engine.config
            if self.group is not None:
                self.group.reapplied()
            else:
                subs = result.model.subscriptions(per_space=self.per_space_subscriptions)
                self.link.set_subscriptions(subs + [f"{self.command_prefix}#"])
            if self.delivery is not None:
                self.delivery.reconfigure(config.delivery, config.site.timezone)
            self.dirty = True
            freeze_heap()
            log.info("reloaded: %d space(s), %d point(s), %d rule(s)",
                     result.model.n_spaces, len(result.model.points), len(result.engine.rules))
        finally:
            self.reloading.clear()
            self.notify("READY=1")

    def _report_off_thread(self, now: float) -> None:
        """Start yesterday's report on a thread of its own: it reads the store through its
        own connection, so the engine thread goes on ticking (a day of 10,000 spaces takes
        tens of seconds)."""
        running = self.report_thread
        if running is not None and running.is_alive():
            log.warning("the daily report is still being written; this one is skipped")
            return
        config, path = self.engine.config, self.store.path

        def work() -> None:
            try:
                self.daily_report(now, config, path)
            except Exception:  # noqa: BLE001 - a failed report must not stop the service
                self.metrics.job_errors.labels(job="report", kind="error").inc()
                log.exception("the daily report failed")

        thread = threading.Thread(target=work, name="thermowarden-report", daemon=True)
        thread.start()
        self.report_thread = thread  # published once started: others may join it

    def daily_report(self, now: float, config: SiteConfig | None = None,
                     store_path: pathlib.Path | None = None) -> pathlib.Path:
        """Write yesterday's reports (local calendar day) next to the store: the site's,
        and one per building or area; returns the site's. Reads the store through a
        connection of its own (any thread)."""
        import datetime as dt
        import zoneinfo

        from thermowarden.shell.report import write_reports

        config = config or self.engine.config
        store_path = store_path or self.store.path
        tz = zoneinfo.ZoneInfo(config.site.timezone)
        today = dt.datetime.fromtimestamp(now, tz).date()
        day = today - dt.timedelta(days=1)
        start = dt.datetime.combine(day, dt.time(0), tz).timestamp()
        end = dt.datetime.combine(today, dt.time(0), tz).timestamp()
        began = time.monotonic()
        written = write_reports(config, store_path, store_path.parent / "reports", start, end,
                                day.isoformat())
        log.info("daily report written to %s (%d file(s), %.1f s)", written[0], len(written),
                 time.monotonic() - began)
        if self.delivery is not None:
            stem = f"{config.site.id}-{day.isoformat()}-"
            parts = {p.name[len(stem):-len(".html")]: p for p in written[1:]}
            self.delivery.offer_report(day.isoformat(), written[0], parts)
        return written[0]

    def run(self) -> None:
        """The engine thread: runs until :meth:`request_stop`; then stops in order."""
        self._schedule()
        if self.delivery is not None:
            self.delivery.start()
        self.link.start()
        if self.group is not None:
            self.group.start()
        self.evaluate()
        freeze_heap()
        ready_sent = False
        clock = self.clock
        try:
            while not self.stop_requested.is_set():
                self.last_loop = clock.monotonic()
                while True:
                    try:
                        self._handle_control(self.control.get_nowait())
                    except queue.Empty:
                        break
                if not clock.driven:
                    self._check_clock()
                stepped = 0
                try:
                    while True:
                        name = self.jobs.get_nowait()
                        stepped += name == "step"
                        try:
                            self._job(name)
                        except Exception:  # noqa: BLE001 - a failed job must not stop us
                            self.metrics.job_errors.labels(job=name, kind="error").inc()
                            log.exception("job %s failed", name)
                except queue.Empty:
                    pass
                self.steps_done += stepped
                try:
                    self._finish_reload(self.reloads.get_nowait())
                except queue.Empty:
                    pass
                self.inbox.wait(0.05)
                taken = self._drain()
                self._sync_counters()
                if self.group is not None:
                    self._group_step(self.group.update)
                if taken:
                    # let messages gather for a moment: fewer wake-ups, less contention
                    # with the network thread for the interpreter lock
                    time.sleep(BATCH_PAUSE_S)
                mono = clock.monotonic()
                since = mono - self.last_eval
                if clock.driven:
                    pass  # evaluated by its steps only
                elif not clock.simulated and mono - self.last_tick >= self.tick_s:
                    self.last_tick = mono
                    self.evaluate()
                elif (self.dirty and since >= self.prompt_eval_s) or (
                        clock.simulated and since >= self.prompt_eval_s):
                    self.evaluate()
                self._outbox_upkeep()
                ok, _ = self.ready()
                if ok and not ready_sent:
                    self.notify("READY=1")
                    self.notify("STATUS=evaluating")
                    ready_sent = True
                    log.info("ready")
                if self.watchdog_s and clock.monotonic() - self.last_watchdog >= \
                        self.watchdog_s and self.alive():
                    self.notify("WATCHDOG=1")
                    self.last_watchdog = clock.monotonic()
        finally:
            self._stop_in_order()

    def request_stop(self) -> None:
        self.stop_requested.set()

    def _stop_in_order(self) -> None:
        """Finish the tick, flush the outbox, publish offline, close the store."""
        self.notify("STOPPING=1")
        log.info("stopping: finishing the evaluation and flushing the outbox")
        try:
            self.evaluate()
        except Exception:  # noqa: BLE001
            log.exception("last evaluation failed")
        deadline = time.monotonic() + 5.0
        while self.inflight and time.monotonic() < deadline and self.link.connected.is_set():
            try:
                self._handle_control(self.control.get(timeout=0.1))
            except queue.Empty:
                pass
        if self.group is not None:
            self.group.stop()
        self.link.stop()
        if self.delivery is not None:
            self.delivery.stop()
        depth = self.store.outbox_depth()
        if depth:
            log.warning("%d event(s) not yet acknowledged stay in the outbox for the next start",
                        depth)
        self.store.close()
        self.stopped.set()
        log.info("stopped")


def _rejection_level(reason: str) -> int:
    """A SenML pack without a point's record carries nothing for it: said, not warned."""
    return logging.INFO if reason == RECORD_ABSENT else logging.WARNING


def freeze_heap() -> None:
    """Move every object alive now (configuration, engine, libraries: built at start and
    kept for the life of the process) out of the garbage collector's reach, so that its
    collections, which a flood of messages triggers often, walk only what came after.
    Called after start and after a reload (the previous engine's objects are released to
    the collector first)."""
    gc.unfreeze()
    gc.collect()
    gc.freeze()


def _iso(t: float) -> str:
    import datetime as dt

    return dt.datetime.fromtimestamp(t, dt.UTC).isoformat(timespec="seconds").replace(
        "+00:00", "Z")


def _identify(payload: dict[str, Any]) -> None:
    """Give an event its identity once (kept on every copy: stored, sent, re-sent)."""
    if "event_id" not in payload:
        payload["event_id"] = uuid.uuid4().hex


def _advisory_id(body: bytes) -> object:
    try:
        data: Any = json.loads(body.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        return None
    return data.get("advisory_id") if isinstance(data, dict) else None


def _reply_to(body: bytes) -> str | None:
    try:
        data: Any = json.loads(body.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        return None
    target = data.get("reply_to") if isinstance(data, dict) else None
    if isinstance(target, str) and target and not any(c in target for c in "+#\0"):
        return target
    return None

