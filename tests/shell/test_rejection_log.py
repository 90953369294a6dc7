"""Sensor rejections in the log: one line per point and reason per interval, every one
counted in the metrics (a sensor sending garbage every second cannot flood the log)."""

from __future__ import annotations

import logging
import re
import threading
import uuid

import pytest

from tests.shell.conftest import SLOW, Collector, clear_retained, wait_for, write_site
from thermowarden.shell import intake_counts
from thermowarden.shell.bootstrap import bootstrap
from thermowarden.shell.logs import IntervalLog


class FakeClock:
    def __init__(self) -> None:
        self.t = 100.0

    def __call__(self) -> float:
        return self.t


def test_interval_log_one_line_per_key_per_interval():
    clock = FakeClock()
    log = IntervalLog(600.0, clock)
    assert log.first("not_numeric|a/ta", "x1")
    assert not any(log.first("not_numeric|a/ta", f"x{i}") for i in range(2, 51))
    assert log.first("malformed|a/ta", "m1")  # another reason: its own line
    assert log.first("not_numeric|b/ta", "y1")  # another point: its own line
    clock.t += 599.0
    assert log.due() == []
    clock.t += 1.0
    # one summary for the key that had more; the others had none and start afresh
    assert log.due() == [("not_numeric|a/ta", 49, "x50")]
    assert log.first("malformed|a/ta", "m2")
    # after a summary the key is still within an interval: counted, not logged
    assert not log.first("not_numeric|a/ta", "x51")
    clock.t += 300.0
    assert log.due() == []
    clock.t += 300.0
    assert log.due() == [("not_numeric|a/ta", 1, "x51")]
    clock.t += 600.0
    assert log.due() == []  # quiet for a whole interval: forgotten
    assert log.first("not_numeric|a/ta", "x52")


@pytest.mark.broker
def test_service_logs_a_flood_of_bad_payloads_once(tmp_path, system_broker_port, caplog,
                                                    monkeypatch):
    port = system_broker_port
    monkeypatch.setattr(intake_counts, "REJECTION_LOG_INTERVAL_S", 3.0)
    prefix = f"twrej-{uuid.uuid4().hex[:6]}"
    site = write_site(tmp_path, prefix, port, ["room-a", "room-b"])
    running = bootstrap(str(site), state_dir=str(tmp_path / "state"))
    service = running.service
    thread = threading.Thread(target=service.run, daemon=True)
    caplog.set_level(logging.INFO, logger="thermowarden")
    thread.start()
    sensor = Collector(port, [])

    def rejected() -> float:
        return service.metrics.registry.get_sample_value(
            "thermowarden_messages_rejected_total", {"reason": "not_numeric"}) or 0.0

    def records(point: str) -> list[logging.LogRecord]:
        return [r for r in list(caplog.records)
                if r.getMessage().startswith("rejected not_numeric")
                and f"[{point}]" in r.getMessage()]

    def more(point: str) -> int:
        found = (re.search(r": (\d+) more in the last", r.getMessage())
                 for r in records(point))
        return sum(int(m.group(1)) for m in found if m)

    try:
        wait_for(lambda: service.ready()[0], SLOW, "the service to be ready")
        for i in range(40):
            sensor.publish(f"{prefix}-in/room-a/ta", f"warm-{i}")
        sensor.publish(f"{prefix}-in/room-b/ta", "cold")
        wait_for(lambda: rejected() == 41, SLOW, "every bad payload counted")
        first = records("room-a/air_temperature")[0].getMessage()
        assert "warm-0" in first and "all are counted" in first
        # the rest are told in summaries once their interval is over: 39 in all
        wait_for(lambda: more("room-a/air_temperature") == 39, SLOW, "the summary lines")
        got = records("room-a/air_temperature")
        assert "warm-39" in got[-1].getMessage()
        # one line per point and reason per interval
        times = [r.created for r in got]
        assert all(b - a >= 3.0 - 0.05 for a, b in zip(times, times[1:], strict=False))
        assert len(records("room-b/air_temperature")) == 1
    finally:
        service.request_stop()
        thread.join(SLOW)
        sensor.close()
        clear_retained(port, prefix)
