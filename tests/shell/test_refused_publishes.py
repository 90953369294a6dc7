"""Publishes refused by the broker's ACL (a started mosquitto with an ACL file) leave one
integrator notice per episode: stored with the events, delivered by webhook, never in the
outbox (so it cannot travel the refused path again and again), on MQTT 3.1.1 (where the
refusal is found out because events never come back) and MQTT 5 (reason codes)."""

from __future__ import annotations

import json
import sqlite3
import subprocess
import uuid

import pytest

from tests.engine.conftest import validator
from tests.shell.conftest import (
    SLOW,
    Collector,
    Mosquitto,
    ServiceProcess,
    need_program,
    wait_for,
    write_site,
)
from tests.shell.delivery_parts import Receiver
from tests.shell.test_faults_broker import REFUSING_ACL

pytestmark = pytest.mark.broker


@pytest.mark.parametrize("protocol", ["3.1.1", "5"])
def test_refused_publishes_leave_one_integrator_notice(tmp_path, protocol):
    need_program("mosquitto_passwd", "mosquitto")
    prefix = f"twacl-{uuid.uuid4().hex[:6]}"
    pw = tmp_path / "passwd"
    for i, user in enumerate(("thermowarden", "watcher")):
        subprocess.run(["mosquitto_passwd", "-b"] + (["-c"] if i == 0 else []) +
                       [str(pw), user, f"{user}-pw"], check=True, capture_output=True)
    acl = tmp_path / "acl"
    acl.write_text(REFUSING_ACL.format(prefix=prefix))  # no write on <prefix>/events/#
    broker = Mosquitto(tmp_path, extra=f"password_file {pw}\nacl_file {acl}\n")
    broker.conf.write_text(broker.conf.read_text().replace("allow_anonymous true",
                                                            "allow_anonymous false"))
    broker.start()
    rec = Receiver()
    # MQTT 5: refused events stay in the outbox and expire after a minute (3.1.1: the
    # broker acknowledges them, so they leave it)
    site = write_site(tmp_path, prefix, broker.port, ["room-a"],
                      extra_broker=f'  protocol: "{protocol}"',
                      extra="outbox: {max_age_s: 60}\n")
    with open(site, "a", encoding="utf-8") as fh:
        fh.write(f"""\
delivery:
  retry: {{first_s: 0.2, max_s: 1}}
  audiences:
    integrator:
      webhook: {{url: "{rec.url}"}}
""")
    state = tmp_path / "state"
    svc = ServiceProcess(site, state, env={
        "THERMOWARDEN_BROKER__USERNAME": "thermowarden",
        "THERMOWARDEN_BROKER__PASSWORD": "thermowarden-pw",
        "THERMOWARDEN_DELIVERY__AUDIENCES__INTEGRATOR__WEBHOOK__SECRET": uuid.uuid4().hex})
    watcher = Collector(broker.port, [f"{prefix}/#"], username="watcher",
                        password="watcher-pw")

    def notices() -> list[dict]:
        return [b for b in rec.bodies() if b.get("event") == "notice"]

    def unconfirmed_or_refused() -> float:
        return svc.metric("thermowarden_publish_failures_total" if protocol == "5"
                          else "thermowarden_events_unconfirmed_total")

    try:
        svc.start()
        watcher.publish(f"{prefix}-in/room-a/ta", "31.5")
        wait_for(lambda: notices(), SLOW, "the integrator notice by webhook")
        notice = notices()[0]
        validator("event.v1.json").validate(notice)
        assert notice["kind"] == "publishes_refused" and notice["audience"] == "integrator"
        assert notice["protocol"] == protocol
        assert notice["topic"].startswith(f"{prefix}/events/")
        assert f"{prefix}/#" in notice["text"]
        # more refused events in the same episode: no second notice
        first = unconfirmed_or_refused()
        watcher.publish(f"{prefix}-in/room-a/ta", "25")
        wait_for(lambda: unconfirmed_or_refused() > first, SLOW, "another refusal")
        watcher.publish(f"{prefix}-in/room-a/ta", "31.5")
        wait_for(lambda: unconfirmed_or_refused() > first + 1, SLOW, "a third refusal")
        assert len(notices()) == 1
        if protocol == "5":
            # the refused events expire: one events_expired notice lists them; it and the
            # first notice never went into the outbox, so neither expires into another
            wait_for(lambda: any(n["kind"] == "events_expired" for n in notices()),
                     3 * SLOW, "the events_expired notice")
            expired = next(n for n in notices() if n["kind"] == "events_expired")
            validator("event.v1.json").validate(expired)
            assert expired["count"] >= 1 and len(expired["event_ids"]) == expired["count"]
            assert notice["event_id"] not in expired["event_ids"]
        assert not watcher.events(prefix)  # nothing got through the broker
    finally:
        watcher.close()
        code = svc.stop()
        broker.stop()
        rec.close()
    assert code == 0
    refused_again = [n for n in notices() if n["kind"] == "publishes_refused"]
    assert len(refused_again) == 1
    (db,) = state.glob("*.sqlite3")
    with sqlite3.connect(db) as conn:
        stored = [json.loads(p) for (p,) in conn.execute("SELECT payload FROM events")]
        outbox = [json.loads(p) for (p,) in conn.execute("SELECT payload FROM outbox")]
    kept = [e for e in stored if e.get("event") == "notice"]
    assert [e["kind"] for e in kept][:1] == ["publishes_refused"]
    assert kept[0]["event_id"] == notice["event_id"]
    expired_ids = {i for e in kept if e["kind"] == "events_expired" for i in e["event_ids"]}
    assert not expired_ids & {e["event_id"] for e in kept}  # no notice ever expired
    assert not [e for e in outbox if e.get("event") == "notice"]
