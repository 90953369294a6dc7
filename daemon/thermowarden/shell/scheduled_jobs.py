"""The jobs due at a time of the site's calendar day: the daily rollup (an evaluation just after
midnight), pruning the store, the morning digest and yesterday's report.

Each is due at a wall time (the site's time zone) and fires once when the wall clock reaches
it, so a step forward runs a skipped job once and a step back does not run it again. A due job
is put on the engine loop's job queue (:mod:`thermowarden.shell.service`), which runs it; the
daily report is then written on a thread of its own.
"""

from __future__ import annotations

import datetime as dt
import logging
import pathlib
import queue
import threading
import time
import zoneinfo
from dataclasses import dataclass
from typing import TYPE_CHECKING, Protocol

from apscheduler.triggers.cron import CronTrigger

if TYPE_CHECKING:
    from thermowarden.config import SiteConfig
    from thermowarden.effects import Effect
    from thermowarden.engine import Engine
    from thermowarden.shell.clock import Clock
    from thermowarden.shell.delivery import Delivery
    from thermowarden.shell.metrics import Metrics
    from thermowarden.shell.report import RuleFacts
    from thermowarden.shell.store import Store

log = logging.getLogger("thermowarden.service")


@dataclass
class CalendarJob:
    """A job due at a wall time (local calendar of the site)."""

    name: str
    trigger: CronTrigger
    due: float

    def advance(self, now: float) -> None:
        """The next due time strictly after both ``now`` and the current one."""
        after = max(now, self.due) + 1.0
        tz = self.trigger.timezone
        nxt = self.trigger.get_next_fire_time(None, dt.datetime.fromtimestamp(after, tz))
        self.due = nxt.timestamp() if nxt is not None else float("inf")


class JobsHost(Protocol):
    """What the scheduled jobs use of the service that runs them."""

    engine: Engine

    def execute(self, effects: list[Effect]) -> None:
        """Store, then publish."""
        ...


class ScheduledJobs:
    """The calendar (:attr:`calendar`) and the jobs that are not an evaluation."""

    def __init__(self, host: JobsHost, store: Store, clock: Clock, metrics: Metrics,
                 delivery: Delivery | None, jobs: queue.Queue[str]) -> None:
        self.host = host
        self.store = store
        self.clock = clock
        self.metrics = metrics
        self.delivery = delivery
        self.jobs = jobs
        """The engine loop's job queue: due jobs are put here by name."""
        self.calendar: list[CalendarJob] = []
        self.last_digest = clock.now()
        self.report_thread: threading.Thread | None = None
        """The daily report being written (never on the engine thread)."""

    def schedule(self) -> None:
        """Set the calendar up (at start)."""
        if self.clock.simulated:
            # a simulated clock (the demo): the engine loop ticks by itself and there are
            # no calendar jobs
            return
        tz = self.host.engine.state.tz
        now = self.clock.now()
        for name, trigger in (("rollup", CronTrigger(hour=0, minute=0, second=30, timezone=tz)),
                              ("prune", CronTrigger(hour=3, minute=17, timezone=tz)),
                              ("digest", CronTrigger(hour=7, minute=0, timezone=tz)),
                              ("report", CronTrigger(hour=6, minute=30, timezone=tz))):
            job = CalendarJob(name, trigger, now - 1.0)
            job.advance(now - 1.0)
            self.calendar.append(job)

    def put_due(self, now: float) -> None:
        """Put every job due at ``now`` (wall time) on the job queue, once each."""
        for job in self.calendar:
            if now >= job.due:
                job.advance(now)
                self.jobs.put(job.name)

    def prune(self, now: float) -> None:
        """Drop events and samples older than the configured retention."""
        keep = self.host.engine.config.retention
        n = self.store.prune_events(now - keep.events_days * 86_400)
        m = self.store.prune_samples(now - keep.samples_days * 86_400)
        log.info("pruned %d event(s) older than %g days and %d sample(s) older than %g "
                 "days", n, keep.events_days, m, keep.samples_days)

    def digest(self, now: float) -> None:
        """The digest of what happened since the last one."""
        self.host.execute(self.host.engine.digest(now, self.last_digest))
        self.last_digest = now

    def report_off_thread(self, now: float) -> None:
        """Start yesterday's report on a thread of its own: it reads the store through its
        own connection, so the engine thread goes on ticking (a day of 10,000 spaces takes
        tens of seconds)."""
        running = self.report_thread
        if running is not None and running.is_alive():
            log.warning("the daily report is still being written; this one is skipped")
            return
        config, path = self.host.engine.config, self.store.path
        rules = self.report_rules()  # read here, on the engine's thread

        def work() -> None:
            try:
                self.daily_report(now, config, path, rules)
            except Exception:  # noqa: BLE001 - a failed report must not stop the service
                self.metrics.job_errors.labels(job="report", kind="error").inc()
                log.exception("the daily report failed")

        thread = threading.Thread(target=work, name="thermowarden-report", daemon=True)
        thread.start()
        self.report_thread = thread  # published once started: others may join it

    def report_rules(self) -> RuleFacts:
        """The engine's rules' titles and what its ahead-of-time rules foresee."""
        from thermowarden.shell.report import RuleFacts

        rules = self.host.engine.rules
        return RuleFacts({rt.rule.key: rt.rule.config.title for rt in rules},
                         {rt.rule.key: (f.rule, f.priority) for rt in rules
                          if (f := rt.rule.config.foresees) is not None})

    def daily_report(self, now: float, config: SiteConfig | None = None,
                     store_path: pathlib.Path | None = None,
                     rules: RuleFacts | None = None) -> pathlib.Path:
        """Write yesterday's reports (local calendar day) next to the store: the site's,
        and one per building or area; returns the site's. Reads the store through a
        connection of its own (any thread); ``rules``: as :meth:`report_rules` gives (read
        on the engine's thread; read here when not given)."""
        from thermowarden.shell.report import write_reports

        config = config or self.host.engine.config
        store_path = store_path or self.store.path
        tz = zoneinfo.ZoneInfo(config.site.timezone)
        today = dt.datetime.fromtimestamp(now, tz).date()
        day = today - dt.timedelta(days=1)
        start = dt.datetime.combine(day, dt.time(0), tz).timestamp()
        end = dt.datetime.combine(today, dt.time(0), tz).timestamp()
        began = time.monotonic()
        written = write_reports(config, store_path, store_path.parent / "reports", start, end,
                                day.isoformat(), rules or self.report_rules())
        log.info("daily report written to %s (%d file(s), %.1f s)", written[0], len(written),
                 time.monotonic() - began)
        if self.delivery is not None:
            stem = f"{config.site.id}-{day.isoformat()}-"
            parts = {p.name[len(stem):-len(".html")]: p for p in written[1:]}
            self.delivery.offer_report(day.isoformat(), written[0], parts)
        return written[0]
