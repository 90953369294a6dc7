"""Delivery wired into the running service: a sensor reading on a real broker raises an
advisory, and the event reaches a local webhook receiver (signed with the secret from the
environment) and a local SMTP server, counted in /metrics."""

from __future__ import annotations

import base64
import email
import email.policy
import json
import os
import uuid

import pytest
from standardwebhooks.webhooks import Webhook

from tests.shell.conftest import (
    Collector,
    ServiceProcess,
    clear_retained,
    wait_for,
    write_site,
)
from tests.shell.delivery_parts import Receiver, SmtpSink

pytestmark = pytest.mark.broker


def test_service_delivers_events_by_webhook_and_email(tmp_path, system_broker_port):
    port = system_broker_port
    prefix = f"twtest/{uuid.uuid4().hex[:8]}"
    site = write_site(tmp_path, prefix, port, ["room-a"])
    rec = Receiver()
    sink = SmtpSink()
    with open(site, "a", encoding="utf-8") as fh:
        fh.write(f"""\
delivery:
  retry: {{first_s: 0.2, max_s: 1}}
  audiences:
    facilities:
      webhook: {{url: "{rec.url}"}}
      email:
        smtp: {{host: 127.0.0.1, port: {sink.port}, tls: none}}
        from: thermowarden@works.invalid
        to: [facilities@works.invalid]
""")
    secret = "whsec_" + base64.b64encode(os.urandom(24)).decode()
    svc = ServiceProcess(site, tmp_path / "state", env={
        "THERMOWARDEN_DELIVERY__AUDIENCES__FACILITIES__WEBHOOK__SECRET": secret}).start()
    sensor = Collector(port, [])
    watcher = Collector(port, [f"{prefix}/events/#"])
    try:
        sensor.publish(f"{prefix}-in/room-a/ta", "31.5")
        wait_for(lambda: rec.requests and sink.messages, 20, "webhook and e-mail")
        headers, body = rec.requests[0]
        # the receiver's side of the Standard Webhooks specification, by its reference
        # library: signature, id and a fresh timestamp
        assert Webhook(secret).verify(body, dict(headers)) == json.loads(body)
        event = rec.bodies()[0]
        assert event["event"] == "raised"
        assert event["advisory"]["rule"] == "fast.hot"
        assert event["advisory"]["numbers"]["air_temperature"]["value"] == 31.5
        msg = email.message_from_bytes(sink.messages[0].content, policy=email.policy.default)
        assert msg["Subject"] == "[thermowarden] medium raised: room-a is hot"
        wait_for(lambda: svc.metric("thermowarden_deliveries_total",
                                    'outcome="sent"') == 2, 10, "the metric")
        # the safety audience has no delivery configured: its event goes over MQTT only
        wait_for(lambda: watcher.json_on(f"{prefix}/events/safety/"), 20, "the safety event")
        wait_for(lambda: "thermowarden_delivery_pending 0.0" in svc.get("/metrics")[1], 10,
                 "nothing pending")
        assert len(rec.requests) == 1 and len(sink.messages) == 1
    finally:
        assert svc.stop() == 0
        sensor.close()
        watcher.close()
        rec.close()
        sink.close()
        clear_retained(port, prefix)
