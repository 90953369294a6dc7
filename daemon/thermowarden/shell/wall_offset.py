"""A stepped wall clock for fault tests: ``THERMOWARDEN_TEST_WALL_OFFSET_FILE`` names a file
holding a number of seconds (e.g. ``300`` or ``-300``) added to the system's wall clock,
read again at most twice a second, so a test can step one running instance's wall clock
forward and back while its monotonic clock runs on, as after a step of the system clock.
Unset (always, outside tests), the wall clock is ``time.time``.

(libfaketime would step it from outside, but with the monotonic clock left alone it makes
Python 3.11's ``time.sleep`` fail with EINVAL.)
"""

from __future__ import annotations

import math
import os
import pathlib
import time
from collections.abc import Callable, Mapping

ENV = "THERMOWARDEN_TEST_WALL_OFFSET_FILE"


def wall_clock(environ: Mapping[str, str] = os.environ) -> Callable[[], float]:
    """``time.time``, or the wall clock offset by the file that ``ENV`` names."""
    path = environ.get(ENV)
    if not path:
        return time.time
    file = pathlib.Path(path)
    state = [-math.inf, 0.0]  # when the file was last read (monotonic s), the offset (s)

    def now() -> float:
        m = time.monotonic()
        if m - state[0] >= 0.5:
            state[0] = m
            try:
                offset = float(file.read_text().strip() or "0")
            except (OSError, ValueError):
                offset = state[1]
            state[1] = offset if math.isfinite(offset) else state[1]
        return time.time() + state[1]
    return now
