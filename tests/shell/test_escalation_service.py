"""Escalation through the running service: two buildings' rooms raise urgent alerts from
sensor readings on the real broker; the one acknowledged over MQTT stays with its first
recipients, the one nobody acknowledges reaches the second recipient (a local SMTP server
and a webhook receiver) after the set time, with a link to its page; the building's own
recipients get their building's alert only."""

from __future__ import annotations

import email
import email.policy
import json
import textwrap
import uuid

import pytest

from tests.shell.conftest import Collector, ServiceProcess, clear_retained, free_port, wait_for
from tests.shell.delivery_parts import Receiver, SmtpSink

pytestmark = pytest.mark.broker

PACK = """\
pack: urgent
description: an urgent alert at once
rules:
  - id: heat
    title: Heat
    audience: safety
    priority: urgent
    needs: [air_temperature]
    condition: air_temperature > 35
    clear: air_temperature < 34
    on_delay_s: 0
    numbers: [air_temperature]
    messages: {title: "Heat in {space_name}", advice: "Stop hot work.", rationale: "Above 35."}
"""
AFTER_S = 10.0


def test_unacknowledged_alert_escalates_through_the_service(tmp_path, system_broker_port):
    port = system_broker_port
    prefix = f"twtest/{uuid.uuid4().hex[:8]}"
    first = Receiver()
    north_team = Receiver()
    second_hook = Receiver()
    second_mail = SmtpSink()
    web_port = free_port()
    (tmp_path / "packs").mkdir()
    (tmp_path / "packs" / "urgent.yaml").write_text(PACK)
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent(f"""\
        site: {{id: t{uuid.uuid4().hex[:6]}, timezone: UTC}}
        broker: {{url: "mqtt://127.0.0.1:{port}", client_id: tw-{uuid.uuid4().hex[:8]}}}
        output: {{prefix: {prefix}}}
        evaluation: {{tick_s: 1}}
        rule_dirs: [packs]
        web: {{enabled: true, port: {web_port}, public_url: "https://comfort.works.invalid"}}
        defaults: {{occupancy: {{always: true}}, rule_packs: [urgent]}}
        templates:
          - {{topic: "{prefix}-in/{{building}}/{{space}}/ta", quantity: air_temperature}}
        buildings:
          - id: north
            name: North Hall
            spaces: [{{id: north-kiln, topic_name: kiln}}]
          - id: south
            spaces: [{{id: south-kiln, topic_name: kiln}}]
        delivery:
          audiences:
            safety:
              webhook: {{url: "{first.url}"}}
              buildings:
                north:
                  webhook: {{url: "{north_team.url}"}}
              escalation:
                after_s: {AFTER_S}
                webhook: {{url: "{second_hook.url}"}}
                email:
                  smtp: {{host: 127.0.0.1, port: {second_mail.port}, tls: none}}
                  from: thermowarden@works.invalid
                  to: [site-manager@works.invalid]
        """))
    secret = uuid.uuid4().hex
    env = {f"THERMOWARDEN_DELIVERY__AUDIENCES__SAFETY__{k}WEBHOOK__SECRET": secret
           for k in ("", "BUILDINGS__NORTH__", "ESCALATION__")}
    svc = ServiceProcess(site, tmp_path / "state", env=env).start()
    sensor = Collector(port, [])
    watcher = Collector(port, [f"{prefix}/#"])
    try:
        sensor.publish(f"{prefix}-in/north/kiln/ta", "36.5")
        sensor.publish(f"{prefix}-in/south/kiln/ta", "37")
        wait_for(lambda: len(first.requests) == 2, 30, "both urgent alerts delivered")
        raised = {b["advisory"]["space"]["id"]: b["advisory"]["id"] for b in first.bodies()}
        assert {b["page"] for b in first.bodies()} == {
            f"https://comfort.works.invalid/advisories/{a}" for a in raised.values()}
        # the south alert is taken on at once, over MQTT
        sensor.publish(f"{prefix}/commands/safety/acknowledge", json.dumps(
            {"advisory_id": raised["south-kiln"], "by": "duty-officer", "request_id": "a1"}))
        wait_for(lambda: any(r.get("request_id") == "a1" and r.get("ok")
                             for r in watcher.json_on(f"{prefix}/replies")), 30,
                 "the acknowledgement")
        # the north one nobody acknowledges: after the set time it reaches the second
        # recipient, by webhook and by e-mail
        wait_for(lambda: second_hook.requests and second_mail.messages, 60,
                 "the escalation")
        (body,) = second_hook.bodies()
        assert body["event"] == "unacknowledged"
        assert body["advisory"]["id"] == raised["north-kiln"]
        assert body["waited_s"] >= AFTER_S
        assert body["place"] == "North Hall"
        msg = email.message_from_bytes(second_mail.messages[0].content,
                                       policy=email.policy.default)
        assert msg["Subject"] == "[thermowarden] urgent unacknowledged: Heat in north-kiln"
        assert f"Page: https://comfort.works.invalid/advisories/{raised['north-kiln']}" in \
            msg.get_content()
        # the north building's team had the north alert only
        wait_for(lambda: north_team.requests, 30, "the building's recipient")
        assert [b["advisory"]["space"]["id"] for b in north_team.bodies()] == ["north-kiln"]
        # the acknowledged one never escalates: its timer is gone from the store
        import sqlite3

        db = sqlite3.connect(next((tmp_path / "state").glob("*.sqlite3")))
        try:
            rows = dict(db.execute("SELECT advisory_id, state FROM escalations").fetchall())
        finally:
            db.close()
        assert rows == {raised["north-kiln"]: "sent"}
        assert len(second_hook.requests) == 1 and len(second_mail.messages) == 1
    finally:
        assert svc.stop() == 0
        sensor.close()
        watcher.close()
        for r in (first, north_team, second_hook):
            r.close()
        second_mail.close()
        clear_retained(port, prefix)
