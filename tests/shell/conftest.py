"""Real-broker fixtures: the machine's Mosquitto on 127.0.0.1:1883 when it answers, our own
mosquitto processes on free ports for tests that stop, restart or reconfigure a broker,
the service as a subprocess, and a collecting MQTT client."""

from __future__ import annotations

import json
import os
import pathlib
import shutil
import signal
import socket
import subprocess
import sys
import textwrap
import threading
import time
import urllib.request
import uuid
from collections.abc import Iterator

import paho.mqtt.client as mqtt
import pytest
from paho.mqtt.enums import CallbackAPIVersion

from tests.conftest import COMMAND_LIMIT_S
from thermowarden.shell.buffered_client import release_sockets

REPO = pathlib.Path(__file__).resolve().parents[2]
MOSQUITTO = shutil.which("mosquitto") or (
    "/usr/sbin/mosquitto" if os.access("/usr/sbin/mosquitto", os.X_OK) else None)

# Timeouts are generous on purpose: a loaded machine (other builds on the two cores) may be
# ten times slower than a quiet one, and a wait ends as soon as its condition holds.
SLOW = 60.0

FAST_PACK = """\
pack: fast
description: quick rules for broker tests
rules:
  - id: hot
    title: Hot
    audience: facilities
    needs: [air_temperature]
    condition: air_temperature > 30
    clear: air_temperature < 29
    on_delay_s: 0
    off_delay_s: 1
    numbers: [air_temperature]
    messages:
      title: "{space_name} is hot"
      advice: "Cool {space_name} ({air_temperature:.1f} °C)."
      rationale: "Above 30 °C."
  - id: slow_hot
    title: Hot for a while
    audience: safety
    needs: [air_temperature]
    condition: air_temperature > 30
    on_delay_s: 8
    off_delay_s: 1
    messages:
      title: "{space_name} has been hot"
      advice: "Act."
      rationale: "Above 30 °C for 8 s."
"""


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def port_open(port: int, host: str = "127.0.0.1") -> bool:
    with socket.socket() as s:
        s.settimeout(0.5)
        return s.connect_ex((host, port)) == 0


def need_program(name: str, package: str) -> str:
    """The program's path, or skip the test saying which Debian package provides it."""
    found = shutil.which(name) or next(
        (p for p in (f"/usr/sbin/{name}", f"/usr/bin/{name}") if os.access(p, os.X_OK)), None)
    if found is None:
        pytest.skip(f"needs the `{name}` program (Debian package `{package}`); "
                    f"not found on PATH")
    return found


def wait_for(predicate, timeout: float = SLOW, what: str = "condition") -> None:
    """Wait until ``predicate()`` holds. A shorter ``timeout`` than SLOW is raised to it: a
    test waits for a condition, never fails because a loaded machine took longer."""
    timeout = max(timeout, SLOW)
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return
        time.sleep(0.05)
    raise AssertionError(f"timed out after {timeout} s waiting for {what}")


class Mosquitto:
    """A mosquitto process of our own on a free port; stop() and start() keep the port."""

    def __init__(self, workdir: pathlib.Path, extra: str = "", port: int | None = None,
                 listener: str | None = None) -> None:
        self.dir = workdir
        self.port = port or free_port()
        self.conf = workdir / f"mosquitto-{self.port}.conf"
        listen = listener or f"listener {self.port} 127.0.0.1\nallow_anonymous true\n"
        # started as root, mosquitto would switch to its own user and lose access to the
        # test's private temporary folder
        run_as = "user root\n" if os.geteuid() == 0 else ""
        self.conf.write_text(run_as + listen + extra + f"\npersistence true\npersistence_location "
                             f"{workdir}/\npersistence_file mosq-{self.port}.db\n")
        self.proc: subprocess.Popen[bytes] | None = None

    def start(self) -> Mosquitto:
        program = need_program("mosquitto", "mosquitto")
        self._logfh = open(self.dir / f"mosq-{self.port}.log", "ab")  # noqa: SIM115
        self.proc = subprocess.Popen([program, "-c", str(self.conf)],
                                     stdout=subprocess.DEVNULL, stderr=self._logfh)
        wait_for(lambda: port_open(self.port), SLOW, "mosquitto to listen")
        return self

    def stop(self) -> None:
        if self.proc and self.proc.poll() is None:
            os.kill(self.proc.pid, signal.SIGCONT)  # in case a test left it stopped
            self.proc.terminate()
            self.proc.wait(SLOW)
        if self.proc and not self._logfh.closed:
            self._logfh.close()
        wait_for(lambda: not port_open(self.port), SLOW, "mosquitto to stop")

    def hang(self) -> None:
        """SIGSTOP: the broker keeps its sockets open and answers nothing."""
        assert self.proc is not None
        os.kill(self.proc.pid, signal.SIGSTOP)

    def kill(self) -> None:
        """SIGKILL (from a hang or not): whatever it had not saved is gone."""
        assert self.proc is not None
        self.proc.kill()
        self.proc.wait(SLOW)
        self._logfh.close()
        wait_for(lambda: not port_open(self.port), 10, "mosquitto to die")

    def log(self) -> str:
        return (self.dir / f"mosq-{self.port}.log").read_text(errors="replace")


@pytest.fixture
def own_broker(tmp_path) -> Iterator[Mosquitto]:
    b = Mosquitto(tmp_path).start()
    yield b
    b.stop()


@pytest.fixture(scope="session")
def system_broker_port() -> Iterator[int]:
    """127.0.0.1:1883 when a broker answers there (CI starts one), else our own."""
    if port_open(1883):
        yield 1883
        return
    need_program("mosquitto", "mosquitto")
    d = pathlib.Path(os.environ.get("TMPDIR", "/tmp")) / f"tw-broker-{uuid.uuid4().hex[:6]}"
    d.mkdir()
    b = Mosquitto(d).start()
    yield b.port
    b.stop()


class Collector:
    """A test client that records every message on its subscriptions."""

    def __init__(self, port: int, topics: list[str], *, client_id: str | None = None,
                 username: str | None = None, password: str | None = None,
                 persistent: bool = False, tls: dict | None = None) -> None:
        self.messages: list[tuple[str, bytes, bool]] = []
        self.lock = threading.Lock()
        self.connected = threading.Event()
        cid = client_id or f"test-{uuid.uuid4().hex[:8]}"
        self.client = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                                  client_id=cid, protocol=mqtt.MQTTv311,
                                  clean_session=not persistent)
        if username:
            self.client.username_pw_set(username, password)
        if tls:
            self.client.tls_set(**tls)
        self.topics = topics
        self.client.on_connect = self._on_connect
        self.client.on_message = self._on_message
        self.client.on_subscribe = self._on_subscribe
        self.client.on_disconnect = lambda *a: self.connected.clear()
        self._pending: set[int] = set()
        self.client.connect("127.0.0.1" if not tls else "localhost", port, 30)
        self.client.loop_start()
        wait_for(self.connected.is_set, SLOW, "test client to connect and subscribe")

    def _on_connect(self, client, userdata, flags, reason, properties):
        # connected (for the tests) once the broker has acknowledged every subscription
        with self.lock:
            self._pending = set()
            for t in self.topics:
                _, mid = client.subscribe(t, qos=1)
                self._pending.add(mid)
            if not self._pending:
                self.connected.set()

    def _on_subscribe(self, client, userdata, mid, reason_codes, properties):
        with self.lock:
            self._pending.discard(mid)
            done = not self._pending
        if done:
            self.connected.set()

    def _on_message(self, client, userdata, msg):
        with self.lock:
            self.messages.append((msg.topic, bytes(msg.payload), bool(msg.retain)))

    def publish(self, topic: str, payload: str | bytes, retain: bool = False, qos: int = 1):
        info = self.client.publish(topic, payload, qos=qos, retain=retain)
        info.wait_for_publish(SLOW)

    def sync(self, topic: str) -> None:
        """Wait until a marker published now on ``topic`` (under a subscription of this
        client) comes back: everything the broker had queued for us before it has arrived."""
        marker = f"sync-{uuid.uuid4().hex}".encode()
        self.publish(topic, marker)
        wait_for(lambda: any(p == marker for _, p, _ in list(self.messages)), SLOW,
                 "the sync marker to come back")

    def json_on(self, prefix: str) -> list[dict]:
        with self.lock:
            return [json.loads(p) for t, p, _ in self.messages
                    if t.startswith(prefix) and p and not p.startswith(b"sync-")]

    def events(self, prefix: str) -> list[dict]:
        return [m for m in self.json_on(f"{prefix}/events/") if m.get("event")]

    def close(self) -> None:
        self.client.loop_stop()
        self.client.disconnect()
        release_sockets(self.client)


def write_site(tmp: pathlib.Path, prefix: str, port: int, spaces: list[str], *,
               extra_broker: str = "", url: str | None = None,
               evaluation: str = "{tick_s: 1}", extra: str = "") -> pathlib.Path:
    (tmp / "packs").mkdir(exist_ok=True)
    (tmp / "packs" / "fast.yaml").write_text(FAST_PACK)
    broker_url = url or f"mqtt://127.0.0.1:{port}"
    text = textwrap.dedent(f"""\
        site: {{id: t{uuid.uuid4().hex[:6]}, timezone: UTC}}
        broker:
          url: {broker_url}
          client_id: tw-{uuid.uuid4().hex[:8]}
        {extra_broker}
        output: {{prefix: {prefix}}}
        evaluation: {evaluation}
        rule_dirs: [packs]
        defaults:
          occupancy: {{always: true}}
          rule_packs: [fast, sensor_health]
        templates:
          - {{topic: "{prefix}-in/{{space}}/ta", quantity: air_temperature, interval_s: 60}}
        """) + extra + "spaces:\n" + "".join(f"  - id: {s}\n" for s in spaces)
    p = tmp / "site.yaml"
    p.write_text(text)
    return p


class ServiceProcess:
    """``thermowarden run`` as a subprocess, with its HTTP endpoint for readiness."""

    def __init__(self, site: pathlib.Path, state: pathlib.Path, *args: str,
                 env: dict[str, str] | None = None) -> None:
        self.http = free_port()
        self.log = state / f"service-{self.http}.log"
        state.mkdir(parents=True, exist_ok=True)
        self.cmd = [sys.executable, "-m", "thermowarden.cli", "run", "--config", str(site),
                    "--state-dir", str(state), "--http-port", str(self.http), *args]
        self.env = {**os.environ, **(env or {})}
        self.proc: subprocess.Popen[bytes] | None = None

    def start(self, wait_ready: bool = True) -> ServiceProcess:
        self._logfh = open(self.log, "ab")  # noqa: SIM115 - closed in stop()/kill()
        self.proc = subprocess.Popen(self.cmd, env=self.env, stdout=subprocess.DEVNULL,
                                     stderr=self._logfh)
        if wait_ready:
            try:
                # (a first start compiles the comfort models: minutes on a loaded machine)
                wait_for(self.ready, COMMAND_LIMIT_S,
                         f"the service to be ready (log {self.log})")
            except BaseException:
                self.kill()  # leave no process or open log behind a failed start
                raise
        return self

    def get(self, path: str) -> tuple[int, str]:
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{self.http}{path}", timeout=2) as r:
                return r.status, r.read().decode()
        except urllib.error.HTTPError as exc:
            with exc:  # closes its connection now, not whenever the collector runs
                try:
                    body = exc.read().decode()
                except OSError:  # the body timed out on a loaded machine
                    body = ""
                return exc.code, body
        except OSError:
            return 0, ""

    def ready(self) -> bool:
        assert self.proc is not None
        if self.proc.poll() is not None:
            raise AssertionError(f"service exited early:\n{self.log.read_text()[-3000:]}")
        return self.get("/readyz")[0] == 200

    def metric(self, name: str, labels: str = "") -> float:
        _, text = self.get("/metrics")
        total = 0.0
        for line in text.splitlines():
            if line.startswith(name) and (not labels or labels in line) and \
                    not line.startswith("#"):
                head, value = line.rsplit(" ", 1)
                if head.split("{")[0] == name:
                    total += float(value)
        return total

    def stop(self) -> int:
        assert self.proc is not None
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(SLOW)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(SLOW)
        self._logfh.close()
        return int(self.proc.returncode)

    def kill(self) -> None:
        assert self.proc is not None
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGKILL)
        self.proc.wait(SLOW)
        self._logfh.close()

    def logtext(self) -> str:
        return self.log.read_text()


def clear_retained(port: int, prefix: str) -> None:
    """Remove what a test left retained on a shared broker."""
    seen: list[str] = []
    c = Collector(port, [f"{prefix}/#"])
    c.sync(f"{prefix}/_sync")  # retained messages are delivered before the marker
    with c.lock:
        seen = [t for t, p, r in c.messages if r and p]
    for t in seen:
        c.publish(t, b"", retain=True)
    c.close()
