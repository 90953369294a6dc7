"""The service under real faults with real Mosquitto brokers: a broker that hangs and is
killed mid-run, retained and oversized commands, a flood of unknown verbs, publishing the
broker refuses (MQTT 5 and 3.1.1), a broker that drops messages, oversized payloads."""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import threading
import time
import uuid

import paho.mqtt.client as mqtt
import pytest
from paho.mqtt.enums import CallbackAPIVersion

from tests.shell.conftest import (
    Collector,
    Mosquitto,
    ServiceProcess,
    clear_retained,
    port_open,
    wait_for,
    write_site,
)
from thermowarden.shell.buffered_client import release_sockets

pytestmark = pytest.mark.broker


def _prefix() -> str:
    return f"twtest-{uuid.uuid4().hex[:8]}"


class EventLog:
    """A QoS 1 subscriber with a persistent session that keeps every copy it receives."""

    def __init__(self, port: int, topic: str) -> None:
        self.copies: list[tuple[str, bytes]] = []
        self.lock = threading.Lock()
        self.connected = threading.Event()
        self.client = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                                  client_id=f"log-{uuid.uuid4().hex[:8]}",
                                  protocol=mqtt.MQTTv311, clean_session=False)
        self.client.on_connect = lambda c, u, f, r, p: (c.subscribe(topic, qos=1),
                                                        self.connected.set())
        self.client.on_disconnect = lambda *a: self.connected.clear()
        self.client.on_message = self._on_message
        self.client.reconnect_delay_set(0.2, 1.0)
        self.client.connect("127.0.0.1", port, 30)
        self.client.loop_start()
        wait_for(self.connected.is_set, 10, "the event log to connect")

    def _on_message(self, client, userdata, msg) -> None:
        if msg.payload:
            with self.lock:
                self.copies.append((json.loads(msg.payload)["event_id"], bytes(msg.payload)))

    def by_id(self) -> dict[str, list[bytes]]:
        out: dict[str, list[bytes]] = {}
        with self.lock:
            for event_id, body in self.copies:
                out.setdefault(event_id, []).append(body)
        return out

    def close(self) -> None:
        self.client.loop_stop()
        self.client.disconnect()
        release_sockets(self.client)


def stored_events(state_dir) -> dict[str, float]:
    """event_id -> when it was stored (epoch s)."""
    out: dict[str, float] = {}
    for db in state_dir.glob("*.sqlite3"):
        with sqlite3.connect(db) as con:
            for at, payload in con.execute("SELECT at, payload FROM events"):
                out[json.loads(payload)["event_id"]] = float(at)
    return out


def test_broker_hang_then_kill_delivers_every_event_once(tmp_path):
    """SIGSTOP the broker mid-run, SIGKILL it while hung, start it again: every stored
    event arrives, no two different events share an identity, and an identity arrives
    twice only as an identical copy (a QoS 1 re-send)."""
    broker = Mosquitto(tmp_path, extra="autosave_interval 1\n").start()
    prefix = _prefix()
    spaces = [f"bay-{k}" for k in range(40)]
    site = write_site(tmp_path, prefix, broker.port, spaces, extra_broker="  keepalive_s: 5",
                      evaluation="{tick_s: 1, flood_limit: 100000}")
    state = tmp_path / "state"
    svc = ServiceProcess(site, state)
    log = EventLog(broker.port, f"{prefix}/events/#")
    stop = threading.Event()
    feeder = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2)
    feeder.reconnect_delay_set(0.2, 1.0)

    done = threading.Event()

    def feed() -> None:
        # space k is hot from 0.6 k s for 6 s, then cool: each raises "hot" at once and
        # "slow_hot" 3 s later and clears both a second after cooling (4 events each,
        # staggered, so that whenever the broker hangs some are about to be raised)
        t0 = time.monotonic()
        while not stop.is_set():
            t = time.monotonic() - t0
            for k, s in enumerate(spaces):
                hot = 0.0 <= t - 0.6 * k < 6.0
                feeder.publish(f"{prefix}-in/{s}/ta", "31.5" if hot else "27.0", qos=0)
            if t > 0.6 * len(spaces) + 10:
                done.set()
            stop.wait(0.5)

    try:
        svc.start()
        feeder.connect("127.0.0.1", broker.port, 30)
        feeder.loop_start()
        threading.Thread(target=feed, daemon=True).start()
        wait_for(lambda: len(log.copies) >= 10, 30, "events before the fault")
        broker.hang()
        hung = time.time()
        # the readings taken just before go on raising (slow_hot after 3 s) and clearing
        # (hot after 1 s): events made while the broker answers nothing
        time.sleep(8)
        broker.kill()
        killed = time.time()
        time.sleep(2)
        broker.start()
        wait_for(lambda: svc.metric("thermowarden_broker_reconnects_total") >= 1, 60,
                 "the service to reconnect")
        wait_for(done.is_set, 90, "the feed to finish")
        stop.set()
        wait_for(lambda: svc.metric("thermowarden_outbox_depth") == 0, 60,
                 "the outbox to drain")
        svc.stop()
        at = stored_events(state)
        stored = set(at)
        wait_for(lambda: stored <= set(log.by_id()), 30, "every stored event to arrive")
    finally:
        stop.set()
        feeder.loop_stop()
        release_sockets(feeder)
        log.close()
        if svc.proc and svc.proc.poll() is None:
            svc.stop()
        broker.stop()
    copies = log.by_id()
    during = [k for k, t in at.items() if hung <= t <= killed]
    # how many transitions a loaded machine evaluates in time varies (about 85-120 here):
    # enough events to matter, some of them made while the broker was hung
    assert len(stored) >= 40 and len(during) >= 3, (len(stored), len(during))
    assert set(copies) == stored  # nothing that was not stored, nothing stored missing
    for event_id, bodies in copies.items():
        # the same identity is never a different event: copies are identical
        assert len(set(bodies)) == 1, (event_id, bodies)
    resent = sum(len(b) - 1 for b in copies.values())
    print(f"stored {len(stored)} events ({len(during)} while the broker hung), received "
          f"{len(log.copies)} copies, {resent} re-sent")
    assert resent <= 20  # at most what was in flight when the broker hung


def test_retained_and_oversized_commands(tmp_path, system_broker_port):
    port = system_broker_port
    prefix = _prefix()
    site = write_site(tmp_path, prefix, port, ["room-a"])
    watcher = Collector(port, [f"{prefix}/#"])
    svc = ServiceProcess(site, tmp_path / "state")
    try:
        svc.start()
        watcher.publish(f"{prefix}-in/room-a/ta", "31.5")
        wait_for(lambda: any(e["event"] == "raised" for e in watcher.events(prefix)), 15,
                 "the raised event")
        adv = next(e for e in watcher.events(prefix) if e["event"] == "raised")["advisory"]
        body = {"advisory_id": adv["id"], "by": "script", "reason": "quiet",
                "duration_s": 600, "request_id": "ret-1"}
        watcher.publish(f"{prefix}/commands/facilities/shelve", json.dumps(body), retain=True)
        wait_for(lambda: svc.metric("thermowarden_commands_retained_total") >= 1, 15,
                 "the retained command to be counted")
        # and it was cleared: a new subscriber gets nothing retained there
        late = Collector(port, [f"{prefix}/commands/#"])
        time.sleep(1.0)
        assert not [m for m in late.messages if m[1]], late.messages
        late.close()
        # a restart (a new subscription) does not execute it either
        svc.stop()
        svc.start()
        time.sleep(2.0)
        assert not any(r.get("request_id") == "ret-1"
                       for r in watcher.json_on(f"{prefix}/replies"))
        assert not any(e["event"] == "shelved" for e in watcher.events(prefix))
        # a body over commands.max_body_bytes is refused before it is decoded
        big = {**body, "request_id": "big-1", "reason": "x" * 5000}
        watcher.publish(f"{prefix}/commands/facilities/shelve", json.dumps(big))
        wait_for(lambda: any(r.get("error", "").startswith("the command body has")
                             for r in watcher.json_on(f"{prefix}/replies")), 15,
                 "the refusal of a large body")
        # the old topic form is refused with the new one named
        watcher.publish(f"{prefix}/commands/shelve", json.dumps(body))
        wait_for(lambda: any("commands/<audience>/<verb>" in r.get("error", "")
                             for r in watcher.json_on(f"{prefix}/replies")), 15,
                 "the refusal of the old topic form")
        assert not any(e["event"] == "shelved" for e in watcher.events(prefix))
    finally:
        svc.stop()
        watcher.close()
        clear_retained(port, prefix)


def test_a_flood_of_unknown_verbs_makes_one_series(tmp_path, system_broker_port):
    port = system_broker_port
    prefix = _prefix()
    site = write_site(tmp_path, prefix, port, ["room-a"])
    svc = ServiceProcess(site, tmp_path / "state")
    sender = Collector(port, [])
    try:
        svc.start()
        for _ in range(2000):
            sender.client.publish(f"{prefix}/commands/facilities/v{uuid.uuid4().hex}",
                                  b"{}", qos=0)
        sender.publish(f"{prefix}/commands/facilities/acknowledge", b"{}")
        wait_for(lambda: svc.metric("thermowarden_commands_total") >= 2001, 60,
                 "every command to be counted")
        _, text = svc.get("/metrics")
        series = [line for line in text.splitlines()
                  if line.startswith("thermowarden_commands_total{")]
        assert len(series) == 2, series  # verb="unknown" and verb="acknowledge"
        assert 'verb="unknown"' in " ".join(series)
        assert len(text) < 40_000
    finally:
        sender.close()
        svc.stop()
        clear_retained(port, prefix)


REFUSING_ACL = """\
user thermowarden
topic read {prefix}-in/#
topic read {prefix}/commands/#
topic write {prefix}/status
topic write {prefix}/spaces/#
topic write {prefix}/replies/#
topic read {prefix}/events/#
user watcher
topic read {prefix}/#
topic write {prefix}-in/#
"""


@pytest.mark.parametrize("protocol", ["5", "3.1.1"])
def test_refused_publishing_is_counted_and_not_ready(tmp_path, protocol):
    """The ACL lets the service read its events but not publish them: under MQTT 5 the
    broker says so (reason code), under 3.1.1 it acknowledges and drops them, which the
    service finds out because they never come back on its own subscription."""
    prefix = _prefix()
    pw = tmp_path / "passwd"
    for i, user in enumerate(("thermowarden", "watcher")):
        import subprocess

        subprocess.run(["mosquitto_passwd", "-b"] + (["-c"] if i == 0 else []) +
                       [str(pw), user, f"{user}-pw"], check=True, capture_output=True)
    acl = tmp_path / "acl"
    acl.write_text(REFUSING_ACL.format(prefix=prefix))
    broker = Mosquitto(tmp_path, extra=f"password_file {pw}\nacl_file {acl}\n")
    broker.conf.write_text(broker.conf.read_text().replace("allow_anonymous true",
                                                            "allow_anonymous false"))
    broker.start()
    site = write_site(tmp_path, prefix, broker.port, ["room-a"],
                      extra_broker=f"  protocol: \"{protocol}\"")
    svc = ServiceProcess(site, tmp_path / "state", env={
        "THERMOWARDEN_BROKER__USERNAME": "thermowarden",
        "THERMOWARDEN_BROKER__PASSWORD": "thermowarden-pw"})
    watcher = Collector(broker.port, [f"{prefix}/#"], username="watcher",
                        password="watcher-pw")
    try:
        svc.start()
        watcher.publish(f"{prefix}-in/room-a/ta", "31.5")
        wait_for(lambda: watcher.json_on(f"{prefix}/spaces/room-a/advisories/"), 15,
                 "the retained advisory (allowed)")
        name = ("thermowarden_publish_failures_total" if protocol == "5"
                else "thermowarden_events_unconfirmed_total")
        wait_for(lambda: svc.metric(name) >= 1, 40, f"{name} to count the refusal")
        code, body = svc.get("/readyz")
        assert code == 503 and json.loads(body)["publishing"] is False, body
        assert svc.metric("thermowarden_outbox_depth") >= (1 if protocol == "5" else 0)
        assert not watcher.events(prefix)  # nothing got through
    finally:
        watcher.close()
        svc.stop()
        broker.stop()


def test_a_broker_that_drops_messages_is_made_visible(tmp_path):
    """A broker with a short queue per client drops QoS 1 readings while the service is
    stalled: the broker's own drop counter ($SYS) and the missed readings show it."""
    broker = Mosquitto(tmp_path, extra="max_queued_messages 20\nsys_interval 1\n").start()
    prefix = _prefix()
    site = write_site(tmp_path, prefix, broker.port, ["room-a"])
    site.write_text(site.read_text().replace("interval_s: 60", "interval_s: 1"))
    svc = ServiceProcess(site, tmp_path / "state")
    sender = Collector(broker.port, [])
    sent = 0
    try:
        svc.start()
        for _ in range(3):
            sender.publish(f"{prefix}-in/room-a/ta", "22.0")
            sent += 1
            time.sleep(1.0)
        assert svc.proc is not None
        os.kill(svc.proc.pid, signal.SIGSTOP)
        try:
            for k in range(3000):
                sender.client.publish(f"{prefix}-in/room-a/ta", f"{22 + (k % 10) / 10}", qos=1)
                sent += 1
            time.sleep(2.5)
        finally:
            os.kill(svc.proc.pid, signal.SIGCONT)
        for _ in range(3):
            time.sleep(1.0)
            sender.publish(f"{prefix}-in/room-a/ta", "22.5")
            sent += 1
        wait_for(lambda: svc.metric("thermowarden_broker_messages_dropped") > 0, 30,
                 "the broker's drop counter to reach the service")
        received = svc.metric("thermowarden_messages_received_total")
        dropped = svc.metric("thermowarden_broker_messages_dropped")
        missed = svc.metric("thermowarden_readings_missed_total")
        print(f"sent {sent}, received {received:.0f}, broker dropped {dropped:.0f}, "
              f"missed readings {missed:.0f}")
        assert received < sent and dropped >= 1 and missed >= 1
        assert svc.metric("thermowarden_readings_accepted_total",
                          'quantity="air_temperature"') >= 6
    finally:
        sender.close()
        svc.stop()
        broker.stop()


def _peak_kb(pid: int) -> int:
    with open(f"/proc/{pid}/status") as fh:
        for line in fh:
            if line.startswith("VmHWM:"):
                return int(line.split()[1])
    raise AssertionError("no VmHWM")


def test_oversized_payloads_do_not_reach_the_service(tmp_path):
    """MQTT 5: the service announces a maximum packet size (64 MiB) above its limit, so the
    broker sends it the ten 50 MB payloads and it counts them, but it never holds one whole
    (peak memory stays flat); the readings around them are taken."""
    broker = Mosquitto(tmp_path).start()
    prefix = _prefix()
    site = write_site(tmp_path, prefix, broker.port, ["room-a"])
    svc = ServiceProcess(site, tmp_path / "state")
    sender = Collector(broker.port, [])
    try:
        svc.start()
        assert svc.proc is not None
        sender.publish(f"{prefix}-in/room-a/ta", "22.0")
        wait_for(lambda: svc.metric("thermowarden_messages_received_total") >= 1, 15,
                 "the first reading")
        before = _peak_kb(svc.proc.pid)
        blob = b"9" * (50 * 1024 * 1024)
        for _ in range(10):
            sender.publish(f"{prefix}-in/room-a/ta", blob)
        sender.publish(f"{prefix}-in/room-a/ta", "23.0")
        wait_for(lambda: svc.metric("thermowarden_messages_received_total") >= 12, 60,
                 "the reading after the large ones")
        grown_mb = (_peak_kb(svc.proc.pid) - before) / 1024
        print(f"peak memory grew by {grown_mb:.1f} MB for 10 x 50 MB payloads")
        assert grown_mb < 20
        assert svc.metric("thermowarden_messages_received_total") == 12
        assert svc.metric("thermowarden_messages_rejected_total",
                          'reason="payload_too_large"') == 10
        assert svc.metric("thermowarden_readings_accepted_total") == 2
    finally:
        sender.close()
        svc.stop()
        broker.stop()
    assert not port_open(broker.port)
