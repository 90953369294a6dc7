"""Fencing fields: every event, retained advisory and retained conditions record carries the
space's shard and the lease epoch it was published under, and the event id names both, so a
new holder's events never reuse an id of the old one's."""

from __future__ import annotations

import json

from tests.engine.conftest import SITE, lab_engine, validate_effects
from tests.engine.test_engine import run
from thermowarden.core.shards import bucket_name
from thermowarden.effects import Persist, Publish

AREAS = SITE.replace("  - id: room-1\n", "  - id: room-1\n    area: furnace-bay\n    building: "
                     "works\n").replace("  - id: room-2\n", "  - id: room-2\n    building: works\n")


def payloads(effects, part):
    return [e for e in effects if isinstance(e, Publish) and part in e.topic and e.payload]


def test_every_record_carries_shard_and_epoch(tmp_path):
    engine = lab_engine(tmp_path, site_text=AREAS)
    assert engine.publication.shards == ["furnace-bay", "works"]
    engine.publication.epochs.update({"furnace-bay": 7, "works": 3})
    effects = run(engine, 0, 200, **{"room-1": 40, "room-2": 25})
    events = payloads(effects, "/events/")
    advisories = payloads(effects, "/advisories/")
    conditions = payloads(effects, "/conditions")
    assert events and advisories and conditions
    for e in events:
        p = e.payload
        assert (p["shard"], p["epoch"]) == ("furnace-bay", 7)
        assert (p["advisory"]["shard"], p["advisory"]["epoch"]) == ("furnace-bay", 7)
        assert p["event_id"].startswith(f"lab.furnace-bay.7.{p['advisory']['id']}.")
    for e in advisories:
        assert (e.payload["shard"], e.payload["epoch"]) == ("furnace-bay", 7)
    by_space = {e.payload["space"]["id"]: e.payload for e in conditions}
    assert (by_space["room-2"]["shard"], by_space["room-2"]["epoch"]) == ("works", 3)
    validate_effects(effects)  # the schemas require both fields


def test_undeclared_spaces_go_to_hash_buckets_and_epoch_zero_outside_a_group(tmp_path):
    engine = lab_engine(tmp_path)
    assert engine.publication.shards == [bucket_name("room-1", 16), bucket_name("room-2", 16)]
    effects = run(engine, 0, 200, **{"room-1": 40})
    first = payloads(effects, "/events/")[0].payload
    shard = bucket_name("room-1", 16)
    assert first["event_id"] == f"lab.{shard}.0.{first['advisory']['id']}.1"


def test_a_new_epoch_never_reuses_an_id(tmp_path):
    """The same advisory continued under a new epoch: the count goes on and the ids differ
    from every id of the old epoch, whatever the count."""
    engine = lab_engine(tmp_path, site_text=AREAS)
    engine.publication.epochs["furnace-bay"] = 1
    first = run(engine, 0, 700, **{"room-1": 36})
    engine.publication.epochs["furnace-bay"] = 2
    later = run(engine, 710, 1500, **{"room-1": 38})
    old = {e.payload["event_id"] for e in payloads(first, "/events/")}
    new = [e.payload["event_id"] for e in payloads(later, "/events/")]
    assert new and not old & set(new)
    assert all(".furnace-bay.2." in i for i in new)
    bodies: dict[str, str] = {}
    for e in payloads(first + later, "/events/"):
        body = json.dumps(e.payload, sort_keys=True)
        assert bodies.setdefault(e.payload["event_id"], body) == body


def _records(effects, part="/advisories/"):
    return [e.payload for e in effects if isinstance(e, Publish) and part in e.topic
            and e.payload]


def test_every_record_of_an_advisory_has_the_next_seq_and_its_event_the_same(tmp_path):
    """seq grows by one with every retained record of an advisory (refreshes too); the
    event of a change carries its record's (epoch, seq)."""
    engine = lab_engine(tmp_path, site_text=AREAS)
    engine.publication.epochs.update({"furnace-bay": 4, "works": 1})
    effects = run(engine, 0, 1500, **{"room-1": 36}) + run(engine, 1510, 2500,
                                                          **{"room-1": 38})
    by_id: dict[str, list[int]] = {}
    for p in _records(effects):
        by_id.setdefault(p["id"], []).append(p["seq"])
    assert by_id and all(seqs == list(range(1, len(seqs) + 1)) for seqs in by_id.values())
    assert max(len(s) for s in by_id.values()) >= 3
    recs = {(p["id"], p["seq"]): p for p in _records(effects)}
    for e in _records(effects, "/events/"):
        a = e["advisory"]
        assert e["seq"] == a["seq"] and (a["id"], a["seq"]) in recs
        assert recs[(a["id"], a["seq"])]["history"] == a["history"]
    validate_effects(effects)


def test_seq_goes_on_after_a_restart_from_the_store(tmp_path):
    """A restarted instance (outside a group the epoch stays 0) continues each advisory's
    seq from its stored row, which every record updates (refreshes included)."""
    engine = lab_engine(tmp_path, site_text=AREAS)
    effects = run(engine, 0, 1500, **{"room-1": 36})
    rows = {e.key: e.record for e in effects if isinstance(e, Persist)
            and e.kind == "advisory" and e.record is not None}
    last: dict[str, int] = {}
    for p in _records(effects):
        last[p["id"]] = max(p["seq"], last.get(p["id"], 0))
    again = lab_engine(tmp_path / "again", site_text=AREAS)
    assert again.restore(list(rows.values())) == []
    later = run(again, 1510, 2500, **{"room-1": 38})
    first: dict[str, int] = {}
    for p in _records(later):
        first.setdefault(p["id"], p["seq"])
    assert set(first) & set(last)
    for aid in set(first) & set(last):
        assert first[aid] == last[aid] + 1, aid
