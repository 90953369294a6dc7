"""The fault suite's harness: a three-node nats-server cluster, three ``thermowarden run
--group`` processes on a site of hot-work spaces, a sensor feeder, a watcher that records
every message with its receipt time, and the faults themselves (by pid: SIGKILL, SIGSTOP
and SIGCONT of an instance or of a broker node; a network partition of one instance in a
network namespace of its own; a step of one instance's wall clock through its test hook).

The invariants are checked by :mod:`tests.faults.invariants` from what the watcher saw.
"""

from __future__ import annotations

import contextlib
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
import urllib.error
import urllib.request
import uuid
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field

import paho.mqtt.client as mqtt
from paho.mqtt.enums import CallbackAPIVersion

from tests.shell.conftest import SLOW, free_port, wait_for
from tests.shell.nats_cluster import NatsCluster
from thermowarden.shell.buffered_client import release_sockets
from thermowarden.shell.wall_offset import ENV as WALL_OFFSET_ENV

# Spot WBGT indoors (ISO 7243:2017, no solar load): 0.7 natural wet-bulb + 0.3 globe.
# Reference values at 297 W (work class moderate, ISO 8996; ISO 7243:2017 Annex A, as the
# engine computes them): about 25.0 °C unacclimatised (action) and 28.3 °C acclimatised
# (limit); from memory of the NIOSH RAL/REL formulas, which the engine's own tests check.
COOL = {"nwb": 18.0, "globe": 26.0}         # WBGT 20.4 °C: nothing
ABOVE_ACTION = {"nwb": 24.0, "globe": 32.0}  # 26.4 °C: high
ABOVE_LIMIT = {"nwb": 31.0, "globe": 44.0}   # 34.9 °C: urgent (spot value at once; a whole
# 600 s window of 26.4 °C crosses the limit after about 2 minutes of it)

HEAT_RULE = "heat_stress.wbgt"


@dataclass
class Timing:
    """The group's times (s). ``lease_ttl_s`` is the lease store's expiry; on main's group
    code (no leases) the bound the README gives, two keepalives, stands in for it."""

    tick_s: float = 1.0
    keepalive_s: float = 8.0
    lease_ttl_s: float = 8.0
    conditions_every_s: float = 15.0
    """How often a space's retained conditions go out while readings arrive (the engine's
    ``CONDITIONS_MIN_S``): the resolution of the "unevaluated" check."""
    wbgt_window_s: float = 600.0
    rebalance_after_s: float = 3660.0
    """How long membership must be steady before an instance above its share hands shards
    over (the group's default). A shard is handed over only to a standby that has stood by
    for it for the WBGT window and a TTL (``standby_warm_s``'s default) whatever this is: the
    scale test shortens this to 20 s and the window still holds."""


# --------------------------------------------------------------------------- recording
@dataclass
class Received:
    t: float          # time.monotonic() at receipt
    topic: str
    payload: bytes
    retained: bool

    def json(self) -> dict | None:
        if not self.payload or self.payload.startswith(b"sync-"):
            return None
        try:
            v = json.loads(self.payload)
        except ValueError:
            return None
        return v if isinstance(v, dict) else None


class Watcher:
    """An MQTT 3.1.1 client that records every message under ``<prefix>/#`` with its
    receipt time (monotonic), and publishes commands."""

    def __init__(self, host: str, port: int, topics: list[str]) -> None:
        self.messages: list[Received] = []
        self.lock = threading.Lock()
        self.connected = threading.Event()
        self.topics = topics
        self.client = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                                  client_id=f"fw-{uuid.uuid4().hex[:8]}",
                                  protocol=mqtt.MQTTv311, clean_session=True)
        self.client.on_connect = self._on_connect
        self.client.on_message = self._on_message
        self.client.on_disconnect = lambda *a: self.connected.clear()
        self._pending: set[int] = set()
        self._topic_of: dict[int, str] = {}
        self.client.on_subscribe = self._on_subscribe
        self.client.connect(host, port, 30)
        self.client.loop_start()
        wait_for(self.connected.is_set, SLOW, "the watcher to connect and subscribe")

    def _on_connect(self, client, userdata, flags, reason, properties):
        with self.lock:
            self._pending = set()
            self._topic_of = {}
            for t in self.topics:
                self._subscribe(client, t)

    def _subscribe(self, client, topic: str) -> None:
        mid = client.subscribe(topic, qos=1)[1]
        self._pending.add(mid)
        self._topic_of[mid] = topic

    def _on_subscribe(self, client, userdata, mid, reason_codes, properties):
        refused = any(getattr(r, "is_failure", False) or getattr(r, "value", 0) == 0x80
                      for r in reason_codes)
        with self.lock:
            self._pending.discard(mid)
            topic = self._topic_of.pop(mid, None)
            if refused and topic is not None:
                # nats-server refuses a QoS 1 subscription while its JetStream elects
                # leaders (a node stopped): ask again, or the watcher hears nothing more
                threading.Timer(1.0, self._retry, (client, topic)).start()
                return
            done = not self._pending
        if done:
            self.connected.set()

    def _retry(self, client, topic: str) -> None:
        with self.lock:
            self._subscribe(client, topic)

    def _on_message(self, client, userdata, msg):
        r = Received(time.monotonic(), msg.topic, bytes(msg.payload), bool(msg.retain))
        with self.lock:
            self.messages.append(r)

    def snapshot(self) -> list[Received]:
        with self.lock:
            return list(self.messages)

    def publish(self, topic: str, payload: str | bytes, qos: int = 1) -> None:
        self.client.publish(topic, payload, qos=qos).wait_for_publish(SLOW)

    def sync(self, topic: str) -> None:
        marker = f"sync-{uuid.uuid4().hex}".encode()
        self.publish(topic, marker)
        wait_for(lambda: any(m.payload == marker for m in self.snapshot()), SLOW,
                 "the sync marker to come back")

    def close(self) -> None:
        self.client.loop_stop()
        self.client.disconnect()
        release_sockets(self.client)


class Feeder:
    """Every space's natural wet-bulb and globe readings every ``every_s`` (QoS 0), from
    ``values`` (space -> {"nwb", "globe"}), which a test changes while it runs."""

    def __init__(self, host: str, port: int, prefix: str, values: dict[str, dict[str, float]],
                 every_s: float = 1.0) -> None:
        self.prefix = prefix
        self.values = values
        self.every_s = every_s
        self.stopped = threading.Event()
        self.client = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                                  client_id=f"ff-{uuid.uuid4().hex[:8]}",
                                  protocol=mqtt.MQTTv311)
        self.client.connect(host, port, 30)
        self.client.loop_start()
        self.thread = threading.Thread(target=self._run, daemon=True)
        self.thread.start()

    def _run(self) -> None:
        while not self.stopped.is_set():
            t0 = time.monotonic()
            for space, v in list(self.values.items()):
                for q in ("nwb", "globe"):
                    self.client.publish(f"{self.prefix}-in/{space}/{q}", f"{v[q]:.2f}", qos=0)
            self.stopped.wait(max(0.05, self.every_s - (time.monotonic() - t0)))

    def stop(self) -> None:
        self.stopped.set()
        self.thread.join(10)
        self.client.loop_stop()
        self.client.disconnect()
        release_sockets(self.client)


# --------------------------------------------------------------------------- instances
class Instance:
    """One ``thermowarden run --group`` process, signalled by its pid. ``netns`` runs it in
    a network namespace (``ip netns exec`` execs the program: the pid is the service's);
    ``wall_offset_file`` holds seconds added to its wall clock (the monotonic clock
    untouched, as after a step of the system clock; ``shell/wall_offset.py``)."""

    def __init__(self, name: str, site: pathlib.Path, state: pathlib.Path, broker_urls: str,
                 group: str, *, netns: str | None = None, http_host: str = "127.0.0.1",
                 wall_offset_file: pathlib.Path | None = None, extra: tuple[str, ...] = ()
                 ) -> None:
        self.name = name
        self.http_host = http_host
        self.http = free_port()
        state.mkdir(parents=True, exist_ok=True)
        self.log = state / f"{name}.log"
        self.cmd = [sys.executable, "-m", "thermowarden.cli", "run", "--config", str(site),
                    "--state-dir", str(state), "--http-port", str(self.http),
                    "--http-host", http_host, "--group", group, "--instance", name,
                    "--broker", broker_urls, *extra]
        if netns is not None:
            self.cmd = ["ip", "netns", "exec", netns, *self.cmd]
        self.env = dict(os.environ)
        if wall_offset_file is not None:
            self.env[WALL_OFFSET_ENV] = str(wall_offset_file)
        self.proc: subprocess.Popen[bytes] | None = None
        self.paused = False

    def start(self) -> Instance:
        self._logfh = open(self.log, "ab")  # noqa: SIM115 - closed in stop()/kill()
        self.proc = subprocess.Popen(self.cmd, env=self.env, stdout=subprocess.DEVNULL,
                                     stderr=self._logfh)
        return self

    @property
    def pid(self) -> int:
        assert self.proc is not None
        return self.proc.pid

    def alive(self) -> bool:
        return self.proc is not None and self.proc.poll() is None

    def get(self, path: str) -> tuple[int, str]:
        try:
            with urllib.request.urlopen(f"http://{self.http_host}:{self.http}{path}",
                                        timeout=2) as r:
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
        if not self.alive():
            raise AssertionError(f"instance {self.name} exited:\n{self.logtext()[-3000:]}")
        return self.get("/readyz")[0] == 200 or self.get("/healthz")[0] == 200

    def metric(self, name: str) -> float | None:
        status, text = self.get("/metrics")
        if status != 200:
            return None
        total, found = 0.0, False
        for line in text.splitlines():
            if line.startswith(name) and not line.startswith("#"):
                head, value = line.rsplit(" ", 1)
                if head.split("{")[0] == name:
                    total += float(value)
                    found = True
        return total if found else None

    def pause(self) -> None:
        os.kill(self.pid, signal.SIGSTOP)
        self.paused = True

    def resume(self) -> None:
        os.kill(self.pid, signal.SIGCONT)
        self.paused = False

    def kill(self) -> None:
        if self.alive():
            os.kill(self.pid, signal.SIGKILL)
        if self.proc is not None:
            self.proc.wait(SLOW)
            self._logfh.close()

    def stop(self) -> None:
        if self.proc is None:
            return
        if self.alive():
            if self.paused:
                self.resume()
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(SLOW)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(SLOW)
        if not self._logfh.closed:
            self._logfh.close()

    def logtext(self) -> str:
        return self.log.read_text(errors="replace") if self.log.exists() else ""


def pause_node(cluster: NatsCluster, k: int) -> None:
    node = cluster.nodes[k]
    assert node.proc is not None
    os.kill(node.proc.pid, signal.SIGSTOP)


def resume_node(cluster: NatsCluster, k: int) -> None:
    node = cluster.nodes[k]
    assert node.proc is not None
    os.kill(node.proc.pid, signal.SIGCONT)


# --------------------------------------------------------------------------- network namespaces
def _ip(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(["ip", *args], capture_output=True, text=True, timeout=30)


@dataclass
class Netns:
    """A network namespace of our own, joined to the test's namespace by a veth pair on a
    private /30: ``outer`` (the test's side) and ``inner`` (the namespace's). A partition
    sets the outer end down: the inner end loses its carrier and whatever it sends is
    dropped without an error, as on a cut link; healing sets it up again."""

    name: str
    outer: str
    inner: str
    outer_ip: str
    inner_ip: str

    @classmethod
    def create(cls) -> Netns:
        if shutil.which("ip") is None and not os.access("/usr/sbin/ip", os.X_OK):
            raise PermissionError("no `ip` program (Debian package iproute2)")
        tag = uuid.uuid4().hex[:6]
        third = int(tag[:2], 16)
        fourth = (int(tag[2:4], 16) % 63) * 4
        ns = cls(f"twf{tag}", f"twfo{tag}", f"twfi{tag}", f"10.231.{third}.{fourth + 1}",
                 f"10.231.{third}.{fourth + 2}")
        r = _ip("netns", "add", ns.name)
        if r.returncode != 0:
            raise PermissionError(f"`ip netns add` refused: {r.stderr.strip()}")
        try:
            for args in (("link", "add", ns.outer, "type", "veth", "peer", "name", ns.inner),
                         ("link", "set", ns.inner, "netns", ns.name),
                         ("addr", "add", f"{ns.outer_ip}/30", "dev", ns.outer),
                         ("link", "set", ns.outer, "up"),
                         ("netns", "exec", ns.name, "ip", "addr", "add", f"{ns.inner_ip}/30",
                          "dev", ns.inner),
                         ("netns", "exec", ns.name, "ip", "link", "set", ns.inner, "up"),
                         ("netns", "exec", ns.name, "ip", "link", "set", "lo", "up")):
                r = _ip(*args)
                if r.returncode != 0:
                    raise PermissionError(f"`ip {' '.join(args)}` refused: {r.stderr.strip()}")
        except BaseException:
            ns.delete()
            raise
        return ns

    def cut(self) -> None:
        r = _ip("link", "set", self.outer, "down")
        assert r.returncode == 0, r.stderr

    def heal(self) -> None:
        r = _ip("link", "set", self.outer, "up")
        assert r.returncode == 0, r.stderr

    def delete(self) -> None:
        _ip("link", "del", self.outer)  # removes both ends
        _ip("netns", "del", self.name)


class Forwarder:
    """TCP forwarding from ``listen_host:port`` to ``127.0.0.1:target`` (the namespaced
    instance reaches services that listen on loopback only, e.g. PostgreSQL), one thread per
    direction of each connection."""

    def __init__(self, listen_host: str, target_port: int) -> None:
        self.target = target_port
        self.sock = socket.socket()
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self.sock.bind((listen_host, 0))
        self.port = int(self.sock.getsockname()[1])
        self.sock.listen(64)
        self.sock.settimeout(0.5)
        self.stopped = threading.Event()
        self.conns: list[socket.socket] = []
        self.thread = threading.Thread(target=self._accept, daemon=True)
        self.thread.start()

    def _accept(self) -> None:
        while not self.stopped.is_set():
            try:
                a, _ = self.sock.accept()
            except (TimeoutError, OSError):
                continue
            try:
                b = socket.create_connection(("127.0.0.1", self.target), timeout=10)
            except OSError:
                a.close()
                continue
            b.settimeout(None)
            a.settimeout(None)
            self.conns += [a, b]
            for x, y in ((a, b), (b, a)):
                threading.Thread(target=self._pipe, args=(x, y), daemon=True).start()

    @staticmethod
    def _pipe(src: socket.socket, dst: socket.socket) -> None:
        try:
            while True:
                data = src.recv(65536)
                if not data:
                    break
                dst.sendall(data)
        except OSError:
            pass
        finally:
            with contextlib.suppress(OSError):
                dst.shutdown(socket.SHUT_WR)

    def close(self) -> None:
        self.stopped.set()
        self.sock.close()
        for c in self.conns:
            with contextlib.suppress(OSError):
                c.close()
        self.thread.join(5)


# --------------------------------------------------------------------------- the site
def space_ids(n: int) -> list[str]:
    return [f"s{i:03d}" for i in range(n)]


def write_site(tmp: pathlib.Path, prefix: str, broker_url: str, spaces: list[str],
               timing: Timing, group_yaml: str = "") -> pathlib.Path:
    """A site of hot-work spaces (moderate work, unacclimatised) with the heat-stress pack;
    nats-server's MQTT needs 3.1.1, "/" rule separators and QoS 0 subscriptions (commands at
QoS 1 in a session the cluster keeps while an instance moves to another node)."""
    text = textwrap.dedent(f"""\
        site: {{id: f{uuid.uuid4().hex[:6]}, timezone: UTC}}
        broker:
          url: {broker_url}
          protocol: "3.1.1"
          subscribe_qos: 0
          persistent_session: true
          keepalive_s: {timing.keepalive_s:g}
        output: {{prefix: {prefix}, rule_topic_separator: "/"}}
        evaluation: {{tick_s: {timing.tick_s:g}, flood_limit: 100000}}
        ingest: {{wbgt_window_s: {timing.wbgt_window_s:g}, silence_limit_s: null}}
        defaults:
          occupancy: {{always: true}}
          rule_packs: [heat_stress]
          people: {{work_class: moderate, clo: 0.6, acclimatised: false}}
        templates:
          - {{topic: "{prefix}-in/{{space}}/nwb", quantity: natural_wet_bulb, interval_s: 60}}
          - {{topic: "{prefix}-in/{{space}}/globe", quantity: globe_temperature, interval_s: 60}}
        """) + group_yaml + "spaces:\n" + "".join(
        f"  - {{id: {s}, hot_work: true}}\n" for s in spaces)
    p = tmp / "site.yaml"
    p.write_text(text)
    return p


def wait_until(predicate: Callable[[], bool], timeout: float) -> float | None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return time.monotonic()
        time.sleep(0.05)
    return None


@dataclass
class Command:
    """A command the test sent: verb, advisory id, the unique ``by`` that marks it in the
    advisory's history, its request id and when it was sent (monotonic)."""

    verb: str
    advisory_id: str
    by: str
    request_id: str
    sent: float
    during_fault: bool


@dataclass
class Scenario:
    """What a fault test set up, for the invariant checks."""

    prefix: str
    spaces: list[str]
    timing: Timing
    commands: list[Command] = field(default_factory=list)
    fault_started: float = 0.0
    fault_started_wall: float | None = None
    """The fault's start by the test machine's wall clock (the instances' clock): a
    window ``rebuilding_since`` then or later was thrown away at a takeover."""
    fault_ended: float = 0.0
    observe_from: float = 0.0
    observe_to: float = 0.0
    notes: list[str] = field(default_factory=list)
    whole_exempt: set[str] = field(default_factory=set)
    """Spaces the window check leaves out, each for a reason the test states (a shard handed
    to a newcomer sooner than the window, by a deliberately short rebalance time)."""


@contextlib.contextmanager
def cleanup() -> Iterator[list[Callable[[], None]]]:
    """Runs the registered closers in reverse order, each even if an earlier one failed."""
    closers: list[Callable[[], None]] = []
    try:
        yield closers
    finally:
        errors: list[BaseException] = []
        for c in reversed(closers):
            try:
                c()
            except BaseException as exc:  # noqa: BLE001 - every closer runs
                errors.append(exc)
        if errors:
            raise errors[0]
