"""The fault tests' stepped wall clock (shell/wall_offset.py)."""

from __future__ import annotations

import time

from thermowarden.shell.wall_offset import ENV, wall_clock


def test_unset_it_is_the_system_wall_clock():
    assert wall_clock({}) is time.time


def test_the_offset_file_steps_it_both_ways(tmp_path):
    f = tmp_path / "offset"
    f.write_text("300\n")
    now = wall_clock({ENV: str(f)})
    assert abs(now() - time.time() - 300) < 1
    f.write_text("-300\n")
    deadline = time.monotonic() + 5
    while abs(now() - time.time() + 300) >= 1 and time.monotonic() < deadline:
        time.sleep(0.05)  # the file is read again at most twice a second
    assert abs(now() - time.time() + 300) < 1
    f.write_text("not a number")  # a bad file keeps the last offset
    time.sleep(0.6)
    assert abs(now() - time.time() + 300) < 1
