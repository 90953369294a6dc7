"""The service's clock: wall time for timestamps, monotonic time for durations, and the
simulated and driven days of the demo and the tests."""

from __future__ import annotations

import time
from collections.abc import Callable


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
