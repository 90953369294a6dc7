"""Command topics cannot loop: after one acknowledgement, on MQTT 3.1.1 (where the service
clears the command topic after each command and receives its own clearing back) and on
MQTT 5, nothing more goes over the command and reply topics. A separate client counts every
message there for 10 seconds (the observation window the requirement names)."""

from __future__ import annotations

import json
import time
import uuid

import pytest

from tests.shell.conftest import (
    SLOW,
    Collector,
    ServiceProcess,
    clear_retained,
    wait_for,
    write_site,
)

pytestmark = pytest.mark.broker

WINDOW_S = 10.0
"""How long nothing more may be seen after the acknowledgement (an observation window)."""


@pytest.mark.parametrize("protocol", ["3.1.1", "5"])
def test_an_acknowledgement_is_answered_once_and_nothing_loops(tmp_path, system_broker_port,
                                                                protocol):
    port = system_broker_port
    prefix = f"twloop-{uuid.uuid4().hex[:6]}"
    site = write_site(tmp_path, prefix, port, ["room-a"],
                      extra_broker=f'  protocol: "{protocol}"')
    watcher = Collector(port, [f"{prefix}/#"])
    counter = Collector(port, [f"{prefix}/commands/#", f"{prefix}/replies",
                               f"{prefix}/replies/#"])
    svc = ServiceProcess(site, tmp_path / "state")

    def on_command_or_reply() -> list[tuple[str, bytes]]:
        with counter.lock:
            return [(t, p) for t, p, _ in counter.messages if not p.startswith(b"sync-")]

    try:
        svc.start()
        watcher.publish(f"{prefix}-in/room-a/ta", "31.5")
        wait_for(lambda: any(e["event"] == "raised" for e in watcher.events(prefix)), SLOW,
                 "the raised event")
        adv = next(e for e in watcher.events(prefix) if e["event"] == "raised")["advisory"]
        topic = f"{prefix}/commands/facilities/acknowledge"
        watcher.publish(topic, json.dumps({"advisory_id": adv["id"], "by": "operator",
                                           "request_id": "ack-1"}))
        wait_for(lambda: any(r.get("request_id") == "ack-1"
                             for r in counter.json_on(f"{prefix}/replies")), SLOW,
                 "the reply")
        if protocol == "3.1.1":
            # the service clears the topic in case the command was retained (3.1.1 cannot
            # say): that empty message reaches every subscriber, the service too
            wait_for(lambda: (topic, b"") in on_command_or_reply(), SLOW, "the clearing")
        seen = on_command_or_reply()
        time.sleep(WINDOW_S)  # the observation window: nothing more may come
        counter.sync(f"{prefix}/replies/_sync")  # whatever was on its way has arrived
        later = on_command_or_reply()[len(seen):]
        assert later == [], later[:10]
        replies = [p for t, p in seen if t.startswith(f"{prefix}/replies")]
        assert len(replies) == 1 and json.loads(replies[0])["ok"] is True
        commands = [p for t, p in seen if t == topic]
        assert commands[0].startswith(b"{") and commands[1:] == (
            [b""] if protocol == "3.1.1" else [])
        assert svc.metric("thermowarden_commands_total") == 1
        assert svc.metric("thermowarden_commands_total", 'ok="false"') == 0
        assert svc.metric("thermowarden_commands_retained_total") == 0
        # and an empty retained message on a command topic is no command either
        watcher.publish(f"{prefix}/commands/facilities/shelve", b"", retain=True)
        watcher.publish(f"{prefix}/commands/safety/unshelve", b"")
        # a command after them: the engine thread takes messages in order, so its reply
        # comes after any the empty ones would have had
        watcher.publish(f"{prefix}/commands/facilities/unshelve",
                        json.dumps({"advisory_id": adv["id"], "by": "operator",
                                    "request_id": "after"}))
        wait_for(lambda: any(r.get("request_id") == "after"
                             for r in counter.json_on(f"{prefix}/replies")), SLOW,
                 "the reply to the later command")
        answered = [json.loads(p).get("request_id") for t, p in on_command_or_reply()
                    if t.startswith(f"{prefix}/replies")]
        assert answered == ["ack-1", "after"]
        assert svc.metric("thermowarden_commands_total") == 2
    finally:
        assert svc.stop() == 0
        counter.close()
        watcher.close()
        clear_retained(port, prefix)
