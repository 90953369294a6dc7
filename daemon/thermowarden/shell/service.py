"""The running service: one engine thread, the MQTT link, the scheduler, the store, the
operations endpoint, systemd notification. Built by :func:`thermowarden.shell.bootstrap.
bootstrap`; this module executes effects and holds no rules.
"""

from __future__ import annotations

import json
import logging
import pathlib
import queue
import threading
import time
from collections.abc import Callable
from typing import Any

from apscheduler.events import EVENT_JOB_ERROR, EVENT_JOB_MISSED, JobExecutionEvent
from apscheduler.schedulers.background import BackgroundScheduler
from apscheduler.triggers.cron import CronTrigger
from apscheduler.triggers.interval import IntervalTrigger

from thermowarden.effects import Effect, Persist, Publish
from thermowarden.engine import Engine
from thermowarden.shell import systemd
from thermowarden.shell.delivery import Delivery
from thermowarden.shell.logs import RateLimiter
from thermowarden.shell.metrics import Metrics
from thermowarden.shell.mqtt_link import Control, Inbox, Incoming, MqttLink
from thermowarden.shell.reloading import Prepared, ReloadRefused, finish_reload
from thermowarden.shell.store import Store

log = logging.getLogger("thermowarden.service")

PROMPT_EVAL_S = 0.25
"""A space with new readings is evaluated within this long (not only at the next tick)."""
DRAIN_BATCH = 5000
BATCH_PAUSE_S = 0.005


class Clock:
    """Epoch seconds that advance with the monotonic clock (delays survive wall-clock steps).

    ``start`` and ``speed`` are for the demo only: a simulated day starting at ``start``
    that runs ``speed`` times faster than real time.
    """

    def __init__(self, start: float | None = None, speed: float = 1.0,
                 paused: bool = False) -> None:
        self.anchor = time.time() if start is None else start
        self.mono = time.monotonic()
        self.speed = speed
        self.paused = paused

    def now(self) -> float:
        if self.paused:
            return self.anchor
        return self.anchor + (time.monotonic() - self.mono) * self.speed

    def resume(self) -> None:
        """Start a paused (demo) clock from its anchor."""
        if self.paused:
            self.mono = time.monotonic()
            self.paused = False


class Service:
    """See the module docstring."""

    def __init__(self, engine: Engine, link: MqttLink, store: Store, metrics: Metrics,
                 inbox: Inbox, control: queue.Queue[Control],
                 command_prefix: str, reply_topic: str, clock: Clock,
                 notify: Callable[[str], bool] = systemd.notify,
                 delivery: Delivery | None = None,
                 reloader: Callable[[Engine], Prepared] | None = None,
                 per_space_subscriptions: bool = False) -> None:
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
        self.inflight: dict[int, int] = {}  # message id -> outbox seq
        self.pending_retained: dict[str, Publish] = {}
        self.dirty = False
        self.prompt_eval_s = min(PROMPT_EVAL_S, engine.config.evaluation.tick_s / clock.speed)
        self.received_seen = 0
        self.last_eval = 0.0
        self.last_loop = time.monotonic()
        self.limiter = RateLimiter()
        self.scheduler = BackgroundScheduler(timezone=engine.state.tz,
                                             job_defaults={"coalesce": True,
                                                           "max_instances": 1,
                                                           "misfire_grace_time": 30})
        self.watchdog_s = systemd.watchdog_interval_s()
        self.last_watchdog = 0.0
        self.last_digest = clock.now()

    # ------------------------------------------------------------------ health
    def alive(self) -> bool:
        return not self.stopped.is_set() and time.monotonic() - self.last_loop < 30.0

    def ready(self) -> tuple[bool, dict[str, bool]]:
        parts = {"connected": self.link.connected.is_set(),
                 "subscribed": self.link.subscribed.is_set(),
                 "evaluated": self.first_evaluation.is_set()}
        return all(parts.values()), parts

    # ------------------------------------------------------------------ scheduler
    def _schedule(self) -> None:
        sched = self.scheduler
        sched.add_listener(self._job_event, EVENT_JOB_ERROR | EVENT_JOB_MISSED)
        if self.clock.speed != 1.0:
            # a simulated clock (the demo): the engine loop ticks by itself and there are
            # no calendar jobs
            return
        tick = self.engine.config.evaluation.tick_s
        sched.add_job(self.jobs.put, IntervalTrigger(seconds=tick), args=["tick"], id="tick")
        sched.add_job(self.jobs.put, CronTrigger(hour=0, minute=0, second=30),
                      args=["rollup"], id="rollup")
        sched.add_job(self.jobs.put, CronTrigger(hour=3, minute=17), args=["prune"],
                      id="prune")
        sched.add_job(self.jobs.put, CronTrigger(hour=7, minute=0), args=["digest"],
                      id="digest")
        sched.add_job(self.jobs.put, CronTrigger(hour=6, minute=30), args=["report"],
                      id="report")
        sched.start()

    def _job_event(self, event: JobExecutionEvent) -> None:
        kind = "error" if event.code == EVENT_JOB_ERROR else "missed"
        self.metrics.job_errors.labels(job=event.job_id, kind=kind).inc()
        log.error("scheduler job %s %s: %s", event.job_id, kind, getattr(event, "exception",
                                                                          "") or "")

    # ------------------------------------------------------------------ effects
    def execute(self, effects: list[Effect]) -> None:
        now = self.clock.now()
        for e in effects:
            if isinstance(e, Persist):
                self._persist(e, now)
            elif "/events/" in e.topic and e.qos == 1:
                assert e.payload is not None
                seq = self.store.outbox_add(e.topic, e.payload, now)
                mid = self.link.publish(e.topic, e.payload, 1, False)
                if mid is not None:
                    self.inflight[mid] = seq
                if self.delivery is not None:
                    self.delivery.offer(e.topic.split("/events/", 1)[1].split("/", 1)[0],
                                        e.payload)
            elif e.retain and "/advisories/" in e.topic:
                mid = self.link.publish(e.topic, e.payload, e.qos, True, e.expiry_s)
                if mid is None:
                    self.pending_retained[e.topic] = e  # latest state wins
                else:
                    self.pending_retained.pop(e.topic, None)
            else:
                self.link.publish(e.topic, e.payload, e.qos, e.retain, e.expiry_s)
        self.metrics.outbox_depth.set(self.store.outbox_depth())

    def _persist(self, e: Persist, now: float) -> None:
        if e.kind == "advisory":
            self.store.put_advisory(e.key, e.record)
        elif e.kind == "event":
            assert e.record is not None
            self.store.add_event(e.key, now, e.record)
        elif e.kind == "sample":
            assert e.record is not None
            self.store.add_sample(float(e.record["t"]), e.record)
        elif e.kind == "daily_means":
            assert e.record is not None
            self.store.put("daily_means", e.record["newest_first"])

    def _flush_after_connect(self) -> None:
        """Deliver, in order, every event the broker has not acknowledged, then the
        latest state of every retained advisory that changed while disconnected."""
        self.inflight.clear()
        for seq, topic, payload in self.store.outbox():
            mid = self.link.publish(topic, payload, 1, False)
            if mid is None:
                return
            self.inflight[mid] = seq
        for topic, e in list(self.pending_retained.items()):
            if self.link.publish(topic, e.payload, e.qos, True, e.expiry_s) is not None:
                self.pending_retained.pop(topic, None)
        self.engine.republish_all()  # live advisories and conditions at the next tick
        self.dirty = True

    # ------------------------------------------------------------------ the loop
    def _handle_control(self, c: Control) -> None:
        if c.kind == "connected":
            log.info("connected to the broker")
            self._flush_after_connect()
        elif c.kind == "subscribed":
            log.info("subscribed to %d topic filter(s)", len(self.link.subscriptions))
        elif c.kind == "disconnected":
            log.warning("disconnected from the broker (%s)", c.reason)
        elif c.kind == "refused":
            log.error("the broker refused: %s", c.reason)
        elif c.kind == "puback":
            seq = self.inflight.pop(c.mid, None)
            if c.failed:
                self.metrics.publish_failures.labels(reason=c.reason).inc()
                log.error("the broker refused an event (reason %s); it stays in the outbox",
                          c.reason)
            elif seq is not None:
                self.store.outbox_done(seq)

    def _handle_message(self, m: Incoming) -> None:
        if m.topic.startswith(self.command_prefix):
            verb = m.topic[len(self.command_prefix):]
            now = self.clock.now()
            reply, effects = self.engine.command(verb, m.payload, now)
            self.metrics.commands.labels(verb=verb[:32], ok=str(reply["ok"]).lower()).inc()
            self.execute(effects)
            target = self.reply_topic
            for wanted in (_reply_to(m.payload), m.response_topic):
                if wanted and wanted.startswith(self.reply_topic + "/"):
                    target = wanted
            self.link.publish(target, reply, 1, False, correlation=m.correlation)
            if not reply["ok"]:
                log.info("command %s refused: %s", verb, reply.get("error"))
            self.dirty = True
            return
        rejections = self.engine.message(m.topic, m.payload, m.received)
        self.dirty = True
        for r in rejections:
            self.metrics.rejected.labels(reason=r.reason).inc()
            ok, dropped = self.limiter.allow(f"{r.reason}|{r.point}")
            if ok:
                more = f" ({dropped} similar suppressed)" if dropped else ""
                log.warning("rejected %s on %s [%s]: %s%s", r.reason, r.topic, r.point,
                            r.detail, more)

    def _sync_counters(self) -> None:
        """Copy the network thread's plain counter into the metric (cheaper than a locked
        metric update per message)."""
        received = self.link.received
        if received != self.received_seen:
            self.metrics.received.inc(received - self.received_seen)
            self.received_seen = received
        self.metrics.queue_depth.set(self.inbox.qsize())

    def evaluate(self) -> None:
        now = self.clock.now()
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
        self.last_eval = time.monotonic()
        if not self.first_evaluation.is_set():
            self.first_evaluation.set()
            log.info("first evaluation done in %.0f ms", took * 1000)

    def _job(self, name: str) -> None:
        now = self.clock.now()
        if name == "tick" or name == "rollup":
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
            self.daily_report(now)

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
            self.execute(result.effects)
            config = result.engine.config
            subs = result.model.subscriptions(per_space=self.per_space_subscriptions)
            self.link.set_subscriptions(subs + [f"{self.command_prefix}+"])
            if self.delivery is not None:
                self.delivery.reconfigure(config.delivery, config.site.timezone)
            self.dirty = True
            log.info("reloaded: %d space(s), %d point(s), %d rule(s)",
                     result.model.n_spaces, len(result.model.points), len(result.engine.rules))
        finally:
            self.reloading.clear()
            self.notify("READY=1")

    def daily_report(self, now: float) -> pathlib.Path:
        """Write yesterday's report (local calendar day) next to the store."""
        import datetime as dt

        from thermowarden.report import build_report, render_html

        tz = self.engine.state.tz
        today = dt.datetime.fromtimestamp(now, tz).date()
        day = today - dt.timedelta(days=1)
        start = dt.datetime.combine(day, dt.time(0), tz).timestamp()
        end = dt.datetime.combine(today, dt.time(0), tz).timestamp()
        config = self.engine.config
        text = render_html(config, build_report(
            config, self.store.samples_between(start, end),
            self.store.events_between(start - 7 * 86_400, end), start, end), start, end)
        folder = self.store.path.parent / "reports"
        folder.mkdir(parents=True, exist_ok=True)
        path = folder / f"{config.site.id}-{day.isoformat()}.html"
        path.write_text(text, encoding="utf-8")
        log.info("daily report written to %s", path)
        return path

    def run(self) -> None:
        """The engine thread: runs until :meth:`request_stop`; then stops in order."""
        self._schedule()
        if self.clock.speed != 1.0:
            self.scheduler.start()
        if self.delivery is not None:
            self.delivery.start()
        self.link.start()
        self.evaluate()
        ready_sent = False
        try:
            while not self.stop_requested.is_set():
                self.last_loop = time.monotonic()
                while True:
                    try:
                        self._handle_control(self.control.get_nowait())
                    except queue.Empty:
                        break
                try:
                    while True:
                        self._job(self.jobs.get_nowait())
                except queue.Empty:
                    pass
                try:
                    self._finish_reload(self.reloads.get_nowait())
                except queue.Empty:
                    pass
                self.inbox.wait(0.05)
                batch = self.inbox.take(DRAIN_BATCH)
                for m in batch:
                    self._handle_message(m)
                self._sync_counters()
                if batch:
                    # let messages gather for a moment: fewer wake-ups, less contention
                    # with the network thread for the interpreter lock
                    time.sleep(BATCH_PAUSE_S)
                since = time.monotonic() - self.last_eval
                if (self.dirty and since >= self.prompt_eval_s) or (
                        self.clock.speed != 1.0 and since >= self.prompt_eval_s):
                    self.evaluate()
                ok, _ = self.ready()
                if ok and not ready_sent:
                    self.notify("READY=1")
                    self.notify("STATUS=evaluating")
                    ready_sent = True
                    log.info("ready")
                if self.watchdog_s and time.monotonic() - self.last_watchdog >= self.watchdog_s \
                        and self.alive():
                    self.notify("WATCHDOG=1")
                    self.last_watchdog = time.monotonic()
        finally:
            self._stop_in_order()

    def request_stop(self) -> None:
        self.stop_requested.set()

    def _stop_in_order(self) -> None:
        """Finish the tick, flush the outbox, publish offline, close the store."""
        self.notify("STOPPING=1")
        log.info("stopping: finishing the evaluation and flushing the outbox")
        try:
            if self.scheduler.running:
                self.scheduler.shutdown(wait=False)
        except Exception:  # noqa: BLE001 - stopping regardless
            pass
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


def _reply_to(body: bytes) -> str | None:
    try:
        data: Any = json.loads(body.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        return None
    target = data.get("reply_to") if isinstance(data, dict) else None
    if isinstance(target, str) and target and not any(c in target for c in "+#\0"):
        return target
    return None

