"""Run ``thermowarden.cli`` with a profiler of the engine thread (the main thread) that
SIGUSR1 starts and SIGUSR2 stops, writing its statistics to the file named first:
``python bench/_profiled.py OUT.prof run --config ...`` (used by bench/idle_profile.py to
profile an idle window only, not the start-up)."""

from __future__ import annotations

import cProfile
import signal
import sys
import types

OUT = sys.argv.pop(1)
profiler = cProfile.Profile()


def _start(_sig: int, _frame: types.FrameType | None) -> None:
    profiler.enable()


def _stop(_sig: int, _frame: types.FrameType | None) -> None:
    profiler.disable()
    profiler.dump_stats(OUT)


signal.signal(signal.SIGUSR1, _start)
signal.signal(signal.SIGUSR2, _stop)

from thermowarden.cli import main  # noqa: E402

main()
