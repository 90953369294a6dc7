"""Commands kept by the broker while the link moves between nodes (``broker.persistent_session``,
MQTT 3.1.1): a command published while the link's node of a three-node nats-server cluster
is stopped (SIGSTOP) reaches the link after it moved to another node; a copy the broker
delivers again of a command handled already is dropped, one sent again by a person is not."""

from __future__ import annotations

import json
import os
import queue
import signal
import threading
import time

import paho.mqtt.client as mqtt
import pytest
from paho.mqtt.enums import CallbackAPIVersion

from tests.shell.conftest import SLOW, free_port, wait_for
from tests.shell.nats_cluster import NatsCluster, nats_program
from thermowarden.config import BrokerConfig
from thermowarden.shell.advisory_commands import SEEN_KEPT_S, AdvisoryCommands
from thermowarden.shell.inbox import Control, Inbox, Incoming
from thermowarden.shell.metrics import Metrics
from thermowarden.shell.mqtt_link import MqttLink

PREFIX = "twsess"
COMMANDS = f"{PREFIX}/commands/"


def _sender(port: int) -> mqtt.Client:
    c = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                    client_id=f"twsess-send-{free_port()}", protocol=mqtt.MQTTv311)
    connected = threading.Event()
    c.on_connect = lambda *a: connected.set()
    c.connect("127.0.0.1", port, 30)
    c.loop_start()
    wait_for(connected.is_set, SLOW, "the sender to connect")
    return c


@pytest.mark.broker
def test_a_command_sent_while_the_links_node_is_stopped_arrives_after_it_moved(tmp_path):
    program = nats_program()
    if program is None:
        pytest.skip("needs the `nats-server` program (Debian package `nats-server`)")
    cluster = NatsCluster(tmp_path / "nats", program).start()
    nodes = cluster.nodes
    link = sender = None
    got: list[Incoming] = []
    try:
        cfg = BrokerConfig(url=nodes[1].url, fallback_urls=[nodes[2].url, nodes[0].url],
                           protocol="3.1.1", subscribe_qos=0, persistent_session=True,
                           keepalive_s=5)
        inbox = Inbox(10_000)
        control: queue.Queue[Control] = queue.Queue()
        link = MqttLink(cfg, [f"{PREFIX}/in/#", f"{COMMANDS}#"], f"{PREFIX}/status",
                        {"state": "online"}, {"state": "offline"}, inbox, control, Metrics(),
                        f"twsess-{free_port()}", command_prefix=COMMANDS, read_sys=False)
        link.start()
        wait_for(link.subscribed.is_set, 2 * SLOW, "the link to subscribe")
        sender = _sender(nodes[0].mqtt)

        def bodies() -> list[dict[str, int]]:
            for item in inbox.take(10_000):
                if isinstance(item, Incoming) and item.kind == "command":
                    got.append(item)
            return [json.loads(m.payload) for m in got]

        sender.publish(f"{COMMANDS}safety/acknowledge", json.dumps({"n": 1}),
                       qos=1).wait_for_publish(SLOW)
        wait_for(lambda: {"n": 1} in bodies(), SLOW, "the first command")
        os.kill(nodes[1].proc.pid, signal.SIGSTOP)  # the link's node stops
        stopped = time.monotonic()
        sender.publish(f"{COMMANDS}safety/shelve", json.dumps({"n": 2}),
                       qos=1).wait_for_publish(SLOW)
        # the link notices the stopped node only after its keepalive, moves to another node
        # and asks for its session back; the broker delivers what it kept for it
        wait_for(lambda: {"n": 2} in bodies(), 3 * SLOW,
                 "the command sent while the link's node was stopped")
        assert time.monotonic() - stopped < 3 * SLOW
        # node 1 stayed stopped all along, so the command came through another node (where
        # the link is now is not asked: it may have lost that node again since and be trying
        # the next one, the stopped node included)
        with open(f"/proc/{nodes[1].proc.pid}/stat") as fh:
            assert fh.read().rsplit(")", 1)[1].split()[0] == "T", "node 1 is stopped"
        assert bodies().count({"n": 2}) >= 1
        # a copy of the first command delivered again carries the DUP flag
        assert all(m.redelivered for m in got if json.loads(m.payload) == {"n": 1}
                   and m is not got[0])
    finally:
        if nodes[1].proc is not None and nodes[1].proc.poll() is None:
            os.kill(nodes[1].proc.pid, signal.SIGCONT)
        if sender is not None:
            sender.loop_stop()
            sender.disconnect()
        if link is not None:
            link.stop()
        cluster.stop()


def test_a_redelivered_copy_of_a_command_handled_already_is_dropped(monkeypatch):
    commands = AdvisoryCommands(None, None, None, COMMANDS, f"{PREFIX}/replies")  # type: ignore[arg-type]
    handled: list[Incoming] = []
    monkeypatch.setattr(commands, "handle", handled.append)
    clock = [1000.0]
    monkeypatch.setattr("thermowarden.shell.advisory_commands.time.monotonic",
                        lambda: clock[0])
    topic = f"{COMMANDS}safety/shelve"

    def cmd(body: bytes, redelivered: bool) -> Incoming:
        return Incoming(topic, body, 0.0, kind="command", redelivered=redelivered)

    first = cmd(b'{"n": 1}', False)
    commands.receive(first)
    commands.receive(cmd(b'{"n": 1}', True))       # the broker's copy: handled already
    commands.receive(cmd(b'{"n": 1}', False))      # sent again by a person: a new message
    commands.receive(cmd(b'{"n": 2}', True))       # a copy of one never received: handled
    clock[0] += SEEN_KEPT_S + 1
    commands.receive(cmd(b'{"n": 3}', False))
    commands.receive(cmd(b'{"n": 1}', True))       # remembered no longer: handled
    assert [(m.payload, m.redelivered) for m in handled] == [
        (b'{"n": 1}', False), (b'{"n": 1}', False), (b'{"n": 2}', True),
        (b'{"n": 3}', False), (b'{"n": 1}', True)]
    assert commands.redeliveries_dropped == 1
