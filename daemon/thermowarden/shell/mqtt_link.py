"""The MQTT client: paho-mqtt 2.x, callback API version 2, MQTT 5 (or 3.1.1).

A thread of our own runs the network loop and reconnects with capped exponential backoff
and jitter; while it waits it probes the broker's port once a second and starts again from
the shortest delay as soon as the broker answers. Callbacks do nothing but enqueue: sensor
messages and commands onto the bounded ``inbox`` (overflow is counted), connection events
and publish acknowledgements onto the unbounded ``control`` queue.

Every write to the socket is made by the network thread. The engine thread publishes
through :meth:`MqttLink.publish`, which only queues the packet: paho takes its own lock,
gives the message its id, appends the packet to its output queue and wakes the network
thread's ``select`` through its socket pair; the network thread's next ``loop`` writes it.
(paho writes the socket directly from the publishing thread when no loop thread of its own
runs and no ``on_socket_register_write`` callback is set; with our own loop thread that
made two threads write one socket at once, which nats-server saw as corrupt packets in
bursts. Setting the callback, which does nothing here, selects paho's queue-only path.)

Several broker URLs (``broker.url`` then ``broker.fallback_urls``, the nodes of a clustered
broker) are tried in turn: a failed connect moves to the next one at once, and a lost
connection reconnects to the next node, waiting (with backoff) only after every node has
been tried.

paho keeps every QoS 1 message it was handed until the broker acknowledges it, across
reconnects, and sends it again (DUP set, same packet id) after a reconnect: the service
hands each outbox row to paho once and never publishes it again while paho holds it.

``broker.persistent_session`` (MQTT 3.1.1, see its docstring): every connection asks for the
session the broker keeps, commands at QoS 1; a run's first connection only ends an earlier
run's session (clean session on) and disconnects, as a session begun clean is not kept.

Received messages are sorted by kind onto the inbox by :mod:`thermowarden.shell.
message_sorting` (retained and oversized commands, oversized sensor messages).
Under MQTT 5 the client announces a maximum packet size of :data:`SEEN_PACKET_BYTES` (or
``max_packet_bytes`` when larger), far above the limit, so the broker sends it what it
refuses and it can count it; the broker drops anything larger for this client (Mosquitto
logs it, and counts it nowhere the service can read).
"""

from __future__ import annotations

import json
import logging
import queue
import random
import ssl
import threading
import time
from collections.abc import Callable
from typing import Any

import paho.mqtt.client as mqtt
from paho.mqtt.enums import CallbackAPIVersion
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties
from paho.mqtt.subscribeoptions import SubscribeOptions

from thermowarden.config import BrokerConfig, read_password
from thermowarden.shell.broker_nodes import BrokerNodes
from thermowarden.shell.buffered_client import BufferedClient, no_op, release_sockets
from thermowarden.shell.inbox import Control, Inbox
from thermowarden.shell.message_sorting import MessageSorter
from thermowarden.shell.metrics import Metrics

log = logging.getLogger("thermowarden.mqtt")

BACKOFF_START_S = 0.5
BACKOFF_CAP_S = 30.0
PROBE_EVERY_S = 1.0
"""While waiting to reconnect, the broker's port is tried this often (a TCP connect)."""
RETRY_SUBSCRIBE_S = 1.0
SEEN_PACKET_BYTES = 64 * 1024 * 1024
"""MQTT 5: the maximum packet size the client announces (unless ``max_packet_bytes`` is
larger): messages up to this size reach the service, which counts and refuses those over
its limits without holding them; larger ones the broker drops."""
SYS_TOPICS = ("$SYS/broker/publish/messages/dropped",
              "$SYS/broker/store/messages/count")
"""Mosquitto's own counters: messages it dropped (queue limits), messages it holds."""


class MqttLink:
    """See the module docstring."""

    def __init__(self, cfg: BrokerConfig, subscriptions: list[str], status_topic: str,
                 status_online: dict[str, Any], status_offline: dict[str, Any],
                 inbox: Inbox, control: queue.Queue[Control],
                 metrics: Metrics, client_id: str, command_prefix: str = "\0",
                 now: Callable[[], float] = time.time, *, max_packet_bytes: int = 0,
                 max_command_bytes: int = 65_536, identity_property: str | None = None,
                 echo_prefix: str | None = None, read_sys: bool = True,
                 watch: tuple[str, ...] = ()) -> None:
        self.cfg = cfg
        self.max_packet_bytes = max_packet_bytes
        self.max_command_bytes = max_command_bytes
        self.identity_property = identity_property
        self.echo_prefix = echo_prefix
        self.subscriptions = list(subscriptions)
        if echo_prefix:
            self.subscriptions.append(echo_prefix + "#")
        self.read_sys = read_sys
        self.status_topic = status_topic
        self.status_online = status_online
        self.status_offline = status_offline
        self.command_prefix = command_prefix
        self.now = now
        self.inbox = inbox
        self.control = control
        self.metrics = metrics
        self.v5 = cfg.protocol == "5"
        self.persistent = cfg.persistent_session and not self.v5
        """MQTT 3.1.1 with a session kept between the connections of this run."""
        self._session_begun = self._begin_session = False
        """Persistent: an earlier run's session was ended; that connection was just closed
        (connect again at once)."""
        self.nodes = BrokerNodes([cfg.url, *cfg.fallback_urls])
        tls = self.nodes.tls
        self.client = BufferedClient(
            callback_api_version=CallbackAPIVersion.VERSION2, client_id=client_id,
            protocol=mqtt.MQTTv5 if self.v5 else mqtt.MQTTv311,
            reconnect_on_failure=False)
        self.client.max_queued_messages_set(0)
        self.client.max_publish_bytes = max_packet_bytes
        self.sorter = MessageSorter(inbox, metrics, self.client, command_prefix, now,
                                    max_command_bytes, identity_property, echo_prefix, watch)
        self.client.on_oversized = self.sorter.on_oversized
        if cfg.username:
            self.client.username_pw_set(cfg.username, read_password(cfg))
        if tls or cfg.tls is not None:
            t = cfg.tls
            self.client.tls_set(ca_certs=t.ca_file if t else None,
                                certfile=t.cert_file if t else None,
                                keyfile=t.key_file if t else None,
                                cert_reqs=ssl.CERT_REQUIRED, tls_version=ssl.PROTOCOL_TLS_CLIENT)
            self.client.tls_insecure_set(False)  # the broker's host name is checked
        self.client.on_connect = self._on_connect
        self.client.on_disconnect = self._on_disconnect
        self.client.on_message = self.sorter.on_message
        self.client.on_publish = self._on_publish
        self.client.on_subscribe = self._on_subscribe
        # the network thread alone writes the socket (see the module docstring)
        self.client.on_socket_register_write = no_op
        self.client.on_socket_unregister_write = no_op
        self.connected = threading.Event()
        self.subscribed = threading.Event()
        self._stop = threading.Event()
        self._stopping = threading.Event()  # an orderly stop: a disconnect is expected
        self._thread: threading.Thread | None = None
        self._connects = 0
        self._pending_subs: set[int] = set()
        self._refused = False
        """The broker refused the latest connection (its CONNACK said so)."""
        self.qos0: set[str] = set()
        """Topic filters subscribed at QoS 0 (a group's heartbeats: on a JetStream-backed
        broker QoS 0 deliveries do not wait for the streams)."""
        self._sub_topics: dict[int, str] = {}
        self._pub_topics: dict[int, str] = {}
        """QoS 1 messages published through :meth:`publish` and not yet acknowledged: the
        topic of each message id (a refusal names it)."""
        self.resend_filter: Callable[[bytes], bool] | None = None
        """A group's fencing: a message the client would send again after a reconnect is
        dropped (and reported as "dropped") when this says no: an event or record of a
        shard whose lease lapsed while the connection was down."""
        self._retry_subs: set[str] = set()
        """Subscriptions the broker refused: asked for again every ``RETRY_SUBSCRIBE_S``."""

    @property
    def received(self) -> int:
        """Sensor messages received (the metric is updated from this by the engine thread)."""
        return self.sorter.received

    @property
    def watch(self) -> tuple[str, ...]:
        """Topic prefixes delivered as kind "watch" (a group's status records and retained
        advisories), not counted as sensor messages."""
        return self.sorter.watch

    @watch.setter
    def watch(self, prefixes: tuple[str, ...]) -> None:
        self.sorter.watch = prefixes

    @property
    def host(self) -> str:
        """The broker node in use."""
        return self.nodes.host

    @property
    def port(self) -> int:
        return self.nodes.port

    # ---------------------------------------------------------------- callbacks (enqueue only)
    def _on_connect(self, client: mqtt.Client, userdata: Any, flags: Any, reason: Any,
                    properties: Any) -> None:
        if reason.is_failure:
            # paho's loop reports an MQTT 5 refusal (codes >= 0x80) as a protocol error,
            # not as "refused": remember it here, where the broker's answer is known
            self._refused = True
            self.control.put(Control("refused", reason=str(reason)))
            return
        if self.persistent and not self._session_begun:
            # an earlier run's session is ended; this run's begins with the next connect
            self._session_begun = self._begin_session = True
            client.disconnect()
            return
        self._connects += 1
        if self._connects > 1:
            self.metrics.reconnects.inc()
        self.connected.set()
        self.metrics.connected.set(1)
        client.publish(self.status_topic, json.dumps(self.status_online), qos=1, retain=True)
        # subscribe again on every connect
        self.subscribed.clear()
        self._pending_subs = set()
        self._retry_subs = set()
        for topic in self.subscriptions:
            self._subscribe(topic)
        if self.read_sys:
            for topic in SYS_TOPICS:  # best effort: not every broker publishes them
                client.subscribe(topic, qos=0)
        self.control.put(Control("connected"))

    def _subscribe(self, topic: str) -> None:
        if self.v5 and topic.startswith(self.command_prefix):
            # see the retain flag on live deliveries too: a retained command is never
            # executed, not even once
            _, mid = self.client.subscribe(topic, options=SubscribeOptions(
                qos=1, retainAsPublished=True))
        elif self.persistent and topic.startswith(self.command_prefix):
            # kept for this client by the broker while it is away (the session)
            _, mid = self.client.subscribe(topic, qos=1)
        else:
            _, mid = self.client.subscribe(
                topic, qos=0 if topic in self.qos0 else self.cfg.subscribe_qos)
        if mid is not None:
            self._pending_subs.add(mid)
            self._sub_topics[mid] = topic

    def set_subscriptions(self, subscriptions: list[str]) -> None:
        """Change the topic filters (after a reload): unsubscribe what is gone, subscribe
        what is new; every later connect subscribes to the new list."""
        old = set(self.subscriptions)
        self.subscriptions = list(subscriptions)
        if self.echo_prefix and self.echo_prefix + "#" not in self.subscriptions:
            self.subscriptions.append(self.echo_prefix + "#")
        subscriptions = self.subscriptions
        if not self.connected.is_set():
            return
        removed = sorted(old - set(subscriptions))
        if removed:
            self.client.unsubscribe(removed)
        for topic in sorted(set(subscriptions) - old):
            self._subscribe(topic)

    def _on_disconnect(self, client: mqtt.Client, userdata: Any, flags: Any, reason: Any,
                       properties: Any) -> None:
        self.connected.clear()
        self.subscribed.clear()
        self.metrics.connected.set(0)
        if not self._stopping.is_set() and not self._begin_session:
            self.control.put(Control("disconnected", reason=str(reason)))

    def _on_subscribe(self, client: mqtt.Client, userdata: Any, mid: int, reasons: Any,
                      properties: Any) -> None:
        failed = [str(r) for r in reasons if getattr(r, "is_failure", False)
                  or getattr(r, "value", 0) == 0x80]
        if mid not in self._pending_subs:
            return  # a $SYS subscription (best effort)
        topic = self._sub_topics.pop(mid, None)
        if failed:
            self.control.put(Control("refused", mid=mid,
                                     reason=f"subscription to {topic} refused: "
                                            f"{', '.join(failed)}"))
            if topic is not None and topic in self.subscriptions:
                # a clustered broker refuses while it moves its streams: ask again
                self._retry_subs.add(topic)
        self._pending_subs.discard(mid)
        if not self._pending_subs:
            self.subscribed.set()
            self.control.put(Control("subscribed"))

    def _on_publish(self, client: mqtt.Client, userdata: Any, mid: int, reason: Any,
                    properties: Any) -> None:
        failed = bool(getattr(reason, "is_failure", False))
        self.control.put(Control("puback", mid=mid, reason=str(reason), failed=failed,
                                 topic=self._pub_topics.pop(mid, "")))

    # ---------------------------------------------------------------- network thread
    def start(self) -> None:
        self._thread = threading.Thread(target=self._run, name="mqtt", daemon=True)
        self._thread.start()

    def _prune_resends(self) -> None:
        """Drop what paho would send again after this connect that may no longer be sent
        (see ``resend_filter``); paho re-sends every unacknowledged QoS 1 message itself."""
        keep = self.resend_filter
        out = getattr(self.client, "_out_messages", None)
        lock = getattr(self.client, "_out_message_mutex", None)
        if keep is None or out is None or lock is None:
            return
        with lock:
            for mid, m in list(out.items()):
                if not keep(bytes(m.payload)):
                    del out[mid]
                    self.control.put(Control("dropped", mid=mid, reason="fenced"))

    def _connect(self) -> None:
        self._prune_resends()
        # the will as the status record is now (a group adds its fields after the link is
        # built): set before every connect, as the broker takes it with the CONNECT
        self.client.will_set(self.status_topic, json.dumps(self.status_offline), qos=1,
                             retain=True)
        if self.v5:
            props = Properties(PacketTypes.CONNECT)  # type: ignore[no-untyped-call]
            props.SessionExpiryInterval = 0
            if self.max_packet_bytes:
                props.MaximumPacketSize = max(SEEN_PACKET_BYTES, int(self.max_packet_bytes))
            self.client.connect(self.host, self.port, self.cfg.keepalive_s,
                                clean_start=True, properties=props)
        else:
            if self.persistent:
                # see the module docstring: a clean session once, to end an earlier run's
                self.client.session_kept(self._session_begun)
            self.client.connect(self.host, self.port, self.cfg.keepalive_s)

    def _wait(self, seconds: float, probe: bool) -> bool:
        """Wait ``seconds`` (or until stopped); with ``probe``, return True early as soon as
        the broker's port answers."""
        deadline = time.monotonic() + seconds
        while not self._stop.is_set():
            left = deadline - time.monotonic()
            if left <= 0:
                return False
            if self._stop.wait(min(PROBE_EVERY_S, left)):
                return False
            if probe and self.nodes.probe():
                return True
        return False

    def _run(self) -> None:
        backoff = BACKOFF_START_S
        self.nodes.new_round()
        while not self._stop.is_set():
            try:
                self._connect()
            except (OSError, ssl.SSLError, ValueError) as exc:
                failed = f"{self.host}:{self.port}"
                if not self.nodes.next():
                    log.warning("cannot reach broker %s (%s); trying %s:%s", failed, exc,
                                self.host, self.port)
                    continue
                wait = min(BACKOFF_CAP_S, backoff) * random.uniform(0.5, 1.0)
                log.warning("cannot reach broker %s (%s); retrying in %.1f s", failed, exc,
                            wait)
                backoff = min(BACKOFF_CAP_S, backoff * 2)
                if self._wait(wait, probe=True):
                    backoff = BACKOFF_START_S  # the broker answers again: start over
                self.nodes.new_round()
                continue
            refused = self._refused = False
            last_retry = time.monotonic()
            while not self._stop.is_set():
                try:
                    rc = self.client.loop(timeout=0.1)
                except Exception:  # noqa: BLE001 - a callback's fault must not end the link
                    log.exception("the MQTT network loop failed; connecting again")
                    self._on_disconnect(self.client, None, None, "network loop failed", None)
                    break
                if rc != mqtt.MQTT_ERR_SUCCESS:
                    refused = rc == mqtt.MQTT_ERR_CONN_REFUSED or self._refused
                    break
                if self.connected.is_set():
                    backoff = BACKOFF_START_S
                    if self._retry_subs and time.monotonic() - last_retry >= \
                            RETRY_SUBSCRIBE_S:
                        last_retry = time.monotonic()
                        for topic in sorted(self._retry_subs):
                            self._subscribe(topic)
                        self._retry_subs.clear()
            if self._stop.is_set() or self._stopping.is_set():
                break
            if self._begin_session:  # the earlier run's session is ended: connect again
                self._begin_session = False
                continue
            self.connected.clear()
            if refused and len(self.nodes) > 1:
                # another node may accept us (3.1.1 "server unavailable"); the wait below
                # still applies, so refusing nodes are not tried in a tight loop
                self.nodes.next()
            elif len(self.nodes) > 1:
                # a clustered broker: another node carries on at once (this one may be gone)
                self.nodes.next()
                self.nodes.new_round()
                log.warning("connection to the broker lost; connecting to %s:%s", self.host,
                            self.port)
                self._wait(random.uniform(0.05, 0.25), probe=False)
                continue
            wait = min(BACKOFF_CAP_S, backoff) * random.uniform(0.5, 1.0)
            log.warning("connection to the broker lost; reconnecting in %.1f s", wait)
            backoff = min(BACKOFF_CAP_S, backoff * 2)
            # a broker that refused us answers its port too: no early retry then
            if refused:
                self._wait(wait, probe=False)
            elif self._wait(wait, probe=True):
                backoff = BACKOFF_START_S
            self.nodes.new_round()

    # ---------------------------------------------------------------- publishing
    def publish(self, topic: str, payload: dict[str, Any] | None, qos: int, retain: bool,
                expiry_s: int | None = None, correlation: bytes | None = None,
                user: list[tuple[str, str]] | None = None) -> int | None:
        """Publish now if connected; returns the message id, or None when not connected.

        ``user`` are MQTT 5 user properties (an event's identity travels there too)."""
        if not self.connected.is_set():
            return None
        props = None
        if self.v5 and (expiry_s or correlation or user):
            props = Properties(PacketTypes.PUBLISH)  # type: ignore[no-untyped-call]
            if expiry_s:
                props.MessageExpiryInterval = int(expiry_s)
            if correlation:
                props.CorrelationData = correlation
            if user:
                props.UserProperty = user
        body = b"" if payload is None else json.dumps(payload, ensure_ascii=False).encode()
        info = self.client.publish(topic, body, qos=qos, retain=retain, properties=props)
        if info.rc != mqtt.MQTT_ERR_SUCCESS:
            return None
        if qos:
            self._pub_topics[int(info.mid)] = topic
        return int(info.mid)

    def stop(self, timeout: float = 5.0) -> None:
        """Publish the offline status ourselves (an orderly stop), then disconnect."""
        self._stopping.set()
        if self.connected.is_set():
            info = self.client.publish(self.status_topic, json.dumps(
                {**self.status_offline, "reason": "stopped"}), qos=1, retain=True)
            deadline = time.monotonic() + timeout
            while not info.is_published() and time.monotonic() < deadline and \
                    self.connected.is_set():
                time.sleep(0.02)
            self.client.disconnect()  # written by the network thread, which then ends
            if self._thread is not None:
                self._thread.join(min(timeout, 2.0))
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout)
        if self._thread is None or not self._thread.is_alive():
            release_sockets(self.client)
