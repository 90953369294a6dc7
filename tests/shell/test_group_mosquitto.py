"""A group of instances sharing a site through one Mosquitto broker: every space owned by
exactly one, an instance killed mid-advisory (its advisories continue on a survivor, not
raised again), one joining (spaces move to it without a gap), one command answered once."""

from __future__ import annotations

import json
import time
import uuid

import pytest

from tests.engine.conftest import validator
from tests.shell.conftest import (
    SLOW,
    Collector,
    ServiceProcess,
    clear_retained,
    wait_for,
    write_site,
)
from tests.shell.group_parts import Feeder, GroupWatch, wait_until

pytestmark = pytest.mark.broker

KEEPALIVE_S = 6
BOUND_S = 2 * KEEPALIVE_S


def test_group_covers_every_space_through_a_kill_and_a_join(tmp_path, system_broker_port):
    port = system_broker_port
    prefix = f"twg-{uuid.uuid4().hex[:8]}"
    spaces = [f"s{i:02d}" for i in range(12)]
    site = write_site(tmp_path, prefix, port, spaces,
                      extra_broker=f"  keepalive_s: {KEEPALIVE_S}\n",
                      evaluation="{tick_s: 1, flood_limit: 1000}")
    watch_c = Collector(port, [f"{prefix}/#"])
    watch = GroupWatch(watch_c, prefix, "g", spaces)
    temp = {"value": "25"}
    feeder = Feeder(watch_c, lambda: {f"{prefix}-in/{s}/ta": temp["value"] for s in spaces})
    feeder.start()
    procs = {n: ServiceProcess(site, tmp_path / n, "--group", "g", "--instance", n)
             for n in ("a", "b", "c")}
    try:
        for p in procs.values():
            p.start(wait_ready=False)
        for p in procs.values():
            wait_for(p.ready, SLOW, "an instance to be ready")
        wait_for(lambda: watch.covered_by({"a", "b", "c"}), SLOW,
                 "the three instances to own every space once")
        temp["value"] = "31"
        wait_for(lambda: len([e for e in watch_c.events(prefix) if e["event"] == "raised"
                              and e["advisory"]["rule"] == "fast.hot"]) == len(spaces), SLOW,
                 "every space's hot advisory")
        victim = watch.owner_of("s00")
        assert victim is not None
        adv_before = next(e["advisory"] for e in watch_c.events(prefix)
                          if e["event"] == "raised" and e["advisory"]["space"]["id"] == "s00"
                          and e["advisory"]["rule"] == "fast.hot")
        survivors = {"a", "b", "c"} - {victim}
        t_kill = time.monotonic()
        procs[victim].kill()
        t_covered = wait_until(lambda: watch.covered_by(survivors), SLOW)
        assert t_covered is not None, "the survivors never covered every space"
        assert t_covered - t_kill <= BOUND_S, (t_covered - t_kill, BOUND_S)
        print(f"mosquitto: every space owned again {t_covered - t_kill:.1f} s after the kill "
              f"(bound {BOUND_S} s)")
        # the broker's will names the group (set at connect, after the group's fields)
        wills = [json.loads(p) for t, p, _ in list(watch_c.messages)
                 if t == f"{prefix}/status/{victim}" and p and b'"offline"' in p]
        assert wills and wills[0]["group"] == "g" and "reason" not in wills[0], wills
        # the advisory of s00 continues on its new owner with its identity and history
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
        assert adv["id"] == adv_before["id"]
        assert adv["history"][0] == adv_before["history"][0]
        assert adv["history"][-1]["by"] == watch.owner_of("s00")
        # a command goes to every member; only the owner answers, once
        reply_topic = f"{prefix}/replies/t-{uuid.uuid4().hex[:6]}"
        replies = Collector(port, [reply_topic])
        replies.publish(f"{prefix}/commands/facilities/acknowledge", json.dumps(
            {"advisory_id": adv["id"], "by": "Ana", "reply_to": reply_topic}))
        wait_for(lambda: replies.json_on(reply_topic), SLOW, "the reply")
        # one more instance joins: spaces move to it, none is dropped
        procs["d"] = ServiceProcess(site, tmp_path / "d", "--group", "g", "--instance", "d")
        procs["d"].start()
        wait_for(lambda: watch.covered_by(survivors | {"d"}), SLOW,
                 "the new member to take its share")
        assert watch.owners()["d"]
        # the temperature falls: every advisory clears once, nothing was raised twice
        temp["value"] = "27"
        wait_for(lambda: len([e for e in watch_c.events(prefix) if e["event"] == "cleared"
                              and e["advisory"]["rule"] == "fast.hot"]) == len(spaces), SLOW,
                 "every hot advisory to clear")
        replies.sync(reply_topic)
        assert [r["ok"] for r in replies.json_on(reply_topic)] == [True]
        replies.close()
        events = watch_c.events(prefix)
        raised = [e["advisory"]["space"]["id"] for e in events
                  if e["event"] == "raised" and e["advisory"]["rule"] == "fast.hot"]
        assert sorted(raised) == spaces  # once each, through a kill and a join
        ids = {e["event_id"] for e in events if "event_id" in e}
        assert len(ids) == len([e for e in events if "event_id" in e])  # no id used twice
        # the survivors saw no space without an owner for longer than the bound
        assert not [e for e in events if e.get("kind") == "spaces_unowned"]
        for n in survivors | {"d"}:
            assert procs[n].metric("thermowarden_group_uncovered_seconds") <= BOUND_S
            assert procs[n].metric("thermowarden_group_members") == 3
    finally:
        feeder.stop()
        for p in procs.values():
            if p.proc is not None:
                p.stop()
        watch_c.close()
        clear_retained(port, prefix)


def test_unowned_spaces_and_an_idle_member_are_told_to_the_integrator(tmp_path,
                                                                      system_broker_port):
    """A member that claims every space in its published view but evaluates nothing (its
    records are written here by the test): the spaces the real instance wins have two
    claimants and so no owner; after the bound, the integrator is told, and about the idle
    member at once."""
    port = system_broker_port
    prefix = f"twg-{uuid.uuid4().hex[:8]}"
    spaces = [f"s{i:02d}" for i in range(12)]
    site = write_site(tmp_path, prefix, port, spaces,
                      extra_broker=f"  keepalive_s: {KEEPALIVE_S}\n",
                      evaluation="{tick_s: 1, flood_limit: 1000}")
    watch_c = Collector(port, [f"{prefix}/#"])
    fake = {"schema": "thermowarden.status/1", "instance": "zz-fake", "state": "online",
            "group": "g", "view": ["zz-fake"], "evaluated_at": 0.0}
    beats = Feeder(watch_c, lambda: {f"{prefix}/status/zz-fake": json.dumps(
        {**fake, "evaluated_at": time.time() - 600})}, every_s=1.0)
    beats.start()
    proc = ServiceProcess(site, tmp_path / "a", "--group", "g", "--instance", "a")
    try:
        proc.start()

        def notices(kind: str) -> list[dict]:
            return [e for e in watch_c.events(prefix) if e.get("kind") == kind]
        wait_for(lambda: notices("owner_idle"), SLOW, "the idle-member notice")
        (idle,) = notices("owner_idle")
        assert idle["members"] == ["zz-fake"] and idle["audience"] == "integrator"
        assert idle["bound_s"] == BOUND_S
        wait_for(lambda: notices("spaces_unowned"), SLOW, "the unowned-spaces notice")
        (gap,) = notices("spaces_unowned")
        assert 0 < gap["count"] < len(spaces) and set(gap["spaces"]) < set(spaces)
        assert "had no owner for more than 12 s" in gap["text"]
        assert proc.metric("thermowarden_group_uncovered_seconds") > BOUND_S
        assert proc.metric("thermowarden_group_owned_spaces") == 0
        for notice in (idle, gap):
            validator("event.v1.json").validate(notice)
    finally:
        beats.stop()
        proc.stop()
        watch_c.close()
        clear_retained(port, prefix)


def test_hostile_records_on_the_group_topics_stop_nothing(tmp_path, system_broker_port):
    """Anyone who may publish on the group's topics can send anything, and it is retained:
    deeply nested JSON, a 400-digit time, advisory messages without their state. The
    instance keeps running, owns every space and evaluates them."""
    port = system_broker_port
    prefix = f"twg-{uuid.uuid4().hex[:8]}"
    spaces = [f"s{i:02d}" for i in range(4)]
    site = write_site(tmp_path, prefix, port, spaces,
                      extra_broker=f"  keepalive_s: {KEEPALIVE_S}\n",
                      evaluation="{tick_s: 1, flood_limit: 1000}")
    watch_c = Collector(port, [f"{prefix}/#"])
    hostile = {
        f"{prefix}/status/deep": b"[" * 5000,
        f"{prefix}/status/huge": json.dumps({"group": "g", "state": "online", "beat": 1,
                                             "since": "x", "view": ["huge"]}).replace(
            '"beat": 1', '"beat": 1, "evaluated_at": 1' + "0" * 400).encode(),
        f"{prefix}/status/list": b"[]",
        f"{prefix}/spaces/s00/advisories/fast.hot": json.dumps({
            "id": "forged", "rule": "fast.hot", "space": {"id": "s00"},
            "handover": {}}).encode(),
        f"{prefix}/spaces/s01/advisories/fast.hot": json.dumps({
            "id": "forged2", "rule": "fast.hot", "space": {"id": ["s01"]},
            "handover": {"updated_at": 1}}).encode(),
        f"{prefix}/spaces/s02/advisories/fast.hot": b"{" * 3000,
    }
    for topic, payload in hostile.items():
        watch_c.client.publish(topic, payload, qos=1, retain=True).wait_for_publish(SLOW)
    proc = ServiceProcess(site, tmp_path / "a", "--group", "g", "--instance", "a")
    try:
        proc.start()
        wait_for(lambda: proc.metric("thermowarden_group_owned_spaces") == len(spaces), SLOW,
                 "the instance to own every space despite the hostile records")
        before = proc.metric("thermowarden_last_evaluation_timestamp_seconds")
        wait_for(lambda: proc.metric("thermowarden_last_evaluation_timestamp_seconds")
                 > before, SLOW, "evaluations to go on")
        assert proc.proc is not None and proc.proc.poll() is None
        assert proc.metric("thermowarden_group_errors_total") == 0
    finally:
        proc.stop()
        watch_c.close()
        clear_retained(port, prefix)


def test_the_owners_record_comes_back_after_the_broker_lost_it(tmp_path, own_broker):
    """A broker killed before it saved its retained messages comes back without them. The
    instance's status and advisories are sent again on the reconnect; its owners record
    must be too (before, it was sent only when the owned spaces changed, so an integrator
    saw no owner for a space that had one; the same loss happened to a record sent while a
    connection to a clustered broker's node was going)."""
    port = own_broker.port
    prefix = f"twgo-{uuid.uuid4().hex[:8]}"
    spaces = ["s00", "s01", "s02"]
    site = write_site(tmp_path, prefix, port, spaces,
                      extra_broker=f"  keepalive_s: {KEEPALIVE_S}\n")
    topic = f"{prefix}/group/g/owners/a"
    proc = ServiceProcess(site, tmp_path / "a", "--group", "g", "--instance", "a")
    watch_c: Collector | None = None
    try:
        proc.start()
        watch_c = Collector(port, [topic])
        wait_for(lambda: sorted(_owned(watch_c)) == spaces, SLOW, "the owners record")
        watch_c.close()
        own_broker.kill()  # nothing saved: the retained records are gone
        own_broker.start()
        watch_c = Collector(port, [f"{prefix}/#"])
        wait_for(lambda: proc.metric("thermowarden_group_owned_spaces") == len(spaces)
                 and any(t.startswith(f"{prefix}/status/") for t, _, _ in
                         list(watch_c.messages)), SLOW, "the instance to be back")
        wait_for(lambda: sorted(_owned(watch_c)) == spaces, SLOW,
                 "the owners record after the broker lost it")
    finally:
        proc.stop()
        if watch_c is not None:
            watch_c.close()


def _owned(c: Collector) -> list[str]:
    """The spaces of the latest owners record ``c`` received."""
    recs = [json.loads(p) for t, p, _ in list(c.messages) if "/group/g/owners/" in t and p]
    return recs[-1]["spaces"] if recs else []


def test_a_member_silent_with_an_online_record_is_marked_offline(tmp_path,
                                                                 system_broker_port):
    """A member's will can be lost (a clustered broker that cannot store it while its
    streams move drops it): its retained record says online for ever, so an integrator
    reading the status records sees a dead instance as live. Here the member "zz" is the
    test's client: it beats with a view, publishes an owners record, then goes silent with
    no will. The instance "a" (first in name order) marks it offline, naming itself, and
    empties its owners record. Then a record marking "a" itself offline: the retained
    record says online again (that it does so at a's next turn, not only with its next
    periodic retained beat, is shown in tests/shell/test_group_records.py)."""
    port = system_broker_port
    prefix = f"twgs-{uuid.uuid4().hex[:8]}"
    spaces = ["s00", "s01", "s02", "s03"]
    site = write_site(tmp_path, prefix, port, spaces,
                      extra_broker=f"  keepalive_s: {KEEPALIVE_S}\n")
    watch_c = Collector(port, [f"{prefix}/#"])
    since = "2026-12-03T08:00:00Z"
    beat = {"n": 0}

    def zz_record() -> dict[str, str]:
        beat["n"] += 1
        return {f"{prefix}/status/zz": json.dumps(
            {"schema": "thermowarden.status/1", "instance": "zz", "state": "online",
             "group": "g", "since": since, "beat": beat["n"], "view": ["a", "zz"],
             "evaluated_at": time.time()})}
    watch_c.publish(f"{prefix}/status/zz", zz_record()[f"{prefix}/status/zz"], retain=True)
    watch_c.publish(f"{prefix}/group/g/owners/zz", json.dumps(
        {"schema": "thermowarden.owners/1", "group": "g", "instance": "zz", "spaces": ["s01"]}),
        retain=True)
    beats = Feeder(watch_c, zz_record, every_s=1.0).start()
    proc = ServiceProcess(site, tmp_path / "a", "--group", "g", "--instance", "a")

    def latest(topic: str) -> dict | None:
        got = [p for t, p, _ in list(watch_c.messages) if t == topic]
        return json.loads(got[-1]) if got and got[-1] else None
    try:
        proc.start()
        wait_for(lambda: 0 < proc.metric("thermowarden_group_owned_spaces") < len(spaces),
                 SLOW, "a to share the spaces with zz")
        assert latest(f"{prefix}/status/zz")["state"] == "online"
        beats.stop()  # zz dies; no will comes
        wait_for(lambda: (latest(f"{prefix}/status/zz") or {}).get("state") == "offline",
                 SLOW, "zz's record to say offline")
        mark = latest(f"{prefix}/status/zz")
        assert mark["by"] == "a" and mark["reason"] == "silent" and mark["since"] == since
        assert mark["instance"] == "zz" and mark["group"] == "g"
        assert latest(f"{prefix}/group/g/owners/zz") is None
        wait_for(lambda: proc.metric("thermowarden_group_owned_spaces") == len(spaces), SLOW,
                 "a to own every space")
        # a record that says a is offline while it runs
        own = latest(f"{prefix}/status/a")
        assert own is not None and own["state"] == "online"
        watch_c.publish(f"{prefix}/status/a", json.dumps(
            {**own, "state": "offline", "by": "zz", "reason": "silent"}), retain=True)
        wait_for(lambda: (latest(f"{prefix}/status/a") or {}).get("state") == "online"
                 and latest(f"{prefix}/status/a")["beat"] > own["beat"], SLOW,
                 "a to say online again")
        # and the retained copy, which a consumer gets when it subscribes, says so too
        fresh = Collector(port, [f"{prefix}/status/a"])
        try:
            wait_for(lambda: any(p and json.loads(p)["state"] == "online"
                                 for t, p, _ in list(fresh.messages)), SLOW,
                     "the retained record to say online")
        finally:
            fresh.close()
    finally:
        beats.stop()
        proc.stop()
        watch_c.close()
        clear_retained(port, prefix)
