"""Delivery to people, end to end against a local HTTP receiver (http.server) and a local
SMTP server (aiosmtpd): signature, retries with backoff, quiet hours, the low-priority
digest, urgent alerts always sent, and nothing lost across a restart."""

from __future__ import annotations

import datetime as dt
import email
import email.policy
import sqlite3
import zoneinfo

import pytest
from prometheus_client import CollectorRegistry
from standardwebhooks.webhooks import Webhook

from tests.engine.conftest import lab_engine, validator
from tests.shell.delivery_parts import (
    MovableClock,
    Receiver,
    SmtpSink,
    engine_events,
    wait_until,
)
from thermowarden.config import DeliveryConfig
from thermowarden.effects import Publish
from thermowarden.shell.delivery import Delivery
from thermowarden.shell.delivery_channels import (
    DELIVERY_HEADER,
    SIGNATURE_HEADER,
    TIMESTAMP_HEADER,
    render_text,
)

SECRET = "s3cret-for-tests"
LONDON = zoneinfo.ZoneInfo("Europe/London")


def local(text: str) -> float:
    return dt.datetime.fromisoformat(text).replace(tzinfo=LONDON).timestamp()


@pytest.fixture
def events(tmp_path):
    return engine_events(tmp_path)


@pytest.fixture
def receiver():
    r = Receiver()
    yield r
    r.close()


@pytest.fixture
def smtp():
    s = SmtpSink()
    yield s
    s.close()


def make(tmp_path, audience: dict, clock: MovableClock, retry: dict | None = None,
         registry: CollectorRegistry | None = None) -> Delivery:
    (tmp_path / "secret").write_text(SECRET + "\n")
    cfg = DeliveryConfig.model_validate({
        "audiences": {"safety": audience},
        "retry": retry or {"first_s": 0.05, "max_s": 0.2, "max_attempts": 4}})
    d = Delivery(cfg, "Europe/London", tmp_path / "store.sqlite3", registry=registry,
                 now=clock)
    d.start()
    return d


def webhook(tmp_path, url: str) -> dict:
    return {"url": url, "secret_file": str(tmp_path / "secret"), "timeout_s": 5}


def mail(port: int) -> dict:
    return {"smtp": {"host": "127.0.0.1", "port": port, "tls": "none"},
            "from": "thermowarden@works.invalid", "to": ["safety-lead@works.invalid"]}


def metric(reg: CollectorRegistry, channel: str, outcome: str) -> float:
    v = reg.get_sample_value("thermowarden_deliveries_total",
                             {"channel": channel, "outcome": outcome})
    return v or 0.0


def test_webhook_signed_retried_and_counted(tmp_path, events):
    rec = Receiver(statuses=[503, 502])
    reg = CollectorRegistry()
    clock = MovableClock(local("2026-07-14T10:00:00"))
    d = make(tmp_path, {"webhook": webhook(tmp_path, rec.url)}, clock, registry=reg)
    try:
        event = events[("kiln-hall", "hot")]
        assert d.offer("safety", event)
        wait_until(lambda: metric(reg, "webhook", "sent") == 1, what="the webhook")
        assert len(rec.requests) == 3  # two refusals, then delivered
        assert metric(reg, "webhook", "retried") == 2
        ids = {h[DELIVERY_HEADER] for h, _ in rec.requests}
        assert len(ids) == 1  # the same delivery id on every retry
        headers, body = rec.requests[-1]
        assert headers["content-type"] == "application/json"
        # signed as the Standard Webhooks specification has it, checked by its reference
        # library (the test clock is in the past, so the signature, not the freshness)
        when = dt.datetime.fromtimestamp(int(headers[TIMESTAMP_HEADER]), dt.UTC)
        lib = Webhook(SECRET.encode())
        assert headers[SIGNATURE_HEADER] == lib.sign(headers[DELIVERY_HEADER], when, body)
        assert headers[SIGNATURE_HEADER] != Webhook(b"wrong").sign(
            headers[DELIVERY_HEADER], when, body)
        assert headers[SIGNATURE_HEADER] != lib.sign(headers[DELIVERY_HEADER], when,
                                                     body + b" ")
        assert rec.bodies()[-1] == event
        wait_until(lambda: d.pending_count() == 0, what="the row to be removed")
    finally:
        d.stop()
        rec.close()


def test_permanent_refusal_and_giving_up(tmp_path, events):
    rec = Receiver(statuses=[400, 500, 500, 500, 500])
    reg = CollectorRegistry()
    clock = MovableClock(local("2026-07-14T10:00:00"))
    d = make(tmp_path, {"webhook": webhook(tmp_path, rec.url)}, clock, registry=reg)
    try:
        d.offer("safety", events[("kiln-hall", "hot")])  # 400: not retried
        wait_until(lambda: metric(reg, "webhook", "failed") == 1, what="a permanent failure")
        assert len(rec.requests) == 1
        d.offer("safety", events[("kiln-hall", "heat")])  # 500 four times: gives up
        wait_until(lambda: metric(reg, "webhook", "failed") == 2, what="giving up")
        assert len(rec.requests) == 5
        assert metric(reg, "webhook", "retried") == 3
        db = sqlite3.connect(tmp_path / "store.sqlite3")
        rows = db.execute("SELECT state, attempts, error FROM deliveries ORDER BY seq").fetchall()
        db.close()
        assert rows == [("failed", 1, "HTTP 400"), ("failed", 4, "HTTP 500")]
    finally:
        d.stop()
        rec.close()


def test_redirect_is_not_followed(tmp_path, events):
    # urllib would repeat the POST as a GET without its body: a redirect is a failure
    rec = Receiver(statuses=[302])
    reg = CollectorRegistry()
    clock = MovableClock(local("2026-07-14T10:00:00"))
    d = make(tmp_path, {"webhook": webhook(tmp_path, rec.url)}, clock, registry=reg)
    try:
        d.offer("safety", events[("kiln-hall", "hot")])
        wait_until(lambda: metric(reg, "webhook", "failed") == 1, what="the failure")
        assert len(rec.requests) == 1  # nothing went to /elsewhere
    finally:
        d.stop()
        rec.close()


def test_email_through_the_relay_with_retry(tmp_path, events):
    sink = SmtpSink(replies=["451 4.3.0 try again later"])
    reg = CollectorRegistry()
    clock = MovableClock(local("2026-07-14T10:00:00"))
    d = make(tmp_path, {"email": mail(sink.port)}, clock, registry=reg)
    try:
        d.offer("safety", events[("kiln-hall", "heat")])
        wait_until(lambda: len(sink.messages) == 1, what="the e-mail")
        assert metric(reg, "email", "retried") == 1
        env = sink.messages[0]
        assert env.mail_from == "thermowarden@works.invalid"
        assert env.rcpt_tos == ["safety-lead@works.invalid"]
        msg = email.message_from_bytes(env.content, policy=email.policy.default)
        assert msg["Subject"] == "[thermowarden] urgent raised: Heat stress in kiln-hall"
        text = msg.get_content()
        assert "Stop hot work and rest in the shade" in text
        assert "air_temperature: 36.2" in text
        assert "Cautions:" in text and "advisory only" in text
    finally:
        d.stop()
        sink.close()


def test_quiet_hours_hold_all_but_urgent_then_send_a_digest(tmp_path, events, receiver, smtp):
    clock = MovableClock(local("2026-07-14T23:00:00"))
    d = make(tmp_path, {"webhook": webhook(tmp_path, receiver.url), "email": mail(smtp.port),
                        "quiet_hours": "22:00-06:30", "low_priority_digest_s": 0}, clock)
    try:
        high = events[("kiln-hall", "hot")]
        urgent = events[("kiln-hall", "heat")]
        assert high["advisory"]["priority"] == "high"
        assert urgent["advisory"]["priority"] == "urgent"
        d.offer("safety", high)
        d.offer("safety", urgent)  # after the high one: when it arrives, both were handled
        wait_until(lambda: receiver.requests and smtp.messages, what="the urgent alert")
        assert receiver.bodies() == [urgent]
        assert len(smtp.messages) == 1
        # the urgent rows go once sent; the high one stays held on both channels
        wait_until(lambda: d.pending_count() == 2, what="only the held rows left")
        clock.jump_to(local("2026-07-15T06:30:05"))
        d.wake()
        wait_until(lambda: len(receiver.requests) == 2 and len(smtp.messages) == 2,
                   what="the held event after the quiet hours")
        assert receiver.bodies()[1] == high
        assert "[thermowarden] high raised: kiln-hall is hot" in smtp.texts()[1]
    finally:
        d.stop()


def test_low_priority_digest(tmp_path, events, receiver):
    start = local("2026-07-14T10:00:00")
    clock = MovableClock(start)
    d = make(tmp_path, {"webhook": webhook(tmp_path, receiver.url),
                        "low_priority_digest_s": 600}, clock)
    try:
        low1 = events[("kiln-hall", "warm")]
        low2 = events[("yard", "warm")]
        high = events[("kiln-hall", "hot")]
        assert low1["advisory"]["priority"] == low2["advisory"]["priority"] == "low"
        for e in (low1, low2, high):
            d.offer("safety", e)
        wait_until(lambda: receiver.requests, what="the high event")
        assert receiver.bodies() == [high]
        wait_until(lambda: d.pending_count() == 2, what="only the two low ones left")
        clock.jump_to(start + 601)
        d.wake()
        wait_until(lambda: len(receiver.requests) == 2, what="the digest")
        digest = receiver.bodies()[1]
        validator("event.v1.json").validate(digest)
        assert digest["event"] == "summary" and digest["count"] == 2
        assert [(i["space"], i["rule"], i["priority"]) for i in digest["items"]] == [
            ("kiln-hall", "deliverytest.warm", "low"), ("yard", "deliverytest.warm", "low")]
    finally:
        d.stop()


def test_events_not_wanted_are_not_offered(tmp_path, events, receiver):
    clock = MovableClock(local("2026-07-14T10:00:00"))
    d = make(tmp_path, {"webhook": webhook(tmp_path, receiver.url), "events": ["raised"]},
             clock)
    try:
        acked = {**events[("kiln-hall", "hot")], "event": "acknowledged"}
        assert not d.offer("safety", acked)
        assert not d.offer("facilities", events[("kiln-hall", "hot")])  # not configured
        assert d.offer("safety", events[("kiln-hall", "hot")])
    finally:
        d.stop()


def test_pending_deliveries_survive_a_restart(tmp_path, events):
    rec = Receiver()
    port = rec.port
    rec.close()  # nobody listens: every attempt fails and the delivery stays stored
    reg = CollectorRegistry()
    clock = MovableClock(local("2026-07-14T10:00:00"))
    hook = webhook(tmp_path, f"http://127.0.0.1:{port}/hook")
    d = make(tmp_path, {"webhook": hook}, clock, registry=reg,
             retry={"first_s": 0.05, "max_s": 0.1, "max_attempts": 1000})
    event = events[("kiln-hall", "heat")]
    d.offer("safety", event)
    wait_until(lambda: metric(reg, "webhook", "retried") >= 2, what="failed attempts")
    d.stop()
    assert not d.thread.is_alive()
    assert d.pending_count() == 1
    rec = Receiver(port=port)
    d2 = make(tmp_path, {"webhook": hook}, clock)
    try:
        wait_until(lambda: rec.requests, what="delivery after the restart")
        assert rec.bodies() == [event]
        wait_until(lambda: d2.pending_count() == 0, what="the row to be removed")
    finally:
        d2.stop()
        rec.close()


def test_a_clearing_reads_as_one(tmp_path):
    """The text of a cleared event says that it cleared and the values it cleared at, then
    what was advised and why it was raised, with the time of those numbers; never "What to
    do" with numbers on the wrong side of the threshold."""
    engine = lab_engine(tmp_path, conditions_every_s=0)
    payloads = []
    for t in range(0, 600, 10):
        engine.message("lab/room-1/ta", b"31" if t < 200 else b"28.2", float(t))
        payloads += [e.payload for e in engine.tick(float(t)) if isinstance(e, Publish)
                     and "/events/" in e.topic and e.payload
                     and e.payload["advisory"]["rule"] == "testpack.hot"]
    assert [p["event"] for p in payloads] == ["raised", "cleared"]
    subject, text = render_text(payloads[1])
    assert subject == "medium cleared: room-1 is hot"
    assert "this advisory has cleared" in text and "What to do" not in text
    assert "Values at clearing:\n  air_temperature: 28.2 °C" in text
    assert "It advised: Cool room-1: 31.0 °C." in text
    assert "Numbers (as of 1970-01-01T00:01:00Z):\n  air_temperature: 31.0 °C (threshold " \
        "30.0 °C)" in text
    _, raised = render_text(payloads[0])
    assert "What to do: Cool room-1: 31.0 °C." in raised and "as of" not in raised


def test_unknown_and_dimensionless_values_read_as_words(tmp_path):
    """A value not known at the clearing reads "not known" (not "None"), and a
    dimensionless one (PMV, unit "1") has no unit after it."""
    engine = lab_engine(tmp_path, conditions_every_s=0)
    cleared = None
    for t in range(0, 600, 10):
        engine.message("lab/room-1/ta", b"31" if t < 200 else b"28.2", float(t))
        for e in engine.tick(float(t)):
            if isinstance(e, Publish) and "/events/" in e.topic and e.payload \
                    and e.payload["event"] == "cleared":
                cleared = e.payload
    assert cleared is not None
    adv = cleared["advisory"]
    adv["numbers"]["pmv"] = {"value": 0.62, "unit": "1", "method": "ISO 7730:2005"}
    adv["numbers"]["ppd"] = {"value": None, "unit": "%", "method": "ISO 7730:2005",
                             "reason": "input missing or stale"}
    adv["history"][-1]["values"] = {"air_temperature": None, "pmv": 0.41}
    _, text = render_text(cleared)
    assert "Values at clearing:\n  air_temperature: not known\n  pmv: 0.41\n" in text
    assert "  pmv: 0.62\n" in text and "None" not in text
    assert "  ppd: not known (input missing or stale)\n" in text


def test_an_email_of_a_clearing_told_with_its_own_numbers_says_so(tmp_path):
    """A rule with easing texts says at its clearing that it cleared, with the numbers of
    that moment: the e-mail gives them as what holds now, not as "why it was raised"."""
    from tests.engine.conftest import PACK

    pack = PACK.replace('''    clear: air_temperature < 32
    off_delay_s: 60
    max_shelve_s: 600''', '''    clear: air_temperature < 32
    off_delay_s: 60
    max_shelve_s: 600
    easing:
      quantity: air_temperature
      clears_at: "32"
      title: "Easing in {space_name}"
      advice: "Now {air_temperature:.1f} °C."
      cleared_title: "Cleared in {space_name} at {air_temperature:.1f} °C"
      cleared_advice: "Cleared at {air_temperature:.1f} °C."''')
    engine = lab_engine(tmp_path, pack, conditions_every_s=0)
    cleared = None
    for t in range(0, 600, 10):
        engine.message("lab/room-2/ta", b"34" if t < 200 else b"31", float(t))
        for e in engine.tick(float(t)):
            if isinstance(e, Publish) and "/events/" in e.topic and e.payload \
                    and e.payload["event"] == "cleared":
                cleared = e.payload
    assert cleared is not None
    subject, text = render_text(cleared)
    assert subject == "[thermowarden] medium cleared: Cleared in room-2 at 31.0 °C" or \
        subject.endswith("cleared: Cleared in room-2 at 31.0 °C")
    assert "Now: Cleared at 31.0 °C." in text
    assert "Why it was raised" not in text and "It advised" not in text


def test_signature_matches_the_standard_webhooks_test_vector():
    """The signature of the Standard Webhooks specification's own example: secret
    ``whsec_MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw``, id ``msg_p5jXN8AQM9LWM0D4loKWxJek``,
    timestamp 1614265330 and body ``{"test": 2432232314}`` sign as
    ``v1,g0hM9SsE+OTPJTGt/tmIKtSyZlE3uFJELVlNIOLJ1OE=`` (the test vector of the
    specification's reference library, standard-webhooks/standard-webhooks,
    libraries/python/tests/test_webhooks.py, test_sign_function)."""
    import base64
    import hashlib
    import hmac

    from thermowarden.shell.delivery_channels import sign

    body = b'{"test": 2432232314}'
    assert sign("whsec_MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw", "msg_p5jXN8AQM9LWM0D4loKWxJek",
                1614265330, body) == "v1,g0hM9SsE+OTPJTGt/tmIKtSyZlE3uFJELVlNIOLJ1OE="
    # a secret without the whsec_ prefix is its UTF-8 bytes (README, Delivery): the same
    # construction by hand, HMAC-SHA256 of "<id>.<timestamp>.<body>", base64, "v1," before
    mac = hmac.new(SECRET.encode(), b"msg_1.1614265330." + body, hashlib.sha256).digest()
    assert sign(SECRET, "msg_1", 1614265330, body) == "v1," + base64.b64encode(mac).decode()
