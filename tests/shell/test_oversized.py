"""Oversized sensor payloads on a real Mosquitto (a started one: no packet-size limit of its
own), on MQTT 3.1.1 and 5: every one is counted as ``payload_too_large``, none is held
whole in memory (ten 50 MB payloads raise the service's peak resident memory by less than
the README's bound), and the service goes on taking readings."""

from __future__ import annotations

import pathlib
import uuid

import pytest

from tests.shell.conftest import SLOW, Collector, ServiceProcess, wait_for, write_site

pytestmark = pytest.mark.broker

PEAK_BOUND_BYTES = 16 * 1024 * 1024
"""The README's bound: oversized messages raise the peak resident memory by less than this."""
BIG = 50 * 1000 * 1000


def peak_rss(pid: int) -> int:
    """The process's peak resident set size (``VmHWM``), bytes."""
    for line in pathlib.Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) * 1024
    raise AssertionError("no VmHWM in /proc")


@pytest.mark.parametrize("protocol", ["3.1.1", "5"])
def test_oversized_payloads_are_counted_and_never_held(tmp_path, own_broker, protocol):
    port = own_broker.port
    prefix = f"twbig-{uuid.uuid4().hex[:6]}"
    # ingest.max_payload_bytes 4096 (the default): the client drops unread any PUBLISH over
    # 4096 + 4096 bytes; between the two the payload is read and refused by the engine
    site = write_site(tmp_path, prefix, port, ["room-a"],
                      extra_broker=f'  protocol: "{protocol}"')
    sensor = Collector(port, [])
    svc = ServiceProcess(site, tmp_path / "state")
    topic = f"{prefix}-in/room-a/ta"

    def too_large() -> float:
        return svc.metric("thermowarden_messages_rejected_total", 'reason="payload_too_large"')

    def accepted() -> float:
        return svc.metric("thermowarden_readings_accepted_total")

    try:
        svc.start()
        sensor.publish(topic, "22.5")
        wait_for(lambda: accepted() >= 1, SLOW, "the first reading")
        assert svc.proc is not None
        before = peak_rss(svc.proc.pid)
        # 100 over the packet limit (the MQTT 5 broker dropped most of these uncounted when
        # the client announced that limit as its maximum packet size), 10 between the
        # payload limit and the packet limit
        for _ in range(100):
            sensor.publish(topic, b"7" * 20_000)
        for _ in range(10):
            sensor.publish(topic, b"7" * 5_000)
        wait_for(lambda: too_large() >= 110, SLOW, "110 oversized payloads counted")
        for _ in range(10):
            sensor.publish(topic, b"9" * BIG)
        wait_for(lambda: too_large() >= 120, 3 * SLOW, "the 50 MB payloads counted")
        after = peak_rss(svc.proc.pid)
        print(f"MQTT {protocol}: peak RSS {before / 1e6:.1f} MB before, {after / 1e6:.1f} MB "
              f"after ten 50 MB payloads (+{(after - before) / 1e6:.1f} MB)")
        assert after - before < PEAK_BOUND_BYTES, (before, after)
        assert too_large() == 120
        # and readings go on
        sensor.publish(topic, "23.0")
        wait_for(lambda: accepted() >= 2, SLOW, "a reading after them")
        assert "Dropping too large" not in own_broker.log()
    finally:
        sensor.close()
        assert svc.stop() == 0
