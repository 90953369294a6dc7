"""`thermowarden simulate` publishing live to a real broker."""

from __future__ import annotations

import subprocess
import sys
import time

import pytest

from tests.shell.conftest import SLOW, Collector, wait_for


@pytest.mark.broker
def test_simulate_publishes_live_in_the_site_formats(system_broker_port):
    watcher = Collector(system_broker_port, ["larkfield/roof/weather"])
    proc = subprocess.Popen([sys.executable, "-m", "thermowarden.cli", "simulate", "--broker",
                             f"mqtt://127.0.0.1:{system_broker_port}", "--speed", "600"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        wait_for(lambda: len(watcher.json_on("larkfield/roof/weather")) >= 2, SLOW,
                 "two weather messages")
    finally:
        proc.terminate()
        proc.wait(SLOW)
        watcher.close()
    got = watcher.json_on("larkfield/roof/weather")
    assert len(got) >= 2
    assert abs(got[0]["ts"] - time.time()) < 60  # re-stamped to the time it was sent


