"""Delivery under faults, with the service as a process on a real broker: a SIGKILL while
50 deliveries wait on a slow webhook receiver loses none and sends none twice (checked by
delivery id at the receiver), and a webhook answering in 10 s does not hold back e-mail
(a local SMTP server, aiosmtpd)."""

from __future__ import annotations

import collections
import email
import email.policy
import sqlite3
import threading
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
from tests.shell.delivery_parts import Receiver, SmtpSink
from thermowarden.shell.delivery_channels import DELIVERY_HEADER

pytestmark = pytest.mark.broker

N_SPACES = 50


def site_with_delivery(tmp_path, prefix: str, port: int, n: int, audience: str) -> object:
    spaces = [f"room-{i:02d}" for i in range(n)]
    site = write_site(tmp_path, prefix, port, spaces,
                      evaluation="{tick_s: 1, flood_limit: 1000}")
    with open(site, "a", encoding="utf-8") as fh:
        fh.write(audience)
    return site


def raise_in_every_space(port: int, prefix: str, n: int) -> Collector:
    """One hot reading per space: the fast.hot rule raises one facilities event each."""
    watcher = Collector(port, [f"{prefix}/events/facilities/#"])
    for i in range(n):
        watcher.publish(f"{prefix}-in/room-{i:02d}/ta", "31.5")
    return watcher


def test_sigkill_with_50_deliveries_waiting_then_restart(tmp_path, system_broker_port):
    port = system_broker_port
    prefix = f"twdk/{uuid.uuid4().hex[:8]}"
    gate = threading.Event()
    rec = Receiver(gate=gate, hold_s=SLOW * 3)  # answers nothing until the gate opens
    site = site_with_delivery(tmp_path, prefix, port, N_SPACES, f"""\
delivery:
  retry: {{first_s: 0.2, max_s: 1, max_attempts: 1000}}
  audiences:
    facilities:
      webhook: {{url: "{rec.url}", timeout_s: 120}}
""")
    state = tmp_path / "state"
    env = {"THERMOWARDEN_DELIVERY__AUDIENCES__FACILITIES__WEBHOOK__SECRET": "k" * 16}
    svc = ServiceProcess(site, state, env=env).start()
    watcher = None
    try:
        watcher = raise_in_every_space(port, prefix, N_SPACES)
        wait_for(lambda: len(watcher.events(prefix)) >= N_SPACES, SLOW, "50 raised events")
        # all 50 are stored (the gauge counts the table), the first is at the receiver
        wait_for(lambda: svc.metric("thermowarden_delivery_pending") == N_SPACES, SLOW,
                 "50 deliveries stored")
        wait_for(lambda: rec.requests, SLOW, "the first request at the slow receiver")
        svc.kill()
        (db,) = state.glob("*.sqlite3")
        with sqlite3.connect(db) as conn:
            waiting = conn.execute("SELECT COUNT(*) FROM deliveries WHERE state = "
                                   "'pending'").fetchone()[0]
        assert waiting == N_SPACES
        before_kill = len(rec.requests)
        gate.set()  # the receiver is quick from now on
        svc = ServiceProcess(site, state, env=env).start()

        def delivered() -> set[str]:
            with rec.lock:
                return {h[DELIVERY_HEADER] for h, _ in rec.requests}

        wait_for(lambda: len(delivered()) == N_SPACES, SLOW, "all 50 delivered")
        wait_for(lambda: svc.metric("thermowarden_delivery_pending") == 0, SLOW,
                 "nothing waiting")
        raised = {e["event_id"] for e in watcher.events(prefix) if e["event"] == "raised"}
        assert len(raised) == N_SPACES
        by_delivery: dict[str, set[str]] = collections.defaultdict(set)
        by_event: dict[str, set[str]] = collections.defaultdict(set)
        for body, (headers, _) in zip(rec.bodies(), rec.requests, strict=True):
            by_delivery[headers[DELIVERY_HEADER]].add(body["event_id"])
            by_event[body["event_id"]].add(headers[DELIVERY_HEADER])
        # every raised event reached the receiver, under one delivery id each; a repeat
        # can only be a request that was at the receiver when the process was killed
        assert set(by_event) == raised
        assert all(len(ids) == 1 for ids in by_event.values())
        assert all(len(events) == 1 for events in by_delivery.values())
        repeats = len(rec.requests) - N_SPACES
        assert 0 <= repeats <= before_kill
        assert svc.metric("thermowarden_deliveries_total", 'outcome="sent"') == N_SPACES
    finally:
        gate.set()
        if svc.proc is not None and svc.proc.poll() is None:
            assert svc.stop() == 0
        if watcher is not None:
            watcher.close()
        rec.close()
        clear_retained(port, prefix)


def test_slow_webhook_does_not_delay_email(tmp_path, system_broker_port):
    port = system_broker_port
    prefix = f"twds/{uuid.uuid4().hex[:8]}"
    n = 20
    gate = threading.Event()
    rec = Receiver(gate=gate, hold_s=10.0)  # each request answered after 10 s
    sink = SmtpSink()
    site = site_with_delivery(tmp_path, prefix, port, n, f"""\
delivery:
  audiences:
    facilities:
      webhook: {{url: "{rec.url}", timeout_s: 60}}
      email:
        smtp: {{host: 127.0.0.1, port: {sink.port}, tls: none}}
        from: thermowarden@works.invalid
        to: [facilities@works.invalid]
""")
    env = {"THERMOWARDEN_DELIVERY__AUDIENCES__FACILITIES__WEBHOOK__SECRET": "k" * 16}
    svc = ServiceProcess(site, tmp_path / "state", env=env).start()
    watcher = None
    try:
        watcher = raise_in_every_space(port, prefix, n)
        wait_for(lambda: len(sink.messages) == n, SLOW, "20 e-mails")
        # the e-mails did not wait for the webhook: one worker (one receiver) each
        last_mail = max(sink.arrived)
        with rec.lock:
            answered_meanwhile = sum(1 for t in rec.answered if t <= last_mail)
        assert answered_meanwhile <= 2, answered_meanwhile
        subjects = {email.message_from_bytes(m.content, policy=email.policy.default)["Subject"]
                    for m in sink.messages}
        assert subjects == {f"[thermowarden] medium raised: room-{i:02d} is hot"
                            for i in range(n)}
        gate.set()  # let the webhook catch up: nothing lost there either
        wait_for(lambda: len({h[DELIVERY_HEADER] for h, _ in rec.requests}) == n, SLOW,
                 "the webhook deliveries")
        wait_for(lambda: svc.metric("thermowarden_delivery_pending") == 0, SLOW,
                 "nothing waiting")
    finally:
        gate.set()
        assert svc.stop() == 0
        if watcher is not None:
            watcher.close()
        rec.close()
        sink.close()
        clear_retained(port, prefix)
