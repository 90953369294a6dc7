"""The consumer rule for an advisory's records and events: order key (epoch, seq), keep the
newest per advisory id and the newest epoch per shard, drop the rest."""

from __future__ import annotations

from thermowarden.core.record_order import NewestSeen, order_key, shard_epoch


def rec(epoch: int, seq: int, *, aid: str = "s1.heat_stress.wbgt.100", shard: str = "b1",
        priority: str = "high") -> dict:
    return {"id": aid, "rule": "heat_stress.wbgt", "space": {"id": "s1"}, "shard": shard,
            "epoch": epoch, "seq": seq, "priority": priority}


def event(advisory: dict) -> dict:
    return {"event": "escalated", "shard": advisory["shard"], "epoch": advisory["epoch"],
            "seq": advisory["seq"], "advisory": advisory,
            "event_id": f"f.{advisory['shard']}.{advisory['epoch']}.{advisory['id']}.1"}


def test_the_order_key_of_records_and_events():
    assert order_key(rec(3, 7)) == (3, 7)
    assert order_key(event(rec(3, 7))) == (3, 7)
    assert order_key({"epoch": 3}) is None  # a conditions record: no seq
    assert order_key({"epoch": True, "seq": 1}) is None  # not a number
    assert shard_epoch(event(rec(3, 7, shard="hall"))) == ("hall", 3)
    assert shard_epoch({"space": {"id": "s1"}}) is None


def test_a_late_record_of_the_same_epoch_is_dropped():
    """Records 1, 3, then 2 delivered late (held on a frozen broker node): 2 is dropped and
    what is kept never goes back."""
    seen = NewestSeen()
    assert seen.accept(rec(5, 1))
    assert seen.accept(rec(5, 3, priority="urgent"))
    assert not seen.accept(rec(5, 2))
    assert seen.dropped == 1
    assert seen.by_advisory["s1.heat_stress.wbgt.100"] == (5, 3)


def test_a_copy_and_the_record_of_a_taken_event_are_dropped_as_copies():
    seen = NewestSeen()
    r = rec(5, 4)
    assert seen.accept(event(r))
    assert not seen.accept(r) and seen.is_copy(r)
    assert not seen.accept(dict(r)) and seen.is_copy(r)
    assert not seen.is_copy(rec(5, 2))


def test_a_new_epoch_wins_whatever_its_seq_and_an_old_epoch_is_dropped():
    seen = NewestSeen()
    assert seen.accept(rec(5, 40))
    assert seen.accept(rec(6, 3))  # a new holder that had not seen the last records
    assert not seen.accept(rec(5, 41))  # the old holder, fenced since
    # the old epoch is dropped for every advisory of the shard, even one not seen before
    assert not seen.accept(rec(5, 1, aid="s2.heat_stress.wbgt.200"))
    # a conditions record of a newer epoch raises the shard's epoch too
    assert seen.accept({"shard": "b1", "epoch": 7, "space": {"id": "s9"}})
    assert not seen.accept(rec(6, 4))
    assert seen.accept(rec(7, 4))
    assert seen.dropped == 3


def test_advisories_and_shards_are_kept_apart():
    seen = NewestSeen()
    assert seen.accept(rec(5, 9))
    assert seen.accept(rec(5, 1, aid="s1.heat_stress.wbgt.900"))  # another advisory
    assert seen.accept(rec(2, 1, shard="b2", aid="s3.heat_stress.wbgt.5"))  # another shard


def test_a_record_without_order_fields_is_taken():
    seen = NewestSeen()
    assert seen.accept({"id": "x", "rule": "r"})
    assert seen.dropped == 0
