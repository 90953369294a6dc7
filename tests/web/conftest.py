"""A running service on the shipped scenario with the web page on: the example site
(Larkfield Works, invented) and its recorded day, published live through the real broker
on 127.0.0.1:1883 with a simulated clock, then held still at the end of the day.

Topics get a random prefix so that parallel runs on the shared broker do not meet.
"""

from __future__ import annotations

import gzip
import json
import os
import pathlib
import shutil
import threading
import time
import urllib.request
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import paho.mqtt.client as mqtt
import pytest
from paho.mqtt.enums import CallbackAPIVersion

from tests.shell.conftest import (
    Collector,
    Mosquitto,
    clear_retained,
    free_port,
    port_open,
    wait_for,
)
from thermowarden.shell.bootstrap import Running, bootstrap
from thermowarden.shell.buffered_client import release_sockets
from thermowarden.shell.clock import Clock
from thermowarden.shell.web.users import hash_password

REPO = pathlib.Path(__file__).resolve().parents[2]
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"
SITE = REPO / "deploy" / "example-site.yaml"
SPEED = 1200.0
"""Simulated seconds per real second while the day is published (15 h in about 45 s)."""
CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
CHROMEDRIVER = shutil.which("chromedriver") or "/usr/bin/chromedriver"
HAVE_BROWSER = os.path.exists(CHROMIUM) and os.path.exists(CHROMEDRIVER)
"""Debian's chromium and chromium-driver (the browser tests skip without them)."""
BROWSER_ARGS = ("--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                "--disable-background-networking", "--disable-component-update",
                "--disable-sync", "--disable-dev-shm-usage", "--hide-scrollbars")
USERS = {"ana": ("ana-pass-1", ["safety", "facilities"]),
         "ivo": ("ivo-pass-2", ["integrator"])}


@dataclass
class WebSite:
    base: str
    running: Running
    clock: Clock
    prefix: str
    broker_port: int
    tmp: pathlib.Path
    watcher: Collector

    def get(self, path: str, headers: dict[str, str] | None = None) -> tuple[int, Any]:
        req = urllib.request.Request(self.base + path, headers=headers or {})
        try:
            with urllib.request.urlopen(req, timeout=10) as r:
                body = r.read()
                ctype = r.headers.get("content-type", "")
                return r.status, json.loads(body) if "json" in ctype else body.decode()
        except urllib.error.HTTPError as exc:
            with exc:  # closes its connection now, not whenever the collector runs
                body = exc.read()
            return exc.code, json.loads(body) if body.startswith(b"{") else body.decode()

    def send(self, method: str, path: str, body: Any = None,
             headers: dict[str, str] | None = None) -> tuple[int, Any]:
        data = json.dumps(body).encode() if body is not None else None
        req = urllib.request.Request(self.base + path, data=data, method=method,
                                     headers={"content-type": "application/json",
                                              **(headers or {})})
        try:
            with urllib.request.urlopen(req, timeout=20) as r:
                raw = r.read()
                return r.status, json.loads(raw) if raw else None
        except urllib.error.HTTPError as exc:
            with exc:
                raw = exc.read()
            return exc.code, json.loads(raw) if raw.startswith(b"{") else raw.decode()

    def token(self, name: str) -> str:
        status, body = self.send("POST", "/api/session",
                                 {"name": name, "password": USERS[name][0]})
        assert status == 201, body
        return str(body["token"])

    def live(self) -> list[dict[str, Any]]:
        return list(self.get("/api/advisories")[1]["advisories"])


def _users_file(path: pathlib.Path) -> None:
    lines = ["users:"]
    for name, (password, audiences) in USERS.items():
        lines += [f"  - name: {name}", f"    audiences: [{', '.join(audiences)}]",
                  f"    password_hash: \"{hash_password(password, iterations=2000)}\""]
    path.write_text("\n".join(lines) + "\n")


@pytest.fixture(scope="session")
def web_broker_port(tmp_path_factory) -> Iterator[int]:
    """127.0.0.1:1883 when a broker answers there (CI starts one), else our own."""
    if port_open(1883):
        yield 1883
        return
    broker = Mosquitto(tmp_path_factory.mktemp("broker")).start()
    yield broker.port
    broker.stop()


@pytest.fixture(scope="session")
def web_site(tmp_path_factory, web_broker_port) -> Iterator[WebSite]:
    system_broker_port = web_broker_port
    tmp = tmp_path_factory.mktemp("web")
    tag = uuid.uuid4().hex[:6]
    topic_root = f"lk{tag}/"
    prefix = f"tw{tag}/larkfield"
    site = tmp / "site.yaml"
    site.write_text(SITE.read_text().replace("larkfield/", topic_root))
    _users_file(tmp / "users.yaml")
    with gzip.open(FEED, "rt") as fh:
        records = [json.loads(line) for line in fh if line.strip()]
    port = free_port()
    clock = Clock(start=records[0]["t"] - 1.0, speed=SPEED, paused=True)
    overrides = {
        "THERMOWARDEN_OUTPUT__PREFIX": prefix,
        "THERMOWARDEN_BROKER__CLIENT_ID": f"tw-web-{tag}",
        "THERMOWARDEN_WEB__ENABLED": "true",
        "THERMOWARDEN_WEB__PORT": str(port),
        "THERMOWARDEN_WEB__USERS_FILE": "users.yaml",
        # at a thousand times real speed a scheduling hiccup is minutes of sensor time
        "THERMOWARDEN_INGEST__STALE_AFTER_INTERVALS": "20",
        "THERMOWARDEN_INGEST__MAX_AGE_S": "7200",
    }
    running = bootstrap(str(site), broker_url=f"mqtt://127.0.0.1:{system_broker_port}",
                        state_dir=str(tmp / "state"), clock=clock, overrides=overrides)
    service = running.service
    engine_thread = threading.Thread(target=service.run, name="engine", daemon=True)
    engine_thread.start()
    watcher = Collector(system_broker_port, [f"{prefix}/events/#"])
    sensors = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                          client_id=f"tw-web-sensors-{tag}")
    sensors.connect("127.0.0.1", system_broker_port, 30)
    sensors.loop_start()
    ws = WebSite(f"http://127.0.0.1:{port}", running, clock, prefix, system_broker_port,
                 tmp, watcher)
    try:
        wait_for(lambda: service.ready()[0], 90, "the service to be ready")
        clock.resume()
        service.engine.start = clock.now()
        for rec in records:
            while clock.now() < rec["t"]:
                time.sleep(0.002)
            p = rec["payload"]
            sensors.publish(rec["topic"].replace("larkfield/", topic_root),
                            p if isinstance(p, str) else json.dumps(p), qos=0)
        # hold the day still just after its last reading
        end = records[-1]["t"] + 30.0
        wait_for(lambda: clock.now() >= end, 30, "the clock to pass the last reading")
        clock.anchor = end
        clock.paused = True
        wait_for(lambda: all(s["conditions_at"] for s in ws.get("/api/spaces")[1]["spaces"]),
                 60, "conditions of every space")
        wait_for(lambda: ws.live(), 60, "a live advisory")
        yield ws
    finally:
        service.request_stop()
        engine_thread.join(30)
        sensors.loop_stop()
        sensors.disconnect()
        release_sockets(sensors)
        watcher.close()
        if running.web is not None:
            running.web.stop()
        clear_retained(system_broker_port, prefix)


@pytest.fixture(scope="module")
def browser() -> Iterator[object]:
    """Headless chromium through chromedriver, 1200 x 900 to start with."""
    from selenium import webdriver
    from selenium.webdriver.chrome.options import Options
    from selenium.webdriver.chrome.service import Service

    opts = Options()
    opts.binary_location = CHROMIUM
    for a in BROWSER_ARGS:
        opts.add_argument(a)
    opts.add_argument("--window-size=1200,900")
    driver = webdriver.Chrome(service=Service(executable_path=CHROMEDRIVER), options=opts)
    driver.set_page_load_timeout(60)
    try:
        yield driver
    finally:
        driver.quit()
