"""The engine loop: one thread that takes in what the MQTT link received, feeds the engine,
evaluates on time, runs the jobs put on its queue, and hands what the engine returns to the
outbox; with the health it reports (alive, ready) and systemd notification. Built by
:func:`thermowarden.shell.bootstrap.bootstrap`; it executes effects and holds no rules.

Its parts, each in a module of its own: :mod:`~thermowarden.shell.outbox` (store, then
publish, and see every event through to the broker), :mod:`~thermowarden.shell.
advisory_commands` (commands and their replies), :mod:`~thermowarden.shell.scheduled_jobs`
(rollup, prune, digest, report), :mod:`~thermowarden.shell.reloading` (reload beside the
engine thread) and :mod:`~thermowarden.shell.intake_counts` (what is received, accepted and
rejected, into the metrics and the log).

Time: timestamps are wall time, read at each use (a corrected system clock is followed at
once); durations are measured on the monotonic clock. The shell reads both; the engine is
fed the wall time and, before it is fed a time after a step, the step itself (the wall
clock's change minus the monotonic clock's, :meth:`Engine.clock_stepped`,
:class:`~thermowarden.shell.clock.StepWatch`), which moves every timer of the engine (delays,
shelving and its daily budget, reminders, the conditions and sample schedules) and the
outbox's expiry by the step: so each ends after the same monotonic time as without it, and no
schedule stops. The evaluation tick, retries and readiness run on the monotonic clock
directly; the calendar jobs at a wall time.
"""

from __future__ import annotations

import logging
import queue
import threading
import time
from collections.abc import Callable
from typing import Any

from thermowarden.effects import Effect
from thermowarden.engine import Engine
from thermowarden.shell import systemd
from thermowarden.shell.advisory_commands import AdvisoryCommands
from thermowarden.shell.clock import Clock, StepWatch
from thermowarden.shell.delivery import Delivery
from thermowarden.shell.group.instance import Group
from thermowarden.shell.heap import freeze_heap
from thermowarden.shell.inbox import Control, Inbox, Incoming, SensorMessage
from thermowarden.shell.intake_counts import IntakeCounts
from thermowarden.shell.logs import RateLimiter
from thermowarden.shell.metrics import Metrics
from thermowarden.shell.mqtt_link import MqttLink
from thermowarden.shell.outbox import Outbox
from thermowarden.shell.reloading import Prepared, Reloads
from thermowarden.shell.scheduled_jobs import ScheduledJobs
from thermowarden.shell.store import Store

log = logging.getLogger("thermowarden.service")

PROMPT_EVAL_S = 0.25
"""A space with new readings is evaluated within this long (not only at the next tick)."""
DRAIN_BATCH = 5000
BATCH_PAUSE_S = 0.005
CONDITIONS_LATE_FACTOR = 2.5
"""Not ready when no conditions message went out for this many conditions intervals."""


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
        self.clock = clock
        self.notify = notify
        self.delivery = delivery
        """Webhook and e-mail delivery (its own worker thread), when configured."""
        self.stop_requested = threading.Event()
        self.stopped = threading.Event()
        self.first_evaluation = threading.Event()
        self.jobs: queue.Queue[str] = queue.Queue()
        self.steps_done = 0
        """Steps asked for by :meth:`step` and finished (a driven clock only)."""
        self.dirty = False
        self.tick_s = cfg.evaluation.tick_s
        self.prompt_eval_s = min(PROMPT_EVAL_S, cfg.evaluation.tick_s / clock.speed)
        self.last_eval = clock.monotonic()
        self.last_tick = clock.monotonic()
        self.last_loop = clock.monotonic()
        self.started = clock.monotonic()
        self.last_sensor: float | None = None
        self.silence_limit_s = cfg.ingest.silence_limit_s
        self.limiter = RateLimiter()
        self.steps = StepWatch(clock, metrics)
        self.watchdog_s = systemd.watchdog_interval_s()
        self.last_watchdog = 0.0
        self.failures_seen: set[tuple[int, str]] = set()
        self.observers: list[Callable[[list[Effect]], None]] = []
        """Called with every batch of executed effects (the web page's live view)."""
        self.reload_observers: list[Callable[[Engine], None]] = []
        """Called with the new engine after every reload (the web page's site directory)."""
        self.group: Group | None = None
        """One instance of a group sharing the site's spaces (``run --group``)."""
        self.outbox = Outbox(self, store, link, metrics, clock, delivery,
                             command_prefix.removesuffix("/commands/"), cfg.outbox.max_events,
                             cfg.outbox.max_age_s, self.observers)
        self.commands = AdvisoryCommands(self, link, metrics, command_prefix, reply_topic)
        self.scheduled = ScheduledJobs(self, store, clock, metrics, delivery, self.jobs)
        self.reloads = Reloads(self, reloader, notify, link, command_prefix,
                               per_space_subscriptions, delivery)
        self.intake = IntakeCounts(metrics, link, inbox, clock)

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
                 "publishing": self.outbox.publishing(),
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
        return self.clock.monotonic() - self.outbox.last_conditions_sent < limit

    # ------------------------------------------------------------------ time
    def wall_now(self) -> float:
        """The wall time to give the engine, after any step of the wall clock since the
        last look has been handed to it (so a time after a step never meets timers set
        before it)."""
        now, drift = self.steps.look()
        if drift:
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

    def _check_clock(self) -> None:
        """Take wall-clock steps into account and put the calendar jobs that are due on
        the job queue (once each)."""
        self.scheduled.put_due(self.wall_now())

    # ------------------------------------------------------------------ effects
    def execute(self, effects: list[Effect]) -> None:
        """Store everything first (one transaction), then publish (:class:`Outbox`)."""
        self.outbox.execute(effects)

    # ------------------------------------------------------------------ the loop
    def _handle_control(self, c: Control) -> None:
        if c.kind == "connected":
            log.info("connected to the broker %s:%s", self.link.host, self.link.port)
            if self.group is not None:
                self.group.connected()
            if self.outbox.flush_after_connect():
                self.engine.republish_all()  # live advisories and conditions at the next tick
                self.dirty = True
        elif c.kind == "subscribed":
            log.info("subscribed to %d topic filter(s)", len(self.link.subscriptions))
        elif c.kind == "disconnected":
            log.warning("disconnected from the broker (%s)", c.reason)
        elif c.kind == "refused":
            log.error("the broker refused: %s", c.reason)
        elif c.kind == "dropped":  # fenced: not sent again after a reconnect
            self.outbox.dropped(c)
        elif c.kind == "puback":
            self.outbox.acknowledged(c)

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
            self.intake.rejected(rejections)

    def _handle_message(self, m: Incoming) -> None:
        if m.kind == "command":
            self.commands.receive(m)
            return
        if m.kind == "echo":
            self.outbox.echoed(m.payload)
            return
        if m.kind == "sys":
            self.intake.broker_figure(m.topic, m.payload)
            return
        if m.kind == "oversize":
            self.last_sensor = self.clock.monotonic()
            self.intake.rejected(self.engine.oversized(m.topic, m.oversize))
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
        self.commands.handle(m)

    def evaluate(self) -> None:
        now = self.wall_now()
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
        now = self.wall_now()
        if name == "rollup":
            self.evaluate()
        elif name == "prune":
            self.scheduled.prune(now)
        elif name == "reload":
            self.reloads.start()
        elif name == "digest":
            self.scheduled.digest(now)
        elif name == "report":
            self.scheduled.report_off_thread(now)
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

    def run(self) -> None:
        """The engine thread: runs until :meth:`request_stop`; then stops in order."""
        self.scheduled.schedule()
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
                self.reloads.finish_prepared()
                self.inbox.wait(0.05)
                taken = self._drain()
                self.intake.sync(self.engine)
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
                self.outbox.upkeep()
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
        while self.outbox.inflight and time.monotonic() < deadline and \
                self.link.connected.is_set():
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
