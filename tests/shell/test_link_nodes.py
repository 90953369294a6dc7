"""The MQTT link against a real broker: every socket write from its network thread, and a
list of broker nodes tried in turn."""

from __future__ import annotations

import os
import queue
import threading

import pytest

from tests.shell.conftest import SLOW, Collector, free_port, wait_for
from thermowarden.config import BrokerConfig
from thermowarden.shell.inbox import Control, Inbox
from thermowarden.shell.metrics import Metrics
from thermowarden.shell.mqtt_link import MqttLink

pytestmark = pytest.mark.broker


def make_link(urls: list[str], protocol: str = "3.1.1") -> MqttLink:
    cfg = BrokerConfig(url=urls[0], fallback_urls=urls[1:], protocol=protocol)
    control: queue.Queue[Control] = queue.Queue()
    return MqttLink(cfg, [], "twlink/status", {"state": "online"}, {"state": "offline"},
                    Inbox(1000), control, Metrics(), f"twlink-{free_port()}", read_sys=False)


def test_the_first_node_that_answers_is_used(system_broker_port):
    dead = free_port()  # nothing listens there
    link = make_link([f"mqtt://127.0.0.1:{dead}", f"mqtt://127.0.0.1:{system_broker_port}"])
    link.start()
    try:
        wait_for(link.connected.is_set, SLOW, "the link to connect to the second node")
        assert (link.host, link.port) == ("127.0.0.1", system_broker_port)
    finally:
        link.stop()


@pytest.mark.parametrize("protocol", ["3.1.1", "5"])
def test_publishes_from_another_thread_are_written_by_the_network_thread(
        system_broker_port, protocol):
    link = make_link([f"mqtt://127.0.0.1:{system_broker_port}"], protocol)
    writers: set[str] = set()
    watcher = Collector(system_broker_port, ["twlink/data/#"])
    link.start()
    try:
        wait_for(link.connected.is_set, SLOW, "the link to connect")
        send = link.client._sock_send  # paho's one place that writes the socket

        def recording(buf: bytes) -> int:
            writers.add(threading.current_thread().name)
            return send(buf)
        link.client._sock_send = recording  # type: ignore[method-assign]
        n = 300
        for k in range(n):  # the test's thread stands for the engine thread
            assert link.publish(f"twlink/data/{k % 7}", {"k": k}, 1, False) is not None
        wait_for(lambda: len(watcher.json_on("twlink/data/")) >= n, SLOW,
                 "every message to arrive")
        assert sorted(m["k"] for m in watcher.json_on("twlink/data/")) == list(range(n))
        assert writers == {"mqtt"}
    finally:
        link.stop()
        watcher.close()


def _open_fds() -> set[str]:
    return set(os.listdir("/proc/self/fd"))


@pytest.mark.skipif(not os.path.isdir("/proc/self/fd"), reason="needs /proc (Linux)")
def test_a_stopped_link_leaves_no_socket_open(system_broker_port):
    """All of the link's sockets close when it stops, paho's wake-up pair included: not later,
    when the garbage collector finalises the client (then with a ResourceWarning, in whatever
    code ran the collector)."""
    before = _open_fds()
    link = make_link([f"mqtt://127.0.0.1:{system_broker_port}"])
    link.start()
    try:
        wait_for(link.connected.is_set, SLOW, "the link to connect")
        assert _open_fds() - before  # the broker connection and the wake-up pair
    finally:
        link.stop()
    left = _open_fds() - before
    assert not left, [os.readlink(f"/proc/self/fd/{fd}") for fd in left
                      if os.path.exists(f"/proc/self/fd/{fd}")]
