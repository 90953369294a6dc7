"""Scale-out figures on a three-node nats-server cluster (used by bench/run.py --cluster).

One, two and three instances of a group (``run --group``), each connected to its own node,
share a site of ``SPACES`` spaces; one publisher sends ``n`` sensor messages (QoS 0) to node
1 as fast as it can; the figure is the rate at which the group as a whole takes them in
(the sum of the instances' received counters, until it stops growing), against a bare paho
MQTT 3.1.1 consumer subscribed on node 1 in the same run (``cluster_<m>_vs_bare_ratio``).
On this 2-core machine the broker nodes, the instances and the publisher share the cores,
so these are ratios, not capacities.

Costs for sizing: ``cluster_<m>_cpu_per_msg_us`` is the CPU time (user + system, from
/proc/<pid>/stat) the instances used per message received, which includes their evaluations
in that time; ``cluster_<m>_idle_cpu_per_space_min_us`` the CPU time per space per minute
with nothing arriving (evaluations every ``TICK_S``, conditions every minute, heartbeats).
"""

from __future__ import annotations

import os
import pathlib
import shutil
import subprocess
import sys
import tempfile
import textwrap
import time
import uuid

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))

from e2e import BARE, PUBLISHER, _free_port, _metric  # noqa: E402
from tests.shell.nats_cluster import NatsCluster, nats_program  # noqa: E402

SPACES = 600
TICK_S = 5.0


def _site(tmp: pathlib.Path, prefix: str, url: str,
          servers: list[str] | None = None) -> pathlib.Path:
    (tmp / "packs").mkdir(exist_ok=True)
    (tmp / "packs" / "fast.yaml").write_text(textwrap.dedent("""\
        pack: fast
        description: one simple rule
        rules:
          - id: hot
            title: Hot
            audience: facilities
            needs: [air_temperature]
            condition: air_temperature > 30
            messages: {title: "{space_name} is hot", advice: "Cool it.", rationale: "> 30 °C"}
        """))
    site = tmp / "site.yaml"
    site.write_text(
        f"site: {{id: cbench, timezone: UTC}}\n"
        f"broker: {{url: '{url}', protocol: '3.1.1', subscribe_qos: 0, keepalive_s: 8}}\n"
        f"output: {{prefix: {prefix}-out, rule_topic_separator: '/'}}\nrule_dirs: [packs]\n"
        f"evaluation: {{flood_limit: 100000, tick_s: {TICK_S}}}\n"
        "ingest: {silence_limit_s: null}\n"
        + (f"group: {{store: {{kind: nats, servers: [{', '.join(servers)}], stream_replicas: 3}},"
           " lease_ttl_s: 15, rebalance_after_s: 0}\n" if servers else "") +
        "defaults: {occupancy: {always: true}, rule_packs: [fast, comfort, humidity],"
        " people: {met: 1.2, clo: 0.6}}\n"
        f"templates:\n  - {{topic: '{prefix}/{{space}}/ta', quantity: air_temperature,"
        " interval_s: 60}\nspaces:\n" +
        "".join(f"  - id: s{i:04d}\n" for i in range(SPACES)))
    return site


def _cpu_s(pid: int) -> float:
    fields = pathlib.Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def _bare(port: int, prefix: str, n: int, tries: int = 3) -> float | None:
    """Messages per second a bare paho MQTT 3.1.1 consumer receives (QoS 0), or None if it
    never received them all."""
    for attempt in range(tries):
        bare = subprocess.Popen([sys.executable, "-c", BARE, str(port), f"{prefix}{attempt}",
                                 str(n), "3.1.1"], stdout=subprocess.PIPE, text=True)
        assert bare.stdout is not None
        assert bare.stdout.readline().strip() == "ready"
        time.sleep(2.0)
        t0 = _publish(port, f"{prefix}{attempt}", n)
        line = bare.stdout.readline().strip()
        bare.wait(180)
        if not line.startswith("incomplete"):
            return n / (float(line) - t0)
        print(f"warning: bare consumer on the cluster lost messages ({line})", file=sys.stderr)
    return None


def _warm(cluster: NatsCluster) -> None:
    """A first MQTT client makes each node create its MQTT streams (seconds): connect one
    to every node before anything is measured."""
    import paho.mqtt.client as mqtt
    from paho.mqtt.enums import CallbackAPIVersion

    for node in cluster.nodes:
        c = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                        protocol=mqtt.MQTTv311)
        c.connect("127.0.0.1", node.mqtt, 30)
        c.loop_start()
        info = c.publish("twwarm/x", b"1", qos=1)
        info.wait_for_publish(60)
        c.loop_stop()
        c.disconnect()


def _publish(port: int, prefix: str, n: int) -> float:
    out = subprocess.run([sys.executable, "-c", PUBLISHER, str(port), prefix, str(n),
                          str(SPACES)], capture_output=True, text=True, check=True,
                         timeout=600)
    return float(out.stdout.split()[0])


def _group(tmp: pathlib.Path, cluster: NatsCluster, m: int, n: int,
           idle_s: float) -> dict[str, float]:
    prefix = f"twcl{uuid.uuid4().hex[:6]}"
    site = _site(tmp, prefix, cluster.nodes[0].url,
                 [f"nats://127.0.0.1:{node.client}" for node in cluster.nodes])
    procs: list[tuple[subprocess.Popen[bytes], int]] = []
    out: dict[str, float] = {}
    try:
        for k in range(m):
            http = _free_port()
            log = open(tmp / f"svc-{m}-{k}.log", "wb")  # noqa: SIM115
            p = subprocess.Popen([sys.executable, "-m", "thermowarden.cli", "run", "--config",
                                  str(site), "--state-dir", str(tmp / f"state-{m}-{k}"),
                                  "--http-port", str(http), "--group", "bench",
                                  "--instance", f"i{k}", "--broker", cluster.urls(k)],
                                 stdout=subprocess.DEVNULL, stderr=log)
            procs.append((p, http))
        deadline = time.time() + 600
        while time.time() < deadline:
            owned = [_metric(h, "thermowarden_group_owned_spaces") for _, h in procs]
            members = [_metric(h, "thermowarden_group_members") for _, h in procs]
            if sum(owned) == SPACES and all(x == m for x in members):
                break
            time.sleep(0.2)
        else:
            raise RuntimeError(f"the group of {m} never owned every space once")
        # idle: the evaluations (every TICK_S) and conditions (every 60 s) of the spaces,
        # no message arriving: CPU per space per minute
        time.sleep(TICK_S)
        cpu0 = sum(_cpu_s(p.pid) for p, _ in procs)
        w0 = time.monotonic()
        time.sleep(idle_s)
        out["idle_cpu_per_space_min_us"] = (1e6 * (sum(_cpu_s(p.pid) for p, _ in procs) - cpu0)
                                            / SPACES / ((time.monotonic() - w0) / 60))
        base = sum(_metric(h, "thermowarden_messages_received_total") for _, h in procs)
        cpu0 = sum(_cpu_s(p.pid) for p, _ in procs)
        t0 = _publish(cluster.nodes[0].mqtt, prefix, n)
        last, still_since = -1.0, time.time()
        while time.time() - still_since < 3.0 and time.time() - t0 < 600:
            got = sum(_metric(h, "thermowarden_messages_received_total") for _, h in procs)
            if got != last:
                last, still_since = got, time.time()
                if got - base >= n:
                    break
            time.sleep(0.05)
        received = last - base
        elapsed = still_since - t0
        out["rate"] = received / elapsed
        out["lost"] = n - received
        out["cpu_per_msg_us"] = 1e6 * (sum(_cpu_s(p.pid) for p, _ in procs) - cpu0) / max(
            received, 1.0)
    finally:
        for p, _ in procs:
            p.terminate()
        for p, _ in procs:
            p.wait(60)
    return out


def bench_cluster(quick: bool) -> dict[str, float | str | None]:
    program = nats_program()
    if program is None:
        return {"cluster_unmeasured": "nats-server not installed"}
    n = 20_000 if quick else 60_000
    tmp = pathlib.Path(tempfile.mkdtemp(prefix="tw-cluster-"))
    cluster = NatsCluster(tmp / "nats", program).start()
    out: dict[str, float | str | None] = {}
    try:
        _warm(cluster)
        bare = _bare(cluster.nodes[0].mqtt, f"twbare{uuid.uuid4().hex[:6]}", n)
        out["cluster_bare_paho_311_msgs_per_s"] = round(bare) if bare else None
        for m in (1, 2, 3):
            g = _group(tmp, cluster, m, n, 20.0 if quick else 65.0)
            out[f"cluster_{m}_msgs_per_s"] = round(g["rate"])
            out[f"cluster_{m}_lost"] = int(g["lost"])
            out[f"cluster_{m}_vs_bare_ratio"] = round(g["rate"] / bare, 3) if bare else None
            out[f"cluster_{m}_cpu_per_msg_us"] = round(g["cpu_per_msg_us"], 1)
            out[f"cluster_{m}_idle_cpu_per_space_min_us"] = round(
                g["idle_cpu_per_space_min_us"])
    finally:
        cluster.stop()
        shutil.rmtree(tmp, ignore_errors=True)
    return out


if __name__ == "__main__":
    import json

    print(json.dumps(bench_cluster("--quick" in sys.argv)))
