"""Scale-out figures on a three-node nats-server cluster (used by bench/run.py --cluster).

One to four instances of a group (``run --group``; instance k connects first to node
k mod 3) share a site. Where the site model has a ``group`` section (issue 24: shard leases
in a JetStream key-value bucket on the same cluster, a holder and a warm standby per shard),
the bench writes one; otherwise it runs the group as before (membership over retained
records). Each figure is printed (and flushed) as soon as it is measured; the last line of
``bench/run.py`` is the JSON of all of them.

- ``cluster_<m>_msgs_per_s``: one publisher sends ``n`` sensor messages (QoS 0) to node 1 as
  fast as it can, for the large site; the figure is the rate at which the group
  as a whole takes them in (the sum of the instances' received counters, until it stops
  growing), against a bare paho MQTT 3.1.1 consumer on node 1 in the same run
  (``cluster_<m>_vs_bare_ratio``). With standbys, every message reaches each instance that
  holds or stands by for its shard (``cluster_<m>_received_per_sent``, 2.0 with one
  standby): the rate counts each message of the site once.
- ``cluster_<m>_cpu_per_msg_us``: CPU time (user + system, from /proc/<pid>/stat) of all
  instances per message sent (the holder's and the standby's copy together), including
  their evaluations in that time.
- ``cluster_<S>sp_<m>_idle_cpu_per_space_min_us``: CPU time of all instances per space of
  the site per minute with no message arriving (evaluations every ``TICK_S``, conditions,
  lease renewals or heartbeats), for a site of ``S`` spaces (two sizes: 150 and 600 with
  ``--quick``, 1,000 and 4,000 without); ``cluster_<S>sp_<m>_idle_cpu_per_instance_min_ms``
  the same per instance per minute.
- ``cluster_<S>sp_<m>_evaluated_spaces_per_instance`` and ``..._idle_cpu_each_instance_min_ms``:
  per instance (``/`` between them), the spaces it evaluates (those of the shards it holds
  and stands by for, ``thermowarden_group_evaluated_spaces``) and its own idle CPU per
  minute; ``..._load``: the machine's one-minute load average at the end of the idle window.
- ``cluster_idle_fit_*``: every instance of every run fitted as ``fixed + a * evaluated +
  b * site`` (least squares, ms per minute): ``fixed`` per instance, ``a`` per space it
  evaluates, ``b`` per space of the whole site beyond those. ``b`` near 0 against ``a``
  means an instance's idle cost follows its own share, not the whole site's size.
- ``cluster_same_share_<k>_idle_ratio``: idle CPU per instance of four instances on the
  large site against two on half of it, measured one after the other (``k`` counts the
  pairs: a shared machine's load changes over a run, and a pair shares the load of its
  minutes). With one standby per shard, every instance evaluates half the large site in
  both, but the whole site doubles: about 1.0 when an instance's idle cost follows its own
  share, up to 2.0 if it followed the whole site's size.
- ``cluster_idle_site_growth_ratio``: idle CPU per instance with four instances on the large
  site divided by one instance on the small site. With one standby per shard each of the
  four evaluates half the large site, twice the spaces of the one on the small site: 2.0 at
  most when the cost follows the spaces evaluated (less, with the fixed cost per process),
  4.0 or more if it grew with the whole site.

On this 2-core machine, shared with other work, the broker nodes, the instances and the
publisher share the cores: these are ratios and costs, not capacities.
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
from typing import Any

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))

from e2e import BARE, PUBLISHER, _free_port, _metric  # noqa: E402
from tests.shell.nats_cluster import NatsCluster, nats_program  # noqa: E402

SMALL = 150
"""Spaces of the small site with --quick (1,000 without); the large one has four times
(``--sizes`` chooses both)."""
TICK_S = 5.0
LEASE_TTL_S = 15.0
"""Outlasts a JetStream stream leader election (5-11 s measured by the cluster test)."""


def _has_leases() -> bool:
    """Whether this version's site model has the group section (shard leases)."""
    from thermowarden.config import SiteConfig

    return "group" in SiteConfig.model_fields


def _site(tmp: pathlib.Path, prefix: str, url: str, spaces: int,
          cluster: NatsCluster) -> pathlib.Path:
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
    group = ""
    if _has_leases():
        servers = ", ".join(f"'nats://127.0.0.1:{n.client}'" for n in cluster.nodes)
        group = (f"group:\n  name: bench\n  store: {{kind: nats, servers: [{servers}], "
                 f"bucket: {prefix}, stream_replicas: 3}}\n  lease_ttl_s: {LEASE_TTL_S}\n"
                 "  replicas: 1\n  shard_buckets: 16\n  rebalance_after_s: 5\n"
                 "  standby_warm_s: 5\n")  # its rules use no window
    site = tmp / f"site-{prefix}.yaml"
    site.write_text(
        f"site: {{id: cbench, timezone: UTC}}\n"
        f"broker: {{url: '{url}', protocol: '3.1.1', subscribe_qos: 0, keepalive_s: 8}}\n"
        f"output: {{prefix: {prefix}-out, rule_topic_separator: '/'}}\nrule_dirs: [packs]\n"
        f"evaluation: {{flood_limit: 100000, tick_s: {TICK_S}}}\n"
        "ingest: {silence_limit_s: null}\n"
        "defaults: {occupancy: {always: true}, rule_packs: [fast, comfort, humidity],"
        " people: {met: 1.2, clo: 0.6}}\n" + group +
        f"templates:\n  - {{topic: '{prefix}/{{space}}/ta', quantity: air_temperature,"
        " interval_s: 60}\nspaces:\n" +
        "".join(f"  - id: s{i:04d}\n" for i in range(spaces)))
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
        t0 = _publish(port, f"{prefix}{attempt}", n, 1000)
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
        deadline = time.monotonic() + 180
        while True:  # a node may refuse or drop the first clients while it starts
            c = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                            protocol=mqtt.MQTTv311)
            try:
                c.connect("127.0.0.1", node.mqtt, 30)
                c.loop_start()
                c.publish("twwarm/x", b"1", qos=1).wait_for_publish(60)
                break
            except (OSError, RuntimeError, ValueError):
                if time.monotonic() > deadline:
                    raise
                time.sleep(2.0)
            finally:
                c.loop_stop()
                c.disconnect()


def _publish(port: int, prefix: str, n: int, spaces: int) -> float:
    out = subprocess.run([sys.executable, "-c", PUBLISHER, str(port), prefix, str(n),
                          str(spaces)], capture_output=True, text=True, check=True,
                         timeout=600)
    return float(out.stdout.split()[0])


def _say(name: str, value: float | str | None) -> None:
    """A figure as soon as it is measured (stderr, flushed)."""
    print(f"{name:>44}: {value}", file=sys.stderr, flush=True)


def _covered(procs: list[tuple[subprocess.Popen[bytes], int]], m: int, spaces: int) -> bool:
    """Every space held once: the instances' owned-spaces gauges add up to the site."""
    owned = [_metric(h, "thermowarden_group_owned_spaces") for _, h in procs]
    members = [_metric(h, "thermowarden_group_members") for _, h in procs]
    for p, _ in procs:
        if p.poll() is not None:
            raise RuntimeError(f"an instance exited with {p.returncode}")
    # (with leases, every instance holding a share: the shards are spread)
    return sum(owned) == spaces and all(x in (m, 0.0) for x in members) and (
        not _has_leases() or all(x > 0 for x in owned))


def _group(tmp: pathlib.Path, cluster: NatsCluster, m: int, spaces: int, idle_s: float,
           n: int | None) -> dict[str, Any]:
    """Start ``m`` instances on a site of ``spaces``; idle CPU, then (``n``) throughput."""
    prefix = f"twcl{uuid.uuid4().hex[:6]}"
    site = _site(tmp, prefix, cluster.nodes[0].url, spaces, cluster)
    procs: list[tuple[subprocess.Popen[bytes], int]] = []
    out: dict[str, Any] = {}
    try:
        for k in range(m):
            http = _free_port()
            log = open(tmp / f"svc-{prefix}-{k}.log", "wb")  # noqa: SIM115
            p = subprocess.Popen([sys.executable, "-m", "thermowarden.cli", "run", "--config",
                                  str(site), "--state-dir", str(tmp / f"state-{prefix}-{k}"),
                                  "--http-port", str(http), "--group", "bench",
                                  "--instance", f"i{k}", "--broker",
                                  cluster.urls(k % len(cluster.nodes))],
                                 stdout=subprocess.DEVNULL, stderr=log)
            procs.append((p, http))
        deadline = time.time() + 600
        while not _covered(procs, m, spaces):
            if time.time() > deadline:
                raise RuntimeError(f"the group of {m} never held every space once")
            time.sleep(0.2)
        # idle: the evaluations (every TICK_S), conditions (every 60 s), lease renewals or
        # heartbeats, no message arriving: CPU per space per minute and per instance
        time.sleep(2 * TICK_S)
        cpu0 = [_cpu_s(p.pid) for p, _ in procs]
        w0 = time.monotonic()
        time.sleep(idle_s)
        each = [_cpu_s(p.pid) - c for (p, _), c in zip(procs, cpu0, strict=True)]
        minutes = (time.monotonic() - w0) / 60
        used = sum(each)
        out["idle_cpu_per_space_min_us"] = 1e6 * used / spaces / minutes
        out["idle_cpu_per_instance_min_ms"] = 1e3 * used / m / minutes
        out["idle_load"] = float(pathlib.Path("/proc/loadavg").read_text().split()[0])
        # each instance: the spaces it evaluates (held and standby) and its idle CPU
        out["points"] = [(_metric(h, "thermowarden_group_evaluated_spaces")
                          if _has_leases() else spaces, 1e3 * c / minutes)
                         for (_, h), c in zip(procs, each, strict=True)]
        if n is None:
            return out
        base = sum(_metric(h, "thermowarden_messages_received_total") for _, h in procs)
        busy0 = sum(_cpu_s(p.pid) for p, _ in procs)
        t0 = _publish(cluster.nodes[0].mqtt, prefix, n, spaces)
        last, still_since = -1.0, time.time()
        while time.time() - still_since < 3.0 and time.time() - t0 < 600:
            got = sum(_metric(h, "thermowarden_messages_received_total") for _, h in procs)
            if got != last:
                last, still_since = got, time.time()
            time.sleep(0.05)
        received = last - base
        # with standbys every message reaches the holder and the standby of its shard:
        # the rate is of the site's messages (each counted once), the copies are a figure
        copies = max(1.0, round(received / n))
        out["rate"] = received / copies / (still_since - t0)
        out["received"] = received
        out["cpu_per_msg_us"] = 1e6 * (sum(_cpu_s(p.pid) for p, _ in procs) - busy0) / n
    finally:
        for p, _ in procs:
            p.terminate()
        for p, _ in procs:
            p.wait(60)
    return out


def _fit(points: list[tuple[float, float, float]]) -> dict[str, float | str | None]:
    """Each instance's idle CPU per minute as ``fixed + a * evaluated + b * site`` (least
    squares over every instance of every run): ``a`` is what a space it evaluates costs it,
    ``b`` what a space of the whole site costs it beyond that (0 when an instance's idle
    cost follows only its own share)."""
    import numpy as np

    if len(points) < 4:
        return {"cluster_idle_fit": None}
    site, evaluated, ms = (np.array(c) for c in zip(*points, strict=True))
    x = np.column_stack([np.ones_like(site), evaluated, site])
    coef, *_ = np.linalg.lstsq(x, ms, rcond=None)
    resid = ms - x @ coef
    return {"cluster_idle_fit_fixed_ms_per_instance_min": round(float(coef[0]), 1),
            "cluster_idle_fit_us_per_evaluated_space_min": round(1e3 * float(coef[1]), 1),
            "cluster_idle_fit_us_per_site_space_min": round(1e3 * float(coef[2]), 1),
            "cluster_idle_fit_rms_residual_ms": round(float(np.sqrt(np.mean(resid ** 2))),
                                                      1)}


def bench_cluster(quick: bool, sizes: tuple[int, int] | None = None,
                  instances: tuple[int, ...] = (1, 2, 3, 4),
                  pairs: int = 2) -> dict[str, float | str | None]:
    """The figures above, for each count of ``instances``, at the two site ``sizes``
    (small, large; default 150 and 600 with ``quick``, 1,000 and 4,000 without; both sizes
    one after the other for each count), then ``pairs`` same-share pairs."""
    program = nats_program()
    if program is None:
        return {"cluster_unmeasured": "nats-server not installed"}
    n = 20_000 if quick else 60_000
    idle_s = 20.0 if quick else 60.0
    if sizes is None:
        sizes = (SMALL, 4 * SMALL) if quick else (1000, 4000)
    small, large = sizes
    tmp = pathlib.Path(tempfile.mkdtemp(prefix="tw-cluster-"))
    cluster = NatsCluster(tmp / "nats", program).start()
    out: dict[str, float | str | None] = {}

    def put(name: str, value: float | str | None) -> None:
        out[name] = value
        _say(name, value)
    try:
        _warm(cluster)
        put("cluster_design", "shard leases" if _has_leases() else "membership records")
        bare = _bare(cluster.nodes[0].mqtt, f"twbare{uuid.uuid4().hex[:6]}", n)
        put("cluster_bare_paho_311_msgs_per_s", round(bare) if bare else None)
        per_instance: dict[tuple[int, int], float] = {}
        points: list[tuple[float, float, float]] = []
        for m in instances:
            for spaces in (small, large):
                g = _group(tmp, cluster, m, spaces, idle_s, n if spaces == large else None)
                per_instance[(spaces, m)] = g["idle_cpu_per_instance_min_ms"]
                points += [(float(spaces), ev, ms) for ev, ms in g["points"]]
                put(f"cluster_{spaces}sp_{m}_idle_cpu_per_space_min_us",
                    round(g["idle_cpu_per_space_min_us"]))
                put(f"cluster_{spaces}sp_{m}_idle_cpu_per_instance_min_ms",
                    round(g["idle_cpu_per_instance_min_ms"]))
                put(f"cluster_{spaces}sp_{m}_evaluated_spaces_per_instance",
                    "/".join(f"{ev:.0f}" for ev, _ in g["points"]))
                put(f"cluster_{spaces}sp_{m}_idle_cpu_each_instance_min_ms",
                    "/".join(f"{ms:.0f}" for _, ms in g["points"]))
                put(f"cluster_{spaces}sp_{m}_load", g["idle_load"])
                if "rate" in g:
                    put(f"cluster_{m}_msgs_per_s", round(g["rate"]))
                    put(f"cluster_{m}_received_per_sent", round(g["received"] / n, 3))
                    put(f"cluster_{m}_vs_bare_ratio",
                        round(g["rate"] / bare, 3) if bare else None)
                    put(f"cluster_{m}_cpu_per_msg_us", round(g["cpu_per_msg_us"], 1))
        if (small, 1) in per_instance and (large, 4) in per_instance:
            put("cluster_idle_site_growth_ratio",
                round(per_instance[(large, 4)] / per_instance[(small, 1)], 2))
        for name, value in _fit(points).items():
            put(name, value)
        for k in range(1, pairs + 1):
            half = _group(tmp, cluster, 2, large // 2, idle_s, None)
            whole = _group(tmp, cluster, 4, large, idle_s, None)
            for g, tag in ((half, f"{large // 2}sp_2"), (whole, f"{large}sp_4")):
                put(f"cluster_same_share_{k}_{tag}_idle_cpu_each_instance_min_ms",
                    "/".join(f"{ms:.0f}" for _, ms in g["points"]))
                put(f"cluster_same_share_{k}_{tag}_evaluated_spaces_per_instance",
                    "/".join(f"{ev:.0f}" for ev, _ in g["points"]))
                put(f"cluster_same_share_{k}_{tag}_load", g["idle_load"])
            put(f"cluster_same_share_{k}_idle_ratio",
                round(whole["idle_cpu_per_instance_min_ms"]
                      / half["idle_cpu_per_instance_min_ms"], 2))
    finally:
        cluster.stop()
        shutil.rmtree(tmp, ignore_errors=True)
    return out


def _interrupt(_sig: int, _frame: object) -> None:
    """SIGTERM ends the bench as Ctrl-C does: the brokers and instances it started stop."""
    raise KeyboardInterrupt


if __name__ == "__main__":
    import argparse
    import json
    import signal as _signal

    _signal.signal(_signal.SIGTERM, _interrupt)
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--quick", action="store_true", help="smaller sites, shorter windows")
    parser.add_argument("--sizes", type=int, nargs=2, metavar=("SMALL", "LARGE"),
                        help="the two site sizes in spaces (default 1000 4000; 150 600 quick)")
    parser.add_argument("--instances", type=int, nargs="*", default=[1, 2, 3, 4],
                        metavar="M", help="instance counts to measure (default 1 2 3 4; "
                                          "none: only the same-share pairs)")
    parser.add_argument("--pairs", type=int, default=2,
                        help="same-share pairs to measure (default 2)")
    args = parser.parse_args()
    sizes = (args.sizes[0], args.sizes[1]) if args.sizes else None
    print(json.dumps(bench_cluster(args.quick, sizes, tuple(args.instances),
                                   args.pairs)))
