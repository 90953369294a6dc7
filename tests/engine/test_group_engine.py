"""One engine of a group: it evaluates only the spaces it holds or stands by for, gives up
the others, continues the live advisories another instance published (Engine.set_owned,
Engine.adopt), and a standby that takes a shard over reconciles what it computed with what
was published (Engine.reconcile)."""

from __future__ import annotations

import json

from tests.engine.conftest import lab_engine, validate_effects
from tests.engine.test_engine import events, run
from thermowarden.effects import Persist, Publish


def make(tmp_path, name):
    return lab_engine(tmp_path / name)


def retained(effects):
    """The broker's retained advisory messages after ``effects`` (latest per topic), as a
    member of the group receives them (through JSON)."""
    kept = {}
    for e in effects:
        if isinstance(e, Publish) and "/advisories/" in e.topic:
            kept[e.topic] = None if e.payload is None else json.loads(json.dumps(e.payload))
    return {t: p for t, p in kept.items() if p is not None}


def test_only_owned_spaces_are_evaluated_and_published(tmp_path):
    a = make(tmp_path, "a")
    a.set_owned(["room-2"], 0.0)
    e = run(a, 0, 200, **{"room-1": 40, "room-2": 25})
    assert events(e, space="room-1") == []
    topics = {x.topic for x in e if isinstance(x, Publish)}
    assert "tw/lab/spaces/room-2/conditions" in topics
    assert not any("room-1" in t for t in topics)


def _history_a(engine):
    """Raise two advisories in room-1, acknowledge one and shelve the other."""
    effects = run(engine, 0, 70, **{"room-1": 34})  # raised at medium ("levels") and hot
    effects += run(engine, 80, 300, **{"room-1": 34})
    hot = next(x for x in engine.live_advisories() if x.rule == "testpack.hot")
    reply, eff = engine.command("acknowledge", json.dumps(
        {"advisory_id": hot.id, "by": "Ana"}).encode(), 310)
    assert reply["ok"]
    effects += eff
    lv = next(x for x in engine.live_advisories() if x.rule == "testpack.levels")
    reply, eff = engine.command("shelve", json.dumps(
        {"advisory_id": lv.id, "by": "Sam", "reason": "survey", "duration_s": 600}).encode(),
        320)
    assert reply["ok"]
    effects += eff
    effects += run(engine, 330, 400, **{"room-1": 34})
    return effects


def published_events(effects):
    return [(p["event"], p["advisory"]["id"], p["advisory"]["priority"], p["event_id"])
            for p in (x.payload for x in effects if isinstance(x, Publish)
                      and "/events/" in x.topic and "room-1" in x.topic)]


def test_a_new_owner_continues_the_advisory_exactly(tmp_path):
    a, b, ref = make(tmp_path, "a"), make(tmp_path, "b"), make(tmp_path, "ref")
    b.set_owned(["room-2"], 0.0)
    effects = _history_a(a)
    _history_a(ref)  # the same site on an instance that never moves
    before = {x.rule: a.advisory_payload(x) for x in a.live_advisories()}
    timers = {x.rule: a.advisories._timers(x) for x in a.live_advisories()}

    # a dies; b takes room-1 over: adopt the retained messages first, then evaluate
    b.ticks = 1  # b has been running
    b.set_owned(["room-1", "room-2"], 410.0)
    notes, eff = b.adopt(retained(effects).values(), 410.0, by="b")
    assert notes == []
    validate_effects(eff)
    after = {x.rule: b.advisory_payload(x) for x in b.live_advisories()}
    assert set(after) == set(before) == {"testpack.hot", "testpack.levels"}
    for rule, p in before.items():
        q = after[rule]
        assert q["history"][:-1] == p["history"]
        assert q["history"][-1] == {"at": "1970-01-01T00:06:50Z", "event": "moved", "by": "b"}
        for key in ("id", "priority", "state", "acknowledged", "shelved", "raised_at",
                    "acted_on", "title", "numbers"):
            assert q[key] == p[key], key
        got = b.advisories._timers(next(x for x in b.live_advisories() if x.rule == rule))
        assert got == timers[rule]
    # the retained message goes out again with the moved entry; the store gets the row
    assert any(isinstance(x, Persist) and x.kind == "advisory" for x in eff)
    # b goes on exactly as an instance that never moved: nothing raised again, the same
    # reminders, the shelving running out as planned, the escalation, with the same ids
    e_b = run(b, 420, 900, **{"room-1": 34}) + run(b, 910, 1500, **{"room-1": 38})
    e_ref = run(ref, 420, 900, **{"room-1": 34}) + run(ref, 910, 1500, **{"room-1": 38})
    got, want = published_events(e_b), published_events(e_ref)
    assert got == want
    assert ("escalated", before["testpack.levels"]["id"], "urgent") in [g[:3] for g in got]
    assert not any(g[0] == "raised" for g in got)
    # the moved window: the conditions say the 60-minute WBGT window is partial
    cond = [x.payload for x in e_b if isinstance(x, Publish) and x.topic.endswith(
        "room-1/conditions")][-1]
    assert cond["windows"]["wbgt_60min"]["partial"] is True
    assert cond["windows"]["wbgt_60min"]["rebuilding_since"] == "1970-01-01T00:06:50Z"
    assert not any("windows" in x.payload for x in e_ref if isinstance(x, Publish)
                   and x.topic.endswith("/conditions"))


def test_a_new_owner_falls_back_on_what_the_last_event_said(tmp_path):
    """The retained message of a live advisory is republished with newer numbers; a new
    owner takes the texts of its last event from the handover, so that a reminder whose
    reading is stale says what the instance that never moved says."""
    a, b, ref = make(tmp_path, "a"), make(tmp_path, "b"), make(tmp_path, "ref")
    b.set_owned(["room-2"], 0.0)
    effects = []
    for engine in (a, ref):
        e = run(engine, 0, 70, **{"room-1": 31}) + run(engine, 80, 400, **{"room-1": 33.4})
        if engine is a:
            effects = e
    hot = next(p for p in retained(effects).values() if p["rule"] == "testpack.hot")
    assert hot["advice"] == "Cool room-1: 33.4 °C."  # refreshed at 300 s
    assert hot["handover"]["said"]["advice"] == "Cool room-1: 31.0 °C."
    b.ticks = 1
    b.set_owned(["room-1", "room-2"], 410.0)
    notes, moved = b.adopt(retained(effects).values(), 410.0, by="b")
    assert notes == []
    # the message it republishes says one thing: the last event's texts and numbers
    again = next(x.payload for x in moved if isinstance(x, Publish)
                 and x.topic.endswith("/advisories/testpack.hot"))
    assert again["advice"] == "Cool room-1: 31.0 °C."
    assert again["numbers"]["air_temperature"]["value"] == 31.0
    assert hot["numbers_at"] == "1970-01-01T00:05:00Z"  # the refresh's own moment
    assert again["numbers_at"] == "1970-01-01T00:01:00Z"  # the raise's, from the handover
    said = {}
    for name, engine in (("b", b), ("ref", ref)):
        quiet = []
        for t in range(410, 1400, 10):  # room-1's sensor silent: stale after 180 s
            quiet += engine.tick(t)
        said[name] = [(p["event"], p["advisory"]["advice"]) for p in (
            x.payload for x in quiet if isinstance(x, Publish) and "/events/" in x.topic
            and x.payload["advisory"]["rule"] == "testpack.hot")]
    assert said["b"] == said["ref"] == [("renotified", "Cool room-1: 31.0 °C.")] * 2


def test_a_command_right_after_a_takeover_keeps_the_adopted_numbers(tmp_path):
    """b last evaluated room-1 long ago (40 °C); a raised there at 31 °C; b takes the space
    over and an acknowledgement arrives before b's next evaluation: b has no numbers of
    its own for room-1 yet, so the acknowledged event keeps the adopted ones."""
    a, b = make(tmp_path, "a"), make(tmp_path, "b")
    run(b, 0, 100, **{"room-1": 40, "room-2": 25})
    b.set_owned(["room-2"], 100.0)
    run(b, 110, 1000, **{"room-2": 25})
    a.set_owned(["room-1"], 0.0)
    effects = run(a, 600, 1000, **{"room-1": 31})
    hot = next(p for p in retained(effects).values() if p["rule"] == "testpack.hot")
    b.set_owned(["room-1", "room-2"], 1005.0)
    notes, _ = b.adopt(retained(effects).values(), 1005.0, by="b")
    assert notes == []
    reply, eff = b.command("acknowledge", json.dumps(
        {"advisory_id": hot["id"], "by": "Ana"}).encode(), 1006.0)
    assert reply["ok"]
    acked = next(x.payload["advisory"] for x in eff if isinstance(x, Publish)
                 and "/events/" in x.topic)
    assert acked["numbers"]["air_temperature"]["value"] == 31.0
    assert acked["advice"] == "Cool room-1: 31.0 °C."
    # after b's next evaluation the numbers are b's own again
    later = run(b, 1010, 1010, **{"room-1": 31.5, "room-2": 25})
    validate_effects(later)
    reply, eff = b.command("shelve", json.dumps(
        {"advisory_id": hot["id"], "by": "Ana", "reason": "survey",
         "duration_s": 600}).encode(), 1011.0)
    assert reply["ok"]
    shelved = next(x.payload["advisory"] for x in eff if isinstance(x, Publish)
                   and "/events/" in x.topic)
    assert shelved["numbers"]["air_temperature"]["value"] == 31.5


def test_giving_a_space_up_forgets_it_and_its_store_rows(tmp_path):
    a = make(tmp_path, "a")
    run(a, 0, 70, **{"room-1": 34})
    assert {x.rule for x in a.live_advisories()} == {"testpack.hot", "testpack.levels"}
    eff = a.set_owned(["room-2"], 80.0)
    assert a.live_advisories() == []
    assert sorted(x.key for x in eff if isinstance(x, Persist) and x.record is None) == [
        "room-1/testpack.hot", "room-1/testpack.levels"]
    e = run(a, 80, 200, **{"room-1": 34})
    assert events(e, space="room-1") == []


def test_adopt_keeps_a_newer_local_advisory_and_refuses_a_message_without_state(tmp_path):
    a = make(tmp_path, "a")
    effects = run(a, 0, 70, **{"room-1": 34})
    msgs = list(retained(effects).values())
    old = [dict(p) for p in msgs]
    b = make(tmp_path, "b")
    b.set_owned(["room-1", "room-2"], 80.0)
    stripped = [{k: v for k, v in p.items() if k != "handover"} for p in old]
    notes, eff = b.adopt(stripped, 80.0)
    assert len(notes) == 2 and "no handover state" in notes[0] and eff == []
    notes, eff = a.adopt(old, 80.0)  # a already holds newer or equal state: nothing taken
    assert notes == [] and eff == []


def test_adopt_takes_nothing_from_malformed_or_forged_messages(tmp_path):
    """Retained advisory messages come from the broker: anyone who may publish there can
    send anything. A malformed one is noted and not taken (nothing half-restored), one that
    names a space by something other than text is refused, and a handover block cannot
    move an advisory into a space this instance does not own."""
    a = make(tmp_path, "a")
    effects = run(a, 0, 70, **{"room-1": 34})
    good = list(retained(effects).values())
    assert good
    b = make(tmp_path, "b")
    b.set_owned(["room-1"], 80.0)
    p = good[0]
    bad = [
        {**p, "handover": {}},                                      # no state or times
        {**p, "handover": {**p["handover"], "state": "no-such"}},   # unknown state
        {k: v for k, v in p.items() if k != "title"},               # a field missing
        {**p, "space": {"id": ["room-1"]}},                         # not text
        {**p, "handover": {**p["handover"], "updated_at": "soon"}},  # no time
        {**p, "handover": {**p["handover"], "shelvings": [["x"]]}},  # late field bad
        {**p, "handover": {**p["handover"], "said": {"title": 1, "advice": "",
                                                     "rationale": ""}}},  # texts not text
    ]
    notes, eff = b.adopt(bad, 80.0, by="b")
    assert len(notes) == len(bad), notes
    assert eff == [] and b.live_advisories() == []
    for rt in b.advisories.rules:
        assert not rt.advisories and not rt.shelvings
    # a handover that names another space: the message's own space wins
    forged = {**p, "handover": {**p["handover"], "space": "room-2", "rule": "testpack.hot"}}
    notes, eff = b.adopt([forged], 80.0, by="b")
    assert notes == []
    assert [(b.model.space_ids[x.space], x.rule) for x in b.live_advisories()] == [
        (p["space"]["id"], p["rule"])]
    # and nothing at all for a space this instance does not own
    c = make(tmp_path, "c")
    c.set_owned(["room-2"], 80.0)
    notes, eff = c.adopt([forged], 80.0, by="c")
    assert c.live_advisories() == [] and eff == []


def test_a_standby_taking_over_reconciles_with_what_was_published(tmp_path):
    """b stood by for room-1 (evaluating it without publishing) but started later, so it
    raised its own advisories under other ids; a acknowledged its hot advisory. At the
    takeover, the published one wins: a's id, history (plus moved), acknowledgement and
    event count; b's levels advisory, of which nothing was published, is raised at the
    next evaluation with an event."""
    a, b = make(tmp_path, "a"), make(tmp_path, "b")
    effects = run(a, 0, 100, **{"room-1": 34})
    hot = next(x for x in a.live_advisories() if x.rule == "testpack.hot")
    reply, eff = a.command("acknowledge", json.dumps(
        {"advisory_id": hot.id, "by": "Ana"}).encode(), 110)
    assert reply["ok"]
    effects += eff + run(a, 120, 300, **{"room-1": 34})
    mine = run(b, 30, 300, **{"room-1": 34})  # standing by: its effects are not published
    assert {x.rule: x.id for x in b.live_advisories()}["testpack.hot"] != hot.id
    published = [p for p in retained(effects).values() if p["rule"] == "testpack.hot"]
    b.publication.epochs[b.publication.shards[0]] = 2
    notes, eff = b.reconcile(["room-1"], published, 305.0, by="b")
    assert notes == []
    validate_effects(eff)
    live = {x.rule: b.advisory_payload(x) for x in b.live_advisories()}
    assert set(live) == {"testpack.hot"}
    took = live["testpack.hot"]
    assert took["id"] == hot.id and took["acknowledged"]["by"] == "Ana"
    assert took["epoch"] == 2 and took["history"][-1]["event"] == "moved"
    # its records go on from the published one's seq (under the new epoch), whatever the
    # count b had reached while it stood by
    assert took["seq"] == published[0]["seq"] + 1
    assert [x.payload["seq"] for x in eff if isinstance(x, Publish)] == [took["seq"]]
    later = run(b, 310, 400, **{"room-1": 34})
    got = [(p["event"], p["advisory"]["rule"], p["event_id"]) for p in (
        x.payload for x in later if isinstance(x, Publish) and "/events/" in x.topic)]
    # the levels advisory: raised now, and so published; hot: not raised again
    assert [g[:2] for g in got] == [("raised", "testpack.levels")]
    assert got[0][2].split(".")[2] == "2"  # under the new epoch
    assert not [x for x in mine if isinstance(x, Publish) and x.payload is not None
                and x.payload.get("id") == hot.id]


def test_the_old_holder_taking_the_shard_back_keeps_its_acknowledgement(tmp_path):
    """a acknowledged its hot advisory a moment before it was cut off: the reply and the
    record were fenced, so b took the shard over from the record before the
    acknowledgement and published on under a newer epoch. When a takes the shard back, the
    acknowledgement it applied survives the newer record (and its history entry with it),
    as does a shelving it applied, the later one of two winning."""
    a, b = make(tmp_path, "a"), make(tmp_path, "b")
    shard = a.publication.shards[0]
    a.publication.epochs[shard] = 1
    effects = run(a, 0, 300, **{"room-1": 34})
    published = retained(effects)  # what reached the broker before the cut
    hot = next(x for x in a.live_advisories() if x.rule == "testpack.hot")
    lv = next(x for x in a.live_advisories() if x.rule == "testpack.levels")
    reply, _ = a.command("acknowledge", json.dumps(
        {"advisory_id": hot.id, "by": "Ana"}).encode(), 310)
    assert reply["ok"]
    reply, _ = a.command("shelve", json.dumps(
        {"advisory_id": lv.id, "by": "Sam", "reason": "survey", "duration_s": 600}).encode(),
        312)
    assert reply["ok"]
    run(b, 30, 300, **{"room-1": 34})  # b stood by
    b.publication.epochs[shard] = 2
    _, eff = b.reconcile(["room-1"], published.values(), 320.0, by="b")
    later = eff + run(b, 330, 400, **{"room-1": 34})
    newer = retained(later)
    assert {p["id"]: p["acknowledged"] for p in newer.values()}[hot.id] is None
    assert {p["id"]: p["shelved"] for p in newer.values()}[lv.id] is None

    a.publication.epochs[shard] = 3
    notes, eff = a.reconcile(["room-1"], list(newer.values()), 410.0, by="a")
    assert notes == []
    validate_effects(eff)
    live = {x.rule: a.advisory_payload(x) for x in a.live_advisories()}
    took = live["testpack.hot"]
    assert took["id"] == hot.id and took["state"] == "acknowledged"
    assert took["acknowledged"]["by"] == "Ana"
    events = [h["event"] for h in took["history"]]
    assert events.count("acknowledged") == 1 and events[-1] == "moved"
    assert events.count("moved") == 2  # to b and back to a
    shelved = live["testpack.levels"]
    assert shelved["state"] == "shelved" and shelved["shelved"]["by"] == "Sam"
    out = retained(eff)  # what a publishes at once carries both
    assert {p["id"]: p["acknowledged"] is not None for p in out.values()}[hot.id]
    assert {p["id"]: p["state"] for p in out.values()}[lv.id] == "shelved"
    # and it goes on from there: no reminder before the shelving runs out
    after = run(a, 420, 900, **{"room-1": 34})
    assert not [e for e in published_events(after) if e[1] == lv.id]
