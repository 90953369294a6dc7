"""Three instances of a group on a three-node nats-server cluster (JetStream with the shard
leases in a key-value bucket of three replicas, MQTT 3.1.1): during a rising WBGT the
instance that holds the hot space's shard is killed, and so is the broker node of another
instance. The heat-stress alert is raised once; it escalates on the standby that took the
shard, under a new epoch, with the same advisory id and its history, within the bound; no
shard went without a holder for longer than the bound, and what a consumer received keeps
the group's invariants."""

from __future__ import annotations

import json
import textwrap
import time
import uuid

import pytest

from tests.shell.conftest import SLOW, Collector, ServiceProcess, wait_for
from tests.shell.group_parts import Feeder, check_invariants, wait_until
from tests.shell.lease_parts import drop_bucket
from tests.shell.nats_cluster import NatsCluster, nats_program
from thermowarden.shell.leases import LeaseStoreError
from thermowarden.shell.leases.nats_kv import NatsLeaseStore

pytestmark = pytest.mark.broker

KEEPALIVE_S = 8
TTL_S = 15.0
"""The lease TTL. A node's death makes the bucket's stream elect a new leader, and the store
does not answer meanwhile (5-11 s measured here): the TTL must outlast that, or every
holder fences itself until the store answers again."""
BOUND_S = 2 * TTL_S
TICK_S = 1.0

# Spot WBGT indoors (ISO 7243:2017, no solar load): 0.7 natural wet-bulb + 0.3 globe.
# Reference values at 297 W (work class moderate, ISO 8996; ISO 7243:2017 Annex A, as the
# engine computes them): about 25.0 °C unacclimatised (action) and 28.3 °C acclimatised
# (limit); from memory of the NIOSH RAL/REL formulas, which the engine's own tests check.
COOL = {"nwb": "18", "globe": "26"}   # WBGT 20.4 °C: nothing
ABOVE_ACTION = {"nwb": "24", "globe": "32"}  # 26.4 °C: high
ABOVE_LIMIT = {"nwb": "28", "globe": "38"}   # 31.0 °C: urgent


def write_cluster_site(tmp, prefix: str, url: str, spaces: list[str], servers: list[str],
                       bucket: str):
    text = textwrap.dedent(f"""\
        site: {{id: c{uuid.uuid4().hex[:6]}, timezone: UTC}}
        broker:
          url: {url.split(",")[0]}
          protocol: "3.1.1"
          subscribe_qos: 0
          keepalive_s: {KEEPALIVE_S}
        output: {{prefix: {prefix}, rule_topic_separator: "/"}}
        evaluation: {{tick_s: {TICK_S}, flood_limit: 1000}}
        defaults:
          occupancy: {{always: true}}
          rule_packs: [heat_stress]
          people: {{work_class: moderate, clo: 0.6, acclimatised: false}}
        templates:
          - {{topic: "{prefix}-in/{{space}}/nwb", quantity: natural_wet_bulb, interval_s: 60}}
          - {{topic: "{prefix}-in/{{space}}/globe", quantity: globe_temperature, interval_s: 60}}
        group:
          store: {{kind: nats, servers: [{", ".join(servers)}], bucket: {bucket},
                  stream_replicas: 3}}
          lease_ttl_s: {TTL_S}
          rebalance_after_s: 3600
        spaces:
        """) + "".join(f"  - {{id: {s}, hot_work: true, area: {s}}}\n" for s in spaces)
    p = tmp / "site.yaml"
    p.write_text(text)
    return p


def test_a_heat_alert_survives_an_instance_and_a_broker_node(tmp_path):
    program = nats_program()
    if program is None:
        pytest.skip("needs the `nats-server` program (Debian package `nats-server`); not "
                    "found on PATH")
    cluster = NatsCluster(tmp_path / "nats", program).start()
    prefix = f"twc-{uuid.uuid4().hex[:8]}"
    spaces = [f"s{i:02d}" for i in range(6)]
    servers = [f"nats://127.0.0.1:{n.client}" for n in cluster.nodes]
    bucket = f"tw-{uuid.uuid4().hex[:8]}"
    site = write_cluster_site(tmp_path, prefix, cluster.urls(0), spaces, servers, bucket)
    names = ["a", "b", "c"]
    procs: dict[str, ServiceProcess] = {}
    watch_c: Collector | None = None
    feeder: Feeder | None = None
    # the test reads the leases through node 1 (n1), which stays up
    leases = NatsLeaseStore(servers, bucket, TTL_S, stream_replicas=3)

    def holders() -> dict[str, tuple[str, int]]:
        try:
            return {s: (x.holder, x.epoch) for s, x in leases.read(spaces).items()}
        except LeaseStoreError:
            return {}

    def covered_by(live: set[str]) -> bool:
        h = holders()
        return set(h) == set(spaces) and {x for x, _ in h.values()} <= live

    try:
        # the test's own clients use node 1 (n1), which stays up
        watch_c = Collector(cluster.nodes[0].mqtt, [f"{prefix}/#"])
        values = {s: dict(COOL) for s in spaces}
        feeder = Feeder(watch_c, lambda: {f"{prefix}-in/{s}/{q}": v for s in spaces
                                          for q, v in values[s].items()})
        feeder.start()
        for k, n in enumerate(names):  # each instance starts on its own node
            procs[n] = ServiceProcess(site, tmp_path / n, "--group", "g", "--instance", n,
                                      "--broker", cluster.urls(k))
            procs[n].start(wait_ready=False)
        for p in procs.values():
            wait_for(p.ready, SLOW, "an instance to be ready")
        def opened() -> bool:
            try:
                leases.open()  # the bucket exists once an instance created it
                return True
            except LeaseStoreError:
                return False
        wait_for(opened, SLOW, "the lease bucket")
        wait_for(lambda: covered_by(set(names)), SLOW,
                 "the three instances to hold every shard (a space each)")
        wait_for(lambda: "a" in {x for x, _ in holders().values()}, SLOW, "a to hold one")
        # the hot space: one whose shard instance a (on node n1) holds
        target, (_, epoch) = next((s, x) for s, x in sorted(holders().items())
                                  if x[0] == "a")
        values[target] = dict(ABOVE_ACTION)

        def heat_events() -> list[dict]:
            """The alert's events as a consumer takes them: QoS 1 is at least once, so a
            copy of an event_id already seen is dropped (it must be the same event)."""
            seen: dict[str, dict] = {}
            for e in watch_c.events(prefix):
                if "advisory" in e and e["advisory"]["space"]["id"] == target \
                        and e["advisory"]["rule"] == "heat_stress.wbgt":
                    first = seen.setdefault(e["event_id"], e)
                    assert (first["event"], first["advisory"]["priority"]) == (
                        e["event"], e["advisory"]["priority"])
            return list(seen.values())
        wait_for(lambda: any(e["event"] == "raised" for e in heat_events()), SLOW,
                 "the heat-stress alert")
        raised = next(e for e in heat_events() if e["event"] == "raised")
        assert raised["advisory"]["priority"] == "high"
        # kill the owner and another member's broker node; the WBGT keeps rising
        t_kill = time.monotonic()
        procs["a"].kill()
        cluster.nodes[1].kill()  # b's node: b moves to another node
        values[target] = dict(ABOVE_LIMIT)
        t_covered = wait_until(lambda: covered_by({"b", "c"}), 3 * SLOW)
        assert t_covered is not None, \
            f"the survivors never covered every shard; holders: {holders()}"
        assert t_covered - t_kill <= BOUND_S, (t_covered - t_kill, BOUND_S)
        t_escalated = wait_until(lambda: any(e["event"] == "escalated"
                                             for e in heat_events()), 3 * SLOW)
        assert t_escalated is not None, "no escalation on a survivor"
        # within the bound and the survivor's first evaluations (readings every 0.5 s)
        assert t_escalated - t_kill <= BOUND_S + 2 * TICK_S, (t_escalated - t_kill)
        print(f"cluster: every shard held again {t_covered - t_kill:.1f} s after the kills, "
              f"escalated after {t_escalated - t_kill:.1f} s (bound {BOUND_S} s)")
        escalated = next(e for e in heat_events() if e["event"] == "escalated")
        adv = escalated["advisory"]
        assert adv["id"] == raised["advisory"]["id"]
        assert escalated["epoch"] == holders()[target][1] > epoch == raised["epoch"]
        assert adv["priority"] == "urgent"
        history = [h["event"] for h in adv["history"]]
        assert history[0] == "raised" and "moved" in history and history[-1] == "escalated"
        moved_by = next(h["by"] for h in adv["history"] if h["event"] == "moved")
        assert moved_by in ("b", "c")
        # the retained advisory (on its "/" topic: nats refuses "." in MQTT topics)
        topic = f"{prefix}/spaces/{target}/advisories/heat_stress/wbgt"
        wait_for(lambda: any(t == topic and p and json.loads(p)["priority"] == "urgent"
                             for t, p, _ in list(watch_c.messages)), SLOW,
                 "the retained urgent advisory")
        # raised once, escalated once (distinct event ids); heat-stress cautions go along
        watch_c.sync(f"{prefix}/_sync")
        kinds = [e["event"] for e in heat_events()]
        assert kinds.count("raised") == 1 and kinds.count("escalated") == 1, kinds
        assert adv["cautions"]
        # no shard without a holder for longer than the bound, as the survivors saw it
        assert not [e for e in watch_c.events(prefix) if e.get("kind") == "spaces_unowned"]
        check_invariants(watch_c, prefix)
        for n in ("b", "c"):
            assert procs[n].metric("thermowarden_group_uncovered_seconds") <= BOUND_S
    finally:
        if feeder is not None:
            feeder.stop()
        for p in procs.values():
            if p.proc is not None:
                p.stop()
        if watch_c is not None:
            watch_c.close()
        leases.close()
        drop_bucket(servers[:1], bucket)
        cluster.stop()
