"""The buffered paho client (shell/buffered_client.py) receives exactly what stock paho
receives: through the real broker (small and large messages, QoS 0 and 1, retained, MQTT 5
properties, both protocols, a broker restart) and from a byte stream cut at every offset."""

from __future__ import annotations

import socket
import threading
import uuid
from typing import Any

import paho.mqtt.client as mqtt
import pytest
from paho.mqtt.enums import CallbackAPIVersion
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

from tests.shell.conftest import SLOW, wait_for
from thermowarden.shell.buffered_client import READ_CHUNK, BufferedClient, release_sockets


def _record(msg: mqtt.MQTTMessage) -> tuple[Any, ...]:
    props = msg.properties
    return (msg.topic, bytes(msg.payload), msg.qos, bool(msg.retain),
            getattr(props, "ResponseTopic", None), getattr(props, "CorrelationData", None),
            tuple(getattr(props, "UserProperty", None) or ()))


class Receiver:
    def __init__(self, cls: type[mqtt.Client], port: int, prefix: str, v5: bool) -> None:
        self.got: list[tuple[Any, ...]] = []
        self.lock = threading.Lock()
        self.subscribed = threading.Event()
        self.client = cls(callback_api_version=CallbackAPIVersion.VERSION2,
                          protocol=mqtt.MQTTv5 if v5 else mqtt.MQTTv311)
        self.client.on_message = self._on_message
        self.client.on_connect = lambda c, u, f, r, p: c.subscribe(prefix + "/#", qos=1)
        self.client.on_subscribe = lambda *a: self.subscribed.set()
        self.client.connect("127.0.0.1", port, 30)
        self.client.loop_start()

    def _on_message(self, c: Any, u: Any, msg: mqtt.MQTTMessage) -> None:
        with self.lock:
            self.got.append(_record(msg))

    def count(self) -> int:
        with self.lock:
            return len(self.got)

    def stop(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()
        release_sockets(self.client)


def _publish_mix(port: int, prefix: str, v5: bool, caught_up: Any) -> int:
    """Publish a mix in rounds (each waits until ``caught_up(n)``: a broker drops what it
    cannot queue for a slow subscriber) and return how many messages it was."""
    pub = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                      protocol=mqtt.MQTTv5 if v5 else mqtt.MQTTv311)
    pub.max_inflight_messages_set(100)
    pub.connect("127.0.0.1", port, 30)
    pub.loop_start()
    n = 0
    for k in range(3000):
        infos = [pub.publish(f"{prefix}/s{k % 37}/ta", f"{20 + k % 50 / 10:.1f}", qos=k % 2)]
        n += 1
        if k % 500 == 0:
            # larger than one read of the buffer: always received in pieces
            big = bytes(range(256)) * ((3 * READ_CHUNK) // 256 + k % 7)
            infos.append(pub.publish(f"{prefix}/big/{k}", big, qos=1))
            n += 1
        if v5 and k % 300 == 0:
            props = Properties(PacketTypes.PUBLISH)  # type: ignore[no-untyped-call]
            props.ResponseTopic = f"{prefix}-reply/{k}"
            props.CorrelationData = k.to_bytes(4, "big")
            props.UserProperty = [("who", f"tester {k}")]
            infos.append(pub.publish(f"{prefix}/cmd/{k}", b"{}", qos=1, properties=props))
            n += 1
        if k % 200 == 199:
            for info in infos:
                info.wait_for_publish(SLOW)
            wait_for(lambda n=n: caught_up(n), SLOW, f"{n} messages")
    pub.publish(f"{prefix}/retained", b"kept", qos=1, retain=True).wait_for_publish(SLOW)
    n += 1
    pub.disconnect()
    pub.loop_stop()
    release_sockets(pub)
    return n


@pytest.mark.parametrize("v5", [True, False], ids=["mqtt5", "mqtt311"])
def test_same_messages_as_stock_paho_through_the_broker(system_broker_port: int,
                                                        v5: bool) -> None:
    prefix = f"twtest/buf/{uuid.uuid4().hex[:8]}"
    ours = Receiver(BufferedClient, system_broker_port, prefix, v5)
    stock = Receiver(mqtt.Client, system_broker_port, prefix, v5)
    try:
        wait_for(lambda: ours.subscribed.is_set() and stock.subscribed.is_set(), SLOW,
                 "both subscribed")
        def caught_up(n: int) -> bool:
            return stock.count() >= n and ours.count() >= n

        n = _publish_mix(system_broker_port, prefix, v5, caught_up)
        wait_for(lambda: caught_up(n), SLOW, f"{n} messages")
        assert len(ours.got) == len(stock.got) == n
        # the same messages; in the same order on each topic (a broker keeps the order of
        # one topic and QoS, and QoS 1 may wait for acknowledgements where QoS 0 does not)
        assert sorted(ours.got) == sorted(stock.got)
        for key in {r[:3:2] for r in ours.got}:  # (topic, QoS)
            assert [r for r in ours.got if r[:3:2] == key] == \
                [r for r in stock.got if r[:3:2] == key]
        assert any(len(r[1]) > READ_CHUNK for r in ours.got)
        if v5:
            assert ("twtest" in str([r[4] for r in ours.got if r[4]]))
            assert any(r[6] == (("who", "tester 300"),) for r in ours.got)
        # a retained message delivered to a new subscriber carries the retain flag
        late = Receiver(BufferedClient, system_broker_port, prefix + "/retained", v5)
        try:
            wait_for(lambda: late.count() >= 1, SLOW, "the retained message")
            assert late.got[0][1:4] == (b"kept", 1, True)
        finally:
            late.stop()
    finally:
        ours.stop()
        stock.stop()
        clean = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2)
        clean.connect("127.0.0.1", system_broker_port, 30)
        clean.loop_start()
        clean.publish(f"{prefix}/retained", b"", qos=1, retain=True).wait_for_publish(SLOW)
        clean.disconnect()
        clean.loop_stop()
        release_sockets(clean)


def _encode_length(n: int) -> bytes:
    out = bytearray()
    while True:
        byte, n = n % 128, n // 128
        out.append(byte | (128 if n else 0))
        if not n:
            return bytes(out)


def _publish_packet(topic: str, payload: bytes, v5: bool, qos: int = 0, mid: int = 0) -> bytes:
    t = topic.encode()
    head = len(t).to_bytes(2, "big") + t + (mid.to_bytes(2, "big") if qos else b"")
    head += b"\x00" if v5 else b""  # no properties
    return bytes([0x30 | (qos << 1)]) + _encode_length(len(head) + len(payload)) + head + \
        payload


@pytest.mark.parametrize("v5", [True, False], ids=["mqtt5", "mqtt311"])
@pytest.mark.parametrize("piece", [1, 2, 3, 5, 64, 1000])
@pytest.mark.parametrize("limit", [0, 200], ids=["no-limit", "limit-200"])
def test_a_stream_cut_anywhere_is_read_whole(v5: bool, piece: int, limit: int) -> None:
    """A server on loopback answers CONNECT and then sends packets in pieces of
    ``piece`` bytes (each its own send): a packet arrives whole, split, or with the next one.
    With ``limit``, a PUBLISH over it is dropped unread and reported with its size, and
    everything after it is still read whole."""
    server = socket.socket()
    server.bind(("127.0.0.1", 0))
    server.listen(1)
    port = server.getsockname()[1]
    payloads = [f"{k}".encode() * (k % 9 + 1) for k in range(200)]
    for k in range(0, 200, 23):  # large ones among them (one of 70 kB: over READ_CHUNK)
        payloads[k] = b"L" * (70_000 if k == 46 else 250 + k)
    payloads.append(b"x" * 300)  # a remaining length of two bytes
    packets = [_publish_packet(f"a/{k}", p, v5, qos=k % 2, mid=k + 1)
               for k, p in enumerate(payloads)]
    stream = b"".join(packets)
    expected: list[Any] = []
    for p, packet in zip(payloads, packets, strict=True):
        size = len(packet) - 1 - len(_encode_length(len(packet)))  # remaining length
        size = len(packet) - 1 - len(_encode_length(size))  # (its encoding settled)
        expected.append(("oversized", size) if limit and size > limit else p)
    got: list[Any] = []
    acks = bytearray()

    def serve() -> None:
        conn, _ = server.accept()
        conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        conn.settimeout(SLOW)
        conn.recv(1024)  # CONNECT
        conn.sendall(b"\x20\x03\x00\x00\x00" if v5 else b"\x20\x02\x00\x00")
        for i in range(0, len(stream), piece):
            conn.sendall(stream[i:i + piece])
        try:
            while len(acks) < 4 * 100:  # a PUBACK for every QoS 1 message
                data = conn.recv(4096)
                if not data:
                    break
                acks.extend(data)
        finally:
            conn.close()

    thread = threading.Thread(target=serve, daemon=True)
    thread.start()
    c = BufferedClient(callback_api_version=CallbackAPIVersion.VERSION2,
                       protocol=mqtt.MQTTv5 if v5 else mqtt.MQTTv311)
    c.on_message = lambda cl, u, m: got.append(bytes(m.payload))
    c.max_publish_bytes = limit
    c.on_oversized = lambda m: got.append(("oversized", m.size))
    c.connect("127.0.0.1", port, 30)
    c.loop_start()
    try:
        wait_for(lambda: len(got) >= len(payloads), SLOW, "every message")
        thread.join(SLOW)
        assert got == expected
        if limit:
            assert sum(1 for g in got if isinstance(g, tuple)) == 10
        # PUBACKs (0x40 0x02 <mid>) for the QoS 1 messages, in order (MQTT 3.1.1 form; paho
        # sends the short form under MQTT 5 too when the reason is success)
        mids = [int.from_bytes(acks[i + 2:i + 4], "big") for i in range(0, len(acks), 4)
                if acks[i] == 0x40]
        assert mids == [k + 1 for k in range(len(payloads)) if k % 2]
    finally:
        c.loop_stop()
        c.disconnect()
        release_sockets(c)
        server.close()


def test_keeps_receiving_after_the_broker_restarts(own_broker: Any) -> None:
    """Bytes of the old connection are never parsed as the new one's."""
    prefix = f"twtest/bufre/{uuid.uuid4().hex[:8]}"
    ours = Receiver(BufferedClient, own_broker.port, prefix, True)
    try:
        wait_for(ours.subscribed.is_set, SLOW, "subscribed")
        pub = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2)
        pub.connect("127.0.0.1", own_broker.port, 30)
        pub.loop_start()
        pub.publish(f"{prefix}/a", b"before", qos=1).wait_for_publish(SLOW)
        pub.loop_stop()
        release_sockets(pub)
        wait_for(lambda: ours.count() >= 1, SLOW, "the first message")
        own_broker.stop()
        ours.subscribed.clear()
        own_broker.start()
        wait_for(ours.subscribed.is_set, SLOW, "subscribed again after the restart")
        pub = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2)
        pub.connect("127.0.0.1", own_broker.port, 30)
        pub.loop_start()
        pub.publish(f"{prefix}/b", b"after", qos=1).wait_for_publish(SLOW)
        pub.disconnect()
        pub.loop_stop()
        release_sockets(pub)
        wait_for(lambda: ours.count() >= 2, SLOW, "the second message")
        assert [r[1] for r in ours.got] == [b"before", b"after"]
    finally:
        ours.stop()
