"""Sorting what the broker delivers onto the engine thread's inbox by kind: sensor messages
(plain tuples, the common case kept to the minimum), commands, our own events coming back
(the MQTT 3.1.1 delivery check), the broker's ``$SYS`` figures and a group's watched topics.
Runs in paho's callbacks on the network thread: it only enqueues (overflow is counted).

Retained commands are never executed (a retained command would run again at every
reconnect): they are counted and cleared without a reply. Under MQTT 5 the command
subscription asks for the retain flag as published, so even the first, live delivery of a
retained command is refused; MQTT 3.1.1 cannot tell a live retained message from a plain
one, so there the service clears the topic's retained message after every command it
executes. An empty message on a command topic (such a clearing, the service's own included:
3.1.1 has no "no local") is no command: it is dropped without a reply. Command bodies over
the limit are not decoded.
A message over ``max_packet_bytes`` (the larger of the payload and command limits, plus
some room for the topic) is never held whole, on either protocol: the client reads its
fixed header, drops its bytes as they come (see :class:`BufferedClient`) and hands the
engine thread its topic and size, so it is counted and refused like any payload over the
limit.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING, Any

from thermowarden.shell.inbox import Inbox, Incoming

if TYPE_CHECKING:
    import paho.mqtt.client as mqtt

    from thermowarden.shell.buffered_client import Oversized
    from thermowarden.shell.metrics import Metrics


class MessageSorter:
    """See the module docstring. ``watch``: topic prefixes delivered as kind "watch"."""

    def __init__(self, inbox: Inbox, metrics: Metrics, client: mqtt.Client,
                 command_prefix: str, now: Callable[[], float], max_command_bytes: int,
                 identity_property: str | None, echo_prefix: str | None,
                 watch: tuple[str, ...]) -> None:
        self.inbox = inbox
        self.metrics = metrics
        self.client = client
        self.command_prefix = command_prefix
        self.now = now
        self.max_command_bytes = max_command_bytes
        self.identity_property = identity_property
        self.echo_prefix = echo_prefix
        self.watch = watch
        self.received = 0
        """Sensor messages received (a plain counter: no lock)."""

    def on_message(self, client: mqtt.Client, userdata: Any, msg: mqtt.MQTTMessage) -> None:
        topic = msg.topic
        if topic.startswith(self.command_prefix):  # only commands carry reply properties
            if not msg.payload:
                # the clearing of a retained command (the service's own, or anyone's):
                # never a command, never answered (MQTT 3.1.1 has no "no local", so the
                # service receives its own clearing; answering it looped)
                return
            if msg.retain:
                # never executed: it would run again at every reconnect
                self.metrics.retained_commands.inc()
                client.publish(topic, b"", qos=1, retain=True)  # clear it
                return
            props = getattr(msg, "properties", None)
            size = len(msg.payload)
            item = Incoming(topic, b"" if size > self.max_command_bytes else bytes(msg.payload),
                            self.now(), getattr(props, "ResponseTopic", None),
                            getattr(props, "CorrelationData", None), kind="command",
                            identity=self.identity(props),
                            oversize=size if size > self.max_command_bytes else 0,
                            redelivered=bool(msg.dup))
        elif self.echo_prefix and topic.startswith(self.echo_prefix):
            item = Incoming(topic, bytes(msg.payload), 0.0, kind="echo")
        elif topic.startswith("$SYS/"):
            item = Incoming(topic, bytes(msg.payload), 0.0, kind="sys")
        elif self.watch and topic.startswith(self.watch):
            item = Incoming(topic, bytes(msg.payload), self.now(), retained=bool(msg.retain),
                            kind="watch")
        else:
            # the common case, kept to the minimum: a plain tuple (no per-message object
            # the garbage collector has to follow) and a plain counter (no lock)
            self.received += 1
            if not self.inbox.put((topic, bytes(msg.payload), self.now(), bool(msg.retain))):
                self.metrics.queue_overflow.inc()
            return
        if not self.inbox.put(item):
            self.metrics.queue_overflow.inc()

    def on_oversized(self, msg: Oversized) -> None:
        """A message over ``max_packet_bytes``, dropped unread (its topic and size only)."""
        topic = msg.topic
        if topic.startswith(self.command_prefix):
            if msg.retain:
                self.metrics.retained_commands.inc()
                self.client.publish(topic, b"", qos=1, retain=True)  # clear it
                return
            item = Incoming(topic, b"", self.now(), kind="command", oversize=msg.size)
        elif (self.echo_prefix and topic.startswith(self.echo_prefix)) or \
                topic.startswith("$SYS/") or (self.watch and topic.startswith(self.watch)):
            return  # not from a sensor: nothing to count it against
        else:
            self.received += 1
            item = Incoming(topic, b"", self.now(), retained=bool(msg.retain),
                            kind="oversize", oversize=msg.size)
        if not self.inbox.put(item):
            self.metrics.queue_overflow.inc()

    def identity(self, props: Any) -> str | None:
        name = self.identity_property
        if not name or props is None:
            return None
        for key, value in getattr(props, "UserProperty", None) or []:
            if key == name:
                return str(value)[:200]
        return None
