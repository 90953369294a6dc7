"""Commands on advisories (acknowledge, shelve, unshelve) as they arrive over MQTT or from the
web page, and the reply to each.

``<prefix>/commands/<audience>/<verb>[/<user>]``: the audience in the topic lets a broker ACL
decide who may act on whose advisories (the engine checks that it matches the advisory's);
``<user>`` is recorded as who acted, which the broker vouches for only when its ACL lets each
person write to topics ending in their own name. The configured MQTT 5 user property (set by
a trusted gateway) takes precedence. In a group, the instance holding the advisory's shard
answers. The reply goes to ``<prefix>/replies`` or, when the command asks for one below it,
to that topic.

A command the broker delivers again (its DUP flag: a QoS 1 message whose acknowledgement it
did not get, after a lost connection or its redelivery time) is dropped when the same topic
and body arrived within ``SEEN_KEPT_S``: it was handled already (a second shelving would
start the shelving again, a second acknowledgement would be refused). One sent again by a
person is a new message, without the flag, and is handled.

Runs on the engine thread (:mod:`thermowarden.shell.service`).
"""

from __future__ import annotations

import json
import logging
import time
from collections import OrderedDict
from typing import TYPE_CHECKING, Any, Protocol

from thermowarden.core.json_values import iso
from thermowarden.shell.logs import RateLimiter

if TYPE_CHECKING:
    from thermowarden.effects import Effect
    from thermowarden.engine import Engine
    from thermowarden.shell.group.instance import Group
    from thermowarden.shell.inbox import Incoming
    from thermowarden.shell.metrics import Metrics
    from thermowarden.shell.mqtt_link import MqttLink

log = logging.getLogger("thermowarden.service")

KNOWN_VERBS = frozenset({"acknowledge", "shelve", "unshelve"})
"""Only these become metric labels; anything else is counted as "unknown"."""
SEEN_KEPT_S = 600.0
"""How long the topic and body of a command from the broker are remembered (a redelivery of
one of them is dropped); nats-server sends an unacknowledged message again after 30 s by
default."""
SEEN_MAX = 10_000
"""At most this many remembered (the oldest go first)."""


class CommandHost(Protocol):
    """What command handling uses of the service that runs it."""

    engine: Engine
    group: Group | None
    dirty: bool
    """Set after a command: the next turn evaluates."""

    def wall_now(self) -> float:
        """The wall time, after any step of the wall clock was handed to the engine."""
        ...

    def execute(self, effects: list[Effect]) -> None:
        """Store, then publish."""
        ...


class AdvisoryCommands:
    """See the module docstring."""

    def __init__(self, host: CommandHost, link: MqttLink, metrics: Metrics,
                 command_prefix: str, reply_topic: str) -> None:
        self.host = host
        self.link = link
        self.metrics = metrics
        self.command_prefix = command_prefix
        self.reply_topic = reply_topic
        self.limiter = RateLimiter()
        self.seen: OrderedDict[tuple[str, bytes], float] = OrderedDict()
        """(topic, body) of the commands from the broker -> when (monotonic s) they
        arrived, oldest first."""
        self.redeliveries_dropped = 0

    def first_time(self, m: Incoming, now: float) -> bool:
        """Remember a command from the broker; False for a redelivery (DUP flag) of one
        that arrived within ``SEEN_KEPT_S`` (see the module docstring)."""
        seen = self.seen
        while seen and (len(seen) > SEEN_MAX or
                        now - next(iter(seen.values())) > SEEN_KEPT_S):
            seen.popitem(last=False)
        key = (m.topic, m.payload)
        if m.redelivered and key in seen:
            return False
        seen[key] = now
        seen.move_to_end(key)
        return True

    def receive(self, m: Incoming) -> None:
        """A command as it arrives (from the broker or the web page): a redelivery of one
        handled already is dropped, anything else handled."""
        if m.on_reply is None and not m.oversize and \
                not self.first_time(m, time.monotonic()):
            self.redeliveries_dropped += 1
            log.info("a command delivered again by the broker was dropped: it was handled "
                     "already (%s)", m.topic)
            return
        self.handle(m)

    def handle(self, m: Incoming) -> None:
        """Act on one command and answer it (see the module docstring)."""
        if not m.payload and not m.oversize and m.on_reply is None:
            # the empty message that clears a retained command (ours, below, or anyone's):
            # no command, nothing to answer; answered and cleared again, it came back to
            # every instance on MQTT 3.1.1, for ever (about 60 a second on nats-server)
            return
        host = self.host
        group = host.group
        parts = m.topic[len(self.command_prefix):].split("/")
        now = host.wall_now()
        verb = parts[-1]
        audience = parts[0] if len(parts) in (2, 3) else None
        verb = parts[1] if len(parts) in (2, 3) else verb
        if m.oversize:
            reply: dict[str, Any] = {
                "schema": "thermowarden.reply/1", "ok": False, "verb": verb[:32],
                "error": f"the command body has {m.oversize} bytes; at most "
                         f"{self.link.max_command_bytes} are accepted",
                "request_id": None, "at": iso(now)}
            effects: list[Effect] = []
        elif audience is None:
            reply = {"schema": "thermowarden.reply/1", "ok": False, "verb": verb[:32],
                     "error": "commands go to <prefix>/commands/<audience>/<verb> (audience "
                              "facilities, safety or integrator)",
                     "request_id": None, "at": iso(now)}
            effects = []
        elif group is not None and m.on_reply is not None and group.route(
                m, _advisory_id(m.payload), keep=False) != "answer":
            # from this instance's web page: only the holder of the shard may act on it
            reply = {"schema": "thermowarden.reply/1", "ok": False, "verb": verb[:32],
                     "error": "this instance of the group does not hold the shard of that "
                              "advisory; use the holder's page (its status record names "
                              "its shards) or send the command over MQTT",
                     "request_id": None, "at": iso(now)}
            effects = []
        else:
            if group is not None and m.on_reply is None and \
                    group.route(m, _advisory_id(m.payload)) != "answer":
                return  # every instance receives it: the holder of its shard answers
            identity = m.identity or (parts[2] if len(parts) == 3 else None)
            reply, effects = host.engine.command(verb, m.payload, now, audience=audience,
                                                 identity=identity)
            if group is not None:  # fenced as records are (dropped, not sent late)
                reply.update(group.fencing(_advisory_id(m.payload)))
        label = verb if verb in KNOWN_VERBS else "unknown"
        self.metrics.commands.labels(verb=label, ok=str(reply["ok"]).lower()).inc()
        host.execute(effects)
        target = self.reply_topic
        if not m.oversize:
            for wanted in (_reply_to(m.payload), m.response_topic):
                if wanted and wanted.startswith(self.reply_topic + "/"):
                    target = wanted
        self.link.publish(target, reply, 1, False, correlation=m.correlation)
        if m.on_reply is not None:  # from the web page or API, which waits for the reply
            m.on_reply(reply)
        elif not self.link.v5:
            # MQTT 3.1.1 cannot say whether this was retained: clear it in case it was
            self.link.client.publish(m.topic, b"", qos=1, retain=True)
        if not reply["ok"]:
            ok, dropped = self.limiter.allow(f"command|{label}")
            if ok:
                log.info("command %s refused: %s%s", verb[:64], reply.get("error"),
                         f" ({dropped} similar suppressed)" if dropped else "")
        host.dirty = True


def _advisory_id(body: bytes) -> object:
    try:
        data: Any = json.loads(body.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        return None
    return data.get("advisory_id") if isinstance(data, dict) else None


def _reply_to(body: bytes) -> str | None:
    try:
        data: Any = json.loads(body.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        return None
    target = data.get("reply_to") if isinstance(data, dict) else None
    if isinstance(target, str) and target and not any(c in target for c in "+#\0"):
        return target
    return None
