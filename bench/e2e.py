"""End-to-end figures through a real local broker (used by bench/run.py).

- e2e_msgs_per_s: sensor messages published as fast as one publisher process can, through
  the broker into the running service (decode, store, an evaluation every tick), counted
  by the service's own metrics; e2e_vs_bare_paho_ratio: that rate divided by the rate of a
  bare paho consumer that only counts the same messages with the same protocol (MQTT 5),
  measured the same way in the same run; e2e_311_msgs_per_s and e2e_vs_bare_paho_311_ratio:
  the same with the service and the bare consumer both on MQTT 3.1.1. A bare consumer that
  loses messages (a loaded machine) or fails is measured again, up to three times; if it
  never receives them all its ratio is reported as null (unmeasured) with the reason, as
  it is when the service does not count every message.
- e2e_cpu_us_per_msg, e2e_bare_paho_cpu_us_per_msg (and the _311 pair): CPU microseconds
  (user + system, from /proc) each consumer process spent per message over the same
  measurement; steadier than rates on a shared machine, where the rates of both depend on
  how much of the two cores the publisher and the broker get.
- e2e_p99_latency_s: from a sensor publish that crosses a threshold (zero on-delay rule) to
  the advisory event received by another client, default settings except the flood guard
  (raised so that 100 samples in a row are not summarised), 100 samples.
"""

from __future__ import annotations

import json
import os
import pathlib
import socket
import subprocess
import sys
import tempfile
import textwrap
import threading
import time
import urllib.request
import uuid

import paho.mqtt.client as mqtt
from paho.mqtt.enums import CallbackAPIVersion

PUBLISHER = r"""
import sys, time, paho.mqtt.client as mqtt
from paho.mqtt.enums import CallbackAPIVersion
port, prefix, n, spaces = int(sys.argv[1]), sys.argv[2], int(sys.argv[3]), int(sys.argv[4])
c = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2)
c.max_inflight_messages_set(1000)
c.connect("127.0.0.1", port, 60)
c.loop_start()
t0 = time.time()
print(t0, flush=True)
for k in range(n):
    i = k % spaces
    c.publish(f"{prefix}/s{i:04d}/ta", f"{20 + (k % 50) / 10:.1f}", qos=0)
    if k % 2000 == 0:
        time.sleep(0)
time.sleep(0.5)
c.loop_stop()
"""

BARE = r"""
import sys, time, threading, paho.mqtt.client as mqtt
from paho.mqtt.enums import CallbackAPIVersion
port, prefix, n, proto = int(sys.argv[1]), sys.argv[2], int(sys.argv[3]), sys.argv[4]
count = 0
done = threading.Event()
def on_message(c, u, m):
    global count
    count += 1
    if count >= n:
        print(time.time(), flush=True); done.set()
def on_connect(c, u, f, r, p):
    c.subscribe(prefix + "/#", qos=0)
c = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                protocol=mqtt.MQTTv5 if proto == "5" else mqtt.MQTTv311)
c.on_message = on_message; c.on_connect = on_connect
c.connect("127.0.0.1", port, 60)
c.loop_start()
print("ready", flush=True)
if not done.wait(120):
    print("incomplete", count, flush=True)
"""


def _port_open(port: int) -> bool:
    with socket.socket() as s:
        s.settimeout(0.5)
        return s.connect_ex(("127.0.0.1", port)) == 0


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _broker(tmp: pathlib.Path) -> tuple[int, subprocess.Popen[bytes] | None]:
    if _port_open(1883):
        return 1883, None
    port = _free_port()
    conf = tmp / "m.conf"
    conf.write_text(f"listener {port} 127.0.0.1\nallow_anonymous true\n")
    p = subprocess.Popen(["mosquitto", "-c", str(conf)], stdout=subprocess.DEVNULL,
                         stderr=subprocess.DEVNULL)
    for _ in range(100):
        if _port_open(port):
            break
        time.sleep(0.05)
    return port, p


def _publish(port: int, prefix: str, n: int, spaces: int) -> float:
    out = subprocess.run([sys.executable, "-c", PUBLISHER, str(port), prefix, str(n),
                          str(spaces)], capture_output=True, text=True, check=True, timeout=300)
    return float(out.stdout.split()[0])


def _metric(http: int, name: str) -> float:
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{http}/metrics", timeout=2) as r:
            text = r.read().decode()
    except OSError:
        return -1.0
    for line in text.splitlines():
        if line.startswith(name + " "):
            return float(line.split()[-1])
    return 0.0


def _site(tmp: pathlib.Path, port: int, prefix: str, spaces: int,
          protocol: str = "5") -> pathlib.Path:
    (tmp / "packs").mkdir(exist_ok=True)
    (tmp / "packs" / "fast.yaml").write_text(textwrap.dedent("""\
        pack: fast
        description: zero on-delay rule for the latency figure
        rules:
          - id: hot
            title: Hot
            audience: facilities
            needs: [air_temperature]
            condition: air_temperature > 30
            messages: {title: "{space_name} is hot", advice: "Cool it.", rationale: "> 30 °C"}
        """))
    site = tmp / "site.yaml"
    cid = f"tw-{uuid.uuid4().hex[:6]}"
    site.write_text(f"site: {{id: bench, timezone: UTC}}\n"
                    f"broker: {{url: 'mqtt://127.0.0.1:{port}', client_id: {cid}, "
                    f"protocol: '{protocol}'}}\n"
                    f"output: {{prefix: {prefix}-out}}\nrule_dirs: [packs]\n"
                    "evaluation: {flood_limit: 100000}\n"
                    "defaults: {occupancy: {always: true}, rule_packs: [fast, comfort, humidity],"
                    " people: {met: 1.2, clo: 0.6}}\n"
                    f"templates:\n  - {{topic: '{prefix}/{{space}}/ta', quantity: air_temperature,"
                    " interval_s: 60}\nspaces:\n" +
                    "".join(f"  - id: s{i:04d}\n" for i in range(spaces)))
    return site


def _cpu_s(pid: int) -> float | None:
    """CPU seconds (user + system) a process has used so far (Linux), None elsewhere."""
    try:
        with open(f"/proc/{pid}/stat") as f:
            fields = f.read().rsplit(")", 1)[1].split()
        return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")
    except (OSError, IndexError, ValueError):
        return None


def _per_msg_us(before: float | None, after: float | None, n: int) -> float | None:
    if before is None or after is None or n <= 0:
        return None
    return round((after - before) / n * 1e6, 1)


def _bare_rate(port: int, prefix: str, n: int, spaces: int, proto: str,
               tries: int = 3) -> tuple[float | None, float | None, str]:
    """Messages per second a bare paho consumer receives and its CPU microseconds per
    message (None, None and the reason if it never got them all)."""
    last = ""
    for attempt in range(tries):
        bare = subprocess.Popen([sys.executable, "-c", BARE, str(port), prefix, str(n),
                                 proto], stdout=subprocess.PIPE, text=True)
        assert bare.stdout is not None
        ready = bare.stdout.readline().strip()
        line, t0, cpu0, cpu1 = "", 0.0, None, None
        if ready == "ready":
            time.sleep(0.5)
            cpu0 = _cpu_s(bare.pid)
            t0 = _publish(port, prefix, n, spaces)
            line = bare.stdout.readline().strip()
            cpu1 = _cpu_s(bare.pid)
        try:
            bare.wait(130)
        except subprocess.TimeoutExpired:
            bare.kill()
            bare.wait()
        try:
            return n / (float(line) - t0), _per_msg_us(cpu0, cpu1, n), ""
        except ValueError:  # "incomplete <count>", or nothing: it failed
            pass
        last = (f"bare MQTT {proto} consumer lost messages or failed "
                f"({line or ready or 'no output'}) in {attempt + 1} tries")
        print(f"warning: {last}", file=sys.stderr)
    return None, None, last


def _service_rate(tmp: pathlib.Path, port: int, prefix: str, n: int, spaces: int,
                  protocol: str, latency: bool) -> dict[str, float]:
    """Run the service on ``protocol``, publish ``n`` messages, return its rate (and the
    p99 latency when asked)."""
    site = _site(tmp, port, prefix, spaces, protocol)
    http = _free_port()
    state = tmp / f"state-{protocol}"
    svc = subprocess.Popen([sys.executable, "-m", "thermowarden.cli", "run", "--config",
                            str(site), "--state-dir", str(state), "--http-port",
                            str(http)], stdout=subprocess.DEVNULL,
                           stderr=open(tmp / f"svc-{protocol}.log", "wb"), env={**os.environ})
    out: dict[str, float] = {}
    try:
        for _ in range(600):
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{http}/readyz", timeout=1):
                    break
            except OSError:
                time.sleep(0.1)
        base = _metric(http, "thermowarden_messages_received_total")
        cpu0 = _cpu_s(svc.pid)
        t0 = _publish(port, prefix, n, spaces)
        deadline = time.time() + 180
        while _metric(http, "thermowarden_messages_received_total") - base < n and \
                time.time() < deadline:
            time.sleep(0.02)
        got = _metric(http, "thermowarden_messages_received_total") - base
        # the engine has taken them all when the queue is empty again
        while _metric(http, "thermowarden_queue_depth") > 0 and time.time() < deadline:
            time.sleep(0.02)
        out["rate"] = got / (time.time() - t0)
        out["got"] = got
        cpu = _per_msg_us(cpu0, _cpu_s(svc.pid), int(got))
        if cpu is not None:
            out["cpu_us"] = cpu
        if latency:
            out["p99"] = _latency(port, prefix, spaces)
    finally:
        svc.terminate()
        svc.wait(30)
    return out


def bench_e2e(quick: bool) -> dict[str, float | str | None]:
    n = 40_000 if quick else 150_000
    spaces = 1000
    tmp = pathlib.Path(tempfile.mkdtemp(prefix="tw-e2e-"))
    port, broker = _broker(tmp)
    out: dict[str, float | str | None] = {}
    unmeasured: list[str] = []
    try:
        for proto, suffix in (("5", ""), ("3.1.1", "_311")):
            prefix = f"twbench/{uuid.uuid4().hex[:6]}"
            bare_rate, bare_cpu, why = _bare_rate(port, prefix, n, spaces, proto)
            svc = _service_rate(tmp, port, prefix, n, spaces, proto, latency=proto == "5")
            if svc["got"] < n:
                why = "; ".join(filter(None, [why, (
                    f"the MQTT {proto} service counted {svc['got']:.0f} of {n} messages")]))
            measured = bool(bare_rate) and svc["got"] >= n
            out[f"e2e{suffix}_msgs_per_s"] = round(svc["rate"]) if svc["got"] > 0 else None
            out[f"e2e{suffix}_bare_paho_msgs_per_s"] = (round(bare_rate) if bare_rate
                                                       else None)
            out[f"e2e_vs_bare_paho{suffix}_ratio"] = (
                round(svc["rate"] / bare_rate, 3) if measured and bare_rate else None)
            out[f"e2e{suffix}_cpu_us_per_msg"] = svc.get("cpu_us")
            out[f"e2e{suffix}_bare_paho_cpu_us_per_msg"] = bare_cpu
            if why:
                unmeasured.append(why)
            if "p99" in svc:
                out["e2e_p99_latency_s"] = svc["p99"]
    finally:
        if broker is not None:
            broker.terminate()
    if unmeasured:
        out["e2e_unmeasured"] = "; ".join(unmeasured)
    return out


def _latency(port: int, prefix: str, spaces: int, samples: int = 100) -> float:
    received: dict[str, float] = {}
    lock = threading.Lock()

    def on_message(c, u, m):  # type: ignore[no-untyped-def]
        t = time.time()
        p = json.loads(m.payload)
        if p.get("event") == "raised":
            with lock:
                received.setdefault(p["advisory"]["space"]["id"], t)

    c = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2)
    c.on_message = on_message
    c.connect("127.0.0.1", port, 60)
    c.subscribe(f"{prefix}-out/events/#", qos=1)
    c.loop_start()
    time.sleep(0.5)
    # cool every sampled space first, then cross the threshold one space at a time
    for i in range(samples):
        c.publish(f"{prefix}/s{i:04d}/ta", "22", qos=1)
    time.sleep(2.0)
    lat = []
    for i in range(samples):
        sid = f"s{i:04d}"
        t0 = time.time()
        c.publish(f"{prefix}/{sid}/ta", "31", qos=1)
        deadline = t0 + 10
        while time.time() < deadline:
            with lock:
                if sid in received:
                    lat.append(received[sid] - t0)
                    break
            time.sleep(0.002)
        else:
            lat.append(10.0)
        time.sleep(0.05)
    c.loop_stop()
    lat.sort()
    return round(lat[int(0.99 * (len(lat) - 1))], 3)
