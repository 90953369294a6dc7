"""The service's clock: wall time for timestamps, monotonic time for durations, the
simulated and driven days of the demo and the tests, and the steps of the wall clock."""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from thermowarden.shell.metrics import Metrics

log = logging.getLogger("thermowarden.service")

STEP_TOLERANCE_S = 2.0
"""A wall-clock change this much larger or smaller than the monotonic one is counted and
logged as a step."""
SHIFT_TOLERANCE_S = 0.5
"""... and from this much on the engine's timers and the outbox's expiry move by it (the
wall and monotonic clocks are read one after the other: they never differ this much
otherwise; a slewing clock slews both)."""


class Clock:
    """Wall time for timestamps (:meth:`now`, epoch s, follows corrections of the system
    clock) and monotonic time for durations (:meth:`monotonic`, s).

    ``start`` and ``speed`` are for simulated days: a day starting at ``start`` that runs
    ``speed`` times faster than real time (then :meth:`now` advances with the monotonic
    clock). A ``driven`` clock stands still until its caller moves it (:meth:`set`), and
    the service then evaluates only when asked (:meth:`Service.step`): the demo drives
    it so that every run gives the same events, however busy the machine. ``wall`` and
    ``mono`` are injectable for tests that step the clock.
    """

    def __init__(self, start: float | None = None, speed: float = 1.0,
                 paused: bool = False, *, driven: bool = False,
                 wall: Callable[[], float] = time.time,
                 mono: Callable[[], float] = time.monotonic) -> None:
        self.wall = wall
        self.mono_clock = mono
        self.driven = driven
        paused = paused or driven
        self.simulated = start is not None or speed != 1.0 or paused
        self.anchor = wall() if start is None else start
        self.mono = mono()
        self.speed = speed
        self.paused = paused

    def now(self) -> float:
        if not self.simulated:
            return self.wall()
        if self.paused:
            return self.anchor
        return self.anchor + (self.mono_clock() - self.mono) * self.speed

    def monotonic(self) -> float:
        return self.mono_clock()

    def set(self, t: float) -> None:
        """Move a driven clock to ``t`` (epoch s)."""
        if not self.driven:
            raise RuntimeError("only a driven clock is moved by its caller")
        self.anchor = t

    def resume(self) -> None:
        """Start a paused (demo) clock from its anchor."""
        if self.paused and not self.driven:
            self.mono = self.mono_clock()
            self.paused = False


class StepWatch:
    """Notices when the wall clock moved by other than the monotonic clock since the last
    look (a step set by hand or by time synchronisation): counted and logged as a step from
    ``STEP_TOLERANCE_S``, handed on from ``SHIFT_TOLERANCE_S``. A simulated clock has no
    steps."""

    def __init__(self, clock: Clock, metrics: Metrics) -> None:
        self.clock = clock
        self.metrics = metrics
        self.seen = (clock.now(), clock.monotonic())
        """The wall and monotonic readings at the last step taken into account."""

    def look(self) -> tuple[float, float]:
        """The wall time now, and the step since the last look to hand on (s, 0.0 when
        none)."""
        now, mono = self.clock.now(), self.clock.monotonic()
        if self.clock.simulated:
            return now, 0.0
        last_now, last_mono = self.seen
        drift = (now - last_now) - (mono - last_mono)
        if abs(drift) < SHIFT_TOLERANCE_S:
            return now, 0.0
        self.seen = (now, mono)
        if abs(drift) > STEP_TOLERANCE_S:
            direction = "forward" if drift > 0 else "backward"
            self.metrics.clock_steps.labels(direction=direction).inc()
            log.warning("the wall clock stepped %s by %.0f s; timestamps follow it, "
                        "durations (shelving, delays, reminders, schedules, outbox expiry, "
                        "escalation timers) are kept by the monotonic clock", direction,
                        abs(drift))
        else:
            log.info("the wall clock moved %.1f s against the monotonic clock", drift)
        return now, drift
