"""A group of instances on one Mosquitto broker with its shard leases in PostgreSQL: every
shard held by exactly one instance, the holder killed mid-advisory (its warm standby takes
the shard under a new epoch and continues the advisory), one frozen past its lease (it
publishes nothing when it wakes), one joining (it gets its share), a command answered once.
Each test checks the invariants a consumer relies on (tests/shell/group_parts.py)."""

from __future__ import annotations

import json
import os
import signal
import threading
import time
import uuid

import pytest

from tests.engine.conftest import validator
from tests.shell.conftest import (
    SLOW,
    Collector,
    ServiceProcess,
    clear_retained,
    free_port,
    wait_for,
    write_site,
)
from tests.shell.group_parts import Feeder, check_invariants, pg_holders, wait_until
from tests.shell.lease_parts import PG_DSN, drop_schema, need_postgres
from thermowarden.core.shards import bucket_name
from thermowarden.shell.leases.postgres import PostgresLeaseStore

pytestmark = pytest.mark.broker

TTL_S = 3.0


def group_site(tmp_path, prefix, port, spaces, schema, *, buckets=6, rebalance_s=2.0):
    return write_site(tmp_path, prefix, port, spaces, evaluation="{tick_s: 1, flood_limit: 1000}",
                      extra=f"""group:
  store: {{kind: postgres, dsn: "{PG_DSN}", table_schema: {schema}}}
  lease_ttl_s: {TTL_S}
  shard_buckets: {buckets}
  rebalance_after_s: {rebalance_s}
  standby_warm_s: {rebalance_s}
""")


def covered(schema: str, names: set[str], shards: int) -> bool:
    holders = pg_holders(schema)
    return len(holders) == shards and {h for h, _ in holders.values()} <= names


def test_holder_killed_its_standby_continues_and_a_newcomer_gets_a_share(
        tmp_path, system_broker_port):
    need_postgres()
    port = system_broker_port
    prefix = f"twg-{uuid.uuid4().hex[:8]}"
    schema = f"tw_{uuid.uuid4().hex[:10]}"
    spaces = [f"s{i:02d}" for i in range(12)]
    site = group_site(tmp_path, prefix, port, spaces, schema, buckets=16)
    n_shards = len({bucket_name(s, 16) for s in spaces})
    assert n_shards >= 7  # three instances hold two or three each, a fourth gets a share
    watch_c = Collector(port, [f"{prefix}/#"])
    temp = {"value": "25"}
    feeder = Feeder(watch_c, lambda: {f"{prefix}-in/{s}/ta": temp["value"] for s in spaces})
    feeder.start()
    tag = uuid.uuid4().hex[:4]  # client ids are instance names: unique on a shared broker
    procs = {n: ServiceProcess(site, tmp_path / n, "--group", "g", "--instance", n + tag)
             for n in ("a", "b", "c")}
    try:
        for p in procs.values():
            p.start(wait_ready=False)
        for p in procs.values():
            wait_for(p.ready, SLOW, "an instance to be ready")
        names = {n: n + tag for n in "abcd"}
        wait_for(lambda: covered(schema, {names[n] for n in "abc"}, n_shards), SLOW,
                 "every shard to have a holder")
        temp["value"] = "31"
        wait_for(lambda: len([e for e in watch_c.events(prefix) if e["event"] == "raised"
                              and e["advisory"]["rule"] == "fast.hot"]) == len(spaces), SLOW,
                 "every space's hot advisory")
        raised = next(e for e in watch_c.events(prefix) if e["event"] == "raised"
                      and e["advisory"]["space"]["id"] == "s00"
                      and e["advisory"]["rule"] == "fast.hot")
        shard = raised["shard"]
        victim, epoch = pg_holders(schema)[shard]
        assert raised["epoch"] == epoch
        assert raised["event_id"].startswith(f"{raised['advisory']['site']}.{shard}.{epoch}.")
        survivors = {names[n] for n in "abc"} - {victim}
        t_kill, wall_kill = time.monotonic(), time.time()
        procs[victim[0]].kill()
        t_taken = wait_until(lambda: pg_holders(schema).get(shard, ("", 0))[0] in survivors,
                             SLOW)
        assert t_taken is not None
        # the bound: the lease runs out (TTL) and the standby's next round takes it
        print(f"postgres leases: shard {shard} taken {t_taken - t_kill:.1f} s after the "
              f"kill (TTL {TTL_S} s)")
        assert t_taken - t_kill <= TTL_S + TTL_S / 3 + 2.0
        new_holder, new_epoch = pg_holders(schema)[shard]
        assert new_epoch > epoch
        topic = f"{prefix}/spaces/s00/advisories/fast.hot"

        def moved() -> dict | None:
            for t, p, _ in reversed(list(watch_c.messages)):
                if t == topic and p:
                    d = json.loads(p)
                    if d["history"][-1]["event"] == "moved":
                        return d
            return None
        wait_for(lambda: moved() is not None, SLOW, "the moved advisory of s00")
        adv = moved()
        assert adv is not None
        assert adv["id"] == raised["advisory"]["id"] and adv["epoch"] == new_epoch
        assert adv["history"][0] == raised["advisory"]["history"][0]
        assert adv["history"][-1]["by"] == new_holder
        # the conditions of s00 come from the standby, whose 60-minute window began when it
        # started standing by, before the kill (not at the takeover)
        wait_for(lambda: any(json.loads(p).get("epoch") == new_epoch for t, p, _ in
                             list(watch_c.messages)
                             if t == f"{prefix}/spaces/s00/conditions" and p
                             and not p.startswith(b"sync-")), SLOW, "s00's new conditions")
        cond = [json.loads(p) for t, p, _ in list(watch_c.messages)
                if t == f"{prefix}/spaces/s00/conditions" and p and not p.startswith(b"sync-")]
        window = cond[-1].get("windows", {}).get("wbgt_60min")
        if window is not None:  # the group started less than an hour ago
            import datetime as dt
            since = dt.datetime.fromisoformat(window["rebuilding_since"].replace("Z", "+00:00"))
            assert since.timestamp() <= wall_kill
        validator("conditions.v1.json").validate(cond[-1])
        # a command goes to every instance; only the holder of its shard answers, once
        reply_topic = f"{prefix}/replies/t-{uuid.uuid4().hex[:6]}"
        replies = Collector(port, [reply_topic])
        replies.publish(f"{prefix}/commands/facilities/acknowledge", json.dumps(
            {"advisory_id": adv["id"], "by": "Ana", "reply_to": reply_topic}))
        wait_for(lambda: replies.json_on(reply_topic), SLOW, "the reply")
        # one more instance joins: it gets a share once the membership has settled
        procs["d"] = ServiceProcess(site, tmp_path / "d", "--group", "g", "--instance",
                                    names["d"])
        procs["d"].start()
        wait_for(lambda: names["d"] in {h for h, _ in pg_holders(schema).values()}, SLOW,
                 "the newcomer to take a shard")
        wait_for(lambda: covered(schema, survivors | {names["d"]}, n_shards), SLOW,
                 "every shard held after the join")
        # the temperature falls: every advisory clears once, nothing was raised twice
        temp["value"] = "27"
        wait_for(lambda: len([e for e in watch_c.events(prefix) if e["event"] == "cleared"
                              and e["advisory"]["rule"] == "fast.hot"]) == len(spaces), SLOW,
                 "every hot advisory to clear")
        replies.sync(reply_topic)
        assert [r["ok"] for r in replies.json_on(reply_topic)] == [True]
        replies.close()
        events = watch_c.events(prefix)
        raised_spaces = [e["advisory"]["space"]["id"] for e in events
                         if e["event"] == "raised" and e["advisory"]["rule"] == "fast.hot"]
        assert sorted(raised_spaces) == spaces  # once each, through a kill and a join
        acked = [e for e in events if e["event"] == "acknowledged"]
        assert [e["advisory"]["id"] for e in acked] == [adv["id"]]
        watch_c.sync(f"{prefix}/sync")
        check_invariants(watch_c, prefix)
        assert not [e for e in events if e.get("kind") == "spaces_unowned"]
        for e in events[:50]:
            validator("event.v1.json").validate(e)
    finally:
        feeder.stop()
        for p in procs.values():
            if p.proc is not None:
                p.stop()
        watch_c.close()
        clear_retained(port, prefix)
        drop_schema(schema)


def test_a_frozen_holder_publishes_nothing_when_it_wakes(tmp_path, system_broker_port):
    """The holder is stopped (SIGSTOP) for twice the lease TTL while its advisory escalates
    and someone acknowledges it; its standby takes over. When it resumes it must not
    publish a thing under its old epoch; the acknowledgement given during the pause is
    kept."""
    need_postgres()
    port = system_broker_port
    prefix = f"twg-{uuid.uuid4().hex[:8]}"
    schema = f"tw_{uuid.uuid4().hex[:10]}"
    spaces = ["s00", "s01"]
    site = group_site(tmp_path, prefix, port, spaces, schema, buckets=1, rebalance_s=3600)
    watch_c = Collector(port, [f"{prefix}/#"])
    temp = {"value": "31"}
    feeder = Feeder(watch_c, lambda: {f"{prefix}-in/{s}/ta": temp["value"] for s in spaces})
    feeder.start()
    tag = uuid.uuid4().hex[:4]  # client ids are instance names: unique on a shared broker
    procs = {n: ServiceProcess(site, tmp_path / n, "--group", "g", "--instance", n + tag)
             for n in ("a", "b")}
    try:
        for p in procs.values():
            p.start(wait_ready=False)
        wait_for(lambda: all(p.ready() for p in procs.values()), SLOW, "both ready")
        wait_for(lambda: len(pg_holders(schema)) == 1, SLOW, "the one shard to be held")
        ((shard, (holder, epoch)),) = pg_holders(schema).items()
        wait_for(lambda: [e for e in watch_c.events(prefix) if e["event"] == "raised"
                          and e["advisory"]["space"]["id"] == "s00"
                          and e["advisory"]["rule"] == "fast.hot"], SLOW, "the advisory")
        adv = next(e["advisory"] for e in watch_c.events(prefix) if e["event"] == "raised"
                   and e["advisory"]["space"]["id"] == "s00"
                   and e["advisory"]["rule"] == "fast.hot")
        frozen = procs[holder[0]]
        assert frozen.proc is not None
        os.kill(frozen.proc.pid, signal.SIGSTOP)
        t_stop = time.monotonic()
        try:
            # during the pause: acknowledged (the standby keeps it until it holds the
            # shard, then applies it; the frozen holder cannot)
            watch_c.publish(f"{prefix}/commands/facilities/acknowledge", json.dumps(
                {"advisory_id": adv["id"], "by": "Ana"}))
            wait_for(lambda: pg_holders(schema).get(shard, ("", 0))[0] not in ("", holder),
                     SLOW, "the standby to take the shard")
            _, new_epoch = pg_holders(schema)[shard]
            assert new_epoch > epoch
            wait_for(lambda: any(e["event"] == "acknowledged" and e["epoch"] == new_epoch
                                 for e in watch_c.events(prefix)), SLOW,
                     "the acknowledgement, applied by the new holder")
            while time.monotonic() - t_stop < 2 * TTL_S:
                time.sleep(0.1)
        finally:
            os.kill(frozen.proc.pid, signal.SIGCONT)
        # let the woken instance run for a while: it must publish nothing of its old epoch
        time_woken = time.monotonic()
        wait_for(lambda: frozen.metric("thermowarden_group_fenced_total") >= 0
                 and time.monotonic() - time_woken > 2 * TTL_S, SLOW, "a while after waking")
        watch_c.sync(f"{prefix}/sync")
        newest = check_invariants(watch_c, prefix)
        assert newest[shard] == new_epoch
        with watch_c.lock:
            msgs = list(watch_c.messages)
        t_new = next(i for i, (t, p, _) in enumerate(msgs)
                     if "/events/" in t and p and not p.startswith(b"sync-")
                     and json.loads(p).get("epoch") == new_epoch)
        late_old = [t for t, p, _ in msgs[t_new:] if p and not p.startswith(b"sync-")
                    and (t.endswith("/conditions") or "/advisories/" in t or "/events/" in t)
                    and json.loads(p).get("epoch") == epoch]
        assert late_old == [], late_old[:5]
        record = json.loads(next(p for t, p, _ in reversed(msgs)
                                 if t == f"{prefix}/spaces/s00/advisories/fast.hot" and p))
        assert record["acknowledged"] and record["acknowledged"]["by"] == "Ana"
        assert record["id"] == adv["id"]
    finally:
        feeder.stop()
        for p in procs.values():
            if p.proc is not None:
                p.stop()
        watch_c.close()
        clear_retained(port, prefix)
        drop_schema(schema)


def test_without_its_lease_store_an_instance_publishes_nothing(tmp_path, system_broker_port):
    """The store cannot be reached (nobody listens on its port): the instance runs, takes
    no shard and publishes nothing for the site's spaces, however hot they are; hostile
    retained records on the site's advisory topics stop nothing either."""
    port = system_broker_port
    prefix = f"twg-{uuid.uuid4().hex[:8]}"
    spaces = ["s00", "s01"]
    closed = free_port()
    site = write_site(tmp_path, prefix, port, spaces, evaluation="{tick_s: 1}",
                      extra=f"""group:
  store: {{kind: postgres, dsn: "host=127.0.0.1 port={closed} dbname=test user=postgres"}}
  lease_ttl_s: {TTL_S}
""")
    watch_c = Collector(port, [f"{prefix}/#"])
    for topic, payload in {f"{prefix}/spaces/s00/advisories/fast.hot": b"[" * 5000,
                           f"{prefix}/spaces/s01/advisories/fast.hot": json.dumps(
                               {"id": "forged", "shard": "x", "epoch": "9"}).encode()}.items():
        watch_c.client.publish(topic, payload, qos=1, retain=True).wait_for_publish(SLOW)
    feeder = Feeder(watch_c, lambda: {f"{prefix}-in/{s}/ta": "35" for s in spaces})
    feeder.start()
    proc = ServiceProcess(site, tmp_path / "a", "--group", "g", "--instance",
                          f"lone{uuid.uuid4().hex[:4]}")
    try:
        proc.start(wait_ready=False)
        def evaluations() -> float:
            try:
                return proc.metric("thermowarden_evaluation_seconds_count")
            except OSError:
                return 0.0  # its HTTP endpoint is not up yet
        # the hot readings arrive every 0.5 s and the rule raises at once: five evaluations
        # (one a second) are five chances to publish
        wait_for(lambda: evaluations() > 5, SLOW, "a few evaluations")
        watch_c.sync(f"{prefix}/sync")
        assert proc.proc is not None and proc.proc.poll() is None
        assert proc.metric("thermowarden_group_owned_spaces") == 0
        assert watch_c.events(prefix) == []
        assert not [t for t, p, _ in list(watch_c.messages) if t.endswith("/conditions")]
        assert proc.metric("thermowarden_group_errors_total") == 0
    finally:
        feeder.stop()
        proc.stop()
        watch_c.close()
        clear_retained(port, prefix)


def test_a_shard_without_a_holder_is_told_to_the_integrator(tmp_path, system_broker_port):
    """A second instance is present in the store (its presence written here by the test)
    but never takes a shard: the real instance takes its fair share, one of the two
    shards, and never more; after twice the TTL the integrator is told which shard and
    spaces nobody evaluates."""
    need_postgres()
    port = system_broker_port
    prefix = f"twg-{uuid.uuid4().hex[:8]}"
    schema = f"tw_{uuid.uuid4().hex[:10]}"
    spaces = ["s00", "s01"]
    site = write_site(tmp_path, prefix, port, spaces, evaluation="{tick_s: 1}",
                      extra=f"""group:
  store: {{kind: postgres, dsn: "{PG_DSN}", table_schema: {schema}}}
  lease_ttl_s: {TTL_S}
""").read_text().replace("  - id: s00\n", "  - id: s00\n    area: east\n").replace(
        "  - id: s01\n", "  - id: s01\n    area: west\n")
    (tmp_path / "site.yaml").write_text(site)
    ghost = PostgresLeaseStore(PG_DSN, "g", TTL_S, schema=schema)
    ghost.open()
    stop = threading.Event()

    def haunt() -> None:
        while not stop.is_set():
            ghost.announce("ghost")
            stop.wait(0.5)
    thread = threading.Thread(target=haunt, daemon=True)
    thread.start()
    watch_c = Collector(port, [f"{prefix}/#"])
    proc = ServiceProcess(tmp_path / "site.yaml", tmp_path / "a", "--group", "g",
                          "--instance", f"real{uuid.uuid4().hex[:4]}")
    try:
        proc.start()

        def notices() -> list[dict]:
            return [e for e in watch_c.events(prefix) if e.get("kind") == "spaces_unowned"]
        wait_for(notices, SLOW, "the notice of a shard without a holder")
        (notice,) = notices()
        validator("event.v1.json").validate(notice)
        held = pg_holders(schema)
        assert len(held) == 1  # its share of two live instances: one shard, never both
        free = ({"east", "west"} - set(held)).pop()
        assert notice["shards"] == [free] and notice["spaces"] == [
            "s00" if free == "east" else "s01"]
        assert notice["bound_s"] == 2 * TTL_S and notice["audience"] == "integrator"
        assert proc.metric("thermowarden_group_uncovered_seconds") > 2 * TTL_S
        assert proc.metric("thermowarden_group_members") == 2
    finally:
        stop.set()
        thread.join(5)
        ghost.close()
        proc.stop()
        watch_c.close()
        clear_retained(port, prefix)
        drop_schema(schema)
