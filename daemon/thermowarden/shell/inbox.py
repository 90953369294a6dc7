"""What the MQTT link's network thread hands the engine thread: sensor messages and commands
on the bounded :class:`Inbox`, connection events and publish acknowledgements as
:class:`Control` items on an unbounded queue (:mod:`thermowarden.shell.mqtt_link` fills both,
:mod:`thermowarden.shell.service` empties them; the web page puts its commands on the inbox
too).
"""

from __future__ import annotations

import threading
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any


@dataclass(slots=True)
class Incoming:
    """A message from the broker, as the engine thread receives it."""

    topic: str
    payload: bytes
    received: float
    response_topic: str | None = None
    correlation: bytes | None = None
    retained: bool = False
    identity: str | None = None
    """The sender's identity from the configured MQTT 5 user property (commands only)."""
    oversize: int = 0
    """A command body over the limit: its length (the body itself is dropped)."""
    kind: str = "sensor"
    """"sensor", "command", "echo" (our own event, MQTT 3.1.1 delivery check), "sys",
    "watch" (a group's status records and retained advisories) or "oversize" (a sensor
    message over the packet limit, dropped unread: ``oversize`` is its size)."""
    redelivered: bool = False
    """A command the broker sends again (the DUP flag): it may have been handled already."""
    on_reply: Callable[[dict[str, Any]], None] | None = None
    """For a command from the web page or API: called with the engine's reply."""


@dataclass(frozen=True)
class Control:
    """A connection event or a publish acknowledgement."""

    kind: str  # "connected", "disconnected", "subscribed", "puback", "refused", "dropped"
    mid: int = 0
    reason: str = ""
    failed: bool = False
    topic: str = ""
    """puback: the topic of the acknowledged (or refused) message, where known."""


SensorMessage = tuple[str, bytes, float, bool]
"""A sensor message as the engine thread receives it: topic, payload, when it was received
(epoch s) and whether the broker kept it (retained)."""


class Inbox:
    """A bounded hand-over from the network thread to the engine thread.

    A deque (append and popleft are atomic in CPython) with a wake-up event: cheaper per
    message than ``queue.Queue``, which takes a lock and a condition for every item. The
    event is set only when it is not set already (the engine thread clears it when it
    wakes), so a flood does not take its lock once per message. Sensor messages travel as
    :data:`SensorMessage` tuples, everything else as :class:`Incoming`. ``put`` refuses
    (returns False) when full; the caller counts the overflow.
    """

    def __init__(self, maxsize: int) -> None:
        self.maxsize = maxsize
        self.items: deque[Incoming | SensorMessage] = deque()
        self.ready = threading.Event()

    def put(self, item: Incoming | SensorMessage) -> bool:
        if len(self.items) >= self.maxsize:
            return False
        self.items.append(item)
        if not self.ready.is_set():  # the flag read is cheap; set() takes a lock
            self.ready.set()
        return True

    def wait(self, timeout: float) -> None:
        """Block until something arrives (or ``timeout``)."""
        if not self.items:
            self.ready.wait(timeout)
        self.ready.clear()

    def take(self, limit: int) -> list[Incoming | SensorMessage]:
        """Up to ``limit`` items, oldest first."""
        items = self.items
        popleft = items.popleft
        return [popleft() for _ in range(min(limit, len(items)))]

    def qsize(self) -> int:
        return len(self.items)
