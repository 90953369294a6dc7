"""How one member reads the others' status records (shell/group.py): the order records
arrive in, the will, and a member that comes back within the same run."""

from __future__ import annotations

import json
from types import SimpleNamespace

from thermowarden.shell.group import Group


class Clock:
    def __init__(self) -> None:
        self.t = 100.0

    def monotonic(self) -> float:
        return self.t

    def now(self) -> float:
        return 1_780_000_000.0 + self.t


def group() -> tuple[Group, Clock]:
    g = Group("g", "me", keepalive_s=6, prefix="tw")
    clock = Clock()
    g.service = SimpleNamespace(clock=clock)  # type: ignore[assignment]
    return g, clock


def record(state: str, beat: int | None, since: str = "2026-12-02T10:00:00Z",
           view: list[str] | None = None) -> bytes:
    body: dict[str, object] = {"group": "g", "state": state, "since": since,
                               "view": view if view is not None else ["b", "me"]}
    if beat is not None:
        body["beat"] = beat
    return json.dumps(body).encode()


def test_a_member_whose_will_fired_is_live_again_when_it_beats_on() -> None:
    """A connection blip: the broker publishes b's will, b reconnects in the same run and
    beats on with higher numbers. b must count as live again (before, the will closed the
    run for good, and two members that each had a blip ignored each other and both owned
    every space until restarted)."""
    g, clock = group()
    g._record("b", record("online", 7))
    assert g.members["b"].online and g.members["b"].beat == 7
    g._record("b", record("offline", None))  # the will
    assert not g.members["b"].online
    clock.t += 1
    g._record("b", record("online", 6))      # an older retained record arriving late
    assert not g.members["b"].online
    g._record("b", record("online", 8))      # the reconnect's birth and beats
    assert g.members["b"].online and g.members["b"].beat == 8


def test_records_of_an_older_run_and_out_of_order_beats_are_ignored() -> None:
    g, _ = group()
    g._record("b", record("online", 3, since="2026-12-02T10:00:00Z"))
    g._record("b", record("online", 9, since="2026-12-02T09:00:00Z"))  # an older run
    assert g.members["b"].beat == 3
    g._record("b", record("online", 2))
    assert g.members["b"].beat == 3


def test_broken_records_are_counted_and_taken_as_nothing() -> None:
    g, _ = group()
    g._record("b", b"[" * 5000)
    g._record("c", b'{"group": "g", "state": "online", "evaluated_at": 1' + b"0" * 400 + b"}")
    g._record("d", record("online", 1, view=[f"m{i}" for i in range(5000)]))
    assert g.ignored == 1
    assert g.members["c"].evaluated_at is None
    assert g.members["d"].view is None  # claims nothing
    g.receive("tw/spaces/s1/advisories/x.y", b"{" * 3000)
    assert g.ignored == 2 and g.retained == {}
