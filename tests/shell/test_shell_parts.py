"""Small shell parts without a broker: systemd notification, log rate limiting and JSON
lines, the store, the simulated clock."""

from __future__ import annotations

import json
import logging
import socket

from thermowarden.shell import systemd
from thermowarden.shell.clock import Clock
from thermowarden.shell.logs import JsonFormatter, RateLimiter
from thermowarden.shell.store import Store


def test_sd_notify_datagram(tmp_path):
    path = str(tmp_path / "notify.sock")
    with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM) as sock:
        sock.bind(path)
        assert systemd.notify("READY=1", {"NOTIFY_SOCKET": path})
        assert sock.recv(100) == b"READY=1"
    assert not systemd.notify("READY=1", {})
    assert systemd.watchdog_interval_s({"WATCHDOG_USEC": "60000000"}) == 30.0
    assert systemd.watchdog_interval_s({}) is None


def test_rate_limiter_counts_what_it_suppresses():
    now = [0.0]
    rl = RateLimiter(per_minute=6, burst=3, clock=lambda: now[0])
    assert [rl.allow("k")[0] for _ in range(5)] == [True, True, True, False, False]
    now[0] += 10.0  # one token back (6 per minute)
    assert rl.allow("k") == (True, 2)
    assert rl.allow("other")[0]


def test_json_log_lines():
    rec = logging.LogRecord("thermowarden", logging.WARNING, __file__, 1, "rejected %s",
                            ("implausible",), None)
    rec.space = "office-west"
    line = json.loads(JsonFormatter().format(rec))
    assert line["level"] == "warning" and line["message"] == "rejected implausible"
    assert line["space"] == "office-west"


def test_store_round_trips_and_outbox_order(tmp_path):
    s = Store(tmp_path / "x" / "site.sqlite3")
    rec = {"space": "a", "rule": "r", "payload": {}}
    s.put_advisory("a/r", {**rec, "state": 2})
    s.put_advisory("a/r", {**rec, "state": 3})
    assert s.advisories() == [{**rec, "state": 3}]
    s.put_advisory("a/r", None)
    assert s.advisories() == []
    seqs = [s.outbox_add(f"t/{k}", {"k": k}, 1.0) for k in range(3)]
    s.outbox_done(seqs[1])
    assert [t for _, t, _ in s.outbox()] == ["t/0", "t/2"]
    s.add_event("e", 5.0, {"event": "raised"})
    assert s.events_between(0, 10) == [{"event": "raised"}]
    assert s.prune_events(6.0) == 1
    s.put("daily_means", [20.5, 19.0])
    assert s.get("daily_means") == [20.5, 19.0]
    s.close()
    assert (tmp_path / "x" / "site.sqlite3").exists()


def test_simulated_clock_runs_faster():
    import time

    before = time.monotonic()
    c = Clock(start=1000.0, speed=100.0)
    t0 = c.now()
    time.sleep(0.05)  # a minimum to elapse, not a wait for something to happen
    t1 = c.now()
    elapsed = time.monotonic() - before
    assert 1000.0 <= t0 <= t1 <= 1000.0 + 100.0 * elapsed + 1.0
    assert t1 - t0 >= 4.0


def test_store_transaction_is_all_or_nothing(tmp_path):
    import pytest

    s = Store(tmp_path / "site.sqlite3")
    rec = {"space": "a", "rule": "r", "payload": {}, "state": 2}
    with pytest.raises(RuntimeError), s.transaction():
        s.put_advisory("a/r", rec)
        s.outbox_add("t/e", {"event": "raised"}, 1.0)
        raise RuntimeError("crash between the writes")
    assert s.advisories() == [] and s.outbox_depth() == 0
    with s.transaction():
        s.put_advisory("a/r", rec)
        s.outbox_add("t/e", {"event": "raised"}, 1.0)
    assert s.advisories() == [rec] and s.outbox_depth() == 1
    s.close()


def test_outbox_expires_by_age_and_by_bound(tmp_path):
    s = Store(tmp_path / "site.sqlite3")
    for k in range(10):
        s.outbox_add(f"t/{k}", {"event_id": f"e{k}"}, float(k))
    gone = s.outbox_expire(older_than=3.0, keep=5)  # 0, 1, 2 by age; then 3, 4 beyond 5 rows
    assert [p["event_id"] for _, p in gone] == ["e0", "e1", "e2", "e3", "e4"]
    assert [t for _, t, _ in s.outbox()] == [f"t/{k}" for k in range(5, 10)]
    assert s.outbox_depth() == 5
    assert s.outbox_expire(older_than=0.0, keep=100) == []
    s.close()


def test_clock_follows_the_wall_clock_and_durations_do_not():
    wall = [1000.0]
    mono = [5.0]
    c = Clock(wall=lambda: wall[0], mono=lambda: mono[0])
    wall[0] += 3600.0  # the system clock is corrected
    assert c.now() == 4600.0 and c.monotonic() == 5.0


def test_reconnect_wait_ends_as_soon_as_a_broker_answers(tmp_path):
    """While the link waits out its backoff (here up to 60 s) it probes the broker's port;
    once a broker answers it stops waiting (and the backoff starts over)."""
    import queue
    import threading

    from tests.shell.conftest import Mosquitto, free_port, wait_for
    from thermowarden.config import BrokerConfig
    from thermowarden.shell.inbox import Inbox
    from thermowarden.shell.metrics import Metrics
    from thermowarden.shell.mqtt_link import MqttLink

    port = free_port()
    link = MqttLink(BrokerConfig(url=f"mqtt://127.0.0.1:{port}"), [], "t/status", {}, {},
                    Inbox(10), queue.Queue(), Metrics(), "backoff-test")
    result: list[bool] = []
    waiter = threading.Thread(target=lambda: result.append(link._wait(60.0, probe=True)))
    waiter.start()
    assert not link.nodes.probe()  # nothing listens yet
    broker = Mosquitto(tmp_path, port=port).start()
    try:
        wait_for(lambda: not waiter.is_alive(), 30, "the wait to end early")
    finally:
        link._stop.set()
        waiter.join(5)
        broker.stop()
    assert result == [True]


def test_a_busy_http_port_is_named(tmp_path):
    """`run --http-port` on a port another process holds: exit 1, naming the port."""
    import socket
    import subprocess
    import sys

    from tests.conftest import COMMAND_LIMIT_S
    from tests.shell.conftest import REPO

    with socket.socket() as holder:
        holder.bind(("127.0.0.1", 0))
        holder.listen(1)
        port = holder.getsockname()[1]
        r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "run", "--config",
                            str(REPO / "deploy" / "example-site.yaml"), "--broker",
                            "mqtt://127.0.0.1:9", "--state-dir", str(tmp_path),
                            "--http-port", str(port)],
                           capture_output=True, text=True, timeout=COMMAND_LIMIT_S)
    assert r.returncode == 1
    assert f"cannot serve the operations endpoint on 127.0.0.1:{port}: Address already in use" \
        in r.stderr
