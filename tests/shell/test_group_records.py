"""How one member reads the others' status records (shell/group.py): the order records
arrive in, the will, a member that comes back within the same run, and a member whose will
never came."""

from __future__ import annotations

import json
import threading
from types import SimpleNamespace

import numpy as np

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


class Link:
    """What the group needs of the MQTT link: its records and what it publishes."""

    def __init__(self) -> None:
        self.connected = threading.Event()
        self.subscribed = threading.Event()
        self.connected.set()
        self.subscribed.set()
        self.status_topic = "tw/status/me"
        self.status_online: dict[str, object] = {"schema": "thermowarden.status/1",
                                                 "site": "lab", "state": "online"}
        self.status_offline: dict[str, object] = {"state": "offline"}
        self.sent: list[tuple[str, object, int, bool]] = []

    def publish(self, topic: str, payload: object, qos: int, retain: bool) -> None:
        self.sent.append((topic, payload, qos, retain))


def linked(name: str = "me") -> tuple[Group, Clock, Link]:
    """A member that has listened since 90 s (the clock is at 100 s) and hears its own
    beats come back."""
    g = Group("g", name, keepalive_s=6, prefix="tw")
    clock, link = Clock(), Link()
    g.service = SimpleNamespace(clock=clock, link=link)  # type: ignore[assignment]
    g.holding = np.zeros(0, dtype=bool)
    g.settle_until, g.listening_since = 0.0, 90.0
    return g, clock, link


def echo(g: Group) -> None:
    """This member's own beat comes back from the broker."""
    g._record(g.me, record("online", g.beats))


def marks(link: Link) -> list[tuple[str, object]]:
    return [(t, p) for t, p, _, retain in link.sent
            if retain and t in ("tw/status/x", "tw/group/g/owners/x")]


def test_a_silent_member_whose_record_says_online_is_marked_offline() -> None:
    """x beat with a view, then fell silent without a will: once it has been silent for a
    keepalive, the first member in name order says offline for it (naming itself and x's
    run) and empties its owners record, with every beat until x's record says offline."""
    g, clock, link = linked()
    g._record("x", record("online", 5, view=["me", "x"]))
    g.view = ("me",)
    clock.t += 5  # silent for less than a keepalive: not yet
    echo(g)
    g._beat(retain=True)
    assert marks(link) == []
    clock.t += 2
    echo(g)
    g._beat(retain=True)
    (status, mark), (owners, empty) = marks(link)
    assert status == "tw/status/x" and owners == "tw/group/g/owners/x" and empty is None
    assert isinstance(mark, dict)
    assert {k: mark[k] for k in ("instance", "group", "state", "since", "beat", "reason",
                                 "by", "site")} == {
        "instance": "x", "group": "g", "state": "offline", "since": "2026-12-02T10:00:00Z",
        "beat": 5, "reason": "silent", "by": "me", "site": "lab"}
    g._beat(retain=False)  # the mark has not come back yet: sent again, with a plain beat
    assert len(marks(link)) == 4
    g._record("x", json.dumps(mark).encode())  # it came back
    g._beat(retain=True)
    assert len(marks(link)) == 4


def test_no_mark_where_silence_proves_nothing() -> None:
    """No mark for a member that stopped in order; none from a member cut off, or whose own
    beats do not come back (its subscription or the broker's path is what is silent), or
    not first in name order."""
    def silent_x(name: str = "me", view: tuple[str, ...] = ("me",)
                 ) -> tuple[Group, Clock, Link]:
        g, clock, link = linked(name)
        g._record("x", record("online", 5, view=[*view, "x"]))
        g.view = view
        clock.t += 10
        return g, clock, link

    g, _, link = silent_x()
    g._record("x", json.dumps({"group": "g", "state": "offline", "reason": "stopped",
                               "since": "2026-12-02T10:00:00Z"}).encode())  # orderly stop
    echo(g)
    g._beat(retain=True)
    assert marks(link) == []
    g, _, link = silent_x()
    link.subscribed.clear()
    echo(g)
    g._beat(retain=True)
    assert marks(link) == []
    g, clock, link = silent_x()
    echo(g)
    clock.t += 6  # its own beats stopped coming back a keepalive ago
    g._beat(retain=True)
    assert marks(link) == []
    g, _, link = silent_x("me", ("a", "me"))  # a marks, not this one
    echo(g)
    g._beat(retain=True)
    assert marks(link) == []


def test_after_a_reconnect_silence_counts_from_the_reconnect() -> None:
    """Cut off for longer than a keepalive, this member heard nobody: the others' silence
    counts only from when it listens again (before, the settle time of the last connect
    could still stand, and every live member was marked offline)."""
    g, clock, link = linked()
    g._record("x", record("online", 5, view=["me", "x"]))
    g.view = ("me", "x")
    link.subscribed.clear()  # cut off
    g.update()
    clock.t += 10
    link.subscribed.set()  # back; x's beats have not arrived yet
    echo(g)
    g.update()
    assert marks(link) == []
    assert g.listening_since == clock.t
    clock.t += 6.5  # a keepalive of listening, and x still silent
    echo(g)
    g.view = ("me",)
    g._beat(retain=True)
    assert [t for t, _ in marks(link)] == ["tw/status/x", "tw/group/g/owners/x"]


def test_a_mark_older_than_the_latest_beat_is_ignored() -> None:
    """A member that marked x had not heard x's latest beats: the others, which had, keep x
    live (a false mark would move x's spaces away and back)."""
    g, _ = group()
    g._record("x", record("online", 6))
    stale = {"group": "g", "state": "offline", "since": "2026-12-02T10:00:00Z", "beat": 5,
             "reason": "silent", "by": "y"}
    g._record("x", json.dumps(stale).encode())
    assert g.members["x"].online
    g._record("x", json.dumps({**stale, "beat": 6}).encode())
    assert not g.members["x"].online


def test_a_member_marked_offline_while_it_runs_says_online_again() -> None:
    """A record saying this instance is offline (a mark by a member that took it as gone,
    or an old will) is answered with a retained online record at the next turn, even when
    its own beat came back after the mark."""
    g, clock, link = linked()
    g.settle_until = None  # just connected: it listens before ownership changes again
    g.beats, g.last_beat = 1, clock.t  # a plain beat was just sent: none is due
    g._record("me", json.dumps({"group": "g", "state": "offline", "by": "x"}).encode())
    echo(g)  # its own plain beat, after the mark
    link.sent.clear()
    g.update()
    own = [(p, retain) for t, p, _, retain in link.sent if t == "tw/status/me"]
    assert own and own[0][1] is True and own[0][0]["state"] == "online"  # type: ignore[index]
    link.sent.clear()
    g.update()  # once
    assert not [p for t, p, _, retain in link.sent if t == "tw/status/me" and retain]


def test_a_will_is_written_again_as_a_mark() -> None:
    """A clustered broker may deliver a will to the members it reaches without storing it:
    the retained record then says online for good. The will takes x offline in this
    member's table, and x is marked all the same, once the mark comes back no more."""
    g, clock, link = linked()
    g._record("x", record("online", 5, view=["me", "x"]))
    g._record("x", json.dumps({"group": "g", "state": "offline", "instance": "x",
                               "since": "2026-12-02T10:00:00Z"}).encode())
    assert "x" in g.members and not g.members["x"].online and g.members["x"].reason == "lost"
    g.view = ("me",)
    clock.t += 7
    echo(g)
    g._beat(retain=True)
    (_, mark), _ = marks(link)
    assert isinstance(mark, dict) and mark["reason"] == "silent" and mark["beat"] == 5
    g._record("x", json.dumps(mark).encode())
    g._beat(retain=True)
    assert len(marks(link)) == 2
