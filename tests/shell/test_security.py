"""The service behind least-privilege credentials (the sample ACL) and over TLS with a
client certificate made for the test."""

from __future__ import annotations

import json
import subprocess
import textwrap
import time
import uuid

import pytest

from tests.shell.conftest import (
    REPO,
    SLOW,
    Collector,
    Mosquitto,
    ServiceProcess,
    need_program,
    wait_for,
)
from thermowarden.shell.buffered_client import release_sockets

pytestmark = pytest.mark.broker

SITE = """\
site: {{id: larkfield, timezone: UTC}}
broker: {{url: "{url}", client_id: tw-{cid}{tls}}}
output: {{prefix: thermowarden/larkfield}}
evaluation: {{tick_s: 1}}
rule_dirs: [packs]
defaults: {{occupancy: {{always: true}}, rule_packs: [fast]}}
templates:
  - {{topic: "larkfield/{{space}}/air/temperature", quantity: air_temperature}}
spaces:
  - id: office-west
"""


def _site(tmp_path, url, tls=""):
    from tests.shell.conftest import FAST_PACK

    (tmp_path / "packs").mkdir(exist_ok=True)
    (tmp_path / "packs" / "fast.yaml").write_text(FAST_PACK)
    p = tmp_path / "site.yaml"
    p.write_text(SITE.format(url=url, cid=uuid.uuid4().hex[:6], tls=tls))
    return p


def test_sample_acl_least_privilege(tmp_path):
    mosquitto_passwd = need_program("mosquitto_passwd", "mosquitto")
    need_program("mosquitto", "mosquitto")
    pw = tmp_path / "passwd"
    users = {"thermowarden": "tw-secret", "gateway": "gw-secret", "safety-desk": "sd-secret",
             "facilities-desk": "fd-secret", "safety-alice": "sa-secret"}
    for i, (u, p) in enumerate(users.items()):
        subprocess.run([mosquitto_passwd, "-b"] + (["-c"] if i == 0 else []) +
                       [str(pw), u, p], check=True, capture_output=True)
    acl = REPO / "deploy" / "broker" / "thermowarden.acl"
    broker = Mosquitto(tmp_path, extra=f"password_file {pw}\nacl_file {acl}\n",
                       listener=None)
    broker.conf.write_text(broker.conf.read_text().replace("allow_anonymous true",
                                                            "allow_anonymous false"))
    broker.start()
    site = _site(tmp_path, f"mqtt://127.0.0.1:{broker.port}")
    svc = ServiceProcess(site, tmp_path / "state", env={
        "THERMOWARDEN_BROKER__USERNAME": "thermowarden",
        "THERMOWARDEN_BROKER__PASSWORD": users["thermowarden"]})
    desk = gateway = safety = None
    try:
        svc.start()
        desk = Collector(broker.port, ["thermowarden/larkfield/#"], username="facilities-desk",
                         password=users["facilities-desk"])
        safety = Collector(broker.port, [], username="safety-desk",
                           password=users["safety-desk"])
        gateway = Collector(broker.port, [], username="gateway", password=users["gateway"])
        gateway.publish("larkfield/office-west/air/temperature", "31.2")
        wait_for(lambda: any(e["event"] == "raised" for e in desk.events(
            "thermowarden/larkfield")), SLOW, "the raised event under the ACL")
        adv = next(e for e in desk.events("thermowarden/larkfield")
                   if e["event"] == "raised")["advisory"]
        # the safety desk may not act on a facilities advisory: the broker drops it
        safety.publish("thermowarden/larkfield/commands/facilities/shelve",
                       json.dumps({"advisory_id": adv["id"], "by": "sd", "reason": "x",
                                   "duration_s": 60}))
        desk.publish("thermowarden/larkfield/commands/facilities/acknowledge",
                     json.dumps({"advisory_id": adv["id"], "by": "facilities desk",
                                 "request_id": "acl-1"}))
        wait_for(lambda: any(r.get("request_id") == "acl-1" and r["ok"] for r in
                             desk.json_on("thermowarden/larkfield/replies")), SLOW,
                 "the acknowledgement reply")
        assert svc.metric("thermowarden_publish_failures_total") == 0
        # the gateway may not send commands: the broker drops them, nothing changes
        gateway.publish("thermowarden/larkfield/commands/facilities/shelve",
                        json.dumps({"advisory_id": adv["id"], "by": "gw", "reason": "x",
                                    "duration_s": 60}))
        # a later command from the desk is answered: by then the gateway's one would have
        # been counted, had the broker let it through
        desk.publish("thermowarden/larkfield/commands/facilities/unshelve",
                     json.dumps({"advisory_id": adv["id"], "by": "facilities desk",
                                 "request_id": "acl-2"}))
        wait_for(lambda: any(r.get("request_id") == "acl-2" for r in
                             desk.json_on("thermowarden/larkfield/replies")), SLOW,
                 "the reply to the desk's second command")
        assert svc.metric("thermowarden_commands_total") == 2
        # per person: safety-alice may write only to topics ending in her own name; the
        # service records that name as who acted, as the broker vouches
        alice = Collector(broker.port, [], username="safety-alice",
                          password=users["safety-alice"])
        wait_for(lambda: any(e["event"] == "raised" and e["advisory"]["audience"] == "safety"
                             for e in desk.events("thermowarden/larkfield")), SLOW,
                 "the safety advisory")
        sadv = next(e for e in desk.events("thermowarden/larkfield")
                    if e["event"] == "raised" and e["advisory"]["audience"] == "safety")
        ack = {"advisory_id": sadv["advisory"]["id"], "by": "someone else", "request_id": "p-1"}
        alice.publish("thermowarden/larkfield/commands/safety/acknowledge/bob",
                      json.dumps(ack))  # not her name: the broker drops it
        alice.publish("thermowarden/larkfield/commands/safety/acknowledge/safety-alice",
                      json.dumps(ack))
        wait_for(lambda: any(e["event"] == "acknowledged" and e["advisory"]["audience"] ==
                             "safety" for e in desk.events("thermowarden/larkfield")), SLOW,
                 "the acknowledgement by safety-alice")
        acked = next(e for e in desk.events("thermowarden/larkfield")
                     if e["event"] == "acknowledged" and e["advisory"]["audience"] == "safety")
        assert acked["advisory"]["acknowledged"]["identity"] == "safety-alice"
        assert svc.metric("thermowarden_commands_total") == 3
        alice.close()
    finally:
        for c in (desk, gateway, safety):
            if c:
                c.close()
        svc.stop()
        broker.stop()


def _openssl(*args: str, cwd) -> None:
    subprocess.run([need_program("openssl", "openssl"), *args], cwd=cwd, check=True,
                   capture_output=True)


def make_certs(d):
    _openssl("req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "2", "-subj",
             "/CN=thermowarden test CA", "-keyout", "ca.key", "-out", "ca.crt", cwd=d)
    for name, cn in (("broker", "localhost"), ("client", "thermowarden")):
        _openssl("req", "-newkey", "rsa:2048", "-nodes", "-subj", f"/CN={cn}", "-keyout",
                 f"{name}.key", "-out", f"{name}.csr", cwd=d)
        (d / f"{name}.ext").write_text("subjectAltName=DNS:localhost\n" if name == "broker"
                                       else "extendedKeyUsage=clientAuth\n")
        _openssl("x509", "-req", "-in", f"{name}.csr", "-CA", "ca.crt", "-CAkey", "ca.key",
                 "-CAcreateserial", "-days", "2", "-out", f"{name}.crt", "-extfile",
                 f"{name}.ext", cwd=d)


def test_tls_with_client_certificate(tmp_path):
    need_program("openssl", "openssl")
    need_program("mosquitto", "mosquitto")
    certs = tmp_path / "certs"
    certs.mkdir()
    make_certs(certs)
    port = __import__("tests.shell.conftest", fromlist=["free_port"]).free_port()
    listener = textwrap.dedent(f"""\
        listener {port} 127.0.0.1
        allow_anonymous true
        cafile {certs}/ca.crt
        certfile {certs}/broker.crt
        keyfile {certs}/broker.key
        require_certificate true
        """)
    broker = Mosquitto(tmp_path, port=port, listener=listener).start()
    tls = (f", tls: {{ca_file: {certs}/ca.crt, cert_file: {certs}/client.crt, "
           f"key_file: {certs}/client.key}}")
    site = _site(tmp_path, f"mqtts://localhost:{port}", tls)
    svc = ServiceProcess(site, tmp_path / "state")
    watcher = None
    try:
        svc.start()
        tls_args = {"ca_certs": str(certs / "ca.crt"), "certfile": str(certs / "client.crt"),
                    "keyfile": str(certs / "client.key")}
        watcher = Collector(port, ["thermowarden/larkfield/#"], tls=tls_args)
        watcher.publish("larkfield/office-west/air/temperature", "33")
        wait_for(lambda: any(e["event"] == "raised" for e in watcher.events(
            "thermowarden/larkfield")), SLOW, "an event over TLS")
    finally:
        if watcher:
            watcher.close()
        svc.stop()
        broker.stop()
    # without a client certificate the broker refuses the connection
    import ssl

    import paho.mqtt.client as mqtt
    from paho.mqtt.enums import CallbackAPIVersion

    broker.start()
    try:
        c = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2)
        c.tls_set(ca_certs=str(certs / "ca.crt"))
        with pytest.raises((ssl.SSLError, OSError)):
            c.connect("localhost", port, 10)
            deadline = time.monotonic() + SLOW  # the refusal may only arrive on a read
            while time.monotonic() < deadline:
                if c.loop(timeout=0.1) != 0:
                    raise OSError("refused")
    finally:
        release_sockets(c)
        broker.stop()
