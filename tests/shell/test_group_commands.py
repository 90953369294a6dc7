"""Commands in a group (in process, on the real engine thread's calls; no broker round trip
needed): every instance keeps every command of the site for ``COMMANDS_KEPT_S``, whatever
its shard, so one that stands by for the shard a moment after the command arrived (or
takes it over) can still apply it; only an instance whose lease for the advisory's shard
is valid at that moment answers, and its reply is fenced as records are."""

from __future__ import annotations

import json
import uuid

from tests.shell.conftest import free_port, write_site
from tests.shell.lease_parts import PG_DSN, drop_schema, need_postgres
from thermowarden.shell.bootstrap import bootstrap
from thermowarden.shell.inbox import Incoming
from thermowarden.shell.lease_keeper import Round
from thermowarden.shell.leases import Lease


def test_commands_are_kept_by_every_instance_and_answered_only_under_a_valid_lease(
        tmp_path):
    need_postgres()
    prefix = f"twg-{uuid.uuid4().hex[:8]}"
    schema = f"tw_{uuid.uuid4().hex[:10]}"
    site = write_site(tmp_path, prefix, free_port(), ["s00", "s01"], extra=f"""group:
  store: {{kind: postgres, dsn: "{PG_DSN}", table_schema: {schema}}}
  lease_ttl_s: 3.0
  shard_buckets: 1
""")
    running = bootstrap(str(site), state_dir=str(tmp_path / "state"), group="g",
                        instance="b")
    try:
        group = running.service.group
        assert group is not None
        (shard,) = group.shards
        # the holder a's retained advisory, as b receives it
        topic = f"{prefix}/spaces/s00/advisories/fast.hot"
        group.receive(topic, json.dumps({"id": "s00.fast.hot.1", "shard": shard,
                                         "epoch": 4, "rule": "fast.hot"}).encode())
        t = group.clock()
        # b neither holds the shard nor stands by for it yet (it is about to)
        group.rounds.put(Round(t, True, {}, frozenset(), {shard: "a"},
                               frozenset({"a", "b"})))
        group.update()
        assert group.evaluating == frozenset()
        cmd = Incoming(f"{prefix}/commands/facilities/acknowledge", json.dumps(
            {"advisory_id": "s00.fast.hot.1", "by": "Ana"}).encode(), 0.0, kind="command")
        assert group.route(cmd, "s00.fast.hot.1") == "keep"
        assert [(c.advisory_id, c.shard) for c in group.commands] == [
            ("s00.fast.hot.1", shard)]
        assert group.route(cmd, "s00.fast.hot.1") == "keep"  # the same message, kept once
        assert len(group.commands) == 1
        # b holds the shard under epoch 5 with a valid lease: it answers, and its reply
        # carries the shard and epoch it was sent under
        t = group.clock()
        group.rounds.put(Round(t, True, {shard: Lease(shard, "b", 5, t + 3.0)},
                               frozenset(), {shard: "b"}, frozenset({"a", "b"})))
        group.update()
        assert group.publishing == {shard: 5}
        other = Incoming(cmd.topic, cmd.payload, 1.0, kind="command")
        assert group.route(other, "s00.fast.hot.1") == "answer"
        fencing = group.fencing("s00.fast.hot.1")
        assert fencing == {"shard": shard, "epoch": 5}
        reply = json.dumps({"schema": "thermowarden.reply/1", "ok": True, **fencing}).encode()
        assert group.allows_bytes(reply)
        # its lease lapses by its own clock (cut off): no answer, and the reply the client
        # would send after the reconnect is dropped
        t = group.clock()
        group.round = Round(t, True, {shard: Lease(shard, "b", 5, t - 1.0)}, frozenset(),
                            {shard: "b"}, frozenset({"a", "b"}))
        late = Incoming(cmd.topic, cmd.payload, 2.0, kind="command")
        assert group.route(late, "s00.fast.hot.1") == "keep"
        assert not group.allows_bytes(reply)
        assert len(group.commands) == 3  # kept all the same, for whoever takes over
    finally:
        if running.service.group is not None:
            running.service.group.store.close()
        running.service.store.close()
        drop_schema(schema)
