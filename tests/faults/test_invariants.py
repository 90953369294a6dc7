"""The invariant checks themselves, on invented message sequences: each violation the fault
cases look for is caught, and a clean failover passes (no broker needed)."""

from __future__ import annotations

import json

from tests.faults.harness import Command, Received, Scenario, Timing
from tests.faults.invariants import check_all

P = "twf-x"
ADV = f"{P}/spaces/s001/advisories/heat_stress/wbgt"


def adv(epoch: int, history: list[str], priority: str = "high", *, shard: str = "b3",
        by: dict[int, str] | None = None, seq: int | None = None) -> dict:
    """An advisory record; its ``seq`` is its history's length unless given (one record per
    change)."""
    return {"id": "s001.heat_stress.wbgt.1", "rule": "heat_stress.wbgt", "space": {"id": "s001"},
            "priority": priority, "state": "active", "shard": shard, "epoch": epoch,
            "seq": len(history) if seq is None else seq,
            "history": [{"at": f"2026-12-04T19:00:{k:02d}Z", "event": e,
                         **({"by": by[k]} if by and k in by else {})}
                        for k, e in enumerate(history)]}


def event(epoch: int, n: int, kind: str, advisory: dict, shard: str = "b3") -> dict:
    return {"schema": "thermowarden.event/1", "event": kind, "at": "2026-12-04T19:00:00Z",
            "shard": shard, "epoch": epoch, "seq": advisory["seq"],
            "event_id": f"f1.{shard}.{epoch}.{advisory['id']}.{n}", "advisory": advisory}


def cond(space: str, epoch: int, *, partial: bool = False, twa: float | None = 27.0,
         since: str | None = None) -> dict:
    d = {"schema": "thermowarden.conditions/1", "space": {"id": space}, "shard": "b3",
         "epoch": epoch, "indices": {"wbgt_time_weighted": {"value": twa}}}
    if partial:
        d["windows"] = {"wbgt_60min": {"partial": True}}
    if since is not None:
        d["windows"] = {"wbgt_60min": {"partial": twa is None, "rebuilding_since": since}}
    return d


def msg(t: float, topic: str, payload: dict | None, retained: bool = False) -> Received:
    return Received(t, topic, json.dumps(payload).encode() if payload is not None else b"",
                    retained)


def scenario(**kw) -> Scenario:
    sc = Scenario(P, ["s001"], Timing(tick_s=1.0, lease_ttl_s=8.0, conditions_every_s=15.0))
    sc.fault_started, sc.observe_from, sc.observe_to = 50.0, 0.0, 100.0
    for k, v in kw.items():
        setattr(sc, k, v)
    return sc


def conditions_every(step: float, epoch_at: float = 50.0, until: float = 100.0,
                     **kw) -> list[Received]:
    out, t = [], 0.0
    while t <= until:
        out.append(msg(t, f"{P}/spaces/s001/conditions", cond("s001", 1 if t < epoch_at else 2,
                                                               **kw)))
        t += step
    return out


def clean() -> list[Received]:
    a1 = adv(1, ["raised"])
    a2 = adv(2, ["raised", "moved", "escalated"], "urgent")
    return [*conditions_every(10.0),
            msg(1.0, f"{P}/events/safety/s001", event(1, 1, "raised", a1)),
            msg(1.1, ADV, a1, True),
            msg(60.0, f"{P}/events/safety/s001", event(2, 2, "escalated", a2)),
            msg(60.0, f"{P}/events/safety/s001", event(2, 2, "escalated", a2)),  # a QoS 1 copy
            msg(60.1, ADV, a2, True)]


def test_a_clean_failover_passes():
    rep = check_all(sorted(clean(), key=lambda m: m.t), scenario())
    assert not rep.failed(), rep.summary()
    assert rep.figures["epochs_per_shard_max"] == 2


def test_one_id_for_two_events_is_caught():
    a = adv(1, ["raised", "escalated"], "urgent")
    b = adv(1, ["raised", "escalated"], "high")
    msgs = clean() + [msg(70.0, f"{P}/events/safety/s001", event(1, 5, "escalated", a)),
                      msg(71.0, f"{P}/events/safety/s001", event(1, 5, "escalated", b))]
    rep = check_all(sorted(msgs, key=lambda m: m.t), scenario())
    assert "ids" in rep.failed()
    assert rep.figures["ids_two_events"] == 1


def test_an_older_epoch_after_a_newer_is_caught():
    late = event(1, 9, "renotified", adv(1, ["raised", "renotified"]))
    rep = check_all(sorted(clean() + [msg(61.0, f"{P}/events/safety/s001", late)],
                           key=lambda m: m.t), scenario())
    assert any("epoch 1 after one of epoch 2" in v for v in rep.failed()["epochs"])


def test_records_without_epochs_are_caught():
    a = adv(1, ["raised"])
    del a["epoch"], a["shard"]
    e = {"schema": "thermowarden.event/1", "event": "raised", "at": "x", "event_id": "f1.s1.1",
         "advisory": a}
    rep = check_all([msg(1.0, f"{P}/events/safety/s001", e)], scenario())
    assert any("without shard and epoch" in v for v in rep.failed()["epochs"])


def test_a_record_going_backwards_is_caught_and_a_stale_epoch_dropped():
    msgs = clean() + [
        # the old holder's record after the new epoch: a consumer drops it (not a violation)
        msg(61.0, ADV, adv(1, ["raised"], seq=7), True),
        # the new epoch's next record with its history cut short: a violation
        msg(62.0, ADV, adv(2, ["raised", "moved"], "urgent", seq=4), True)]
    rep = check_all(sorted(msgs, key=lambda m: m.t), scenario())
    assert rep.figures["stale_advisory_records_dropped"] == 1
    assert any("history went from 3 to 2" in v for v in rep.failed()["forward"])


def test_a_record_delivered_late_in_its_epoch_is_dropped_by_its_seq():
    """The broker-node freeze: an older record of the same epoch, held up on the frozen
    node, arrives after a newer one. A consumer drops it by (epoch, seq); the stream it
    keeps never goes back."""
    a1 = adv(1, ["raised"])
    a2 = adv(1, ["raised", "escalated"], "urgent")
    msgs = [*conditions_every(10.0, epoch_at=1000.0),
            msg(1.0, f"{P}/events/safety/s001", event(1, 1, "raised", a1)),
            msg(1.1, ADV, a1, True),
            msg(60.0, f"{P}/events/safety/s001", event(1, 2, "escalated", a2)),
            msg(60.1, ADV, a2, True),
            msg(75.0, ADV, a1, True)]  # the late copy from the frozen node
    rep = check_all(sorted(msgs, key=lambda m: m.t), scenario())
    assert not rep.failed(), rep.summary()
    assert rep.figures["late_advisory_records_dropped"] == 1
    # read by epoch alone (no seq), the same stream goes back from urgent to high
    for m in msgs:
        d = m.json()
        if d is not None:
            (d.get("advisory") or d).pop("seq", None)
            d.pop("seq", None)
            m.payload = json.dumps(d).encode()
    rep = check_all(sorted(msgs, key=lambda m: m.t), scenario())
    assert any("without epoch and seq" in v for v in rep.failed()["forward"])


def test_a_newer_record_lost_to_a_seq_that_went_back_is_caught():
    """A holder whose seq restarted lower in the same epoch: the consumer drops its newer
    records; the check says a record with a longer history was dropped."""
    msgs = clean() + [msg(70.0, ADV, adv(2, ["raised", "moved", "escalated", "renotified"],
                                         "urgent", seq=1), True)]
    rep = check_all(sorted(msgs, key=lambda m: m.t), scenario())
    assert any("longer history than the one kept was dropped" in v
               for v in rep.failed()["forward"])


def test_a_priority_dropping_without_deescalation_is_caught():
    msgs = clean() + [msg(62.0, ADV, adv(2, ["raised", "moved", "escalated", "renotified"]),
                          True)]
    rep = check_all(sorted(msgs, key=lambda m: m.t), scenario())
    assert any("urgent to high" in v for v in rep.failed()["forward"])


def test_a_lost_acknowledgement_is_caught():
    cmd = Command("acknowledge", "s001.heat_stress.wbgt.1", "fault-ack-1", "r1", 55.0, True)
    reply = {"schema": "thermowarden.reply/1", "ok": True, "verb": "acknowledge",
             "request_id": "r1", "at": "x"}
    msgs = clean() + [msg(56.0, f"{P}/replies/faults", reply)]
    rep = check_all(sorted(msgs, key=lambda m: m.t), scenario(commands=[cmd]))
    assert any("answered ok" in v for v in rep.failed()["commands"])
    kept = adv(2, ["raised", "moved", "escalated", "acknowledged"], "urgent",
               by={3: "fault-ack-1"})
    rep = check_all(sorted(msgs + [msg(80.0, ADV, kept, True)], key=lambda m: m.t),
                    scenario(commands=[cmd]))
    assert not rep.failed(), rep.summary()
    assert rep.figures["commands_kept"] == 1


def test_an_acknowledgement_only_a_superseded_holder_kept_is_caught():
    """The old holder (epoch 1) took the acknowledgement after the new one (epoch 2) took
    over; its record is longer than the new holder's, but a consumer drops it as stale."""
    cmd = Command("acknowledge", "s001.heat_stress.wbgt.1", "fault-ack-1", "r1", 55.0, True)
    stale = adv(1, ["raised", "escalated", "escalated", "acknowledged", "renotified"],
                "urgent", by={3: "fault-ack-1"})
    msgs = clean() + [msg(61.0, ADV, stale, True)]
    rep = check_all(sorted(msgs, key=lambda m: m.t), scenario(commands=[cmd]))
    assert any("not in its history" in v for v in rep.failed()["commands"]), rep.summary()
    assert rep.figures["stale_advisory_records_dropped"] == 1


def test_a_space_left_unevaluated_is_caught():
    msgs = [m for m in clean() if not (40.0 < m.t < 75.0 and m.topic.endswith("conditions"))]
    rep = check_all(sorted(msgs, key=lambda m: m.t), scenario())
    assert any("no conditions for 40.0 s" in v for v in rep.failed()["evaluated"])


def test_a_rebuilt_window_is_caught():
    msgs = [m for m in clean() if not m.topic.endswith("conditions")]
    msgs += conditions_every(10.0, until=40.0)
    msgs += [msg(50.0 + k * 10, f"{P}/spaces/s001/conditions",
                 cond("s001", 2, partial=True, twa=None)) for k in range(6)]
    rep = check_all(sorted(msgs, key=lambda m: m.t), scenario())
    found = rep.failed()["whole"]
    assert any("rebuilt" in v for v in found) and any("present before" in v for v in found)


def test_a_storm_of_answers_is_caught():
    stray = {"schema": "thermowarden.reply/1", "ok": False, "verb": "acknowledge",
             "request_id": None, "at": "x", "error": "the body is not a JSON object"}
    msgs = clean() + [msg(60.0 + k / 100, f"{P}/replies", stray) for k in range(20)]
    rep = check_all(sorted(msgs, key=lambda m: m.t), scenario())
    assert any("storm" in v for v in rep.failed()["commands"])


def test_a_window_not_whole_before_the_fault_is_not_asked_to_be_whole_after():
    """A run shorter than the window: before the fault the holder's window was not whole
    (no time-weighted WBGT), and the standby flags its own as rebuilt after the takeover;
    no takeover could have done better, so that is no violation."""
    msgs = [m for m in clean() if not m.topic.endswith("conditions")]
    msgs += conditions_every(10.0, until=40.0, twa=None)
    msgs += [msg(50.0 + k * 10, f"{P}/spaces/s001/conditions",
                 cond("s001", 2, partial=True, twa=None)) for k in range(6)]
    rep = check_all(sorted(msgs, key=lambda m: m.t), scenario())
    assert "whole" not in rep.failed(), rep.summary()


FAULT_WALL = 1796410800.0
"""2026-12-04T19:00:00Z, the fault's start by the wall clock in these sequences."""


def test_a_window_restarted_at_the_takeover_is_caught_in_a_short_run():
    """A run shorter than the window: the window was not whole before the fault, but the
    instance that took over started its window after the fault began (it was not standing
    by): caught. One rebuilding since the group's start, before the fault, is not."""
    msgs = [m for m in clean() if not m.topic.endswith("conditions")]
    msgs += conditions_every(10.0, until=40.0, twa=None, since="2026-12-04T18:59:10Z")
    early = msgs + [msg(50.0 + k * 10, f"{P}/spaces/s001/conditions",
                        cond("s001", 2, twa=None, since="2026-12-04T18:59:10Z"))
                    for k in range(6)]
    rep = check_all(sorted(early, key=lambda m: m.t), scenario(fault_started_wall=FAULT_WALL))
    assert "whole" not in rep.failed(), rep.summary()
    late = msgs + [msg(50.0 + k * 10, f"{P}/spaces/s001/conditions",
                       cond("s001", 2, twa=None, since="2026-12-04T19:00:15Z"))
                   for k in range(6)]
    rep = check_all(sorted(late, key=lambda m: m.t), scenario(fault_started_wall=FAULT_WALL))
    assert any("restarted at 2026-12-04T19:00:15Z" in v for v in rep.failed()["whole"]), \
        rep.summary()
    assert rep.figures["windows_restarted_after_fault"] == 1


def test_a_window_begun_in_the_faults_own_second_is_not_taken_for_a_restart():
    """Records give whole seconds: a window whose readings began half a second before the
    fault, in the same second, reads as begun at the fault's second and is not a restart
    (seen in the clock-step case); one begun the second after is."""
    msgs = [m for m in clean() if not m.topic.endswith("conditions")]
    msgs += conditions_every(10.0, until=40.0, twa=None, since="2026-12-04T19:00:00Z")
    same = msgs + [msg(50.0 + k * 10, f"{P}/spaces/s001/conditions",
                       cond("s001", 2, twa=None, since="2026-12-04T19:00:00Z"))
                   for k in range(6)]
    rep = check_all(sorted(same, key=lambda m: m.t),
                    scenario(fault_started_wall=FAULT_WALL + 0.5))
    assert "whole" not in rep.failed(), rep.summary()
    after = msgs + [msg(50.0 + k * 10, f"{P}/spaces/s001/conditions",
                        cond("s001", 2, twa=None, since="2026-12-04T19:00:01Z"))
                    for k in range(6)]
    rep = check_all(sorted(after, key=lambda m: m.t),
                    scenario(fault_started_wall=FAULT_WALL + 0.5))
    assert rep.figures["windows_restarted_after_fault"] == 1, rep.summary()
