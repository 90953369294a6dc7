"""Delivery by building and escalation, end to end against a local SMTP server (aiosmtpd)
and webhook receivers (http.server): an urgent alert nobody acknowledges reaches the second
recipient after the set time, also across a restart, and an acknowledged one does not;
recipients per building get their building's events; flood summaries are grouped by rule
and building; every message links to the advisory's page."""

from __future__ import annotations

import copy
import email
import email.policy
import json
import sqlite3

import pytest

from tests.engine.conftest import validator
from tests.shell.delivery_parts import (
    MovableClock,
    Receiver,
    SmtpSink,
    engine_events,
    wait_until,
)
from tests.shell.test_delivery import SECRET, local
from thermowarden.config import ConfigError, DeliveryConfig, load_site
from thermowarden.shell.delivery import Delivery
from thermowarden.shell.delivery_channels import render_text

PAGE = "https://comfort.works.invalid"
PLACES = {"kiln-hall": ("works", "Works · Ground floor"), "yard": ("yard", "Yard")}


@pytest.fixture
def events(tmp_path):
    return engine_events(tmp_path)


def hook(tmp_path, url: str) -> dict:
    (tmp_path / "secret").write_text(SECRET + "\n")
    return {"url": url, "secret_file": str(tmp_path / "secret"), "timeout_s": 5}


def mail(port: int, to: str) -> dict:
    return {"smtp": {"host": "127.0.0.1", "port": port, "tls": "none"},
            "from": "thermowarden@works.invalid", "to": [to]}


def start(tmp_path, audience: dict, clock: MovableClock) -> Delivery:
    cfg = DeliveryConfig.model_validate({"audiences": {"safety": audience}})
    d = Delivery(cfg, "Europe/London", tmp_path / "store.sqlite3", now=clock)
    d.set_site(PLACES, PAGE)
    d.start()
    return d


def another(event: dict, advisory_id: str, kind: str = "raised") -> dict:
    """The same engine event for another advisory (or another lifecycle step of it)."""
    out = copy.deepcopy(event)
    out["advisory"]["id"] = advisory_id
    out["event"] = kind
    if kind == "acknowledged":
        out["advisory"]["state"] = "acknowledged"
        out["advisory"]["acknowledged"] = {"by": "ana", "at": out["at"], "note": "on it"}
    return out


def escalation_rows(tmp_path) -> dict[str, str]:
    db = sqlite3.connect(tmp_path / "store.sqlite3")
    try:
        return dict(db.execute("SELECT advisory_id, state FROM escalations").fetchall())
    finally:
        db.close()


def test_unacknowledged_urgent_alert_reaches_the_second_recipient(tmp_path, events):
    first = Receiver()
    second_hook = Receiver()
    second_mail = SmtpSink()
    clock = MovableClock(local("2026-07-14T14:00:00"))
    audience = {"webhook": hook(tmp_path, first.url),
                "escalation": {"after_s": 600, "webhook": hook(tmp_path, second_hook.url),
                               "email": mail(second_mail.port, "site-manager@works.invalid")}}
    urgent = events[("kiln-hall", "heat")]
    assert urgent["advisory"]["priority"] == "urgent"
    ignored = urgent["advisory"]["id"]
    taken = f"{ignored}-b"
    d = start(tmp_path, audience, clock)
    try:
        assert d.offer("safety", urgent)
        assert d.offer("safety", another(urgent, taken))
        d.offer("safety", another(urgent, taken, "acknowledged"))
        wait_until(lambda: len(first.requests) == 2, what="the first recipient's two alerts")
        wait_until(lambda: escalation_rows(tmp_path) == {ignored: "waiting"},
                   what="one timer, the acknowledged alert's gone")
    finally:
        d.stop()  # a restart before the timer is due
    clock.jump_to(local("2026-07-14T14:10:05"))
    d = start(tmp_path, audience, clock)
    try:
        wait_until(lambda: second_hook.requests and second_mail.messages,
                   what="the escalation by webhook and e-mail")
        (body,) = second_hook.bodies()
        assert body["event"] == "unacknowledged" and body["advisory"]["id"] == ignored
        assert body["waited_s"] >= 600
        assert body["page"] == f"{PAGE}/advisories/{ignored}"
        validator("event.v1.json").validate(body)
        msg = email.message_from_bytes(second_mail.messages[0].content,
                                       policy=email.policy.default)
        assert msg["To"] == "site-manager@works.invalid"
        assert msg["Subject"] == ("[thermowarden] urgent unacknowledged: "
                                  "Heat stress in kiln-hall")
        text = msg.get_content()
        assert "Nobody has acknowledged this urgent alert" in text
        assert f"Page: {PAGE}/advisories/{ignored}" in text
        assert escalation_rows(tmp_path) == {ignored: "sent"}
        # the acknowledged one has no timer left: nothing can send it
        assert all(b["advisory"]["id"] != taken for b in second_hook.bodies())
        # the first recipient got no unacknowledged event (it is for the second one)
        assert all(b["event"] == "raised" for b in first.bodies())
    finally:
        d.stop()
        first.close()
        second_hook.close()
        second_mail.close()


def test_cleared_or_not_urgent_alerts_do_not_escalate(tmp_path, events):
    second = Receiver()
    clock = MovableClock(local("2026-07-14T14:00:00"))
    audience = {"webhook": hook(tmp_path, second.url).copy(),
                "escalation": {"after_s": 60, "webhook": hook(tmp_path, second.url)}}
    urgent = events[("kiln-hall", "heat")]
    high = events[("kiln-hall", "hot")]
    d = start(tmp_path, audience, clock)
    try:
        d.offer("safety", urgent)
        d.offer("safety", high)
        d.offer("safety", another(urgent, urgent["advisory"]["id"], "cleared"))
        wait_until(lambda: len(second.requests) == 3, what="the three events")
        wait_until(lambda: escalation_rows(tmp_path) == {}, what="no timer left")
        clock.jump_to(local("2026-07-14T15:00:00"))
        d.offer("safety", another(urgent, "late-one"))  # a marker: its own timer starts now
        wait_until(lambda: escalation_rows(tmp_path) == {"late-one": "waiting"},
                   what="only the new alert's timer")
        wait_until(lambda: len(second.requests) == 4, what="the new alert delivered")
        assert [b["event"] for b in second.bodies()] == ["raised", "raised", "cleared",
                                                         "raised"]
    finally:
        d.stop()
        second.close()


def test_recipients_per_building_links_and_grouped_floods(tmp_path, events):
    sink = SmtpSink()
    clock = MovableClock(local("2026-07-14T14:00:00"))
    audience = {"email": mail(sink.port, "safety-lead@works.invalid"),
                "buildings": {"works": {"email": mail(sink.port, "works-team@works.invalid")}}}
    d = start(tmp_path, audience, clock)
    try:
        urgent = events[("kiln-hall", "heat")]
        yard = events[("yard", "warm")]
        d.offer("safety", urgent)
        d.offer("safety", {**yard, "advisory": {**yard["advisory"], "priority": "high"}})
        wait_until(lambda: len(sink.messages) == 3, what="two e-mails and the building's")
        to = sorted((m.rcpt_tos[0], json.dumps(m.content.decode()).count("kiln-hall") > 0)
                    for m in sink.messages)
        assert to == [("safety-lead@works.invalid", False), ("safety-lead@works.invalid", True),
                      ("works-team@works.invalid", True)]
        for m in sink.messages:
            text = email.message_from_bytes(m.content, policy=email.policy.default
                                            ).get_content()
            assert f"Page: {PAGE}/advisories/" in text
        # a flood summary: grouped by rule and building; the building gets its own part
        items = []
        for k in range(30):
            space = "kiln-hall" if k < 20 else "yard"
            rule = "deliverytest.heat" if k % 2 == 0 else "deliverytest.hot"
            items.append({"event": "raised", "advisory_id": f"{space}.{rule}.{k}",
                          "space": space, "rule": rule,
                          "priority": "urgent" if k % 2 == 0 else "high",
                          "title": f"{rule} in {space}", "at": "2026-07-14T13:00:00Z"})
        summary = {"schema": "thermowarden.event/1", "event": "summary",
                   "at": "2026-07-14T13:01:00Z", "audience": "safety", "count": 30,
                   "items": items, "note": "30 notifications in 10 minutes: a flood"}
        validator("event.v1.json").validate(summary)
        d.offer("safety", summary)
        wait_until(lambda: len(sink.messages) == 5, what="the summary and its building part")
        texts = {m.rcpt_tos[0]: email.message_from_bytes(
            m.content, policy=email.policy.default).get_content() for m in sink.messages[3:]}
        lead = texts["safety-lead@works.invalid"]
        assert "urgent deliverytest.heat in Works · Ground floor: 10 notification(s)" in lead
        assert "high deliverytest.hot in Yard: 5 notification(s)" in lead
        assert lead.count("- and 5 more") == 2  # the two groups of 10: five listed each
        assert f"{PAGE}/advisories/kiln-hall.deliverytest.heat.0" in lead
        works = texts["works-team@works.invalid"]
        assert "Yard" not in works and "10 notification(s)" in works
        assert render_text({**summary, "items": items[:2]})[0] == \
            "30 notification(s) for safety"
    finally:
        d.stop()
        sink.close()


def test_delivery_buildings_are_checked(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text(f"""\
site: {{id: s, timezone: UTC}}
buildings:
  - id: works
    spaces: [{{id: kiln-hall, points: [{{topic: t/k, quantity: air_temperature}}]}}]
delivery:
  audiences:
    safety:
      buildings:
        wrks:
          webhook: {{url: "http://127.0.0.1:9/h", secret_file: {tmp_path}/s}}
      escalation:
        after_s: 5
        webhook: {{url: "http://127.0.0.1:9/h", secret: nope}}
""")
    with pytest.raises(ConfigError) as exc:
        load_site(site, {})
    msgs = [str(i) for i in exc.value.issues]
    assert any("site.yaml:13:" in m and "escalation.webhook.secret: secrets do not belong"
               in m for m in msgs), msgs
    site.write_text(site.read_text().replace("        webhook: {url: \"http://127.0.0.1:9/h\", "
                                             "secret: nope}",
                                             f"        webhook: {{url: \"http://127.0.0.1:9/h\""
                                             f", secret_file: {tmp_path}/s}}"))
    msgs = [str(i) for i in pytest.raises(ConfigError, load_site, site, {}).value.issues]
    assert any("site.yaml:12:" in m and "escalation.after_s" in m for m in msgs), msgs
    site.write_text(site.read_text().replace("after_s: 5", "after_s: 600"))
    msgs = [str(i) for i in pytest.raises(ConfigError, load_site, site, {}).value.issues]
    assert any("site.yaml:9:" in m and "no building or area 'wrks'" in m
               and "did you mean 'works'" in m for m in msgs), msgs


def test_escalation_timer_moves_with_a_step_of_the_wall_clock(tmp_path, events):
    """A step of the wall clock (the service measures it against the monotonic clock and
    hands it to the delivery) moves a waiting timer by the step: the alert still waits its
    after_s of elapsed time, and waited_s does not count the step."""
    second = Receiver()
    clock = MovableClock(local("2026-07-14T14:00:00"))
    audience = {"escalation": {"after_s": 600, "webhook": hook(tmp_path, second.url)},
                "buildings": {"works": {"webhook": hook(tmp_path, second.url)}}}
    urgent = events[("kiln-hall", "heat")]
    d = start(tmp_path, audience, clock)
    try:
        d.offer("safety", urgent)
        wait_until(lambda: escalation_rows(tmp_path) == {urgent["advisory"]["id"]: "waiting"},
                   what="the timer")
        db = sqlite3.connect(tmp_path / "store.sqlite3")
        try:
            (due,) = db.execute("SELECT due FROM escalations").fetchone()
            d.clock_stepped(3600.0)
            (moved,) = db.execute("SELECT due FROM escalations").fetchone()
        finally:
            db.close()
        assert moved == pytest.approx(due + 3600.0)
        clock.jump_to(moved + 2)
        wait_until(lambda: len(second.requests) == 2, what="the escalation")
        # the building's copy of the alert and the escalation go out on workers of their
        # own (two receivers, one address): either may arrive first
        by_event = {b["event"]: b for b in second.bodies()}
        assert set(by_event) == {"raised", "unacknowledged"}, list(by_event)
        assert 600 <= by_event["unacknowledged"]["waited_s"] < 700
    finally:
        d.stop()
        second.close()
